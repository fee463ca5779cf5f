"""Losses: training objective value, gradient, and the task's error metric.

Least squares (the only loss of regression tasks):

    f(w) = (1 / (2 n)) ||X w - y||^2,   grad f(w) = X^T (X w - y) / n,
    task error = mean squared error,     L = ||X||_2^2 / n.
"""
from __future__ import annotations

import numpy as np

from .problem import TrainingSet


def squares_value(X: np.ndarray, y: np.ndarray, w: np.ndarray) -> float:
    r = X @ w - y
    return float(r @ r) / (2 * max(X.shape[0], 1))


def squares_gradient(train: TrainingSet, w: np.ndarray) -> np.ndarray:
    """``X^T (X w - y) / n`` as a new array."""
    r = train.X @ w
    r -= train.y
    g = train.X.T @ r
    g /= train.n
    return g


def gradient(train: TrainingSet, w: np.ndarray) -> np.ndarray:
    """Dispatch on the training set's loss (least squares for regression)."""
    if train.loss == "squares":
        return squares_gradient(train, w)
    raise ValueError(f"unknown loss {train.loss!r}")


def mse(X: np.ndarray, y: np.ndarray, w: np.ndarray) -> float:
    if X.shape[0] == 0:
        return float("nan")
    r = X @ w - y
    return float(r @ r) / X.shape[0]

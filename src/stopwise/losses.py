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
    """``X^T (X w - y) / n`` as a new array.

    When an evaluation plan is attached to the training set (see :mod:`stopwise.fastpath`:
    Gram matrix or cache-sized row blocks) the same quantity is computed through it.
    """
    plan = train.__dict__.get("_gradient_plan")
    if plan is not None:
        return plan(w)
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


# ---------------------------------------------------------------- minibatch gradients

def squares_minibatch_gradient(train: TrainingSet, w: np.ndarray, rows) -> np.ndarray:
    """``X_B^T (X_B w - y_B) / |B|`` for the rows ``B`` (a slice or an index array)."""
    Xb = train.X[rows]
    r = Xb @ w
    r -= train.y[rows]
    g = Xb.T @ r
    g /= max(r.shape[0], 1)
    return g


# loss name -> specialised minibatch gradient; a loss without one falls back to its full
# gradient evaluated on the selected rows (see minibatch_gradient).
MINIBATCH_GRADIENTS = {"squares": squares_minibatch_gradient}


def minibatch_gradient(train: TrainingSet, w: np.ndarray, rows) -> np.ndarray:
    """Gradient of the training objective restricted to the rows ``B``::

        g_B(w) = (1 / |B|) sum_{i in B} grad f_i(w)

    (rows may repeat, as with sampling with replacement). Dispatches on ``train.loss``;
    a loss with no specialised minibatch gradient gets its full-batch :func:`gradient`
    on the training set restricted to ``B``, so every loss that has a gradient has a
    minibatch gradient.
    """
    fn = MINIBATCH_GRADIENTS.get(train.loss)
    if fn is not None:
        return fn(train, w, rows)
    import dataclasses

    sub = dataclasses.replace(train, X=train.X[rows], y=train.y[rows])
    return gradient(sub, w)

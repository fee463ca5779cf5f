"""The Problem: what a run sees of a dataset after splitting and preprocessing.

A solver never receives the Problem itself, only its :class:`TrainingSet` (training rows
and the smoothness constant), so no solver can look at validation or test data.
"""
from __future__ import annotations

from dataclasses import dataclass, field
from typing import Any

import numpy as np

TASKS = ("regression", "binary", "multiclass")
NOISE_KINDS = ("norm", "gaussian")


@dataclass(frozen=True)
class TrainingSet:
    """Training rows only: what a solver may use.

    ``L`` is the smoothness constant of the training objective
    ``f(w) = (1 / (2 n)) ||X w - y||^2``, that is ``||X||_2^2 / n``.
    """

    X: np.ndarray
    y: np.ndarray
    L: float
    task: str = "regression"
    loss: str = "squares"

    def gradient(self, w: np.ndarray) -> np.ndarray:
        """Gradient of the training objective at ``w`` as a new array (one data pass)."""
        from .losses import gradient

        return gradient(self, w)

    @property
    def n(self) -> int:
        return self.X.shape[0]

    @property
    def d(self) -> int:
        return self.X.shape[1]


@dataclass(frozen=True)
class Problem:
    """Float64 train/validation/test arrays plus what is known about the truth.

    ``noise_kind`` is ``"norm"`` when ``noise_level`` is the exact Euclidean norm of the
    noise added to the training targets (worst-case model, the ``delta`` of the
    discrepancy principle), ``"gaussian"`` when it is the standard deviation ``sigma`` of
    i.i.d. Gaussian noise on every target, and ``None`` when unknown.
    """

    name: str
    task: str
    X_train: np.ndarray
    y_train: np.ndarray
    X_val: np.ndarray
    y_val: np.ndarray
    X_test: np.ndarray
    y_test: np.ndarray
    w_true: np.ndarray | None = None
    noise_level: float | None = None
    noise_kind: str | None = None
    feature_names: tuple[str, ...] = ()
    preprocessing: dict[str, Any] = field(default_factory=dict)
    info: dict[str, Any] = field(default_factory=dict)

    def __post_init__(self) -> None:
        if self.task not in TASKS:
            raise ValueError(f"task {self.task!r} is not one of {', '.join(TASKS)}")
        if self.noise_kind is not None and self.noise_kind not in NOISE_KINDS:
            raise ValueError(f"noise kind {self.noise_kind!r} is not one of {', '.join(NOISE_KINDS)}")
        for name in ("X_train", "y_train", "X_val", "y_val", "X_test", "y_test"):
            arr = getattr(self, name)
            if arr.dtype != np.float64:
                raise TypeError(f"Problem.{name} must be float64, got {arr.dtype}")
            arr.flags.writeable = False
        if self.w_true is not None:
            self.w_true.flags.writeable = False

    @property
    def n_train(self) -> int:
        return self.X_train.shape[0]

    @property
    def d(self) -> int:
        return self.X_train.shape[1]

    @property
    def L(self) -> float:
        """Smoothness constant ``||X_train||_2^2 / n_train`` of the training objective."""
        return self.training.L

    @property
    def training(self) -> TrainingSet:
        cached = self.__dict__.get("_training")
        if cached is None:
            X = self.X_train
            smax = float(np.linalg.norm(X, 2)) if X.size else 0.0
            cached = TrainingSet(X=X, y=self.y_train, L=smax * smax / max(X.shape[0], 1), task=self.task)
            object.__setattr__(self, "_training", cached)
        return cached

    @property
    def noise_norm(self) -> float | None:
        """Norm of the training noise (exact for ``norm``, expected for ``gaussian``)."""
        if self.noise_level is None:
            return None
        if self.noise_kind == "norm":
            return float(self.noise_level)
        return float(self.noise_level) * float(np.sqrt(self.n_train))

"""Recorder: the one place where per-iterate metrics are computed.

The recorder owns preallocated columns and scratch buffers; recording an iterate writes
one row in place. It never knows which solver produced the iterate.

Two extension points add columns after the base ones:

``METRIC_SETS``
    functions ``problem -> {column: f(w) -> float}``: extras that depend on the problem
    and the iterate only (sparsity and support against the truth, margins). Every run of
    a problem gets them; a function may return ``{}`` for problems it does not apply to.
``state_metrics`` (argument of :class:`Recorder`)
    ``{column: f(state) -> float}`` supplied by the runner from the solver's own
    ``SolverDef.metrics(train, params)``: extras that depend on the solver's params or on
    more of its state than ``w`` (bias value, primal-dual gap). Only runs of that solver
    have these columns; traces of different solvers concatenate with nulls
    (:func:`stopwise.load_traces`).

Both are computed here, on recorded iterates only, outside the solver's timed work.
Classification problems replace the squared-error columns by the task's own
(misclassification, loss per split, margins; see :mod:`stopwise.classify`), which come
between the base columns and the extras.
"""
from __future__ import annotations

import math
from typing import Any, Callable, Mapping

import numpy as np

from .problem import Problem

# Columns every trace has, in order (see docs/schema.md).
BASE_COLUMNS = ("iteration", "passes", "seconds", "train_loss", "train_error", "val_error",
                "test_error", "w_norm", "residual_norm", "dist_truth")

# Extension point: functions (problem) -> {column: f(w) -> float} for task extras.
METRIC_SETS: list[Callable[[Problem], dict[str, Callable[[np.ndarray], float]]]] = []


class Recorder:
    """Records iterates of one run. Regression problems get squared errors; classification
    problems (``problem.task`` binary or multiclass) get the columns of
    :class:`stopwise.classify.ClassificationMetrics` for the run's ``loss`` and ``model``
    (default: the problem's loss and a linear model)."""

    def __init__(self, problem: Problem, capacity: int = 256,
                 state_metrics: Mapping[str, Callable[[Any], float]] | None = None,
                 loss: str | None = None, model: Any = None):
        self.problem = problem
        self._cls = None
        self.info: dict = {}
        if problem.task != "regression":
            from .classify import ClassificationMetrics

            self._cls = ClassificationMetrics(problem, loss or problem.objective, model)
            self.info = self._cls.info
        self._extras: dict[str, Callable[[np.ndarray], float]] = {}
        for make in METRIC_SETS:
            self._extras.update(make(problem) or {})
        cls_cols = self._cls.columns if self._cls is not None else ()
        self._state_extras = dict(state_metrics or {})
        clash = sorted(set(self._state_extras) & (set(BASE_COLUMNS) | set(cls_cols) | set(self._extras)))
        if clash:
            raise ValueError(f"solver metric column {clash[0]!r} clashes with a recorder column")
        self.columns = BASE_COLUMNS + cls_cols + tuple(self._extras) + tuple(self._state_extras)
        self._cap = max(int(capacity), 1)
        self._data = {c: np.empty(self._cap, dtype=np.int64 if c == "iteration" else np.float64)
                      for c in self.columns}
        self.size = 0
        p = problem
        self._buf = {k: np.empty(getattr(p, "X_" + k).shape[0]) for k in ("train", "val", "test")}
        self._dbuf = np.empty(p.d)

    def _sq_error(self, split: str, w: np.ndarray) -> float:
        X = getattr(self.problem, "X_" + split)
        if X.shape[0] == 0:
            return math.nan
        buf = self._buf[split]
        np.dot(X, w, out=buf)
        buf -= getattr(self.problem, "y_" + split)
        return float(buf @ buf)

    def record(self, iteration: int, passes: float, seconds: float, w: np.ndarray,
               state: Any = None) -> float:
        """Write one row for iterate ``w`` (of solver ``state``); returns the training objective."""
        if self.size == self._cap:
            self._grow()
        if self._cls is not None:
            return self._record_classification(iteration, passes, seconds, w, state)
        p, i, col = self.problem, self.size, self._data
        sq = self._sq_error("train", w)
        n = p.n_train
        col["iteration"][i] = iteration
        col["passes"][i] = passes
        col["seconds"][i] = seconds
        col["train_loss"][i] = sq / (2 * n)
        col["train_error"][i] = sq / n
        col["residual_norm"][i] = math.sqrt(sq) if sq >= 0 else math.nan
        col["val_error"][i] = self._sq_error("val", w) / p.X_val.shape[0] if p.X_val.shape[0] else math.nan
        col["test_error"][i] = self._sq_error("test", w) / p.X_test.shape[0]
        col["w_norm"][i] = math.sqrt(float(w @ w))
        if p.w_true is not None:
            np.subtract(w, p.w_true, out=self._dbuf)
            col["dist_truth"][i] = math.sqrt(float(self._dbuf @ self._dbuf))
        else:
            col["dist_truth"][i] = math.nan
        for name, fn in self._extras.items():
            col[name][i] = fn(w)
        for name, fn in self._state_extras.items():
            col[name][i] = fn(state) if state is not None else math.nan
        self.size += 1
        return sq / (2 * n)

    def _record_classification(self, iteration: int, passes: float, seconds: float, w: np.ndarray,
                               state: Any = None) -> float:
        p, i, col = self.problem, self.size, self._data
        col["iteration"][i] = iteration
        col["passes"][i] = passes
        col["seconds"][i] = seconds
        loss = self._cls.fill(col, i, w)
        col["w_norm"][i] = math.sqrt(float(w @ w))
        if p.w_true is not None and p.w_true.shape == w.shape:
            d = w - p.w_true
            col["dist_truth"][i] = math.sqrt(float(d @ d))
        else:
            col["dist_truth"][i] = math.nan
        for name, fn in self._extras.items():
            col[name][i] = fn(w)
        for name, fn in self._state_extras.items():
            col[name][i] = fn(state) if state is not None else math.nan
        self.size += 1
        return loss

    def _grow(self) -> None:
        self._cap *= 2
        for c, a in self._data.items():
            b = np.empty(self._cap, dtype=a.dtype)
            b[: self.size] = a[: self.size]
            self._data[c] = b

    def view(self) -> dict[str, np.ndarray]:
        """The rows recorded so far as read-only views (no copy; valid until the next record)."""
        out = {}
        for c, a in self._data.items():
            v = a[: self.size]
            v.flags.writeable = False
            out[c] = v
        return out

    def result(self) -> dict[str, np.ndarray]:
        return {c: a[: self.size].copy() for c, a in self._data.items()}

"""Recorder: the one place where per-iterate metrics are computed.

The recorder owns preallocated columns and scratch buffers; recording an iterate writes
one row in place. It never knows which solver produced the iterate.

Squared errors ``||X_s w - y_s||^2`` of the train / validation / test splits come either
from the rows directly or, for splits with more rows than features, from sufficient
statistics computed once per problem (``w^T G_s w - 2 c_s^T w + y_s^T y_s``, one stacked
product for all such splits); where that form would lose digits to cancellation the split
is evaluated from its compressed rows ``||R_s [w; -1]||^2`` (QR of ``[X_s y_s]``), which
are as accurate as the rows. See :mod:`stopwise.fastpath`.
"""
from __future__ import annotations

import math
from typing import Callable

import numpy as np

from . import fastpath
from .problem import Problem

# Columns every trace has, in order (see docs/schema.md).
BASE_COLUMNS = ("iteration", "passes", "seconds", "train_loss", "train_error", "val_error",
                "test_error", "w_norm", "residual_norm", "dist_truth")

# Extension point: functions (problem) -> {column: f(w) -> float} for task extras.
METRIC_SETS: list[Callable[[Problem], dict[str, Callable[[np.ndarray], float]]]] = []


class Recorder:
    def __init__(self, problem: Problem, capacity: int = 256,
                 statistics: "fastpath.SplitStatistics | None | str" = "auto"):
        """``statistics``: the split statistics to use, None for direct evaluation only, or
        an evaluation path name (``auto``, ``gram``, ``direct``, ``blocked``)."""
        self.problem = problem
        self._extras: dict[str, Callable[[np.ndarray], float]] = {}
        for make in METRIC_SETS:
            self._extras.update(make(problem) or {})
        self.columns = BASE_COLUMNS + tuple(self._extras)
        self._cap = max(int(capacity), 1)
        self._data = {c: np.empty(self._cap, dtype=np.int64 if c == "iteration" else np.float64)
                      for c in self.columns}
        self.size = 0
        p = problem
        self._buf = {k: np.empty(getattr(p, "X_" + k).shape[0]) for k in ("train", "val", "test")}
        self._dbuf = np.empty(p.d)
        if isinstance(statistics, str):
            statistics = fastpath.split_statistics(p, statistics)
        self.statistics = statistics
        self._sq = np.full(3, math.nan)
        splits = fastpath.SPLITS
        used = statistics.splits if statistics is not None else ()
        self._stat_idx = tuple(splits.index(s) for s in used)
        self._direct_idx = tuple(i for i, s in enumerate(splits)
                                 if s not in used and getattr(p, "X_" + s).shape[0] > 0)
        if used:
            k = len(used)
            self._ua = np.empty(k * p.d + k)
            self._u = self._ua[: k * p.d]
            self._uk = self._u.reshape(k, p.d)
            self._l = self._ua[k * p.d:]
            self._v = np.empty(k)
            self._wa = np.empty(p.d + 1)
            self._wa[p.d] = -1.0
        self.fallbacks = 0  # Gram-form errors recomputed from compressed rows (cancellation guard)

    def _sq_error(self, split: str, w: np.ndarray) -> float:
        X = getattr(self.problem, "X_" + split)
        if X.shape[0] == 0:
            return math.nan
        buf = self._buf[split]
        np.dot(X, w, out=buf)
        buf -= getattr(self.problem, "y_" + split)
        return float(buf @ buf)

    def _compressed_error(self, split: str, w: np.ndarray) -> float:
        self.fallbacks += 1
        R = fastpath.row_factor(self.problem, split)
        self._wa[:-1] = w
        r = R @ self._wa
        return float(r @ r)

    def squared_errors(self, w: np.ndarray) -> np.ndarray:
        """``||X_s w - y_s||^2`` for train, val, test (NaN for an empty split), in a
        scratch array that the next call overwrites."""
        sq = self._sq
        if self._stat_idx:
            st = self.statistics
            np.dot(st.A, w, out=self._ua)      # G_j w and c_j^T w for every split j
            self._u -= st.C2                   # G_j w - 2 c_j
            np.dot(self._uk, w, out=self._v)   # w^T G_j w - 2 c_j^T w
            guard = fastpath.GUARD
            for i, v, l, yy in zip(self._stat_idx, self._v.tolist(), self._l.tolist(), st.yy):
                v += yy
                if v >= guard * (v + 2.0 * l):  # v + 2 l = w^T G_j w + y_j^T y_j, the scale
                    sq[i] = v
                else:
                    sq[i] = self._compressed_error(fastpath.SPLITS[i], w)
        for i in self._direct_idx:
            sq[i] = self._sq_error(fastpath.SPLITS[i], w)
        return sq

    def record(self, iteration: int, passes: float, seconds: float, w: np.ndarray) -> float:
        """Write one row for iterate ``w``; returns the training objective."""
        if self.size == self._cap:
            self._grow()
        p, i, col = self.problem, self.size, self._data
        sq_tr, sq_va, sq_te = self.squared_errors(w).tolist()
        n = p.n_train
        col["iteration"][i] = iteration
        col["passes"][i] = passes
        col["seconds"][i] = seconds
        col["train_loss"][i] = sq_tr / (2 * n)
        col["train_error"][i] = sq_tr / n
        col["residual_norm"][i] = math.sqrt(sq_tr) if sq_tr >= 0 else math.nan
        col["val_error"][i] = sq_va / p.X_val.shape[0] if p.X_val.shape[0] else math.nan
        col["test_error"][i] = sq_te / p.X_test.shape[0]
        col["w_norm"][i] = math.sqrt(float(w @ w))
        if p.w_true is not None:
            np.subtract(w, p.w_true, out=self._dbuf)
            col["dist_truth"][i] = math.sqrt(float(self._dbuf @ self._dbuf))
        else:
            col["dist_truth"][i] = math.nan
        for name, fn in self._extras.items():
            col[name][i] = fn(w)
        self.size += 1
        return sq_tr / (2 * n)

    def _grow(self) -> None:
        self._cap *= 2
        for c, a in self._data.items():
            b = np.empty(self._cap, dtype=a.dtype)
            b[: self.size] = a[: self.size]
            self._data[c] = b

    def result(self) -> dict[str, np.ndarray]:
        return {c: a[: self.size].copy() for c, a in self._data.items()}

"""Recorder: the one place where per-iterate metrics are computed.

The recorder owns preallocated columns and scratch buffers; recording an iterate writes
one row in place. It never knows which solver produced the iterate. :func:`make_recorder`
picks the recorder for the problem's task: :class:`RegressionRecorder` or
:class:`ClassificationRecorder`, both behind the one interface of :class:`Recorder`
(``record``, ``view``, ``result``, ``columns``, ``size``, ``info``, ``fallbacks``).

Regression traces carry the residual statistics of :mod:`stopwise.stopping.residual` after the
base columns (unless ``residual=False``). Two extension points add columns after those:

``METRIC_SETS``
    functions ``problem -> {column: f(w) -> float}``: extras that depend on the problem
    and the iterate only (sparsity and support against the truth, margins). Every run of
    a problem gets them; a function may return ``{}`` for problems it does not apply to.
    A function marked ``f.batch = True`` takes a block of iterates instead (one flattened
    iterate per row) and returns one value per row; the recorder keeps the recorded
    iterates of such sets in a bounded block and evaluates them together (when the block
    is full, and before any view or result). Only functions whose value for a row does not
    depend on the other rows of the block (elementwise operations and reductions along the
    row) may be marked: then the values are the per-iterate ones, bit for bit.
``state_metrics`` (argument of :class:`Recorder`)
    ``{column: f(state) -> float}`` supplied by the runner from the solver's own
    ``SolverDef.metrics(train, params)``: extras that depend on the solver's params or on
    more of its state than ``w`` (bias value, primal-dual gap). Only runs of that solver
    have these columns; traces of different solvers concatenate with nulls
    (:func:`stopwise.load_traces`).

Both are computed here, on recorded iterates only, outside the solver's timed work.
Classification problems replace the squared-error columns by the task's own
(misclassification, loss per split, margins; see :mod:`stopwise.running.classify`), which come
between the base columns and the extras.

Regression: the squared errors ``||X_s w - y_s||^2`` of the train / validation / test
splits come either from the rows directly or, for splits with more rows than features, from sufficient
statistics computed once per problem (``w^T G_s w - 2 c_s^T w + y_s^T y_s``, one stacked
product for all such splits); where that form would lose digits to cancellation the split
is evaluated from its compressed rows ``||R_s [w; -1]||^2`` (QR of ``[X_s y_s]``), which
are as accurate as the rows. See :mod:`stopwise.running.fastpath`.
"""
from __future__ import annotations

import dataclasses
import math
from typing import Any, Callable, Mapping

import numpy as np

from stopwise.core.errors import SpecError
from stopwise.core.registry import Registry
from stopwise.running import fastpath
from stopwise.running.fastpath import GUARD
from stopwise.problem import design as _design
from stopwise.problem.problem import Problem
from stopwise.results.schema import BASE_COLUMNS  # columns every trace has, in order (docs/schema.md)
from stopwise.stopping.residual import COLUMNS as RESIDUAL_COLUMNS, NCPDistance


MetricSet = Callable[[Problem], dict[str, Callable[[np.ndarray], float]]]
BLOCK_BYTES = 1 << 20  # iterates kept for the batch extras at most (256 rows at most)


def residual_into(X: Any, y: np.ndarray, w: np.ndarray, out: np.ndarray) -> np.ndarray:
    """``X w - y`` written into ``out`` (and returned): a BLAS product for a dense design, one
    read of the stored entries of a CSR one (:func:`stopwise.running.kernels.csr_residual`)."""
    if _design.is_sparse(X):
        from stopwise.running.kernels import csr_residual

        csr_residual(X, w, y, out)
        return out
    np.dot(X, w, out=out)
    out -= y
    return out


class UnknownMetricSet(SpecError):
    """An unknown metric-set name (one line listing the registered ones)."""


# Extension point: named functions (problem) -> {column: f(w) -> float} for task extras,
# evaluated in registration order. The built-in ones register when stopwise.running loads.
METRIC_SETS: Registry[MetricSet] = Registry("metric set", UnknownMetricSet)


def register_metric_set(name: str, make: MetricSet) -> MetricSet:
    """Add a metric set (a name registered twice raises ValueError)."""
    return METRIC_SETS.register(name, make)


def make_recorder(problem: Problem, capacity: int = 256,
                  state_metrics: Mapping[str, Callable[[Any], float]] | None = None,
                  loss: str | None = None, model: Any = None,
                  statistics: "fastpath.SplitStatistics | None | str" = "auto",
                  residual: bool = True) -> "Recorder":
    """The recorder for ``problem``'s task: a :class:`RegressionRecorder` (which reads
    ``statistics`` and ``residual``) or a :class:`ClassificationRecorder` (``problem.task``
    binary or multiclass; reads ``loss`` and ``model``). The arguments a task does not read
    are ignored, so the runner calls this one way for every task. A regression run whose
    iterates parameterize a model other than ``X w`` (``model.feature_weights`` false, such
    as kernel regression's coefficients) has its errors computed from the model's scores."""
    if problem.task == "regression":
        return RegressionRecorder(problem, capacity, state_metrics, statistics=statistics, residual=residual,
                                  model=model)
    return ClassificationRecorder(problem, capacity, state_metrics, loss=loss, model=model)


def feature_weights(model: Any) -> bool:
    """Whether a run's iterates are weight vectors over the problem's features (no model, or
    a model that says so): only those are compared with the truth ``w_true``."""
    return model is None or bool(getattr(model, "feature_weights", True))


class Recorder:
    """Records iterates of one run into preallocated columns: the interface the runner uses
    (:meth:`record`, :meth:`view`, :meth:`result`, ``columns``, ``size``, ``info``,
    ``fallbacks``) and the columns every task shares. Build one with :func:`make_recorder`;
    a subclass writes its task's columns in :meth:`_fill`.

    Columns, in order: the base columns (``results.schema.BASE_COLUMNS``), the task's
    ``task_columns``, the metric sets' extras, then the solver's ``state_metrics``.

    ``weights``: whether iterates are weight vectors over the features. When they are not
    (a network's parameters, kernel coefficients) ``dist_truth`` is NaN and the metric
    sets see the problem without its truth."""

    info: dict          # run metadata the recorder contributes (the runner stores it)
    fallbacks: int = 0  # Gram-form errors recomputed from compressed rows (regression only)

    def __init__(self, problem: Problem, capacity: int,
                 state_metrics: Mapping[str, Callable[[Any], float]] | None,
                 task_columns: tuple[str, ...], weights: bool = True):
        self.problem = problem
        self.info = {}
        self._truth = problem.w_true if weights else None
        seen = problem if weights or problem.w_true is None else dataclasses.replace(problem, w_true=None)
        extras: dict[str, Callable[[np.ndarray], float]] = {}
        for make in METRIC_SETS.values():
            extras.update(make(seen) or {})
        self._extras = {c: f for c, f in extras.items() if not getattr(f, "batch", False)}
        self._batch = {c: f for c, f in extras.items() if getattr(f, "batch", False)}
        self._state_extras = dict(state_metrics or {})
        clash = sorted(set(self._state_extras) & (set(BASE_COLUMNS) | set(task_columns) | set(extras)))
        if clash:
            raise ValueError(f"solver metric column {clash[0]!r} clashes with a recorder column")
        self.columns = BASE_COLUMNS + task_columns + tuple(extras) + tuple(self._state_extras)
        self._cap = max(int(capacity), 1)
        self._data = {c: np.empty(self._cap, dtype=np.int64 if c == "iteration" else np.float64)
                      for c in self.columns}
        self.size = 0
        self._dbuf = np.empty(problem.d)
        self._block: np.ndarray | None = None  # recorded iterates awaiting the batch extras
        self._pending = 0                      # first row whose batch extras are not computed

    def record(self, iteration: int, passes: float, seconds: float, w: np.ndarray,
               state: Any = None, w_sq: float | None = None) -> float:
        """Write one row for iterate ``w`` (of solver ``state``); returns the training objective.
        ``w_sq``: ``float(w @ w)`` when the caller has it already (the runner's divergence
        check computes it for every step)."""
        if self.size == self._cap:
            self._grow()
        i, col = self.size, self._data
        col["iteration"][i] = iteration
        col["passes"][i] = passes
        col["seconds"][i] = seconds
        loss = self._fill(i, w)
        self._finish_row(i, w, state, w_sq)
        return loss

    def _fill(self, i: int, w: np.ndarray) -> float:
        """Write row ``i`` of the task's columns (training loss and errors included); return
        the training objective."""
        raise NotImplementedError

    def _finish_row(self, i: int, w: np.ndarray, state: Any, w_sq: float | None = None) -> None:
        """Columns every task shares: ||w||, distance to the truth, metric sets; then count the row."""
        col, truth = self._data, self._truth
        col["w_norm"][i] = math.sqrt(float(w.dot(w)) if w_sq is None else w_sq)
        if truth is not None and truth.shape == w.shape:
            buf = self._dbuf if self._dbuf.shape == w.shape else np.empty_like(w)
            np.subtract(w, truth, out=buf)
            col["dist_truth"][i] = math.sqrt(float(buf.dot(buf)))
        else:
            col["dist_truth"][i] = math.nan
        for name, fn in self._extras.items():
            col[name][i] = fn(w)
        for name, fn in self._state_extras.items():
            col[name][i] = fn(state) if state is not None else math.nan
        if self._batch:
            block = self._block
            if block is None:
                rows = max(1, min(256, BLOCK_BYTES // (8 * max(w.size, 1))))
                block = self._block = np.empty((rows, w.size))
            block[i - self._pending] = w.ravel()
            self.size += 1
            if self.size - self._pending == block.shape[0]:
                self._flush()
            return
        self.size += 1

    def _flush(self) -> None:
        """Evaluate the batch extras of the rows recorded since the last flush."""
        lo, hi = self._pending, self.size
        if hi > lo and self._block is not None:
            W = self._block[: hi - lo]
            for name, fn in self._batch.items():
                self._data[name][lo:hi] = fn(W)
        self._pending = self.size

    def _grow(self) -> None:
        self._cap *= 2
        for c, a in self._data.items():
            b = np.empty(self._cap, dtype=a.dtype)
            b[: self.size] = a[: self.size]
            self._data[c] = b

    def view(self) -> dict[str, np.ndarray]:
        """The rows recorded so far as read-only views (no copy; valid until the next record)."""
        self._flush()
        out = {}
        for c, a in self._data.items():
            v = a[: self.size]
            v.flags.writeable = False
            out[c] = v
        return out

    def result(self) -> dict[str, np.ndarray]:
        self._flush()
        return {c: a[: self.size].copy() for c, a in self._data.items()}


class ClassificationRecorder(Recorder):
    """Classification problems (``problem.task`` binary or multiclass): the columns of
    :class:`stopwise.running.classify.ClassificationMetrics` for the run's ``loss`` and
    ``model`` (default: the problem's loss and a linear model)."""

    def __init__(self, problem: Problem, capacity: int = 256,
                 state_metrics: Mapping[str, Callable[[Any], float]] | None = None,
                 loss: str | None = None, model: Any = None):
        from stopwise.running.classify import ClassificationMetrics

        metrics = ClassificationMetrics(problem, loss or problem.objective, model)
        super().__init__(problem, capacity, state_metrics, metrics.columns, weights=feature_weights(model))
        self._metrics = metrics
        self.info = metrics.info

    def _fill(self, i: int, w: np.ndarray) -> float:
        return self._metrics.fill(self._data, i, w)


class RegressionRecorder(Recorder):
    """Regression problems: squared errors per split and, unless ``residual=False``, the
    residual statistics of :mod:`stopwise.stopping.residual` (``residual_dot_prev`` always,
    ``ncp_distance`` when ``problem.signal_rows``).

    ``statistics``: the split statistics to use, None for direct evaluation only, or an
    evaluation path name (``auto``, ``gram``, ``direct``, ``fused``); see
    :mod:`stopwise.running.fastpath`.

    ``model``: a model whose iterates are not weights over the features
    (``feature_weights`` false; kernel regression's coefficients) scores every split through
    its ``scorer`` (predictions ``f(X_s)``, errors ``||f(X_s) - y_s||^2``); the statistics
    are then not used."""

    def __init__(self, problem: Problem, capacity: int = 256,
                 state_metrics: Mapping[str, Callable[[Any], float]] | None = None,
                 statistics: "fastpath.SplitStatistics | None | str" = "auto",
                 residual: bool = True, model: Any = None):
        self._dot = bool(residual)
        self._ncp = NCPDistance(problem.n_train) if self._dot and problem.signal_rows else None
        res_cols = RESIDUAL_COLUMNS[: 2 if self._ncp is not None else 1] if self._dot else ()
        weights = feature_weights(model)
        super().__init__(problem, capacity, state_metrics, res_cols, weights=weights)
        self._res_rows = False  # the training residual vector is evaluated at every row
        self._buf = {k: np.empty(getattr(problem, "X_" + k).shape[0]) for k in ("train", "val", "test")}
        self._score = None
        if not weights:
            statistics = None
            self._score = {k: model.scorer(getattr(problem, "X_" + k)) for k in ("train", "val", "test")
                           if getattr(problem, "X_" + k).shape[0] > 0}
        self._init_statistics(statistics)
        if self._dot:
            self._init_residual()

    def _init_statistics(self, statistics: "fastpath.SplitStatistics | None | str") -> None:
        """Which splits are evaluated from the statistics (one stacked product) and which
        from their rows, and the scratch buffers of the stacked product."""
        p = self.problem
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
        self._train_stat = used.index("train") if "train" in used else None
        self.fallbacks = 0
        # what every row reads, looked up once: (position j, split index, y_j^T y_j) of the
        # splits evaluated from statistics, the training split's row of G w - 2 c, the sizes
        self._plan = tuple(zip(range(len(used)), self._stat_idx, statistics.yy)) if used else ()
        self._uk_train = self._uk[self._train_stat] if self._train_stat is not None else None
        self._sizes = (p.n_train, p.X_val.shape[0], p.X_test.shape[0])

    def _init_residual(self) -> None:
        """Buffers of the residual statistics. The training residual vector is evaluated at
        every row when the training error is direct or the NCP is recorded; then the inner
        product comes from two residual vectors (alternating buffers), else from the
        training split's statistics (O(d) beyond the error, see :meth:`_gram_dot`)."""
        p = self.problem
        self._res_rows = self._ncp is not None or self._train_stat is None
        self._rb = (self._buf["train"], np.empty(p.n_train)) if self._res_rows else ()
        self._rk = 0                       # buffer holding this row's residual
        self._wprev = np.empty(p.d)        # previous recorded iterate, its c^T w and scale
        self._lprev = self._sprev = math.nan
        self._ltr = self._str = math.nan   # this row's c^T w and scale (statistics path)
        self._za = np.empty(p.d + 1)       # [w_prev; -1] for the compressed-rows fall back
        self._za[p.d] = -1.0

    def _sq_error(self, split: str, w: np.ndarray) -> float:
        X = getattr(self.problem, "X_" + split)
        if X.shape[0] == 0:
            return math.nan
        buf = self._buf[split]
        if self._score is not None:
            np.subtract(self._score[split](w), getattr(self.problem, "y_" + split), out=buf)
        else:
            residual_into(X, getattr(self.problem, "y_" + split), w, buf)
        return float(buf.dot(buf))

    def _compressed_error(self, split: str, w: np.ndarray) -> float:
        self.fallbacks += 1
        if self.problem.sparse:  # from the rows: a QR factor of a sparse split would be dense
            X, y = getattr(self.problem, "X_" + split), getattr(self.problem, "y_" + split)
            r = residual_into(X, y, w, np.empty(X.shape[0]))
            return float(r.dot(r))
        R = fastpath.row_factor(self.problem, split)
        self._wa[:-1] = w
        r = R @ self._wa
        return float(r @ r)

    def squared_errors(self, w: np.ndarray) -> np.ndarray:
        """``||X_s w - y_s||^2`` for train, val, test (NaN for an empty split), in a
        scratch array that the next call overwrites."""
        sq = self._sq
        if self._plan:
            st = self.statistics
            np.dot(st.A, w, out=self._ua)      # G_j w and c_j^T w for every split j
            self._u -= st.C2                   # G_j w - 2 c_j
            np.dot(self._uk, w, out=self._v)   # w^T G_j w - 2 c_j^T w
            vs, ls = self._v.tolist(), self._l.tolist()
            train = self._train_stat
            for j, i, yy in self._plan:
                v = vs[j] + yy
                l = ls[j]
                scale = v + 2.0 * l            # w^T G_j w + y_j^T y_j, the scale
                if j == train:
                    self._ltr, self._str = l, scale
                if v >= GUARD * scale:
                    sq[i] = v
                else:
                    sq[i] = self._compressed_error(fastpath.SPLITS[i], w)
        for i in self._direct_idx:
            sq[i] = self._sq_error(fastpath.SPLITS[i], w)
        return sq

    def _fill(self, i: int, w: np.ndarray) -> float:
        p, col = self.problem, self._data
        if self._res_rows:
            self._buf["train"] = self._rb[self._rk]   # the direct training error writes this row's residual
        sq_tr, sq_va, sq_te = self.squared_errors(w).tolist()
        n, n_val, n_test = self._sizes
        loss = sq_tr / (2 * n)
        col["train_loss"][i] = loss
        col["train_error"][i] = sq_tr / n
        col["residual_norm"][i] = math.sqrt(sq_tr) if sq_tr >= 0 else math.nan
        col["val_error"][i] = sq_va / n_val if n_val else math.nan
        col["test_error"][i] = sq_te / n_test
        if self._dot:
            self._residual_row(i, w)
        return loss

    def _residual_row(self, i: int, w: np.ndarray) -> None:
        col, first = self._data, i == 0
        if self._res_rows:
            cur = self._rb[self._rk]
            if self._train_stat is not None:  # the training error came from statistics: evaluate r
                residual_into(self.problem.X_train, self.problem.y_train, w, cur)
            col["residual_dot_prev"][i] = math.nan if first else float(cur.dot(self._rb[1 - self._rk]))
            if self._ncp is not None:
                col["ncp_distance"][i] = self._ncp(cur)
            self._rk = 1 - self._rk
        else:
            col["residual_dot_prev"][i] = math.nan if first else self._gram_dot(w)
            self._lprev, self._sprev = self._ltr, self._str
            self._wprev[:] = w  # read by the next row's _gram_dot only

    def _gram_dot(self, w: np.ndarray) -> float:
        """``<r_prev, r_t>`` from the training statistics: ``w_prev^T (G w - 2 c) + c^T w_prev
        - c^T w + y^T y``, exact up to rounding of size eps times ``2 sqrt(s_prev s_t)`` (s the
        errors' scales); below ``GUARD`` times that, from the compressed rows instead
        (``(R [w_prev; -1]) . (R [w; -1])``, as accurate as the residual vectors)."""
        dot = float(self._wprev.dot(self._uk_train)) + self._lprev - self._ltr + self.statistics.yy[self._train_stat]
        if abs(dot) >= GUARD * math.sqrt(max(self._sprev * self._str, 0.0)):
            return dot
        self.fallbacks += 1
        p = self.problem
        if p.sparse:  # from the residual vectors (one read of the nonzeros each)
            r = residual_into(p.X_train, p.y_train, w, np.empty(p.n_train))
            return float(r.dot(residual_into(p.X_train, p.y_train, self._wprev, np.empty(p.n_train))))
        R = fastpath.row_factor(self.problem, "train")
        self._wa[:-1] = w
        self._za[:-1] = self._wprev
        return float((R @ self._za) @ (R @ self._wa))

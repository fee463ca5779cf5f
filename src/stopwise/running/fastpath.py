"""Evaluation paths for least squares: direct, one fused pass over the rows, and sufficient statistics.

Everything here computes exactly the quantities of the direct formulas, in a different
order of floating-point operations. For ``f(w) = ||X w - y||^2 / (2 n)``:

========  =========================================================  ==================
path      gradient ``g = X^T (X w - y) / n``                          cost per call
========  =========================================================  ==================
direct    ``r = X w - y``, then ``X^T r`` (BLAS)                      two reads of X
fused     ``sum_i (x_i . w - y_i) x_i``, row by row, compiled         one read of X
gram      ``(G w - c) / n`` with ``G = X^T X``, ``c = X^T y``         O(d^2), X unread
========  =========================================================  ==================

and for a recorded squared error on a split ``(X_s, y_s)``:

==========  ==============================================================================
direct      ``||X_s w - y_s||^2``
gram        ``w^T G_s w - 2 c_s^T w + y_s^T y_s`` with ``G_s = X_s^T X_s``, ``c_s = X_s^T y_s``
            (O(d^2) per iterate; one stacked product serves every split)
compressed  ``||R_s [w; -1]||^2`` with ``R_s`` the triangular factor of the QR
            factorization ``[X_s  y_s] = Q_s R_s`` (O(d^2) per iterate)
==========  ==============================================================================

Precision. The Gram form subtracts numbers of the size of its *scale*
``w^T G_s w + y_s^T y_s``; its rounding error is a few units of ``eps * scale``, so it
keeps all but ``log10(scale / error)`` of its digits. When the result falls below
``GUARD`` times the scale (errors near zero, interpolation, noise-free data) the recorder
evaluates that split from its compressed rows instead, which have no cancellation:
Householder QR is backward stable, so ``||R_s [w; -1]||^2`` is the exact error of data
within a few rounding units of ``[X_s  y_s]``, as accurate as evaluating the rows
directly, at O(d^2) cost. The factor ``R_s`` is computed on the first such iterate and
kept with the problem (QR costs about four times the Gram matrix, so it is not paid by
problems that never need it). The gradient needs no guard: near the solution ``G w - c``
is small too, but its absolute rounding error, ``eps ||X||^2 ||w||``, is of the same
order as that of ``X^T (X w - y)``, so both give the same iterates to rounding (tested
against the spectral-filter closed form of gradient descent).

Which path a run takes is a deterministic function of the array shapes (``choose_gradient_path``
and ``statistics_splits``), so a rerun of a run, on any machine, takes the same path.

Sparse designs (``scipy.sparse`` CSR, :mod:`stopwise.problem.design`): ``direct`` is SciPy's
``X @ w`` then ``X.T @ r`` (two reads of the nonzeros), ``fused`` the compiled one-pass CSR
kernel (:func:`stopwise.running.kernels.csr_residual_gradient`, one read, no allocation
but the returned gradient), ``gram`` the dense ``d x d`` matrix of the sparse product
``X^T X``. ``auto`` takes ``gram`` when ``n > d``, it fits, and ``d^2 <= nnz`` (an O(d^2)
product is then no dearer than a pass over the nonzeros), else ``fused``; the recorder uses
split statistics on the same condition per split, and where the Gram form would lose digits
it evaluates the split from its rows (one read of the nonzeros; no QR factor, which would be
dense).

Caching: Gram matrices, compressed rows and the stacked statistics are kept in the declared
caches of the :class:`~stopwise.problem.problem.Problem` (only the recorder reads the validation
and test ones); the gradient plan is a field of the solver's
:class:`~stopwise.problem.problem.TrainingSet` (``plan``, ``path``), set once with
``dataclasses.replace``, and holds the training Gram matrix only, so a solver still sees
nothing but training rows.
Everything is computed once per problem per process, on first use, and shared by every
run on that problem. Plans and statistics are read-only after construction and plans
allocate their scratch per call, so concurrent runs in threads may share them.
"""
from __future__ import annotations

import dataclasses
from dataclasses import dataclass
from typing import Callable

import numpy as np

from stopwise.problem import design as _design
from stopwise.problem.problem import Problem, TrainingSet
from stopwise.core.errors import StopwiseError

PATHS = ("auto", "direct", "fused", "gram")
SPLITS = ("train", "val", "test")

GRAM_MAX_BYTES = 256 * 2**20     # no Gram matrix (of all splits together) above this size
FUSED_MIN_BYTES = 4 * 2**20      # below this X stays in cache and the direct path is as fast
GUARD = 1e-3                     # Gram-form errors below GUARD * scale are recomputed from compressed rows

class PathError(StopwiseError, ValueError):
    """Unknown evaluation path; the message is one line."""


def _check_path(path: str) -> str:
    if path not in PATHS:
        raise PathError(f"evaluation path {path!r} is invalid: must be one of {', '.join(PATHS)}")
    return path


def _frozen(a: np.ndarray) -> np.ndarray:
    a.flags.writeable = False
    return a


# ---------------------------------------------------------------- gradient plans

def choose_gradient_path(n: int, d: int, nbytes: int, nnz: int | None = None) -> str:
    """The path ``auto`` picks: Gram when ``n > d`` and it fits, fused for large X, else direct.
    A sparse design (``nnz`` given): Gram when ``n > d``, it fits and ``d^2 <= nnz``, else fused."""
    if nnz is not None:
        return "gram" if n > d and d * d * 8 <= GRAM_MAX_BYTES and d * d <= nnz else "fused"
    if n > d and d * d * 8 <= GRAM_MAX_BYTES:
        return "gram"
    if nbytes > FUSED_MIN_BYTES:
        return "fused"
    return "direct"


class GramGradient:
    """``g = (G w - c) / n`` with ``G = X^T X`` and ``c = X^T y`` computed once."""

    path = "gram"

    def __init__(self, X: np.ndarray, y: np.ndarray, G: np.ndarray | None = None,
                 c: np.ndarray | None = None):
        self.n = X.shape[0]
        self.G = G if G is not None else _frozen(_design.gram(X))
        self.c = c if c is not None else _frozen(np.asarray(X.T @ y, dtype=np.float64))

    def __call__(self, w: np.ndarray) -> np.ndarray:
        g = self.G.dot(w)  # the same BLAS call as G @ w, with less dispatch
        g -= self.c
        g /= self.n
        return g


class FusedGradient:
    """``g = X^T (X w - y) / n`` in one pass over the rows of X (a compiled kernel,
    :mod:`stopwise.running.kernels`): each row gives its residual and its share of the gradient
    while it is in cache, so one gradient reads X from memory once (the direct path reads
    it twice). The residual ``X w - y`` of the last call is kept in ``last_residual``
    only when ``keep_residual`` is set (checks and benchmarks)."""

    path = "fused"

    def __init__(self, X: np.ndarray, y: np.ndarray, keep_residual: bool = False):
        from stopwise.running import kernels  # numba is imported (and the kernel compiled) only when used

        self.X, self.y = X, y
        self.n, self.d = X.shape
        self.variant = kernels.variant(self.d)
        self._kernel = kernels.residual_gradient
        self.keep_residual = keep_residual
        self.last_residual: np.ndarray | None = None

    def __call__(self, w: np.ndarray) -> np.ndarray:
        g = np.empty(self.d)
        r = np.empty(self.n)  # scratch per call, so plans can be shared between threads
        self._kernel(self.X, w, self.y, r, g, self.variant)
        g /= self.n
        if self.keep_residual:
            self.last_residual = r
        return g


class SparseFusedGradient:
    """``g = X^T (X w - y) / n`` for a CSR design in one pass over its stored entries
    (:func:`stopwise.running.kernels.csr_residual_gradient`). The residual and the kernel's
    ``(p, 2)`` scratch are kept per thread, so a call allocates only the gradient it
    returns; ``last_residual`` as for :class:`FusedGradient`."""

    path = "fused"

    def __init__(self, X, y: np.ndarray, keep_residual: bool = False):
        import threading

        from stopwise.running import kernels

        self.X, self.y = X, y
        self.n, self.d = X.shape
        self.variant = "csr"
        self._kernel = kernels.csr_residual_gradient
        self._local = threading.local()
        self.keep_residual = keep_residual
        self.last_residual: np.ndarray | None = None

    def __call__(self, w: np.ndarray) -> np.ndarray:
        r = getattr(self._local, "r", None)
        if r is None or self.keep_residual:
            r = self._local.r = np.empty(self.n)
        work = getattr(self._local, "work", None)
        if work is None:
            work = self._local.work = np.empty((self.d, 2))
        g = np.empty(self.d)
        self._kernel(self.X, w, self.y, r, g, work)
        g /= self.n
        if self.keep_residual:
            self.last_residual = r
        return g


def gradient_plan(train: TrainingSet) -> Callable[[np.ndarray], np.ndarray] | None:
    """The training set's gradient plan, or None (then the direct formula is used)."""
    return train.plan


def attach_plan(train: TrainingSet, plan: Callable[[np.ndarray], np.ndarray] | None) -> TrainingSet:
    """A copy of ``train`` whose gradient goes through ``plan`` (None: the direct formula)."""
    return dataclasses.replace(train, plan=plan, path=getattr(plan, "path", "direct") if plan is not None else "direct")


def _make_plan(train: TrainingSet, path: str, gram: tuple | None = None):
    if path == "gram":
        return GramGradient(train.X, train.y, *(gram[:2] if gram is not None else ()))
    if path == "fused":
        return SparseFusedGradient(train.X, train.y) if train.sparse else FusedGradient(train.X, train.y)
    return None


def _squares(train: TrainingSet) -> bool:
    return getattr(train, "loss", "squares") == "squares"


def training_for(problem: Problem, train: TrainingSet | None = None, path: str = "auto") -> TrainingSet:
    """The training set a solver receives under an evaluation path.

    ``train`` is the run's training set (default: ``problem.training``). ``auto`` attaches
    the chosen plan to it once (it is the problem's cached set, so every run on the problem
    shares the plan); an explicit path returns a fresh copy with that plan (``direct``:
    none), leaving the cached one untouched. Losses other than least squares get no plan.
    """
    _check_path(path)
    train = train if train is not None else problem.training
    own = train.X is problem.X_train and train.y is problem.y_train
    if path == "auto":
        if train.path is not None:
            return train
        chosen = (choose_gradient_path(train.n, train.d, _design.stored_bytes(train.X),
                                       int(train.X.nnz) if train.sparse else None)
                  if _squares(train) and train.n else "direct")
        gram = _gram(problem, "train") if chosen == "gram" and own else None
        planned = attach_plan(train, _make_plan(train, chosen, gram))
        if problem.training_sets.get(train.loss) is train:
            problem.training_sets[train.loss] = planned  # every later run on the problem shares it
        return planned
    plan = None
    if path != "direct" and _squares(train) and train.n:
        plan = _make_plan(train, path, _gram(problem, "train") if path == "gram" and own else None)
    return attach_plan(train, plan)


def path_name(train: TrainingSet) -> str:
    return train.path or "direct"


# ---------------------------------------------------------------- split statistics (recorder)

def _gram(problem: Problem, split: str) -> tuple[np.ndarray, np.ndarray, float]:
    """(X_s^T X_s, X_s^T y_s, y_s^T y_s), computed once per problem."""
    cache = problem.sufficient_statistics
    hit = cache.get(split)
    if hit is None:
        X, y = getattr(problem, "X_" + split), getattr(problem, "y_" + split)
        hit = (problem.gram_matrix(split), _frozen(np.asarray(X.T @ y, dtype=np.float64)), float(y @ y))
        cache[split] = hit
    return hit


def compressed_rows(X: np.ndarray, y: np.ndarray) -> np.ndarray:
    """The triangular factor ``R`` of ``[X  y] = Q R`` (min(n, d + 1) x (d + 1)), so that
    ``||X w - y||^2 = ||R [w; -1]||^2`` for every ``w``."""
    return np.linalg.qr(np.column_stack((X, y)), mode="r")


def row_factor(problem: Problem, split: str) -> np.ndarray:
    """Compressed rows ``R_s`` of a split, computed on first use and kept with the problem."""
    cache = problem.row_factors
    hit = cache.get(split)
    if hit is None:
        hit = _frozen(compressed_rows(getattr(problem, "X_" + split), getattr(problem, "y_" + split)))
        cache[split] = hit
    return hit


def statistics_splits(problem: Problem, path: str = "auto") -> tuple[str, ...]:
    """Splits whose recorded error uses sufficient statistics under ``path``.

    ``auto``: every split with more rows than features (sparse designs: and at least ``d^2``
    stored entries), while their Gram matrices together fit in ``GRAM_MAX_BYTES``; ``gram``:
    every non-empty split; ``direct`` and ``fused``: none. Only regression problems (squared
    error) are concerned.
    """
    _check_path(path)
    if path in ("direct", "fused") or problem.task != "regression":
        return ()
    d = problem.d
    rows = {s: getattr(problem, "X_" + s).shape[0] for s in SPLITS}
    if path == "gram":
        return tuple(s for s in SPLITS if rows[s] > 0)
    chosen = tuple(s for s in SPLITS if rows[s] > d
                   and (not problem.sparse or d * d <= getattr(problem, "X_" + s).nnz))
    if len(chosen) * (d + 1) ** 2 * 8 > GRAM_MAX_BYTES:
        return ()
    return chosen


@dataclass(frozen=True)
class SplitStatistics:
    """Stacked sufficient statistics of the splits in ``splits`` (read-only arrays).

    ``A = [G_1; ...; G_k; c_1^T; ...; c_k^T]`` ((k d + k) x d), ``C2 = 2 [c_1; ...; c_k]``
    (k d) and ``yy = (y_j^T y_j)_j``. One product ``u = A w`` gives ``G_j w`` and
    ``l_j = c_j^T w``; then ``v_j = w^T (G_j w - 2 c_j) + yy_j`` is the squared error of
    split j and ``v_j + 2 l_j = w^T G_j w + yy_j`` its scale (see the precision note).
    """

    splits: tuple[str, ...]
    A: np.ndarray
    C2: np.ndarray
    yy: tuple[float, ...]

    @property
    def k(self) -> int:
        return len(self.splits)

    def gram(self, j: int) -> np.ndarray:
        d = self.A.shape[1]
        return self.A[j * d:(j + 1) * d]


def split_statistics(problem: Problem, path: str = "auto") -> SplitStatistics | None:
    splits = statistics_splits(problem, path)
    if not splits:
        return None
    cached = problem.statistics.get(splits)
    if cached is not None:
        return cached
    parts = [_gram(problem, s) for s in splits]
    C = np.stack([p[1] for p in parts])
    st = SplitStatistics(splits=splits, A=_frozen(np.concatenate([p[0] for p in parts] + [C], axis=0)),
                         C2=_frozen(2.0 * C.ravel()), yy=tuple(p[2] for p in parts))
    problem.statistics[splits] = st
    return st


def prepare(problem: Problem, train: TrainingSet | None = None,
            path: str = "auto") -> tuple[TrainingSet, SplitStatistics | None]:
    """Everything a run on ``problem`` evaluates with: the solver's training set (from the
    run's ``train``, default ``problem.training``) and the recorder's statistics (both
    computed once per problem for ``auto``)."""
    return training_for(problem, train, path), split_statistics(problem, path)


def describe(train: TrainingSet, stats: SplitStatistics | None) -> dict:
    return {"gradient": path_name(train), "statistics": list(stats.splits) if stats is not None else [],
            "guard": GUARD}


__all__ = ["PATHS", "GUARD", "FusedGradient", "GramGradient", "SparseFusedGradient", "SplitStatistics", "attach_plan",
           "choose_gradient_path", "compressed_rows", "gradient_plan", "prepare", "row_factor", "split_statistics", "statistics_splits",
           "training_for"]

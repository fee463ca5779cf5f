"""The Problem: what a run sees of a dataset after splitting and preprocessing.

A solver never receives the Problem itself, only its :class:`TrainingSet` (training rows
and the smoothness constant), so no solver can look at validation or test data.
"""
from __future__ import annotations

import dataclasses
from dataclasses import dataclass, field
from functools import cached_property
from typing import Any, Callable

import numpy as np

from stopwise.problem import design as _design
from stopwise.problem.design import SPECTRUM_GRAM_MAX  # noqa: F401  (||X_train||_2 from a Gram matrix up to this size)

TASKS = ("regression", "binary", "multiclass")
DENSE_CHOICES = ("choose dataset.params.design=dense on a smaller file, or a method that takes sparse designs "
                 "(solvers gd, nesterov, heavy_ball, sgd, cgls)")
NOISE_KINDS = ("norm", "gaussian")


@dataclass(frozen=True)
class TrainingSet:
    """Training rows only: what a solver may use.

    ``loss`` names the training objective (see :mod:`stopwise.problem.losses`) and ``L`` is its
    smoothness constant: ``||X||_2^2 / n`` for least squares ``f(w) = (1 / (2 n)) ||X w - y||^2``,
    ``||X||_2^2 / (4 n)`` for logistic, ``||X||_2^2 / (2 n)`` for softmax, and the scale
    ``||X||_2^2 / n`` for the (non-smooth) hinge. ``k`` is the number of columns of the weight
    matrix (the number of classes for softmax, 1 otherwise); iterates are flat vectors of
    length ``dim = d * k``.

    ``plan`` is the gradient's evaluation plan (a callable ``w -> X^T (X w - y) / n`` computed
    another way, see :mod:`stopwise.running.fastpath`) and ``path`` its name; ``path`` is None
    until an evaluation path was chosen for this set, and ``plan`` None means the direct
    formula. A planned set is built once with ``dataclasses.replace``.

    ``X`` is a dense float64 array or a ``scipy.sparse`` CSR matrix (see
    :mod:`stopwise.problem.design`); every quantity here reads a CSR matrix's nonzeros only.
    """

    X: np.ndarray
    y: np.ndarray
    L: float
    task: str = "regression"
    loss: str = "squares"
    k: int = 1
    plan: Callable[[np.ndarray], np.ndarray] | None = field(default=None, repr=False, compare=False)
    path: str | None = field(default=None, compare=False)

    def gradient(self, w: np.ndarray) -> np.ndarray:
        """Gradient of the training objective at ``w`` as a new array (one data pass)."""
        return self._gradient(w)

    @cached_property
    def _gradient(self) -> Callable[[np.ndarray], np.ndarray]:
        """The function :func:`stopwise.problem.losses.gradient` calls for this set, chosen
        once (a step then pays no dispatch)."""
        from stopwise.problem.losses import gradient_function

        return gradient_function(self)

    def value(self, w: np.ndarray) -> float:
        """Training objective at ``w``."""
        from stopwise.problem.losses import value

        return value(self, w)

    @cached_property
    def row_norm_max2(self) -> float:
        """``R^2 = max_i ||x_i||^2`` (computed once per training set)."""
        X = self.X
        return float(_design.row_norms_sq(X).max()) if X.shape[0] and X.shape[1] else 0.0

    @cached_property
    def hessian_range(self) -> tuple[float, float]:
        """``(mu, lam_max)``: the smallest and largest eigenvalues of the least-squares
        Hessian ``X^T X / n`` (``numpy.linalg.eigvalsh`` of the d x d Gram matrix, LAPACK
        ``syevd``; its absolute error is a small multiple of ``eps lam_max``). With fewer
        rows than features the smallest is 0 and the largest comes from ``X X^T / n``.
        Computed once per training set (``TrainingSet(np.diag([2.0, 1.0]), y, L)`` gives
        ``(0.5, 2.0)``)."""
        n, d = self.X.shape
        if n == 0 or d == 0:
            return 0.0, 0.0
        if n < d:
            return 0.0, float(np.linalg.eigvalsh(_design.gram(self.X, rows=True))[-1]) / n
        lam = np.linalg.eigvalsh(_design.gram(self.X))
        return max(float(lam[0]), 0.0) / n, float(lam[-1]) / n

    @property
    def sparse(self) -> bool:
        """Whether the training rows are a ``scipy.sparse`` CSR matrix."""
        return _design.is_sparse(self.X)

    @property
    def n(self) -> int:
        return self.X.shape[0]

    @property
    def d(self) -> int:
        return self.X.shape[1]

    @property
    def dim(self) -> int:
        """Length of an iterate: ``d`` (``d * K`` for softmax, W stored row-major)."""
        return self.X.shape[1] * self.k


@dataclass(frozen=True)
class Problem:
    """Float64 train/validation/test arrays plus what is known about the truth.

    ``noise_kind`` is ``"norm"`` when ``noise_level`` is the exact Euclidean norm of the
    noise added to the training targets (worst-case model, the ``delta`` of the
    discrepancy principle), ``"gaussian"`` when it is the standard deviation ``sigma`` of
    i.i.d. Gaussian noise on every target, and ``None`` when unknown.

    The three designs are dense float64 arrays, or all three ``scipy.sparse`` CSR matrices
    (:attr:`sparse`; a file dataset's ``design=sparse``); :meth:`dense` gives a dense copy for
    the methods that need one, within a stated bound.
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
    loss: str | None = None  # the dataset's loss option; None = the task's default
    # Caches, computed on first use and shared by every run on the problem (never compared,
    # never part of the constructor). Keys: a loss name for ``training_sets``, a split
    # name for the others; ``statistics`` is keyed by the tuple of splits it stacks.
    training_sets: dict[str, TrainingSet] = field(default_factory=dict, init=False, repr=False, compare=False)
    gram_matrices: dict[str, np.ndarray] = field(default_factory=dict, init=False, repr=False, compare=False)
    sufficient_statistics: dict[str, tuple] = field(default_factory=dict, init=False, repr=False, compare=False)
    row_factors: dict[str, np.ndarray] = field(default_factory=dict, init=False, repr=False, compare=False)
    statistics: dict[tuple, Any] = field(default_factory=dict, init=False, repr=False, compare=False)
    dense_copies: dict[str, "Problem"] = field(default_factory=dict, init=False, repr=False, compare=False)
    # Called as ``on_norm(value, seconds)`` once :attr:`train_norm2_sq` is computed (the data
    # layer keeps a costly one in its on-disk cache, so another process reads it).
    on_norm: list[Callable[[float, float], None]] = field(default_factory=list, init=False, repr=False,
                                                          compare=False)

    def __post_init__(self) -> None:
        if self.task not in TASKS:
            raise ValueError(f"task {self.task!r} is not one of {', '.join(TASKS)}")
        from stopwise.problem.losses import check_loss

        check_loss(self.task, self.loss)
        if self.noise_kind is not None and self.noise_kind not in NOISE_KINDS:
            raise ValueError(f"noise kind {self.noise_kind!r} is not one of {', '.join(NOISE_KINDS)}")
        for name in ("X_train", "y_train", "X_val", "y_val", "X_test", "y_test"):
            arr = getattr(self, name)
            if arr.dtype != np.float64:
                raise TypeError(f"Problem.{name} must be float64, got {arr.dtype}")
            if name.startswith("X") and _design.is_sparse(arr) != _design.is_sparse(self.X_train):
                raise TypeError(f"Problem.{name} must be sparse like X_train, or dense like it")
            if _design.is_sparse(arr) and arr.format != "csr":
                raise TypeError(f"Problem.{name} must be a CSR matrix, got {arr.format}")
            if _design.is_sparse(arr) and not arr.has_canonical_format:
                raise TypeError(f"Problem.{name} must have sorted column indices without duplicates "
                                "(scipy's X.sum_duplicates())")
            _design.freeze(arr)
        if self.w_true is not None:
            self.w_true.flags.writeable = False

    @property
    def n_train(self) -> int:
        return self.X_train.shape[0]

    @property
    def sparse(self) -> bool:
        """Whether the designs are ``scipy.sparse`` CSR matrices."""
        return _design.is_sparse(self.X_train)

    def dense(self, method: str) -> "Problem":
        """This problem with dense designs, for ``method`` that needs them (itself when dense).

        The copy is made once per problem and only below :func:`design.dense_bytes_limit`
        (all three splits together); above it a one-line :class:`design.DesignError` names the
        method, the shape and the choices."""
        if not self.sparse:
            return self
        hit = self.dense_copies.get("dense")
        if hit is not None:
            return hit
        self.check_dense(method)  # all splits together, before any copy
        copy = dataclasses.replace(self, **{k: np.ascontiguousarray(getattr(self, k).toarray(), dtype=np.float64)
                                            for k in ("X_train", "X_val", "X_test")})
        self.dense_copies["dense"] = copy
        return copy

    def check_dense(self, method: str) -> None:
        """Raise what :meth:`dense` raises for ``method``, without making the copy."""
        if not self.sparse:
            return
        n = sum(getattr(self, "X_" + s).shape[0] for s in ("train", "val", "test"))
        _design.check_dense_size((n, self.d), f"{method} needs a dense design, and dataset {self.name!r}",
                                 DENSE_CHOICES)

    @property
    def d(self) -> int:
        return self.X_train.shape[1]

    @property
    def signal_rows(self) -> bool:
        """Whether the rows are samples of a signal in their order (sampling points of an
        integral equation, time), so that the training residual read in row order is a
        signal too: the source declares it (``SourceDef.row_order``) and the build writes
        ``info["row_order"] = "signal"``. Splits keep
        the source's row order within each part."""
        return self.info.get("row_order") == "signal"

    @property
    def L(self) -> float:
        """Smoothness constant of the default training objective (``||X_train||_2^2 / n_train``
        for least squares; see :class:`TrainingSet`)."""
        return self.training.L

    @property
    def objective(self) -> str:
        """The loss trained by default: the dataset's ``loss`` option or the task's default."""
        from stopwise.problem.losses import check_loss

        return check_loss(self.task, self.loss)

    @property
    def n_classes(self) -> int:
        """Number of classes (0 for regression): from ``info["classes"]`` when the source
        recorded them, else 2 for binary and the largest label + 1 for multiclass."""
        if self.task == "regression":
            return 0
        classes = self.info.get("classes")
        if classes:
            return len(classes)
        if self.task == "binary":
            return 2
        top = max(float(a.max()) for a in (self.y_train, self.y_val, self.y_test) if a.size)
        return int(top) + 1

    @property
    def training(self) -> TrainingSet:
        """Training rows with the default loss (see :meth:`training_set`)."""
        return self.training_set(None)

    def training_set(self, loss: str | None = None) -> TrainingSet:
        """Training rows with ``loss`` (default: :attr:`objective`), cached per loss."""
        from stopwise.problem.losses import CURVATURE, check_loss, n_outputs

        loss = check_loss(self.task, loss if loss is not None else self.loss)
        cache = self.training_sets
        hit = cache.get(loss)
        if hit is None:
            X = self.X_train
            L = CURVATURE[loss] * self.train_norm2_sq / max(X.shape[0], 1)
            hit = TrainingSet(X=X, y=self.y_train, L=L, task=self.task, loss=loss,
                              k=n_outputs(loss, self.n_classes))
            cache[loss] = hit
        return hit

    def gram_matrix(self, split: str = "train") -> np.ndarray:
        """``X_s^T X_s`` of a split (``train``, ``val``, ``test``), computed once per problem
        and read-only (shared by the smoothness constant and the Gram evaluation path)."""
        cache = self.gram_matrices
        G = cache.get(split)
        if G is None:
            X = getattr(self, "X_" + split)
            G = _design.gram(X)  # a sparse product made dense for a sparse design (d x d)
            G.flags.writeable = False
            cache[split] = G
        return G

    @cached_property
    def train_norm2_sq(self) -> float:
        """``||X_train||_2^2``, the largest eigenvalue of the smaller of ``X^T X`` and ``X X^T``
        (LAPACK ``syevd``; its relative error is a small multiple of the machine epsilon), or,
        when that matrix would have more than ``SPECTRUM_GRAM_MAX`` rows, of a full SVD (dense
        design) or of ``scipy.sparse.linalg.svds`` (sparse design, no dense copy).
        Computed once per problem (and handed to :attr:`on_norm`)."""
        import time

        X = self.X_train
        n, d = X.shape
        if n == 0 or d == 0 or _design.nnz(X) == 0:
            return 0.0
        t0 = time.perf_counter()
        if min(n, d) > SPECTRUM_GRAM_MAX:  # a full SVD (dense) or ARPACK's top singular value (sparse)
            value = _design.sparse_norm2(X) ** 2 if self.sparse else float(np.linalg.norm(X, 2)) ** 2
        else:
            value = float(np.linalg.eigvalsh(self.gram_matrix("train") if n >= d else _design.gram(X, rows=True))[-1])
        took = time.perf_counter() - t0
        for call in self.on_norm:
            call(value, took)
        return value

    @cached_property
    def hard_margin(self):
        """The hard-margin reference of a binary problem's training rows
        (:func:`stopwise.problem.margins.reference`), computed once; None for other tasks."""
        from stopwise.problem.margins import compute_reference

        return compute_reference(self)

    @property
    def noise_norm(self) -> float | None:
        """Norm of the training noise (exact for ``norm``, expected for ``gaussian``)."""
        if self.noise_level is None:
            return None
        if self.noise_kind == "norm":
            return float(self.noise_level)
        return float(self.noise_level) * float(np.sqrt(self.n_train))

"""Early-stopped kernel regression: gradient descent in a reproducing-kernel Hilbert space.

The estimator after ``t`` steps is ``f_t(x) = sum_i c_i k(x, x_i)`` over the ``n`` training
rows, with ``K = k(X_train, X_train)`` and, from ``c_0 = 0``::

    c_{t+1} = c_t - (eta / n) (K c_t - y),    eta = step_scale / L_K,   L_K = lambda_max(K) / n

which is gradient descent on ``(1 / (2n)) sum_i (f(x_i) - y_i)^2`` over the RKHS, whose
smoothness constant is ``L_K`` (Yao, Rosasco and Caponnetto, "On early stopping in gradient
descent learning", Constr. Approx. 26, 2007). It converges for ``0 < step_scale < 2``, and
with ``K = Q diag(s) Q^T`` the iterate is a spectral filter of the kernel matrix:

    c_t = Q diag((1 - (1 - eta s_j / n)^t) / s_j) Q^T y

so the iteration count plays the part of ridge's penalty. With the linear kernel
``K = X X^T``, ``L_K = ||X||_2^2 / n = L`` and ``w_t = X^T c_t`` is gradient descent's iterate
with the same ``step_scale``: the same predictions. A step costs one product with ``K``
(the residual of every training row): one data pass.

The iterate ``w`` of the state is ``c`` (length ``n_train``); the run's model
(:class:`stopwise.problem.models.KernelModel`) scores the validation and test rows through
``k(X_s, X_train)``, so the trace's ``w_norm`` is ``||c||`` and ``dist_truth`` is not
defined (NaN). The column ``rkhs_norm`` records ``||f_t||_H = sqrt(c^T K c)``.
Kernels and their params follow :mod:`sklearn.metrics.pairwise` (``gamma`` null: ``1 / d``).
The kernel matrix is held in memory: at most ``KERNEL_MAX_ROWS`` training rows.
"""
from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from stopwise.core.errors import SpecError
from stopwise.core.params import Choice, Interval, param
from stopwise.problem.models import KERNELS, KernelModel, training_kernel
from stopwise.problem.problem import TrainingSet
from stopwise.solvers.base import SolverDef, State, frozen, register

KERNEL_MAX_ROWS = 10000  # an n x n float64 matrix of 800 MB; the recorder holds the scores' matrices too
POSITIVE = Interval(0.0, None, low_closed=False)


@dataclass(frozen=True)
class KernelGDParams:
    kernel: str = param("rbf", Choice(KERNELS), "kernel of sklearn.metrics.pairwise: linear, rbf, polynomial, laplacian")
    gamma: float | None = param(None, POSITIVE, "rbf / polynomial / laplacian: gamma; null = 1 / n_features")
    degree: int = param(3, Interval(1, None, integer=True), "polynomial: degree")
    coef0: float = param(1.0, Interval(None, None), "polynomial: coef0")
    step_scale: float = param(1.0, Interval(0.0, None, low_closed=False),
                              "step size in units of 1/L_K, L_K = lambda_max(K) / n (converges for < 2)")


@dataclass(frozen=True)
class KernelState(State):
    K: np.ndarray | None = None     # the training kernel matrix (read-only, shared by every state)
    rate: float = 0.0               # eta / n = step_scale / lambda_max(K)


def kernel_model(params: KernelGDParams, train: TrainingSet) -> KernelModel:
    return KernelModel(train.X, params.kernel, params.gamma, params.degree, params.coef0)


def check_rows(train: TrainingSet, params: KernelGDParams) -> None:
    """Refuse a training set whose kernel matrix would not fit (one line)."""
    if train.n > KERNEL_MAX_ROWS:
        raise SpecError(f"solver 'kernel_gd' keeps the n_train x n_train kernel matrix in memory: n_train={train.n} "
                        f"is above {KERNEL_MAX_ROWS}; subsample the rows (dataset.params) or use random features "
                        "(dataset.random_features) with gd")


LANCZOS_MIN_ROWS = 200  # below this a dense eigenvalue routine is as fast


def top_eigenvalue(K: np.ndarray) -> float:
    """``lambda_max(K)`` of a symmetric matrix: LAPACK ``syevr`` for the last eigenvalue of a
    small matrix, else ARPACK's Lanczos iteration (``scipy.sparse.linalg.eigsh``, which needs
    only products with K: O(n^2) each instead of the O(n^3) reduction) to full precision
    (``tol=0``) from the fixed start ``1 / sqrt(n)``, so a rerun gets the same value."""
    n = K.shape[0]
    if n == 0:
        return 0.0
    if n < LANCZOS_MIN_ROWS:
        from scipy.linalg import eigh

        return float(eigh(K, eigvals_only=True, subset_by_index=[n - 1, n - 1])[0])
    from scipy.sparse.linalg import eigsh

    return float(eigsh(K, k=1, which="LA", tol=0.0, v0=np.full(n, 1.0 / np.sqrt(n)), return_eigenvectors=False)[0])


def kernel_gd_init(train: TrainingSet, params: KernelGDParams, rng) -> KernelState:
    check_rows(train, params)
    K = frozen(training_kernel(train.X, params.kernel, params.gamma, params.degree, params.coef0))
    top = top_eigenvalue(K)
    return KernelState(w=frozen(np.zeros(train.n)), iteration=0, passes=0.0, K=K,
                       rate=params.step_scale / top if top > 0 else 0.0)


def kernel_gd_step(train: TrainingSet, params: KernelGDParams, state: KernelState) -> KernelState:
    """``c_{t+1} = c_t - (eta / n) (K c_t - y)`` (module docstring).

    >>> tr = TrainingSet(np.array([[1.0], [2.0]]), np.array([1.0, 2.0]), L=2.5)
    >>> p = KernelGDParams(kernel="linear")
    >>> s = kernel_gd_step(tr, p, kernel_gd_init(tr, p, None))    # K = [[1, 2], [2, 4]], lambda_max 5
    >>> s.w.round(12).tolist(), s.passes
    ([0.2, 0.4], 1.0)
    """
    r = state.K @ state.w
    r -= train.y
    r *= -state.rate
    r += state.w
    return KernelState(w=frozen(r), iteration=state.iteration + 1, passes=state.passes + 1.0,
                       K=state.K, rate=state.rate)


def kernel_gd_metrics(train: TrainingSet, params: KernelGDParams):
    """``rkhs_norm``: ``||f_t||_H = sqrt(c^T K c)`` of the recorded iterate."""
    def rkhs_norm(state: KernelState) -> float:
        return math.sqrt(max(float(state.w @ (state.K @ state.w)), 0.0))
    return {"rkhs_norm": rkhs_norm}


register(SolverDef("kernel_gd", KernelGDParams, kernel_gd_init, kernel_gd_step,
                   "early-stopped kernel regression: gradient descent in the RKHS of a linear, rbf, "
                   "polynomial or laplacian kernel, step step_scale/L_K",
                   metrics=kernel_gd_metrics, model=kernel_model, check=check_rows))

"""Margins, separability and the hard-margin reference of binary problems.

For a linear classifier ``w`` on rows ``x_i`` with labels ``y_i in {-1, +1}``:

    normalized margin   gamma(w) = min_i y_i <w, x_i> / ||w||,
    separable           there is w with y_i <w, x_i> >= 1 for all i (LP feasibility),
    hard-margin SVM     w* = argmin ||w||^2  subject to  y_i <w, x_i> >= 1,
                        whose normalized margin is the largest one, 1 / ||w*||.

The model has no intercept: a bias is a constant feature (dataset option ``add_constant``)
and is penalized like every other weight, as it is in gradient descent on that feature.
For a model homogeneous of degree k in its parameters theta (a two-layer ReLU network
without biases has k = 2) the normalized margin is ``min_i y_i f(x_i) / ||theta||^k``
(Lyu and Li, ICLR 2020).
"""
from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np

SVM_C = 1e6
# Above this many training rows the reference is skipped (SVC's cost grows quadratically or
# worse in the rows); the trace metadata then says so and the svm_* columns are NaN.
REFERENCE_MAX_ROWS = 10_000


@dataclass(frozen=True)
class HardMargin:
    """The reference for a binary training set: separability and the hard-margin SVM."""

    separable: bool
    w: np.ndarray | None = None
    margin: float = math.nan           # 1 / ||w*||
    min_functional_margin: float = math.nan  # min_i y_i <w*, x_i> (1 at the exact solution)
    method: str = ""
    info: dict = field(default_factory=dict)

    @property
    def direction(self) -> np.ndarray | None:
        return None if self.w is None else self.w / np.linalg.norm(self.w)


def is_separable(X: np.ndarray, y: np.ndarray) -> bool:
    """LP feasibility test (SciPy's HiGHS): is there a w with ``y_i <w, x_i> >= 1`` for all i?

    Equivalent to strict linear separability through the origin (scale any strict separator).
    """
    return X.shape[0] == 0 or feasible_point(X, y) is not None


def feasible_point(X: np.ndarray, y: np.ndarray) -> np.ndarray | None:
    """A w with ``y_i <w, x_i> >= 1`` for all i (SciPy's ``linprog``, HiGHS, zero
    objective), or None when there is none."""
    from scipy.optimize import linprog

    n, d = X.shape
    A = -(y[:, None] * X)
    res = linprog(np.zeros(d), A_ub=A, b_ub=-np.ones(n), bounds=[(None, None)] * d, method="highs")
    if res.status == 0:
        return np.asarray(res.x, dtype=np.float64)
    if res.status == 2:
        return None
    raise RuntimeError(f"separability LP ended with status {res.status}: {res.message}")


def hard_margin_svm(X: np.ndarray, y: np.ndarray, C: float = SVM_C) -> np.ndarray:
    """Hard-margin SVM without intercept via scikit-learn's ``SVC(kernel="linear", C=1e6)``.

    SVC always fits an intercept b. Fitting it on the rows and their mirror images
    ``(-x_i, -y_i)`` makes the problem symmetric under b -> -b, so b = 0 is optimal and the
    returned coefficients solve ``min ||w||^2 s.t. y_i <w, x_i> >= 1`` (for C above the
    largest dual variable, which C = 1e6 is on every bundled separable problem) up to SVC's
    tolerance: :func:`polish` makes it exact.
    """
    from sklearn.svm import SVC

    Xm = np.vstack([X, -X])
    ym = np.concatenate([y, -y])
    svc = SVC(kernel="linear", C=C, tol=1e-8).fit(Xm, ym)
    return np.asarray(svc.coef_, dtype=np.float64).ravel()


# The KKT check: the smallest functional margin is 1 to KKT_TOL and a multiplier vector
# alpha >= 0 on the active rows (functional margin within ACTIVE_TOL of 1) gives w back to
# KKT_TOL relatively; the rows of an exact solution sit at 1 to rounding (a few ulps times
# the conditioning of the support), far inside both.
KKT_TOL = 1e-12
ACTIVE_TOL = 1e-10
# Rows whose functional margin under SVC's solution is within this of the smallest one form
# the guessed support (SVC's margins are 1 to about 1e-6; non-support rows lie further out).
SUPPORT_GUESS = 1e-4


@dataclass(frozen=True)
class KKT:
    """Optimality conditions of ``min ||w||^2 / 2 s.t. a_i.w >= 1`` (``a_i = y_i x_i``) at
    ``w``, with ``alpha >= 0`` the nonnegative least-squares multipliers on the active rows
    ``S`` (``min ||A_S^T alpha - w||``, Lawson-Hanson through ``scipy.optimize.nnls``):
    primal feasibility ``min_i a_i.w - 1``, stationarity ``||w - A_S^T alpha|| / ||w||``
    (dual feasibility holds by construction) and complementary slackness
    ``max_i alpha_i |a_i.w - 1| / max alpha``. Together they certify that w is the solution
    (the problem is convex)."""

    support: tuple[int, ...]
    alpha: np.ndarray
    primal: float
    stationarity: float
    complementarity: float

    @property
    def ok(self) -> bool:
        return self.primal >= -KKT_TOL and self.stationarity <= KKT_TOL and self.complementarity <= ACTIVE_TOL

    def as_dict(self) -> dict:
        return {"active_rows": len(self.support), "support_rows": int(np.count_nonzero(self.alpha > 0)),
                "primal": self.primal, "stationarity": self.stationarity, "complementarity": self.complementarity}


def kkt(A: np.ndarray, w: np.ndarray) -> KKT:
    """The KKT residuals of ``w`` for the rows ``A`` (``a_i = y_i x_i``)."""
    from scipy.optimize import nnls

    m = A @ w - 1.0
    S = np.flatnonzero(np.abs(m) <= ACTIVE_TOL)
    nw = float(np.linalg.norm(w))
    if S.size == 0 or nw == 0.0:
        return KKT(tuple(), np.zeros(0), float(np.min(m)) if m.size else 0.0, math.inf, 0.0)
    alpha, res = nnls(A[S].T, w)
    amax = float(np.max(alpha))
    return KKT(support=tuple(int(i) for i in S), alpha=alpha, primal=float(np.min(m)),
               stationarity=float(res) / nw,
               complementarity=float(np.max(alpha * np.abs(m[S]))) / amax if amax > 0 else 0.0)


def _on_support(A: np.ndarray, S: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """``(w, alpha)`` with ``A_S w = 1`` and ``w = A_S^T alpha``: the least-norm point of the
    support's hyperplanes and its multipliers, for linearly independent rows ``A_S``
    (``A_S^T = QR``: ``R^T v = 1``, ``w = Q v``, ``R alpha = v``), with one step of iterative
    refinement on the residual ``1 - A_S w``."""
    from scipy.linalg import qr, solve_triangular

    Q, R = qr(A[S].T, mode="economic")
    ones = np.ones(S.size)
    v = solve_triangular(R, ones, trans="T")
    w = Q @ v
    r = ones - A[S] @ w
    v = v + solve_triangular(R, r, trans="T")
    w = Q @ v
    return w, solve_triangular(R, v)


def _independent(A: np.ndarray, S: np.ndarray) -> np.ndarray:
    """The rows of ``A_S`` chosen by column-pivoted QR of ``A_S^T`` as a linearly independent
    set spanning the others (numerical rank at ``max(shape) * eps * |R_00|``)."""
    from scipy.linalg import qr

    if S.size == 0:
        return S
    _, R, piv = qr(A[S].T, mode="economic", pivoting=True)
    diag = np.abs(np.diag(R))
    rank = int(np.count_nonzero(diag > max(A.shape) * np.finfo(float).eps * diag[0]))
    return np.sort(S[piv[:rank]])


def active_set(A: np.ndarray, w0: np.ndarray, max_iter: int | None = None) -> tuple[np.ndarray, KKT, int]:
    """The primal active-set method for convex QP (Nocedal and Wright, Numerical
    Optimization, 2nd ed. 2006, Algorithm 16.3) on ``min ||w||^2 / 2 s.t. A w >= 1``, from a
    feasible ``w0``: the working set W holds linearly independent rows active at the iterate;
    each step moves toward the least-norm point of W's hyperplanes, stopping at the first
    constraint it would cross (which joins W), and at that point a row with a negative
    multiplier leaves W. Returns ``(w, kkt, iterations)``."""
    n, d = A.shape
    max_iter = max_iter or 10 * (n + d)
    w = np.array(w0, dtype=np.float64)
    norms = np.linalg.norm(A, axis=1)
    W = np.array([int(np.argmin(A @ w))])
    for it in range(1, max_iter + 1):
        z, alpha = _on_support(A, W)
        p = z - w
        if float(np.linalg.norm(p)) <= KKT_TOL * float(np.linalg.norm(z)):
            w = z
            j = int(np.argmin(alpha))
            if alpha[j] >= -KKT_TOL * float(np.max(alpha)):
                return w, kkt(A, w), it
            W = np.delete(W, j)
            continue
        Ap = A @ p
        slack = np.maximum(A @ w - 1.0, 0.0)
        # a row in the span of W has a_i.p = 0 up to rounding: only a clear descent blocks
        block = Ap < -KKT_TOL * norms * float(np.linalg.norm(p))
        block[W] = False
        step, k = 1.0, -1
        if block.any():
            idx = np.flatnonzero(block)
            ratios = slack[idx] / -Ap[idx]
            j = int(np.argmin(ratios))
            if ratios[j] < 1.0:
                step, k = float(ratios[j]), int(idx[j])
        w = z if step == 1.0 else w + step * p
        if k >= 0:
            W = np.sort(np.append(W, k))
    z, _ = _on_support(A, W)
    return z, kkt(A, z), max_iter


def polish(X: np.ndarray, y: np.ndarray, w_guess: np.ndarray) -> tuple[np.ndarray, KKT, str]:
    """The exact hard-margin solution from an approximate one (SVC's).

    First guess the support (rows whose functional margin is within ``SUPPORT_GUESS`` of
    the smallest), keep a linearly independent subset, and solve the KKT conditions on it
    exactly (:func:`_on_support`); when the check fails (a wrong guess), run the active-set
    method (:func:`active_set`) from the feasible point ``w_guess / min_i a_i.w_guess``.
    Returns ``(w, kkt, route)`` with ``route`` ``"support"`` or ``"active set"``; the caller
    reads ``kkt.ok``.

    >>> X = np.array([[2.0, 0.0], [0.0, 1.0], [-1.0, 0.0], [3.0, 3.0]]); y = np.array([1.0, 1.0, -1.0, 1.0])
    >>> w, k, route = polish(X, y, np.array([1.00001, 0.99999]))
    >>> w.tolist(), k.ok, route, k.support
    ([1.0, 1.0], True, 'support', (1, 2))
    >>> w, k, route = polish(X, y, np.array([1.01, 0.98]))  # guesses row 1 alone
    >>> w.tolist(), k.ok, route
    ([1.0, 1.0], True, 'active set')
    """
    A = y[:, None] * X
    m = A @ w_guess
    mmin = float(np.min(m))
    S = _independent(A, np.flatnonzero(m <= mmin + SUPPORT_GUESS * max(abs(mmin), 1.0)))
    w, _ = _on_support(A, S)
    check = kkt(A, w)
    if check.ok:
        return w, check, "support"
    start = w_guess / mmin if mmin > 0 else feasible_point(X, y)
    if start is None or float(np.min(A @ start)) < 1.0 - KKT_TOL:
        return w, check, "no feasible start"
    w, check, _ = active_set(A, start)
    return w, check, "active set"


def hard_margin(X: np.ndarray, y: np.ndarray) -> HardMargin:
    """Separability by LP, then, when separable, the hard-margin solution: SVC's, polished
    to the exact solution of the KKT conditions (:func:`polish`), which are verified.

    >>> X = np.array([[2.0, 0.0], [0.0, 1.0], [-1.0, 0.0]]); y = np.array([1.0, 1.0, -1.0])
    >>> r = hard_margin(X, y)
    >>> r.separable, r.w.tolist(), round(r.margin, 4), r.min_functional_margin
    (True, [1.0, 1.0], 0.7071, 1.0)
    >>> hard_margin(np.array([[1.0], [1.0]]), np.array([1.0, -1.0])).separable
    False
    """
    if not is_separable(X, y):
        return HardMargin(separable=False, method="linprog (HiGHS) feasibility: infeasible")
    svc = f"SVC(kernel='linear', C={SVM_C:g}) on mirrored rows, no intercept"
    w_svc = hard_margin_svm(X, y)
    w, check, route = polish(X, y, w_svc) if X.shape[0] else (w_svc, None, "")
    if check is not None and check.ok:
        method = f"{svc}, polished: KKT conditions solved exactly on the support ({route})"
        info = {"kkt": check.as_dict()}
    else:  # keep SVC's solution and say so (never seen on the bundled or test problems)
        method, w = f"{svc}; KKT polish failed, SVC's tolerance applies", w_svc
        info = {"kkt": check.as_dict()} if check is not None else {}
    nw = float(np.linalg.norm(w))
    fm = float(np.min(y * (X @ w))) if X.shape[0] else math.nan
    return HardMargin(separable=True, w=w, margin=1.0 / nw if nw > 0 else math.nan, min_functional_margin=fm,
                      method=method, info=info)


def reference(problem) -> HardMargin | None:
    """The hard-margin reference of a binary problem's training rows, computed once and
    kept with the (immutable) Problem (``Problem.hard_margin``); None for other tasks."""
    return problem.hard_margin


def compute_reference(problem) -> HardMargin | None:
    """What :func:`reference` returns, computed afresh."""
    if problem.task != "binary":
        return None
    if problem.sparse:  # the LP and SVC below work on dense rows; a sparse design is not densified for a reference
        return HardMargin(separable=False, method="skipped: sparse design", info={"skipped": True})
    if problem.n_train > REFERENCE_MAX_ROWS:
        return HardMargin(separable=False, method=f"skipped: more than {REFERENCE_MAX_ROWS} training rows",
                          info={"skipped": True})
    return hard_margin(problem.X_train, problem.y_train)


def normalized_margin(X: np.ndarray, y: np.ndarray, w: np.ndarray, degree: int = 1) -> float:
    """``min_i y_i <w, x_i> / ||w||^degree`` (NaN at w = 0)."""
    nw = float(np.linalg.norm(w))
    if nw == 0.0 or X.shape[0] == 0:
        return math.nan
    return float(np.min(y * (X @ w))) / nw ** degree

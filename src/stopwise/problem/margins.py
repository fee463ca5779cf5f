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
    from scipy.optimize import linprog

    n, d = X.shape
    if n == 0:
        return True
    A = -(y[:, None] * X)
    res = linprog(np.zeros(d), A_ub=A, b_ub=-np.ones(n), bounds=[(None, None)] * d, method="highs")
    if res.status == 0:
        return True
    if res.status == 2:
        return False
    raise RuntimeError(f"separability LP ended with status {res.status}: {res.message}")


def hard_margin_svm(X: np.ndarray, y: np.ndarray, C: float = SVM_C) -> np.ndarray:
    """Hard-margin SVM without intercept via scikit-learn's ``SVC(kernel="linear", C=1e6)``.

    SVC always fits an intercept b. Fitting it on the rows and their mirror images
    ``(-x_i, -y_i)`` makes the problem symmetric under b -> -b, so b = 0 is optimal and the
    returned coefficients solve ``min ||w||^2 s.t. y_i <w, x_i> >= 1`` (for C above the
    largest dual variable, which C = 1e6 is on every bundled separable problem).
    """
    from sklearn.svm import SVC

    Xm = np.vstack([X, -X])
    ym = np.concatenate([y, -y])
    svc = SVC(kernel="linear", C=C, tol=1e-8).fit(Xm, ym)
    return np.asarray(svc.coef_, dtype=np.float64).ravel()


def hard_margin(X: np.ndarray, y: np.ndarray) -> HardMargin:
    """Separability by LP, then, when separable, the hard-margin solution by SVC.

    >>> X = np.array([[2.0, 0.0], [0.0, 1.0], [-1.0, 0.0]]); y = np.array([1.0, 1.0, -1.0])
    >>> r = hard_margin(X, y)
    >>> r.separable, np.round(r.w, 4).tolist(), round(r.margin, 4)
    (True, [1.0, 1.0], 0.7071)
    >>> hard_margin(np.array([[1.0], [1.0]]), np.array([1.0, -1.0])).separable
    False
    """
    if not is_separable(X, y):
        return HardMargin(separable=False, method="linprog (HiGHS) feasibility: infeasible")
    w = hard_margin_svm(X, y)
    nw = float(np.linalg.norm(w))
    fm = float(np.min(y * (X @ w))) if X.shape[0] else math.nan
    return HardMargin(separable=True, w=w, margin=1.0 / nw if nw > 0 else math.nan, min_functional_margin=fm,
                      method=f"SVC(kernel='linear', C={SVM_C:g}) on mirrored rows, no intercept")


def reference(problem) -> HardMargin | None:
    """The hard-margin reference of a binary problem's training rows, computed once and
    kept with the (immutable) Problem (``Problem.hard_margin``); None for other tasks."""
    return problem.hard_margin


def compute_reference(problem) -> HardMargin | None:
    """What :func:`reference` returns, computed afresh."""
    if problem.task != "binary":
        return None
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

"""Reference problems and independent references for the classification tests.

Nothing here uses stopwise: the data come from scikit-learn and numpy, the hard-margin
solutions from scikit-learn's SVC and from SciPy's SLSQP.
"""
from __future__ import annotations

import numpy as np
from scipy.optimize import minimize
from sklearn.datasets import load_iris
from sklearn.svm import SVC


def iris_setosa_versicolor() -> tuple[np.ndarray, np.ndarray]:
    """All 100 setosa / versicolor flowers, standardized, plus a constant column (Z), labels
    setosa -1, versicolor +1: the setting of the direction check after Soudry, Hoffer, Nacson, Gunasekar, Srebro,
    "The Implicit Bias of Gradient Descent on Separable Data", JMLR 2018, Thm 3 (docs/references.md)."""
    X, t = load_iris(return_X_y=True)
    keep = t < 2
    X = X[keep]
    y = np.where(t[keep] == 1, 1.0, -1.0)
    X = (X - X.mean(axis=0)) / X.std(axis=0)
    return np.hstack([X, np.ones((X.shape[0], 1))]), y


def separable_gaussian(n: int = 80, d: int = 4, gap: float = 0.25, seed: int = 7) -> tuple[np.ndarray, np.ndarray]:
    """Gaussian rows labelled by a random hyperplane through the origin; rows closer than
    ``gap`` to the hyperplane are dropped, so the data are separable with margin >= gap."""
    rng = np.random.default_rng(seed)
    w0 = rng.standard_normal(d)
    w0 /= np.linalg.norm(w0)
    X = rng.standard_normal((4 * n, d))
    s = X @ w0
    keep = np.flatnonzero(np.abs(s) >= gap)[:n]
    return X[keep], np.sign(s[keep])


def svc_hard_margin(X: np.ndarray, y: np.ndarray) -> np.ndarray:
    """scikit-learn ``SVC(kernel="linear", C=1e6)`` on the rows and their mirror images
    (-x, -y): the symmetric problem has intercept 0, so this is the homogeneous hard margin."""
    svc = SVC(kernel="linear", C=1e6, tol=1e-10).fit(np.vstack([X, -X]), np.concatenate([y, -y]))
    assert abs(svc.intercept_[0]) < 1e-6
    return svc.coef_.ravel().copy()


def slsqp_hard_margin(X: np.ndarray, y: np.ndarray) -> np.ndarray:
    """SciPy SLSQP on ``min 1/2 ||w||^2 s.t. y_i <x_i, w> >= 1``."""
    A = y[:, None] * X
    res = minimize(lambda w: 0.5 * w @ w, np.zeros(X.shape[1]), jac=lambda w: w, method="SLSQP",
                   constraints=[{"type": "ineq", "fun": lambda w: A @ w - 1.0, "jac": lambda w: A}],
                   options={"ftol": 1e-15, "maxiter": 2000})
    assert res.success, res.message
    return res.x

"""The hard-margin reference is exact: SVC's solution polished on its support (problem/margins.py).

Outside references: SciPy's SLSQP on the QP ``min ||w||^2 / 2 s.t. y_i <x_i, w> >= 1``, with
its KKT conditions verified here (feasibility, nonnegative multipliers from SciPy's
Lawson-Hanson ``nnls`` that give w back, complementary slackness), and a problem whose
solution is known in closed form. The KKT conditions are sufficient for this convex QP, so
a point passing them is the solution whatever computed it. The problems are used by no
other test: wine class pairs, iris setosa vs virginica, digits 3 vs 8 and 4 vs 9
(scikit-learn's copies of the UCI data), and Gaussian data of our own making.
"""
import functools
import math

import numpy as np
import pytest
from scipy.optimize import minimize, nnls
from sklearn import datasets

from stopwise.problem import margins
from stopwise.problem.margins import hard_margin, hard_margin_svm, polish
from stopwise.problem.problem import Problem
from stopwise.running.record import make_recorder


def pair(loader, a, b):
    """Classes a (-> -1) and b (-> +1) of a scikit-learn data set, standardized (constant
    pixels left at 0), plus a constant column."""
    X, t = getattr(datasets, "load_" + loader)(return_X_y=True)
    keep = np.isin(t, [a, b])
    X, y = X[keep], np.where(t[keep] == b, 1.0, -1.0)
    sd = X.std(axis=0)
    X = (X - X.mean(axis=0)) / np.where(sd > 0, sd, 1.0)
    return np.hstack([X, np.ones((len(y), 1))]), y


def gaussian(n, d, gap, seed):
    """Correlated Gaussian rows labelled by a random hyperplane through the origin, rows
    within ``gap`` of it dropped (separable by construction)."""
    rng = np.random.default_rng(seed)
    C = rng.standard_normal((d, d)) / np.sqrt(d) + np.eye(d)
    X = rng.standard_normal((3 * n, d)) @ C
    u = rng.standard_normal(d)
    s = X @ u / np.linalg.norm(u)
    keep = np.flatnonzero(np.abs(s) >= gap)[:n]
    return X[keep], np.sign(s[keep])


PROBLEMS = {
    "wine 0 vs 1": lambda: pair("wine", 0, 1),
    "wine 0 vs 2": lambda: pair("wine", 0, 2),
    "wine 1 vs 2": lambda: pair("wine", 1, 2),
    "iris setosa vs virginica": lambda: pair("iris", 0, 2),
    "digits 3 vs 8": lambda: pair("digits", 3, 8),
    "digits 4 vs 9": lambda: pair("digits", 4, 9),
    "gaussian n=150 d=12": lambda: gaussian(150, 12, 0.1, 2024),
    "gaussian n=30 d=60": lambda: gaussian(30, 60, 0.0, 11),  # more features than rows
}


def kkt_residuals(X, y, w, active_tol):
    """(smallest functional margin - 1, stationarity ||w - A_S^T alpha|| / ||w||, largest
    alpha_i |a_i.w - 1| / max alpha) with alpha >= 0 from SciPy's nnls on the rows S whose
    functional margin is within active_tol of 1."""
    A = y[:, None] * X
    m = A @ w - 1.0
    S = np.flatnonzero(np.abs(m) <= active_tol)
    alpha, res = nnls(A[S].T, w)
    return float(m.min()), res / np.linalg.norm(w), float(np.max(alpha * np.abs(m[S])) / alpha.max())


def slsqp(X, y):
    """SciPy SLSQP on the QP from w = 0, its solution's KKT conditions checked. Status 8
    ("positive directional derivative in line search") is SLSQP stopping at rounding level:
    accepted because the KKT check decides."""
    A = y[:, None] * X
    res = minimize(lambda w: 0.5 * w @ w, np.zeros(X.shape[1]), jac=lambda w: w, method="SLSQP",
                   constraints=[{"type": "ineq", "fun": lambda w: A @ w - 1.0, "jac": lambda w: A}],
                   options={"ftol": 1e-15, "maxiter": 5000})
    assert res.status in (0, 8), res.message
    primal, stationarity, complementarity = kkt_residuals(X, y, res.x, 1e-8)
    assert primal >= -1e-9 and stationarity <= 1e-9 and complementarity <= 1e-8
    return res.x


@pytest.mark.parametrize("name", sorted(PROBLEMS))
def test_reference_is_exact_against_slsqp_and_kkt(name):
    X, y = PROBLEMS[name]()
    ref = hard_margin(X, y)
    assert ref.separable and "polished" in ref.method
    # smallest functional margin 1 to 1e-12, and the KKT conditions hold to rounding
    assert abs(ref.min_functional_margin - 1.0) <= 1e-12
    primal, stationarity, complementarity = kkt_residuals(X, y, ref.w, 1e-10)
    assert primal >= -1e-12 and stationarity <= 1e-12 and complementarity <= 1e-12
    # the same point as SLSQP's (to SLSQP's accuracy); SVC's own solution is visibly coarser
    w_qp = slsqp(X, y)
    assert np.linalg.norm(ref.w - w_qp) <= 1e-9 * np.linalg.norm(w_qp)
    assert ref.margin == pytest.approx(1.0 / np.linalg.norm(w_qp), rel=1e-12)
    w_svc = hard_margin_svm(X, y)
    assert abs(np.min(y * (X @ w_svc)) - 1.0) > 1e-12
    # the reported KKT summary agrees with the check above
    info = ref.info["kkt"]
    assert info["primal"] >= -1e-12 and info["stationarity"] <= 1e-12
    assert info["support_rows"] == np.count_nonzero(nnls((y[:, None] * X)[np.abs(y * (X @ ref.w) - 1) <= 1e-10].T,
                                                          ref.w)[0] > 0)


def closed_form():
    """Rows a_i = y_i x_i in R^3 whose hard-margin solution is w* = (1, 1, 0), by the KKT
    conditions worked by hand: a1 = (1/2, 1/2, 1), a2 = (1/2, 1/2, -1), a3 = (1/2, 1/2, 0) and
    a4 = (1/4, 3/4, 3) have a.w* = 1; w* = a1 + a2 = 2 a3 (multipliers >= 0, not unique:
    four active rows of rank 3, a4 active with multiplier 0); the other rows have a.w* > 1.
    Every number is a binary fraction, so w* and all margins are exact in floating point."""
    A = np.array([[0.5, 0.5, 1.0], [0.5, 0.5, -1.0], [0.5, 0.5, 0.0], [0.25, 0.75, 3.0],
                  [2.0, 1.0, 0.5], [0.0, 3.0, -2.0], [1.5, 0.0, 4.0], [1.0, 1.0, -1.0]])
    y = np.array([1.0, -1.0, 1.0, -1.0, 1.0, -1.0, -1.0, 1.0])
    return y[:, None] * A, y, np.array([1.0, 1.0, 0.0])


def test_closed_form_degenerate_support():
    X, y, w_star = closed_form()
    ref = hard_margin(X, y)
    assert np.allclose(ref.w, w_star, rtol=0, atol=1e-15)
    assert abs(ref.min_functional_margin - 1.0) <= 1e-15
    assert ref.info["kkt"]["active_rows"] == 4


@pytest.mark.parametrize("name", ["gaussian n=150 d=12", "wine 1 vs 2", "closed form"])
def test_wrong_support_guess_falls_back_to_the_active_set_method(name):
    # a perturbed guess puts the wrong rows in the support: the check fails and the
    # active-set method, started from the guess scaled to feasibility (or from an LP
    # solution when the guess separates nothing), finds the solution
    if name == "closed form":
        X, y, w_ref = closed_form()
    else:
        X, y = PROBLEMS[name]()
        w_ref = slsqp(X, y)
    rng = np.random.default_rng(5)
    guesses = [-w_ref]  # no separator at all: the start is the LP's feasible point (HiGHS)
    for _ in range(3):
        e = rng.standard_normal(w_ref.size) * np.linalg.norm(w_ref) / np.sqrt(w_ref.size)
        size = 0.3
        while np.min(y * (X @ (w_ref + size * e))) <= 0:  # keep the guess a strict separator
            size /= 2
        guesses.append(w_ref + size * e)
    for guess in guesses:
        w, check, route = polish(X, y, guess)
        assert route == "active set" and check.ok
        assert np.linalg.norm(w - w_ref) <= 1e-9 * np.linalg.norm(w_ref)
        assert abs(np.min(y * (X @ w)) - 1.0) <= 1e-12


def test_failed_polish_keeps_svc_and_says_so(monkeypatch):
    # the support guess narrowed to one row and the active-set method cut to one step: the
    # polish cannot finish, and the reference stays SVC's solution, saying so
    X, y = PROBLEMS["wine 0 vs 2"]()
    monkeypatch.setattr(margins, "SUPPORT_GUESS", 0.0)
    monkeypatch.setattr(margins, "active_set", functools.partial(margins.active_set, max_iter=1))
    ref = hard_margin(X, y)
    assert "polish failed" in ref.method and np.array_equal(ref.w, hard_margin_svm(X, y))
    assert ref.min_functional_margin == pytest.approx(1.0, abs=1e-5)


def _problem(X, y):
    return Problem(name="t", task="binary", X_train=X, y_train=y, X_val=X[:3], y_val=y[:3], X_test=X[3:6],
                   y_test=y[3:6])


@pytest.mark.parametrize("name", ["wine 0 vs 1", "digits 4 vs 9", "closed form"])
def test_recorded_angle_of_an_exact_iterate(name):
    # an iterate equal to the solution (closed form, or SLSQP's with its KKT conditions
    # verified, at any positive scale) reads svm_angle and svm_dist below 1e-10; SVC's
    # unpolished solution sat ~5e-8 rad away
    if name == "closed form":
        X, y, w_star = closed_form()
    else:
        X, y = PROBLEMS[name]()
        w_star = slsqp(X, y)
    rec = make_recorder(_problem(X, y))
    for scale in (1.0, 2.5, 1e-3):
        rec.record(0, 0.0, 0.0, scale * w_star)
    cols = rec.result()
    assert np.all(cols["svm_angle"] < 1e-10) and np.all(cols["svm_dist"] < 1e-10)
    assert abs(rec.info["svm_min_functional_margin"] - 1.0) <= 1e-12
    assert rec.info["svm_kkt"]["stationarity"] <= 1e-12
    w_svc = hard_margin_svm(X, y)
    u, v = w_star / np.linalg.norm(w_star), w_svc / np.linalg.norm(w_svc)
    if name != "closed form":
        assert 2 * math.asin(np.linalg.norm(u - v) / 2) > 1e-9

"""Chambolle-Pock for min C(w) s.t. Xw = y, against LP solutions from SciPy's linprog (HiGHS)."""
import numpy as np
import pytest

from helpers.biased import final, linprog_basis_pursuit, piecewise_constant, linprog_tv, slsqp_group_limit, training
from stopwise.solvers.primal_dual import (
    ChambollePockParams,
    cp_init,
    cp_metrics,
    diff_t,
    operator_norm,
)


def bp_system(seed=5, n=12, d=30):
    rng = np.random.default_rng(seed)
    X = rng.standard_normal((n, d))
    w = np.zeros(d)
    w[[3, 11, 20]] = [1.2, -0.9, 0.6]
    return X, X @ w, w


tv_system = piecewise_constant


@pytest.mark.parametrize("balance", [0.3, 1.0, 3.0])
def test_l1_converges_to_the_basis_pursuit_solution(balance):
    """Reference: min ||w||_1 s.t. Xw = y as an LP, scipy.optimize.linprog (HiGHS)."""
    X, y, _ = bp_system()
    ref = linprog_basis_pursuit(X, y)
    st = final("chambolle_pock", training(X, y), {"bias": "l1", "balance": balance}, 3000)
    np.testing.assert_allclose(st.w, ref, atol=1e-6)
    assert abs(np.abs(st.w).sum() - np.abs(ref).sum()) < 1e-6
    assert np.linalg.norm(X @ st.w - y) < 1e-6


def test_tv_converges_to_the_lp_solution():
    """Reference: min sum |w_{j+1} - w_j| s.t. Xw = y as an LP (auxiliary t >= |Dw|), linprog (HiGHS)."""
    X, y, _ = tv_system()
    ref = linprog_tv(X, y)
    st = final("chambolle_pock", training(X, y), {"bias": "tv"}, 6000)
    TV = lambda u: np.abs(np.diff(u)).sum()  # noqa: E731
    assert abs(TV(st.w) - TV(ref)) < 1e-6
    assert np.linalg.norm(X @ st.w - y) < 1e-6
    np.testing.assert_allclose(st.w, ref, atol=1e-6)


def test_nonneg_l1_converges_to_the_lp_solution():
    """Reference: min sum w s.t. Xw = y, w >= 0 as an LP, linprog (HiGHS)."""
    X, _, w = bp_system(seed=8)
    w = np.abs(w)
    y = X @ w
    ref = linprog_basis_pursuit(X, y, nonneg=True)
    st = final("chambolle_pock", training(X, y), {"bias": "nonneg_l1"}, 3000)
    assert (st.w >= 0).all()
    np.testing.assert_allclose(st.w, ref, atol=1e-6)


def test_group_l1_converges_to_the_slsqp_solution():
    """Reference: min sum_g ||w_g|| s.t. Xw = y by SciPy SLSQP (epigraph form)."""
    X, y, _ = bp_system(n=14)
    ref = slsqp_group_limit(X, y, 1.0, 3, quad=0.0)
    st = final("chambolle_pock", training(X, y), {"bias": "group_l1", "group_size": 3}, 6000)
    np.testing.assert_allclose(st.w, ref, atol=1e-6)


@pytest.mark.parametrize("bias", ["l1", "tv"])
def test_power_iteration_estimates_the_operator_norm(bias):
    """Reference: numpy.linalg.norm(K, 2) (LAPACK SVD) of K = X / ||X|| or [X / ||X||; D]."""
    X, y, _ = tv_system()
    tr = training(X, y)
    st = cp_init(tr, ChambollePockParams(bias=bias), np.random.default_rng(0))
    K = X / np.linalg.norm(X, 2)
    if bias == "tv":
        K = np.vstack([K, np.diff(np.eye(X.shape[1]), axis=0)])
    true = np.linalg.norm(K, 2)
    assert st.op_norm <= true * (1 + 1e-12)
    assert st.op_norm == pytest.approx(true, rel=1e-6)
    assert st.tau * st.sigma * true ** 2 < 1.0
    assert st.tau * st.sigma * st.op_norm ** 2 == pytest.approx(0.95 ** 2)
    assert st.tau / st.sigma == pytest.approx(1.0)


def test_operator_norm_helper_and_difference_adjoint():
    """Reference: numpy.linalg.norm(A, 2), and <D w, q> = <w, D^T q> with D = numpy.diff."""
    rng = np.random.default_rng(2)
    A = rng.standard_normal((7, 5))
    est, its = operator_norm(lambda x: A.T @ (A @ x), 5, rng)
    assert est == pytest.approx(np.linalg.norm(A, 2), rel=1e-8) and 1 <= its
    w, q = rng.standard_normal(9), rng.standard_normal(8)
    assert np.diff(w) @ q == pytest.approx(w @ diff_t(q, 9))


@pytest.mark.parametrize("bias", ["l1", "tv"])
def test_gap_and_dual_feasibility_vanish_at_the_solution(bias):
    """At the LP solution the primal-dual gap, the dual infeasibility and the residual go to 0;
    the final gap also equals C(w) - C(w_LP) up to the same tolerance."""
    X, y, _ = bp_system() if bias == "l1" else tv_system()
    tr = training(X, y)
    st = final("chambolle_pock", tr, {"bias": bias}, 6000)
    m = cp_metrics(tr, ChambollePockParams(bias=bias))
    assert abs(m["pd_gap"](st)) < 1e-6
    assert m["dual_infeasibility"](st) < 1e-6
    ref = linprog_basis_pursuit(X, y) if bias == "l1" else linprog_tv(X, y)
    C = (lambda u: np.abs(u).sum()) if bias == "l1" else (lambda u: np.abs(np.diff(u)).sum())
    assert m["bias_value"](st) == pytest.approx(C(ref), abs=1e-6)
    early = final("chambolle_pock", tr, {"bias": bias}, 5)
    assert m["dual_infeasibility"](early) > 1e-3 or abs(m["pd_gap"](early)) > 1e-3


def test_step_scale_must_keep_the_product_below_one():
    from stopwise.core.params import ParamError, make_params

    with pytest.raises(ParamError, match=r"step_scale=1\.0 is invalid: must be a number in \(0, 1\)"):
        make_params(ChambollePockParams, {"step_scale": 1.0}, "solver")

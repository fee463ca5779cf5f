"""Mirror descent / linearized Bregman and its accelerated version, checked against
gradient descent, Nesterov, the classical linearized Bregman recursion and SciPy."""
from types import SimpleNamespace

import numpy as np
import pytest

from helpers.biased import (FTOL, final, iterate, slsqp_elastic_limit, slsqp_group_limit, slsqp_nonneg_limit,
                            training, underdetermined)
from stopwise.solvers import PROX_OPERATORS, ProxDef, register_prox
from stopwise.solvers.prox import get_prox


def overdetermined(seed=1, n=30, d=6):
    rng = np.random.default_rng(seed)
    X = rng.standard_normal((n, d))
    return X, X @ rng.standard_normal(d) + 0.3 * rng.standard_normal(n)


# ---------------------------------------------------------------- special cases

@pytest.mark.parametrize("bias,size", [("l1", 1), ("group_l1", 3)])
@pytest.mark.parametrize("system", ["under", "over"])
def test_lambda_zero_is_gradient_descent_iterate_by_iterate(bias, size, system):
    """Reference: the project's gradient descent (Landweber) solver; with lam = 0 the
    bias is (1/2)||w||^2, whose mirror map is the identity."""
    X, y = underdetermined()[:2] if system == "under" else overdetermined()
    tr = training(X, y)
    md = iterate("mirror_descent", tr, {"lam": 0.0, "bias": bias, "group_size": size, "step_scale": 1.3}, 60)
    gd = iterate("gd", tr, {"step_scale": 1.3}, 60)
    for a, b in zip(md, gd):
        assert a.w.tobytes() == b.w.tobytes()
        assert a.passes == b.passes and a.iteration == b.iteration


def test_accelerated_with_lambda_zero_is_nesterov_iterate_by_iterate():
    """Reference: the project's Nesterov solver (momentum (t-1)/(t+2))."""
    X, y, _ = underdetermined()
    tr = training(X, y)
    acc = iterate("mirror_nesterov", tr, {"lam": 0.0, "step_scale": 0.8}, 60)
    nes = iterate("nesterov", tr, {"step_scale": 0.8}, 60)
    for a, b in zip(acc, nes):
        assert a.w.tobytes() == b.w.tobytes()


def test_matches_the_classical_linearized_bregman_recursion():
    """Reference: the recursion as published (Cai, Osher, Shen, Math. Comp. 78, 2009;
    Yin et al. 2008): u = delta shrink(v, mu); v += A^T (f - A u), with
    delta = step_scale / ||X||^2 and mu = lam ||X||^2 / step_scale."""
    X, y, _ = underdetermined()
    tr = training(X, y)
    s, lam = 0.9, 0.7
    delta = s / np.linalg.norm(X, 2) ** 2
    mu = lam / delta
    v = np.zeros(X.shape[1])
    ours = iterate("mirror_descent", tr, {"lam": lam, "step_scale": s}, 200)
    for t in range(1, 201):
        u = delta * np.sign(v) * np.maximum(np.abs(v) - mu, 0.0)
        v = v + X.T @ (y - X @ u)
        u = delta * np.sign(v) * np.maximum(np.abs(v) - mu, 0.0)
        np.testing.assert_allclose(ours[t].w, u, rtol=1e-10, atol=1e-12)


# ---------------------------------------------------------------- limits against SciPy

@pytest.mark.parametrize("lam", [0.3, 1.0, 2.0])
@pytest.mark.parametrize("step_scale", [1.0, 1.9])
def test_linearized_bregman_limit_matches_slsqp(lam, step_scale):
    """Reference: SciPy SLSQP on min lam||w||_1 + (1/2)||w||^2 s.t. Xw = y (8 x 20 system);
    the iteration converges for step_scale < 2 (Yin, SIAM J. Imaging Sci. 3, 2010)."""
    X, y, _ = underdetermined()
    ref = slsqp_elastic_limit(X, y, lam)
    w = final("mirror_descent", training(X, y), {"lam": lam, "step_scale": step_scale}, 12000).w
    R = lambda u: lam * np.abs(u).sum() + 0.5 * u @ u  # noqa: E731
    assert abs(R(w) - R(ref)) < 1e-6
    assert np.linalg.norm(X @ w - y) < 1e-6
    np.testing.assert_allclose(w, ref, atol=1e-6)


def test_group_l1_limit_matches_slsqp():
    """Reference: SciPy SLSQP on min lam sum_g ||w_g|| + (1/2)||w||^2 s.t. Xw = y (epigraph form)."""
    X, y, _ = underdetermined()
    lam, size = 0.8, 4
    ref = slsqp_group_limit(X, y, lam, size)
    w = final("mirror_descent", training(X, y), {"lam": lam, "bias": "group_l1", "group_size": size}, 20000).w
    C = get_prox("group_l1").value
    opts = SimpleNamespace(group_size=size)
    assert abs(lam * C(w, opts) + 0.5 * w @ w - (lam * C(ref, opts) + 0.5 * ref @ ref)) < 1e-6
    assert np.linalg.norm(X @ w - y) < 1e-6
    np.testing.assert_allclose(w, ref, atol=1e-5)


def test_nonneg_l1_limit_matches_slsqp():
    """Reference: SciPy SLSQP on min lam sum w + (1/2)||w||^2 s.t. Xw = y, w >= 0, with a
    nonnegative truth so the constraint set is not empty."""
    rng = np.random.default_rng(11)
    X = rng.standard_normal((8, 20))
    w_true = np.zeros(20)
    w_true[[1, 9, 14]] = [1.0, 0.5, 2.0]
    y = X @ w_true
    ref = slsqp_nonneg_limit(X, y, 1.0)
    w = final("mirror_descent", training(X, y), {"lam": 1.0, "bias": "nonneg_l1"}, 20000).w
    assert (w >= 0).all()
    assert np.linalg.norm(X @ w - y) < 1e-6
    np.testing.assert_allclose(w, ref, atol=1e-5)


def test_a_newly_registered_prox_is_accepted_and_used():
    """Register C = indicator of the box [-0.6, 0.6]^d (prox = clipping); the limit is
    argmin (1/2)||w||^2 s.t. Xw = y, |w_j| <= 0.6, which SciPy SLSQP also finds."""
    from scipy.optimize import minimize

    from stopwise.config.spec import spec_from_config

    register_prox(ProxDef("box_test", lambda v, t, o: np.clip(v, -0.6, 0.6),
                          lambda w, o: 0.0 if np.abs(w).max(initial=0) <= 0.6 + 1e-12 else np.inf,
                          lambda u, o: 0.0, "test-only box indicator"))
    try:
        spec = spec_from_config({"dataset": {"name": "d", "source": "synthetic"},
                                 "solver": {"name": "mirror_descent", "bias": "box_test", "lam": 1.0}})
        assert spec.params.bias == "box_test"
        X, y, _ = underdetermined()
        y = 0.5 * y
        w = final("mirror_descent", training(X, y), {"bias": "box_test"}, 20000).w
        cons = {"type": "eq", "fun": lambda u: X @ u - y, "jac": lambda u: X}
        r = minimize(lambda u: 0.5 * u @ u, np.zeros(20), jac=lambda u: u, method="SLSQP", constraints=[cons],
                     bounds=[(-0.6, 0.6)] * 20, options={"ftol": FTOL, "maxiter": 2000})
        assert r.success
        np.testing.assert_allclose(w, r.x, atol=1e-5)
    finally:
        if "box_test" in PROX_OPERATORS:
            PROX_OPERATORS.unregister("box_test")


# ---------------------------------------------------------------- acceleration

def iterations_to(name, params, ref, X, y, tol=1e-6, cap=20000):
    from stopwise.solvers import get_solver
    from stopwise.core.params import make_params

    sdef = get_solver(name)
    p = make_params(sdef.params, params, "solver")
    tr = training(X, y)
    state = sdef.init(tr, p, None)
    while state.iteration < cap:
        state = sdef.step(tr, p, state)
        if np.linalg.norm(state.w - ref) < tol:
            return state.iteration
    return cap + 1


def test_accelerated_reaches_the_same_limit_in_fewer_iterations():
    """Documented problem: the 8 x 20 system of ``underdetermined()``, lam = 1, step_scale = 1.
    Reference limit: SciPy SLSQP. Plain 800-900 iterations to 1e-6, Nesterov on the dual
    about 2.5 times fewer, with gradient restart about 7 times fewer. The reference limit is
    the outside check; the factor 0.6 is a regression guard (the project's own measurement,
    not an outside fact)."""
    X, y, _ = underdetermined()
    ref = slsqp_elastic_limit(X, y, 1.0)
    plain = iterations_to("mirror_descent", {"lam": 1.0}, ref, X, y)
    acc = iterations_to("mirror_nesterov", {"lam": 1.0}, ref, X, y)
    restart = iterations_to("mirror_nesterov", {"lam": 1.0, "restart": "gradient"}, ref, X, y)
    assert plain <= 20000 and acc < plain and restart < acc
    # regression guard (project's own measurement, not an outside fact)
    assert acc < 0.6 * plain


def test_accelerated_group_limit_matches_slsqp():
    """Reference: SciPy SLSQP (epigraph form), as for the plain iteration."""
    X, y, _ = underdetermined()
    ref = slsqp_group_limit(X, y, 0.8, 4)
    w = final("mirror_nesterov", training(X, y), {"lam": 0.8, "bias": "group_l1", "group_size": 4,
                                                   "restart": "gradient"}, 3000).w
    np.testing.assert_allclose(w, ref, atol=1e-5)

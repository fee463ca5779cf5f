"""The four full-batch least-squares solvers against references the project did not compute."""
import dataclasses

import numpy as np
import pytest
import scipy.sparse.linalg

import stopwise
from stopwise.problem.problem import Problem, TrainingSet
from stopwise.running.runner import execute
from stopwise.solvers import SOLVERS, get_solver
from stopwise.core.params import ParamError, make_params
from stopwise.config.compose import spec_from_overrides


def training(X, y):
    s = np.linalg.norm(X, 2)
    return TrainingSet(X=X, y=y, L=s * s / X.shape[0])


def iterate(name, train, k, **params):
    d = get_solver(name)
    p = make_params(d.params, params, "solver")
    st = d.init(train, p, np.random.default_rng(0))
    out = [st.w]
    for _ in range(k):
        st = d.step(train, p, st)
        out.append(st.w)
    return out, st


def rank_deficient(seed=0, n=30, d=50, rank=12):
    rng = np.random.default_rng(seed)
    X = rng.standard_normal((n, rank)) @ rng.standard_normal((rank, d))
    y = rng.standard_normal(n)
    return X, y


def test_gd_converges_to_minimum_norm_solution():
    """Landweber from zero -> pinv(X) y (Engl, Hanke, Neubauer 1996, Thm 6.5), checked with numpy.linalg.pinv."""
    X, y = rank_deficient()
    ws, _ = iterate("gd", training(X, y), 4000, step_scale=1.5)
    ref = np.linalg.pinv(X) @ y
    assert np.linalg.norm(ws[-1] - ref) < 1e-9 * max(1.0, np.linalg.norm(ref))


def test_gd_above_two_over_L_is_recorded_as_diverged(root):
    """Step 2.01/L: the top spectral component grows by |1 - 2.01| per step (closed form:
    the factor 1 - 2.01 = -1.01 per step; converse of Nesterov 2004, Thm 2.1.14; docs/references.md)."""
    out = stopwise.run(["dataset=wellposed", "solver=gd", "solver.step_scale=2.01",
                        "budget.iterations=20000"], root=root)
    assert out.status == "diverged"
    df = stopwise.load_traces(root)
    assert len(df) > 1 and np.isfinite(df["train_loss"]).all()
    assert df["train_loss"].iloc[-1] > 1e10 * df["train_loss"].iloc[0]
    ok = stopwise.run(["dataset=wellposed", "solver=gd", "solver.step_scale=1.99",
                       "budget.iterations=2000"], root=root)
    assert ok.status == "completed"


def spectral_filter(X, y, eta, t):
    """w_t = V diag((1 - (1 - eta s^2)^t) / s) U^T y (Hansen, Rank-Deficient and Discrete Ill-Posed Problems, 1998)."""
    U, s, Vt = np.linalg.svd(X, full_matrices=False)
    f = (1 - (1 - eta * s**2) ** t) / s
    return Vt.T @ (f * (U.T @ y))


def test_every_recorded_gd_error_matches_the_svd_filter():
    """All recorded train/val/test errors of GD on diabetes equal the spectral-filter closed form to rel 1e-9."""
    spec = spec_from_overrides(["dataset=diabetes", "solver=gd", "solver.step_scale=1.3", "budget.iterations=300",
                                "record.every=7"])
    p = stopwise.load_problem(["dataset=diabetes"])
    tr = execute(spec).columns
    eta = 1.3 / p.L / p.n_train  # step on (1/2n)||Xw-y||^2 is (s/L) * (1/n) on X^T(Xw - y)
    for i, t in enumerate(tr["iteration"]):
        w = spectral_filter(p.X_train, p.y_train, eta, int(t))
        for split, col in (("train", "train_error"), ("val", "val_error"), ("test", "test_error")):
            X, y = getattr(p, "X_" + split), getattr(p, "y_" + split)
            ref = np.mean((X @ w - y) ** 2)
            assert tr[col][i] == pytest.approx(ref, rel=1e-9), (t, split)
        assert tr["w_norm"][i] == pytest.approx(np.linalg.norm(w), rel=1e-9, abs=1e-12)
    assert list(tr["iteration"][:3]) == [0, 7, 14] and tr["iteration"][-1] == 300


@pytest.mark.parametrize("k", [1, 2, 5, 12])
def test_cgls_matches_scipy_lsqr(k):
    """CGLS iterate k equals LSQR's (Paige and Saunders 1982; exact-arithmetic equivalence), scipy's lsqr as
    reference. The design is moderately conditioned (cond 10) so that floating-point loss of orthogonality,
    which makes the two drift apart differently on ill-conditioned systems, stays below the tolerance."""
    rng = np.random.default_rng(3)
    X = rng.standard_normal((60, 25)) @ np.diag(np.logspace(0, -1, 25))
    y = rng.standard_normal(60)
    ws, _ = iterate("cgls", training(X, y), k)
    ref = scipy.sparse.linalg.lsqr(X, y, iter_lim=k, atol=0, btol=0, conlim=0)[0]
    assert np.allclose(ws[-1], ref, rtol=1e-8, atol=1e-10)


def test_cgls_converges_to_lstsq_and_stays():
    """After d steps CGLS reaches numpy.linalg.lstsq's solution (well-conditioned design)."""
    rng = np.random.default_rng(4)
    X, y = rng.standard_normal((40, 8)), rng.standard_normal(40)
    ws, _ = iterate("cgls", training(X, y), 30)
    ref = np.linalg.lstsq(X, y, rcond=None)[0]
    assert np.allclose(ws[8], ref, atol=1e-10) and np.allclose(ws[-1], ref, atol=1e-10)


def test_heavy_ball_with_zero_momentum_is_gd():
    X, y = rank_deficient(1)
    tr = training(X, y)
    a, _ = iterate("heavy_ball", tr, 50, step_scale=0.8, momentum=0.0)
    b, _ = iterate("gd", tr, 50, step_scale=0.8)
    assert all(np.array_equal(u, v) for u, v in zip(a, b))


def test_heavy_ball_matches_polyak_recursion():
    """Independent two-term recursion w+ = w - eta g + beta (w - w-) (Polyak 1964), written here."""
    rng = np.random.default_rng(2)
    X, y = rng.standard_normal((50, 10)), rng.standard_normal(50)
    tr = training(X, y)
    ws, _ = iterate("heavy_ball", tr, 40, step_scale=0.7, momentum=0.6)
    eta = 0.7 / tr.L
    w_prev = w = np.zeros(10)
    for t in range(40):
        w, w_prev = w - eta * X.T @ (X @ w - y) / 50 + 0.6 * (w - w_prev), w
        assert np.allclose(ws[t + 1], w, rtol=1e-12, atol=1e-13)


def test_nesterov_matches_an_independent_reference_and_its_rate():
    """Nesterov (1983) with momentum (k-1)/(k+2), transcribed independently here; and the published rate
    f(x_k) - f* <= 2 L ||x_0 - x*||^2 / (k + 1)^2 for step 1/L (Nesterov, Introductory Lectures on Convex
    Optimization, 2004, Thm 2.2.2), with x* from numpy.linalg.lstsq."""
    rng = np.random.default_rng(5)
    X = rng.standard_normal((80, 30)) @ np.diag(np.logspace(0, -2, 30))
    y = rng.standard_normal(80)
    tr = training(X, y)
    ws, _ = iterate("nesterov", tr, 60, step_scale=1.0)
    eta = 1.0 / tr.L
    x_prev = x = np.zeros(30)
    for k in range(60):
        v = x + (k - 1) / (k + 2) * (x - x_prev) if k > 0 else x
        x, x_prev = v - eta * X.T @ (X @ v - y) / 80, x
        assert np.allclose(ws[k + 1], x, rtol=1e-11, atol=1e-13)
    f = lambda w: np.sum((X @ w - y) ** 2) / 160  # noqa: E731
    xstar = np.linalg.lstsq(X, y, rcond=None)[0]
    for k in range(1, 61):
        assert f(ws[k]) - f(xstar) <= 2 * tr.L * (xstar @ xstar) / (k + 1) ** 2 + 1e-12


@pytest.mark.parametrize("name", sorted(SOLVERS))
def test_steps_never_modify_the_state_they_receive(name):
    d = SOLVERS[name]
    # a solver that declares what it needs of the rows (SolverDef.check: a positive definite
    # Hessian) gets full rank; the others the rank-deficient rows
    X, y = rank_deficient(6, n=20, d=15, rank=15 if d.check is not None else 12)
    tr = training(X, y)
    p = make_params(d.params, {}, "solver")
    st = d.init(tr, p, np.random.default_rng(0))
    st = d.step(tr, p, st)
    snapshot = {f.name: np.copy(getattr(st, f.name)) if isinstance(getattr(st, f.name), np.ndarray)
                else getattr(st, f.name) for f in dataclasses.fields(st)}
    nxt = d.step(tr, p, st)
    assert nxt is not st and nxt.iteration == st.iteration + 1
    for k, v in snapshot.items():
        now = getattr(st, k)
        if isinstance(v, np.ndarray):
            assert np.array_equal(v, now) and not now.flags.writeable, k
        else:
            assert v == now, k


def _bad_values():
    """Out-of-range values generated from every registered solver's declared constraints."""
    cases = []
    for name, d in sorted(SOLVERS.items()):
        for f in dataclasses.fields(d.params):
            c = f.metadata.get("constraint")
            if c is not None:
                cases.append((name, f.name, c.outside()))
    return cases


@pytest.mark.parametrize("name,field,value", _bad_values())
def test_out_of_range_params_are_rejected(name, field, value):
    with pytest.raises(ParamError, match=field):
        make_params(SOLVERS[name].params, {field: value}, "solver")


def test_cgls_stops_at_the_least_squares_solution_instead_of_amplifying_rounding():
    """Past the least-squares solution plain CGLS recursions amplify rounding errors (seen on the
    wellposed generator, seed 1: ||w|| reached 5e22 by iteration 300). LSQR's stopping tests
    (Paige and Saunders 1982) end the run at numpy.linalg.lstsq's solution instead."""
    spec = spec_from_overrides(["dataset=wellposed", "seed=1", "solver=cgls", "budget.iterations=300"])
    tr = execute(spec)
    p = stopwise.load_problem(["dataset=wellposed", "seed=1"])
    ref = np.linalg.lstsq(p.X_train, p.y_train, rcond=None)[0]
    assert tr.status == "completed" and "converged" in tr.message
    assert tr.columns["iteration"][-1] < 100
    assert tr.columns["w_norm"][-1] == pytest.approx(np.linalg.norm(ref), rel=1e-10)

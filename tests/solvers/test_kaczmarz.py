"""kaczmarz: randomized Kaczmarz against numpy.linalg.pinv, the published expected rate
(Strohmer and Vershynin, J. Fourier Anal. Appl. 15, 2009, Theorem 2) and its sampling
distribution (a chi-square test from scipy.stats)."""
from __future__ import annotations

import numpy as np
import pytest
import scipy.stats

from stopwise.config.compose import spec_from_overrides
from stopwise.core.params import make_params
from stopwise.problem.problem import TrainingSet
from stopwise.running.runner import execute
from stopwise.solvers import get_solver


def underdetermined(n: int = 12, d: int = 30, seed: int = 0) -> TrainingSet:
    """A consistent system with fewer rows than columns and rows of very different norms."""
    rng = np.random.default_rng([seed, 77])
    X = rng.standard_normal((n, d)) * np.geomspace(0.5, 2.0, n)[:, None]
    y = X @ rng.standard_normal(d)
    return TrainingSet(X, y, L=float(np.linalg.norm(X, 2)) ** 2 / n)


def run(train: TrainingSet, steps: int, seed: int = 0, **params):
    sd = get_solver("kaczmarz")
    p = make_params(sd.params, params, "solver")
    st = sd.init(train, p, np.random.default_rng(seed))
    states = [st]
    for _ in range(steps):
        st = sd.step(train, p, st)
        states.append(st)
    return states


@pytest.mark.parametrize("relaxation", [1.0, 0.6, 1.5])
def test_from_zero_converges_to_the_minimum_norm_solution(relaxation):
    """From w_0 = 0 every iterate is a combination of rows, so the limit on a consistent system is
    the minimum-norm solution X^+ y (numpy.linalg.pinv); also with relaxation in (0, 2)."""
    tr = underdetermined()
    ref = np.linalg.pinv(tr.X) @ tr.y
    w = run(tr, 15000, step_scale=relaxation)[-1].w
    assert np.linalg.norm(w - ref) <= 1e-9 * np.linalg.norm(ref)
    assert np.linalg.norm(tr.X @ w - tr.y) <= 1e-9 * np.linalg.norm(tr.y)


def test_mean_squared_error_over_seeds_stays_below_the_published_rate():
    """Strohmer and Vershynin (2009), Theorem 2: E ||x_k - x*||^2 <= (1 - 1/kappa_F^2)^k ||x_0 - x*||^2
    with kappa_F = ||A||_F ||A^+||_2 (norms from numpy.linalg.norm and numpy.linalg.pinv);
    x* = A^+ b, the limit from x_0 = 0. The mean is over 100 seeds."""
    tr = underdetermined(n=8, d=20, seed=1)
    xs = np.linalg.pinv(tr.X) @ tr.y
    kf2 = (np.linalg.norm(tr.X, "fro") * np.linalg.norm(np.linalg.pinv(tr.X), 2)) ** 2
    checks = (10, 50, 100, 200, 400)
    err = np.zeros(len(checks))
    for seed in range(100):
        states = run(tr, checks[-1], seed=seed)
        err += [float(np.sum((states[k].w - xs) ** 2)) for k in checks]
    err /= 100
    bound = np.array([(1 - 1 / kf2) ** k for k in checks]) * float(xs @ xs)
    assert (err <= bound).all(), (err, bound)
    assert err[-1] < 1e-3 * err[0]  # the error does fall (the bound is not met by standing still)


def test_rows_are_drawn_with_probability_proportional_to_their_squared_norm():
    """Chi-square goodness of fit (scipy.stats.chisquare) of 60000 draws against
    P(i) = ||x_i||^2 / ||X||_F^2; a row of norm zero is never drawn."""
    tr = underdetermined(n=12, d=30, seed=2)
    X = tr.X.copy()
    X[3] = 0.0
    tr = TrainingSet(X, tr.y, L=tr.L)
    from stopwise.solvers.row_action import row_block

    st = run(tr, 0, seed=5)[0]
    rows = np.concatenate([row_block(st.key, k, st.cdf) for k in range(5000)])  # the stream's first blocks
    counts = np.bincount(rows, minlength=12)
    p = np.einsum("ij,ij->i", X, X) / np.sum(X * X)
    assert counts[3] == 0 and p[3] == 0
    keep = p > 0
    stat = scipy.stats.chisquare(counts[keep], 60000 * p[keep])
    assert stat.pvalue > 1e-3, stat


def test_a_step_is_one_row_and_one_nth_of_a_pass():
    tr = underdetermined()
    states = run(tr, 30)
    assert [s.passes for s in states] == [t / tr.n for t in range(31)]
    for a, b in zip(states, states[1:]):
        i = int(a.block[a.pos]) if a.pos < tr.n else int(b.block[0])
        # the iterate moved along row i only, onto its hyperplane (relaxation 1: exact projection)
        assert tr.X[i] @ b.w == pytest.approx(tr.y[i], rel=1e-12, abs=1e-12)
        step = b.w - a.w
        assert np.allclose(step, (step @ tr.X[i]) / (tr.X[i] @ tr.X[i]) * tr.X[i], atol=1e-13)


def test_runs_by_passes_with_the_row_order_fixed_by_the_seed():
    """Through the runner with a pass budget: the row order depends on the seed only, not on the
    relaxation (a common stream, as for sgd)."""
    base = ["solver=kaczmarz", "dataset=wellposed", "budget.iterations=100000", "budget.passes=3",
            "record.per_pass=2"]
    a = execute(spec_from_overrides(base))
    assert a.status == "completed" and a.columns["passes"][-1] == pytest.approx(3.0)
    assert len(a.columns["passes"]) == 7
    assert a.columns["train_loss"][-1] < 0.5 * a.columns["train_loss"][0]  # noisy data: a neighbourhood of the fit
    from stopwise.running.runner import run_rng

    sd = get_solver("kaczmarz")
    keys = {s: sd.init(TrainingSet(np.eye(2), np.ones(2), L=1.0),
                       make_params(sd.params, {"step_scale": s}, "solver"),
                       run_rng(spec_from_overrides(base + [f"solver.step_scale={s}"]))).key for s in (0.5, 1.0)}
    assert keys[0.5] == keys[1.0]

"""nesterov_strong and heavy_ball_optimal: constants from the training spectrum, checked
against SciPy's singular values, independent transcriptions of the published recurrences,
Nesterov's rate bound, Polyak's spectral radius, and the sqrt(kappa) growth of the iteration
count on designed spectra (the spectral generator with chosen eigenvalues)."""
from __future__ import annotations

import math
from pathlib import Path

import numpy as np
import pytest
import scipy.linalg

from stopwise.cli import main
from stopwise.config.compose import spec_from_overrides
from stopwise.core.errors import SpecError
from stopwise.core.params import make_params
from stopwise.data.generators import SpectralParams, load_spectral
from stopwise.problem.problem import Problem, TrainingSet
from stopwise.running.runner import execute
from stopwise.solvers import get_solver


def designed(kappa: float, n: int = 60, d: int = 30, seed: int = 0) -> TrainingSet:
    """Rows from the spectral generator whose X^T X / n has exactly the eigenvalues
    exp(-rate (j - 1)), j = 1..d, with rate chosen so that their ratio is kappa; targets
    with Gaussian noise (so f* > 0)."""
    raw = load_spectral(SpectralParams(n=n, d=d, decay="exponential", rate=math.log(kappa) / (d - 1),
                                       design="fixed", seed=seed))
    y = raw.y + 0.1 * np.random.default_rng([seed, 9]).standard_normal(n)
    return TrainingSet(raw.X, y, L=float(scipy.linalg.svdvals(raw.X)[0]) ** 2 / n)


def start(name: str, train: TrainingSet, **params):
    sd = get_solver(name)
    p = make_params(sd.params, params, "solver")
    return sd, p, sd.init(train, p, np.random.default_rng(0))


def suboptimality(train: TrainingSet):
    """f(w) - f* = ||X (w - w*)||^2 / (2n) for least squares (w* from numpy.linalg.lstsq),
    which has no cancellation near the minimum."""
    ws = np.linalg.lstsq(train.X, train.y, rcond=None)[0]
    return lambda w: float(np.sum((train.X @ (w - ws)) ** 2)) / (2 * train.n), ws


def iterations_to(name: str, train: TrainingSet, tol: float = 1e-8, cap: int = 200000) -> int:
    sd, p, st = start(name, train)
    gap, _ = suboptimality(train)
    g0 = gap(st.w)
    while st.iteration < cap:
        st = sd.step(train, p, st)
        if gap(st.w) <= tol * g0:
            return st.iteration
    raise AssertionError(f"{name} did not reach {tol} in {cap} steps")


@pytest.mark.parametrize("name", ["nesterov_strong", "heavy_ball_optimal"])
def test_constants_come_from_the_extreme_singular_values(name):
    """mu and L from scipy.linalg.svdvals (an SVD, not the eigenvalue routine the solver uses);
    the step and momentum are the published formulas (Nesterov 2004, (2.2.19); Polyak 1964)."""
    tr = designed(500.0, seed=3)
    s = scipy.linalg.svdvals(tr.X)
    L, mu = s[0] ** 2 / tr.n, s[-1] ** 2 / tr.n
    assert L / mu == pytest.approx(500.0, rel=1e-9)  # the generator's designed spectrum
    _, _, st = start(name, tr)
    q = math.sqrt(L / mu)
    if name == "nesterov_strong":
        want_step, want_beta = 1 / L, (q - 1) / (q + 1)
    else:
        want_step, want_beta = 4 / (math.sqrt(L) + math.sqrt(mu)) ** 2, ((q - 1) / (q + 1)) ** 2
    assert st.step == pytest.approx(want_step, rel=1e-10)
    assert st.momentum == pytest.approx(want_beta, rel=1e-10)
    assert st.kappa == pytest.approx(500.0, rel=1e-9)


def test_nesterov_strong_matches_a_transcription_and_the_published_rate():
    """Constant step scheme III of Nesterov, Introductory Lectures on Convex Optimization (2004),
    (2.2.19), transcribed here; and its bound (Thm 2.2.3)
    f(x_k) - f* <= (1 - sqrt(mu / L))^k (f(x_0) - f* + mu ||x_0 - x*||^2 / 2)."""
    tr = designed(1e3, seed=1)
    sd, p, st = start("nesterov_strong", tr)
    s = scipy.linalg.svdvals(tr.X)
    L, mu = s[0] ** 2 / tr.n, s[-1] ** 2 / tr.n
    beta = (math.sqrt(L) - math.sqrt(mu)) / (math.sqrt(L) + math.sqrt(mu))
    gap, ws = suboptimality(tr)
    x = x_prev = np.zeros(tr.d)
    bound0 = gap(x) + mu * float(ws @ ws) / 2
    for k in range(1, 400):
        yk = x + beta * (x - x_prev)
        x, x_prev = yk - tr.X.T @ (tr.X @ yk - tr.y) / (tr.n * L), x
        st = sd.step(tr, p, st)
        assert np.allclose(st.w, x, rtol=1e-9, atol=1e-12), k
        assert gap(st.w) <= (1 - math.sqrt(mu / L)) ** k * bound0 * (1 + 1e-9) + 1e-15, k


def test_heavy_ball_optimal_has_polyaks_spectral_radius_and_matches_a_transcription():
    """On a quadratic with Hessian H, heavy ball is the linear map
    [e_{t+1}; e_t] = [[(1 + beta) I - alpha H, -beta I], [I, 0]] [e_t; e_{t-1}]; with Polyak's
    constants its spectral radius is (sqrt(kappa) - 1) / (sqrt(kappa) + 1) (Polyak 1964),
    computed here with numpy.linalg.eigvals."""
    tr = designed(200.0, n=40, d=12, seed=2)
    sd, p, st = start("heavy_ball_optimal", tr)
    H = tr.X.T @ tr.X / tr.n
    d = tr.d
    M = np.block([[(1 + st.momentum) * np.eye(d) - st.step * H, -st.momentum * np.eye(d)],
                  [np.eye(d), np.zeros((d, d))]])
    radius = float(np.max(np.abs(np.linalg.eigvals(M))))
    q = math.sqrt(200.0)
    assert radius == pytest.approx((q - 1) / (q + 1), rel=1e-6)
    w = w_prev = np.zeros(d)
    for t in range(200):
        w, w_prev = w - st.step * tr.X.T @ (tr.X @ w - tr.y) / tr.n + st.momentum * (w - w_prev), w
        st = sd.step(tr, p, st)
        assert np.allclose(st.w, w, rtol=1e-9, atol=1e-12), t


def test_iterations_to_1e_8_grow_like_the_square_root_of_kappa_and_gd_like_kappa():
    """Iterations to relative suboptimality 1e-8 on designed spectra (kappa = 1e2 .. 1e5): the
    log-log slope is 1/2 +- 0.1 for both accelerated methods (Nesterov 2004, Section 2.2;
    Polyak 1964) and 1 +- 0.1 for gradient descent with step 1/L (kappa = 1e1 .. 1e3; Nesterov
    2004, Thm 2.1.15). Measured: nesterov_strong 82, 236, 684, 2129 (slope 0.47);
    heavy_ball_optimal 62, 221, 769, 2650 (0.54); gd 72, 643, 5435 (0.94)."""
    kappas = [1e2, 1e3, 1e4, 1e5]
    for name in ("nesterov_strong", "heavy_ball_optimal"):
        its = [iterations_to(name, designed(k)) for k in kappas]
        slope = np.polyfit(np.log(kappas), np.log(its), 1)[0]
        assert abs(slope - 0.5) <= 0.1, (name, its, slope)
    kappas = [1e1, 1e2, 1e3]
    its = [iterations_to("gd", designed(k)) for k in kappas]
    slope = np.polyfit(np.log(kappas), np.log(its), 1)[0]
    assert abs(slope - 1.0) <= 0.1, (its, slope)
    assert iterations_to("nesterov_strong", designed(1e3)) * 5 < its[-1]


def test_a_problem_that_is_not_strongly_convex_is_one_line_exit_2_and_writes_nothing(tmp_path, monkeypatch, capsys):
    """overparam has more features than rows: X^T X / n is singular. Refused before any write,
    by stopwise run and by a sweep that contains the pair."""
    monkeypatch.chdir(tmp_path)
    for argv in (["run", "solver=nesterov_strong", "dataset=overparam"],
                 ["sweep", "solver=heavy_ball_optimal", "dataset=wellposed,overparam", "budget.iterations=5"]):
        code = main([*argv, f"results_root={tmp_path / 'res'}"])
        err = capsys.readouterr().err
        assert code == 2 and err.count("\n") == 1, err
        assert "needs a strongly convex objective" in err and "n_train=90 < d=400" in err
        assert "dataset 'overparam'" in err
        assert list(Path(tmp_path).rglob("*")) == []


def test_collinear_columns_are_refused_at_init_too():
    """n >= d but a repeated column: the Hessian is singular. A Problem given directly (no
    check_data) reaches the solver's init, which raises the same one-line SpecError."""
    rng = np.random.default_rng(0)
    X = rng.standard_normal((50, 4))
    X = np.column_stack([X, X[:, 0]])
    y = rng.standard_normal(50)
    prob = Problem("collinear", "regression", X, y, X[:5].copy(), y[:5].copy(), X[:5].copy(), y[:5].copy())
    spec = spec_from_overrides(["solver=nesterov_strong", "budget.iterations=3"])
    with pytest.raises(SpecError, match=r"is singular \(smallest eigenvalue .* n_train=50, d=5\)") as e:
        execute(spec, problem=prob)
    assert "\n" not in str(e.value)


def test_runs_through_the_runner_on_a_strongly_convex_dataset():
    for name in ("nesterov_strong", "heavy_ball_optimal"):
        tr = execute(spec_from_overrides([f"solver={name}", "dataset=wellposed", "budget.iterations=300"]))
        assert tr.status == "completed"
        train = tr.columns["train_loss"]
        assert train[-1] < train[0] and np.isfinite(train).all()

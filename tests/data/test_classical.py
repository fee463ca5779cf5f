"""The classical first-kind integral equations (data/classical.py), from first principles.

Kernels, exact solutions and right-hand sides are written out here again from the published
definitions (Phillips, J. ACM 9, 1962; Shaw, J. Math. Anal. Appl. 37, 1972; Baart, IMA J.
Numer. Anal. 2, 1982; the inverse heat equation of Carasso, SIAM J. Appl. Math. 42, 1982,
and the gravity surveying problem as collected by Hansen, Numer. Algorithms 46, 2007), and
the discretizations are checked against SciPy's adaptive quadrature (``quad``, ``dblquad``)
of those formulas: convergence at rate h^2 under refinement, the published closed-form
right-hand side (Phillips, Baart), symmetry of symmetric kernels, and the Picard condition.
"""
from __future__ import annotations

import math
import warnings
from pathlib import Path

import numpy as np
import pytest
from scipy.integrate import IntegrationWarning, dblquad, quad

import stopwise
from stopwise.config.catalog import entries
from stopwise.data import classical as c


# ---------------------------------------------------------------- the published formulas

def phi(x):  # Phillips 1962
    return 1.0 + math.cos(math.pi * x / 3.0) if abs(x) < 3.0 else 0.0


def phillips_g(s):  # Phillips 1962, the closed-form right-hand side
    a = abs(s)
    return (6.0 - a) * (1.0 + 0.5 * math.cos(math.pi * s / 3.0)) + 9.0 / (2.0 * math.pi) * math.sin(math.pi * a / 3.0)


def baart_g(s):  # Baart 1982: int_0^pi exp(s cos t) sin t dt = 2 sinh(s) / s
    return 2.0 * math.sinh(s) / s if s != 0.0 else 2.0


def shaw_k(s, t):  # Shaw 1972
    u = math.pi * (math.sin(s) + math.sin(t))
    sinc = math.sin(u) / u if u != 0.0 else 1.0
    return (math.cos(s) + math.cos(t)) ** 2 * sinc ** 2


def shaw_f(t):
    return 2.0 * math.exp(-6.0 * (t - 0.8) ** 2) + math.exp(-2.0 * (t + 0.5) ** 2)


def gravity_k(s, t, depth=0.25):  # Hansen 2007
    return depth / (depth ** 2 + (s - t) ** 2) ** 1.5


def gravity_f(t):
    return math.sin(math.pi * t) + 0.5 * math.sin(2.0 * math.pi * t)


def heat_k(r, kappa=1.0):  # Carasso 1982, as collected by Hansen 2007
    return r ** -1.5 / (2.0 * kappa * math.sqrt(math.pi)) * math.exp(-1.0 / (4.0 * kappa ** 2 * r)) if r > 0 else 0.0


def heat_f(t):
    u = 20.0 * t
    if u < 2.0:
        return 0.75 * u * u / 4.0
    if u < 3.0:
        return 0.75 + (u - 2.0) * (3.0 - u)
    return 0.75 * math.exp(-2.0 * (u - 3.0)) if u <= 10.0 else 0.0


def integral(f, a, b, points=None):
    with warnings.catch_warnings():
        warnings.simplefilter("error", IntegrationWarning)
        return quad(f, a, b, points=points, epsabs=1e-14, epsrel=1e-13, limit=500)[0]


def rates(errors):
    return [a / b for a, b in zip(errors, errors[1:])]


# ---------------------------------------------------------------- right-hand sides and quadrature

def test_phillips_galerkin_converges_to_the_published_right_hand_side():
    # fixed measurement boxes (12 on [-6, 6], width 1), unknown boxes refined: the Galerkin
    # system's A x tends to the box integrals of the closed-form g at rate h^2
    edges = np.linspace(-6.0, 6.0, 13)
    b = np.array([integral(phillips_g, edges[i], edges[i + 1], points=[0.0]) for i in range(12)])
    errors = []
    for d in (25, 50, 100, 200, 400):
        S = c.phillips_system(12, d)
        errors.append(np.max(np.abs(S.A @ S.x - b)))
    assert all(3.8 < r < 4.2 for r in rates(errors)), errors
    assert errors[-1] < 3e-4
    # x is the box integral of phi over sqrt(h)
    S = c.phillips_system(12, 24)
    te = np.linspace(-6.0, 6.0, 25)
    x = [integral(phi, te[j], te[j + 1]) / math.sqrt(0.5) for j in range(24)]
    assert np.allclose(S.x, x, rtol=0, atol=1e-13)


def test_phillips_entries_are_the_double_integrals_of_the_kernel():
    # every closed-form Galerkin entry against SciPy's dblquad of phi(s - t) over the two boxes
    n, d = 8, 12
    S = c.phillips_system(n, d)
    se, te = np.linspace(-6, 6, n + 1), np.linspace(-6, 6, d + 1)
    for i in range(n):
        for j in range(d):
            v = dblquad(lambda t, s: phi(s - t), se[i], se[i + 1], te[j], te[j + 1], epsabs=1e-13, epsrel=1e-12)[0]
            assert S.A[i, j] == pytest.approx(v / math.sqrt(1.5 * 1.0), abs=1e-11)


def test_baart_galerkin_converges_to_the_published_right_hand_side():
    edges = np.linspace(0.0, math.pi / 2, 9)
    h = edges[1] - edges[0]
    b = np.array([integral(baart_g, edges[i], edges[i + 1]) for i in range(8)]) / math.sqrt(h)
    errors = []
    for d in (25, 50, 100, 200, 400):
        S = c.baart_system(8, d)
        errors.append(np.max(np.abs(S.A @ S.x - b)))
    assert all(3.8 < r < 4.2 for r in rates(errors)), errors
    assert errors[-1] < 1e-5
    # entries against dblquad of exp(s cos t)
    S = c.baart_system(4, 6)
    se, te = np.linspace(0, math.pi / 2, 5), np.linspace(0, math.pi, 7)
    for i, j in [(0, 0), (1, 3), (3, 5), (2, 2)]:
        v = dblquad(lambda t, s: math.exp(s * math.cos(t)), se[i], se[i + 1], te[j], te[j + 1],
                    epsabs=1e-14, epsrel=1e-13)[0]
        assert S.A[i, j] == pytest.approx(v / math.sqrt((se[1] - se[0]) * (te[1] - te[0])), rel=1e-12)


MIDPOINT = {
    # name: (system(n, d), kernel, solution, interval, breakpoints of the integrand in t, grids)
    "shaw": (c.shaw_system, shaw_k, shaw_f, (-math.pi / 2, math.pi / 2), (), (25, 50, 100, 200, 400)),
    "gravity": (c.gravity_system, gravity_k, gravity_f, (0.0, 1.0), (), (25, 50, 100, 200, 400)),
    # the heat solution has kinks at t = 0.1, 0.15 (and a jump of 6e-7 at 0.5): the rate
    # settles once the cells resolve them
    "heat": (c.heat_system, lambda s, t: heat_k(s - t), heat_f, (0.0, 1.0), (0.1, 0.15, 0.5), (100, 200, 400, 800)),
}


@pytest.mark.parametrize("name", sorted(MIDPOINT))
def test_midpoint_systems_converge_to_the_integral_at_rate_h2(name):
    system, kernel, f, (a, b), breaks, grids = MIDPOINT[name]
    errors = []
    for d in grids:
        S = system(10, d)
        # the matrix is h K(s_i, t_j) at the midpoints, x is f there
        h = (b - a) / d
        K = np.array([[kernel(si, tj) for tj in S.t] for si in S.s])
        assert np.allclose(S.A, h * K, rtol=1e-13, atol=0)
        assert np.allclose(S.x, [f(tj) for tj in S.t], rtol=1e-14, atol=0)
        assert np.allclose(S.t, a + (np.arange(d) + 0.5) * h, rtol=0, atol=1e-15)
        # the continuous right-hand side at the 10 rows, by adaptive quadrature
        upper = [min(si, b) if name == "heat" else b for si in S.s]  # heat: Volterra, t < s
        g = np.array([integral(lambda t, si=si: kernel(si, t) * f(t), a, up, points=[p for p in breaks if p < up] or None)
                      for si, up in zip(S.s, upper)])
        errors.append(np.max(np.abs(S.A @ S.x - g)))
    assert all(3.8 < r < 4.2 for r in rates(errors)), errors


def test_heat_rows_are_collocation_points_and_the_square_matrix_is_lower_triangular_toeplitz():
    S = c.heat_system(40, 40, kappa=5.0)
    assert np.allclose(S.s, np.arange(1, 41) / 40, rtol=0, atol=1e-15)
    assert not np.triu(S.A, 1).any() and np.all(np.diag(S.A) > 0)
    for k in range(40):
        diag = np.diagonal(S.A, -k)
        assert np.allclose(diag, diag[0], rtol=1e-12, atol=0)
        assert diag[0] == pytest.approx(heat_k((k + 0.5) / 40, 5.0) / 40, rel=1e-13)


# ---------------------------------------------------------------- symmetry and the Picard condition

@pytest.mark.parametrize("system", [c.phillips_system, c.shaw_system, c.gravity_system])
def test_symmetric_kernels_give_symmetric_square_matrices(system):
    # Phillips: phi(s - t) with phi even; Shaw: symmetric in s and t; gravity: depends on (s - t)^2
    S = system(48, 48)
    assert np.array_equal(S.A, S.A.T)
    assert np.abs(S.A).max() > 0


def test_baart_and_heat_are_not_symmetric():
    for S in (c.baart_system(20, 20), c.heat_system(20, 20)):
        assert np.abs(S.A - S.A.T).max() > 1e-3 * np.abs(S.A).max()


def picard(S, b):
    """(slope of log|u_i^T b| against log sigma_i, mean log(|u_i^T b| / sigma_i) over the
    last third of the singular values minus over the first third), over the singular
    values above 1e-10 sigma_1 (above rounding)."""
    U, sv, _ = np.linalg.svd(S.A)
    k = int(np.count_nonzero(sv >= 1e-10 * sv[0]))
    beta = np.abs(U.T @ b)[:k]
    rho = np.log(beta / sv[:k])
    third = k // 3
    return np.polyfit(np.log(sv[:k]), np.log(beta), 1)[0], rho[-third:].mean() - rho[:third].mean()


@pytest.mark.parametrize("system", [c.phillips_system, c.shaw_system, c.baart_system, c.heat_system,
                                    c.gravity_system])
def test_exact_right_hand_sides_satisfy_the_picard_condition(system):
    # the exact data's SVD coefficients |u_i^T b| decay faster than the singular values on
    # average (Hansen, Rank-Deficient and Discrete Ill-Posed Problems, 1998, Section 4.5,
    # the discrete Picard condition), so the Picard ratios |u_i^T b| / sigma_i fall
    S = system(64, 64)
    slope, fall = picard(S, S.A @ S.x)
    assert slope > 1.05 and fall < -0.5, (slope, fall)


def test_noise_breaks_the_picard_condition():
    # the test above can fail: noise of relative norm 1e-6 levels off |u_i^T b| where the
    # singular values of the gravity matrix keep falling, so the ratios rise in the tail
    S = c.gravity_system(64, 64)
    b = S.A @ S.x
    e = np.random.default_rng(0).standard_normal(64)
    slope, fall = picard(S, b + 1e-6 * np.linalg.norm(b) * e / np.linalg.norm(e))
    assert slope < 1.0 and fall > 0.5, (slope, fall)


# ---------------------------------------------------------------- as dataset sources

CONFIGS = {"phillips": 0.1, "shaw": 0.3, "baart": 0.02, "heat": 0.005, "gravity": 0.5}


@pytest.mark.parametrize("name", sorted(CONFIGS))
def test_dataset_configs_build_problems_with_the_stated_noise_norm(name):
    p = stopwise.load_problem([f"dataset={name}"])
    system = {"phillips": c.phillips_system(300, 100), "shaw": c.shaw_system(300, 100),
              "baart": c.baart_system(300, 100), "heat": c.heat_system(300, 100, 1.0),
              "gravity": c.gravity_system(300, 100, 0.25)}[name]
    assert np.array_equal(p.w_true, system.x) and p.d == 100
    # worst-case noise: the training residual of the truth has exactly the stated norm
    assert np.linalg.norm(p.X_train @ p.w_true - p.y_train) == pytest.approx(CONFIGS[name], rel=1e-12)
    assert p.noise_kind == "norm" and p.noise_level == CONFIGS[name]
    # about 1% of the clean training data, as the config says
    assert 0.005 < CONFIGS[name] / np.linalg.norm(p.X_train @ p.w_true) < 0.02
    assert p.signal_rows and p.info["generator"] == name
    assert p.n_train + p.X_val.shape[0] + p.X_test.shape[0] == 300


def test_the_catalog_lists_every_classical_problem():
    listed = {e.name: e for e in entries()}
    for name in CONFIGS:
        e = listed[name]
        assert (e.source, e.task, e.rows, e.columns, e.use) == (name, "regression", 300, 100, f"dataset={name}")


def test_the_classical_campaign_runs(tmp_path, monkeypatch, capsys):
    # one dataset and seed of campaigns/classical.yaml with a short budget (the whole
    # campaign composes in tests/config/test_compose.py): both solvers run, three rules each
    from stopwise.cli import main

    text = (Path(__file__).resolve().parents[2] / "campaigns" / "classical.yaml").read_text()
    assert "dataset: phillips,shaw,baart,heat,gravity" in text
    monkeypatch.chdir(tmp_path)
    code = main(["sweep", "classical", "dataset=heat", "seed=0", "budget.iterations=20", f"results_root={tmp_path / 'r'}"])
    out = capsys.readouterr().out
    assert code == 0 and "6 jobs, 2 distinct runs" in out and "2 completed" in out, out

"""Synthetic families: each checked against a reference the project did not compute (closed-form
singular values, numpy's SVD, SciPy's LP solver, scikit-learn's SVC) or an exact property."""
import numpy as np
import pytest
from scipy.optimize import linprog
from sklearn.svm import SVC

from stopwise.data import build_problem
from stopwise.data.generators import IntegralParams, load_integral
from stopwise.config.spec import SpecError
from stopwise.config.compose import spec_from_overrides


def problem(overrides):
    spec = spec_from_overrides(overrides)
    return build_problem(spec.dataset, spec.split, spec.seed)


def all_rows(p, name):
    return np.concatenate([getattr(p, f"{name}_train"), getattr(p, f"{name}_val"), getattr(p, f"{name}_test")])


# ---------------------------------------------------------------- sparse recovery

@pytest.mark.parametrize("design", ["gaussian", "rademacher"])
def test_sparse_truth_has_exactly_k_nonzeros_and_the_stated_design(design):
    p = problem(["dataset=sparse", f"dataset.params.design={design}", "dataset.params.k=7", "dataset.params.n=400"])
    assert np.count_nonzero(p.w_true) == 7
    assert sorted(np.flatnonzero(p.w_true).tolist()) == p.info["support"]
    assert set(np.abs(p.w_true[p.w_true != 0])) == {1.0}
    X = all_rows(p, "X")
    if design == "rademacher":
        assert set(np.unique(X)) == {-1.0, 1.0}
    else:  # N(0, 1) entries: sample mean and variance of 160000 draws
        assert abs(X.mean()) < 0.01 and X.var() == pytest.approx(1.0, abs=0.02)


def test_sparse_k_larger_than_d_is_one_line():
    with pytest.raises(SpecError) as e:
        problem(["dataset=sparse", "dataset.params.k=500", "dataset.params.d=400"])
    assert "k <= d=400" in str(e.value) and "\n" not in str(e.value)


@pytest.mark.parametrize("dataset", ["sparse", "integral_green", "integral_gauss", "spectral"])
def test_worst_case_noise_has_exactly_the_stated_norm(dataset):
    """noise=norm: ||y_train - X_train w*|| equals noise_level (up to rounding)."""
    p = problem([f"dataset={dataset}", "dataset.params.noise=norm", "dataset.params.noise_level=0.37"])
    e = p.y_train - p.X_train @ p.w_true
    assert np.linalg.norm(e) == pytest.approx(0.37, rel=1e-12)
    assert p.noise_kind == "norm" and p.noise_norm == 0.37


def test_gaussian_noise_has_the_stated_sigma():
    p = problem(["dataset=sparse", "dataset.params.n=20000", "dataset.params.d=5", "dataset.params.k=2",
                 "dataset.params.noise_level=0.3"])
    e = all_rows(p, "y") - all_rows(p, "X") @ p.w_true
    assert e.std() == pytest.approx(0.3, rel=0.03)  # 20000 draws: sd of the sample sd ~ 0.5 %


# ---------------------------------------------------------------- integral equations

@pytest.mark.parametrize("kernel,closed_form", [
    # -u'' = f, u(0) = u(1) = 0: eigenvalues 1 / (pi k)^2 (Sturm-Liouville, eigenfunctions sin(pi k t))
    ("green", lambda k: 1.0 / (np.pi * k) ** 2),
    # (K f)(s) = int_0^s f: singular values 2 / ((2k - 1) pi)
    ("volterra", lambda k: 2.0 / ((2 * k - 1) * np.pi)),
])
def test_integral_kernel_singular_values_match_their_closed_forms(kernel, closed_form):
    """numpy SVD of the scaled operator A = X / sqrt(n h) on a midpoint grid vs the operator's singular values."""
    p = IntegralParams(kernel=kernel, n=400, d=200, points="grid")
    raw = load_integral(p)
    s = np.linalg.svd(raw.X / np.sqrt(p.n / p.d), compute_uv=False)
    k = np.arange(1, 9)
    assert np.allclose(s[:8], closed_form(k), rtol=2e-3)


def test_gaussian_kernel_is_severely_and_green_mildly_ill_posed():
    """Different smoothness, different decay (numpy SVD): the Gaussian kernel's singular values follow
    exp(-(pi k w)^2 / 2) (its Fourier transform) to within 10 % for the first modes and fall below 1e-6
    of the largest by k = 40, while Green's kernel decays only like k^-2 (1/1600 at k = 40)."""
    gp = IntegralParams(kernel="gaussian", width=0.05, n=400, d=200, points="grid")
    sg = np.linalg.svd(load_integral(gp).X / np.sqrt(gp.n / gp.d), compute_uv=False)
    k = np.arange(1, 6)
    assert np.allclose(sg[:5], np.exp(-(np.pi * k * 0.05) ** 2 / 2), rtol=0.1)
    assert sg[39] / sg[0] < 1e-6
    gr = IntegralParams(kernel="green", n=400, d=200, points="grid")
    sr = np.linalg.svd(load_integral(gr).X / np.sqrt(gr.n / gr.d), compute_uv=False)
    slope = np.polyfit(np.log(np.arange(1, 21)), np.log(sr[:20]), 1)[0]
    assert slope == pytest.approx(-2.0, abs=0.05)
    assert sr[39] / sr[0] == pytest.approx(1 / 1600, rel=0.01)


@pytest.mark.parametrize("kernel", ["green", "gaussian"])
@pytest.mark.parametrize("nu", [0.5, 1.0])
def test_truth_satisfies_the_source_condition(kernel, nu):
    """f = (A^T A)^nu omega, checked with numpy's SVD of A (independent of the generator's eigh), and
    ||omega||_L2 is the recorded source norm."""
    p = IntegralParams(kernel=kernel, smoothness=nu, n=150, d=60, width=0.05)
    raw = load_integral(p)
    A = raw.X * raw.info["operator_scale"]
    _, s, Vt = np.linalg.svd(A, full_matrices=True)
    lam = np.zeros(p.d)
    lam[: s.size] = s ** 2
    omega = np.array(raw.info["source_element"])
    f = Vt.T @ (lam ** nu * (Vt @ omega))
    assert np.allclose(raw.w_true, f, atol=1e-10 * np.abs(raw.w_true).max())
    h = 1.0 / p.d
    assert np.sqrt(h) * np.linalg.norm(raw.w_true) == pytest.approx(1.0, rel=1e-12)
    assert np.sqrt(h) * np.linalg.norm(omega) == pytest.approx(raw.info["source_norm"], rel=1e-12)


def test_smoother_truth_has_less_energy_in_high_modes():
    """A larger nu puts less of the truth on the small singular values (source condition of higher order)."""
    def tail_share(nu):
        p = IntegralParams(kernel="green", smoothness=nu, n=200, d=80)
        raw = load_integral(p)
        _, _, Vt = np.linalg.svd(raw.X, full_matrices=False)
        c = Vt @ raw.w_true
        return np.sum(c[10:] ** 2) / np.sum(c ** 2)
    assert tail_share(1.0) < tail_share(0.5) < tail_share(0.0)


# ---------------------------------------------------------------- spectral decay

@pytest.mark.parametrize("decay,rate", [("power", 1.0), ("power", 2.0), ("exponential", 0.1)])
def test_fixed_design_singular_values_are_exactly_the_configured_spectrum(decay, rate):
    """numpy SVD of the full design: singular values sqrt(n lambda_j) with lambda_j = j^-rate or
    exp(-rate (j-1))."""
    spec = spec_from_overrides(["dataset=spectral", f"dataset.params.decay={decay}", f"dataset.params.rate={rate}"])
    from stopwise.data import get_source
    from stopwise.core.params import make_params

    src = get_source("spectral")
    raw = src.load(make_params(src.params, spec.dataset["params"], "p"))
    n, d = raw.X.shape
    j = np.arange(1, min(n, d) + 1)
    lam = j ** (-rate) if decay == "power" else np.exp(-rate * (j - 1))
    s = np.linalg.svd(raw.X, compute_uv=False)
    assert np.allclose(s, np.sqrt(n * lam), rtol=1e-10)
    assert d > n  # overparameterized


def test_gaussian_design_has_the_configured_population_covariance():
    p = problem(["dataset=spectral", "dataset.params.design=gaussian", "dataset.params.n=20000",
                 "dataset.params.d=8", "dataset.params.rate=1.5"])
    X = all_rows(p, "X")
    C = X.T @ X / X.shape[0]
    lam = np.arange(1, 9) ** -1.5
    assert np.allclose(np.diag(C), lam, rtol=0.05)
    assert np.abs(C - np.diag(np.diag(C))).max() < 0.03


# ---------------------------------------------------------------- separable classification

def _separable_lp(X, y):
    """LP feasibility (SciPy HiGHS): exists (w, b) with y_i (w.x_i + b) >= 1 for all i."""
    n, d = X.shape
    A = -y[:, None] * np.hstack([X, np.ones((n, 1))])
    res = linprog(np.zeros(d + 1), A_ub=A, b_ub=-np.ones(n), bounds=[(None, None)] * (d + 1), method="highs")
    return res.status == 0


def test_separable_data_has_exactly_the_stated_margin():
    p = problem(["dataset=separable", "dataset.params.margin=0.4", "dataset.standardize=false"])
    X, y = all_rows(p, "X"), all_rows(p, "y")
    u = np.array(p.info["separator"])
    rows = np.concatenate([p.info["rows"][k] for k in ("train", "val", "test")])
    order = np.argsort(rows)
    assert set(np.unique(y)) == {-1.0, 1.0} and p.task == "binary" and p.info["classes"] == [-1, 1]
    assert np.linalg.norm(u) == pytest.approx(1.0)
    assert np.min(y * (X @ u)) == pytest.approx(0.4, abs=1e-12)
    # the hard-margin SVM (scikit-learn SVC, linear kernel, C large) reaches a margin of at least 0.4
    svm = SVC(kernel="linear", C=1e8).fit(X[order], y[order])
    assert 1.0 / np.linalg.norm(svm.coef_) >= 0.4 - 1e-6
    assert _separable_lp(X, y)


def test_label_noise_flips_the_stated_share_and_breaks_separability():
    p = problem(["dataset=separable", "dataset.params.n=2000", "dataset.params.label_noise=0.1",
                 "dataset.standardize=false"])
    flipped = p.info["flipped"]
    assert len(flipped) / 2000 == pytest.approx(0.1, abs=0.02)  # binomial(2000, 0.1): sd 0.0067
    clean = np.array(p.info["clean_labels"])
    rows = np.concatenate([p.info["rows"][k] for k in ("train", "val", "test")])
    y = all_rows(p, "y")
    assert np.array_equal(y != clean[rows], np.isin(rows, flipped))
    assert not _separable_lp(all_rows(p, "X"), y)

"""Fast evaluation paths give the direct path's numbers (numpy's plain X^T (X w - y) and
||X w - y||^2 are the references), the cancellation guard keeps digits, and the paths
keep reruns bit for bit and gradient descent on its spectral-filter closed form."""
import numpy as np
import pytest

import stopwise
from stopwise.running import fastpath
from stopwise.data import build_problem
from stopwise.problem.problem import TrainingSet
from stopwise.running.record import make_recorder
from stopwise.running.rerun import rerun_one
from stopwise.running.runner import execute
from stopwise.config.compose import spec_from_overrides
from stopwise.results.store import Store


def _problem(*overrides):
    spec = spec_from_overrides(list(overrides))
    return build_problem(spec.dataset, spec.split, spec.seed)


def _direct_gradient(X, y, w):
    return X.T @ (X @ w - y) / X.shape[0]


@pytest.mark.parametrize("name", ["diabetes", "wellposed", "illposed", "overparam"])
def test_gram_and_fused_gradients_equal_the_direct_formula(name):
    """Reference: numpy's (BLAS) X^T (X w - y), the direct formula."""
    p = _problem(f"dataset={name}")
    X, y = p.X_train, p.y_train
    rng = np.random.default_rng(0)
    fused = fastpath.FusedGradient(X, y, keep_residual=True)
    plans = [fastpath.GramGradient(X, y), fused]
    s = np.linalg.norm(X, 2)
    for _ in range(5):
        w = rng.standard_normal(p.d) * rng.uniform(0.1, 10)
        ref = _direct_gradient(X, y, w)
        # rounding scale of either formula: ||X|| (||X|| ||w|| + ||y||) / n
        scale = s * (s * np.linalg.norm(w) + np.linalg.norm(y)) / p.n_train
        for plan in plans:
            np.testing.assert_allclose(plan(w), ref, rtol=0, atol=1e-13 * scale)
        np.testing.assert_allclose(fused.last_residual, X @ w - y, rtol=0,
                                   atol=1e-13 * (s * np.linalg.norm(w) + np.linalg.norm(y)))


@pytest.mark.parametrize("kind", ["rows", "quads"])
@pytest.mark.parametrize("shape", [(0, 3), (1, 1), (3, 5), (5, 3), (7, 31), (9, 32), (13, 383), (6, 384), (2, 1000)])
def test_fused_kernel_variants_equal_numpy_on_every_remainder(kind, shape):
    """Both compiled variants against numpy's X w - y and X^T r on shapes that exercise the
    four-row loop's remainder (n mod 4 = 0..3), one-row and one-column inputs, an empty X,
    and non-contiguous (sliced) inputs; the variant rule is a function of d only."""
    from stopwise.running import kernels

    n, d = shape
    rng = np.random.default_rng(n * 1000 + d)
    for X in (rng.standard_normal((n, d)), rng.standard_normal((n, 2 * d))[:, ::2]):
        y, w = rng.standard_normal(n), rng.standard_normal(d)
        r, g = np.full(n, np.nan), np.full(d, np.nan)
        kernels.residual_gradient(X, w, y, r, g, kind)
        np.testing.assert_allclose(r, X @ w - y, rtol=1e-12, atol=1e-12)
        np.testing.assert_allclose(g, X.T @ (X @ w - y), rtol=1e-12, atol=1e-11)
    assert kernels.variant(d) == ("quads" if d >= kernels.QUAD_MIN_D or d < kernels.QUAD_MAX_SHORT_D else "rows")


def test_fused_kernel_keeps_non_finite_numbers():
    """Compiled without the no-NaN / no-infinity assumptions: a diverging iterate shows."""
    from stopwise.running import kernels

    X = np.ones((5, 4))
    for bad in (np.inf, np.nan):
        w = np.array([1.0, bad, 0.0, 0.0])
        r, g = np.empty(5), np.empty(4)
        kernels.residual_gradient(X, w, np.zeros(5), r, g)
        assert not np.isfinite(g).any() and not np.isfinite(r).any()


def test_fused_kernel_is_deterministic():
    """The same call twice gives the same bits (reruns are exact)."""
    from stopwise.running import kernels

    rng = np.random.default_rng(3)
    X, y, w = rng.standard_normal((1003, 500)), rng.standard_normal(1003), rng.standard_normal(500)
    out = []
    for _ in range(2):
        r, g = np.empty(1003), np.empty(500)
        kernels.residual_gradient(X, w, y, r, g)
        out.append((r.tobytes(), g.tobytes()))
    assert out[0] == out[1]


@pytest.mark.parametrize("solver", ["gd", "nesterov", "heavy_ball", "sgd"])
@pytest.mark.parametrize("name", ["diabetes", "wellposed", "illposed", "overparam"])
def test_whole_runs_agree_across_paths(solver, name):
    """Every recorded column of a run (errors, norms, distance to the truth) under the
    Gram and fused paths and the automatic choice agrees with the direct path: relative
    1e-9, or, for residuals that have shrunk to rounding level (interpolation), within
    1e-11 ||y|| in residual norm, the size of the rounding error of X w - y itself."""
    spec = spec_from_overrides([f"dataset={name}", f"solver={solver}", "budget.iterations=150",
                                "solver.step_scale=0.9"])
    prob = _problem(f"dataset={name}")
    ref = execute(spec, prob, path="direct").columns
    for path in ("gram", "fused", "auto"):
        got = execute(spec, prob, path=path).columns
        assert got.keys() == ref.keys()
        np.testing.assert_array_equal(got["iteration"], ref["iteration"])
        for col in ("w_norm", "dist_truth"):
            np.testing.assert_allclose(got[col], ref[col], rtol=1e-9, atol=1e-12, err_msg=f"{path} {col}")
        for split in ("train", "val", "test"):
            m, ynorm = getattr(prob, "y_" + split).size, np.linalg.norm(getattr(prob, "y_" + split))
            np.testing.assert_allclose(np.sqrt(got[f"{split}_error"] * m), np.sqrt(ref[f"{split}_error"] * m),
                                       rtol=1e-9, atol=1e-11 * ynorm, err_msg=f"{path} {split}")
        # exact: s / (2n) and s / n of one sum of squares s; halving is exact in binary floating point
        np.testing.assert_array_equal(got["train_loss"], got["train_error"] / 2)
        # sqrt(s) against sqrt((s / n) n): the division and product move s by <= eps relative, the
        # square root halves that and adds its own eps/2 rounding on each side: <= 1.5 eps apart
        np.testing.assert_allclose(got["residual_norm"], np.sqrt(got["train_error"] * prob.n_train),
                                   rtol=2 * np.finfo(float).eps, atol=0)


def test_recorded_errors_of_gd_match_the_spectral_filter_closed_form():
    """Gradient descent from 0 on least squares: w_t = V diag((1 - (1 - eta s^2/n)^t) / s) U^T y
    (filter factors of the Landweber iteration, Hansen). Every recorded train / val / test
    error under the automatic (Gram) path matches the closed form."""
    spec = spec_from_overrides(["dataset=diabetes", "solver=gd", "budget.iterations=300"])
    p = _problem("dataset=diabetes")
    tr = execute(spec, p)
    assert tr.problem_info["evaluation"]["gradient"] == "gram"
    U, s, Vt = np.linalg.svd(p.X_train, full_matrices=False)
    eta, n = 1.0 / p.L, p.n_train
    for i, t in enumerate(tr.columns["iteration"]):
        w = Vt.T @ ((1 - (1 - eta * s**2 / n) ** t) / s * (U.T @ p.y_train))
        for split, col in (("train", "train_error"), ("val", "val_error"), ("test", "test_error")):
            X, y = getattr(p, "X_" + split), getattr(p, "y_" + split)
            assert tr.columns[col][i] == pytest.approx(np.mean((X @ w - y) ** 2), rel=1e-10)


def test_cancellation_guard_keeps_the_digits_near_interpolation():
    """Noise-free targets: near the least-squares solution the residual shrinks to rounding
    level. The Gram form w'Gw - 2c'w + y'y subtracts numbers of size ||y||^2 and loses its
    digits there (shown by evaluating it); the recorder notices (result below GUARD times
    the scale) and uses the compressed rows (QR of [X y]), so it agrees with the rows
    evaluated directly (numpy) to rounding of the residual itself."""
    p = _problem("dataset=wellposed", "dataset.params.noise=none")
    fast = make_recorder(p, statistics="gram")
    plain = make_recorder(p, statistics=None)
    assert fast.statistics.splits == ("train", "val", "test") and plain.statistics is None
    w_ls = np.linalg.lstsq(p.X_train, p.y_train, rcond=None)[0]
    rng = np.random.default_rng(1)
    worst_gram = 0.0
    for k in range(0, 16, 2):
        w = w_ls + 10.0**-k * rng.standard_normal(p.d)
        got = fast.squared_errors(w).copy()
        ref = plain.squared_errors(w).copy()
        for j, split in enumerate(("train", "val", "test")):
            X, y = getattr(p, "X_" + split), getattr(p, "y_" + split)
            direct = np.sum((X @ w - y) ** 2)
            assert ref[j] == pytest.approx(direct, rel=1e-12, abs=1e-28 * (y @ y))
            # residual norms agree to 1e-13 ||y||, and relatively while the residual is not tiny
            assert abs(np.sqrt(got[j]) - np.sqrt(direct)) <= 1e-13 * np.linalg.norm(y) + 1e-10 * np.sqrt(direct)
            gram = w @ (X.T @ X) @ w - 2 * (X.T @ y) @ w + y @ y
            worst_gram = max(worst_gram, abs(np.sqrt(abs(gram)) - np.sqrt(direct)) / np.linalg.norm(y))
        if k >= 8:
            assert got[0] < 1e-12 * (p.y_train @ p.y_train)  # really at rounding level
    assert worst_gram > 1e-9  # the unguarded Gram form would have been off by far more
    assert fast.fallbacks >= 3 * 5  # every split from k = 6 on


def test_compressed_rows_reproduce_the_squared_error():
    """||X w - y||^2 = ||R [w; -1]||^2 for the QR factor R of [X y] (numpy's QR), for tall
    and wide blocks of rows."""
    rng = np.random.default_rng(2)
    for n, d in ((50, 8), (5, 8)):
        X, y = rng.standard_normal((n, d)), rng.standard_normal(n)
        R = fastpath.compressed_rows(X, y)
        assert R.shape == (min(n, d + 1), d + 1)
        for _ in range(3):
            w = rng.standard_normal(d)
            r = R @ np.append(w, -1.0)
            assert r @ r == pytest.approx(np.sum((X @ w - y) ** 2), rel=1e-12)


def test_automatic_choice_depends_on_shapes_only():
    assert fastpath.choose_gradient_path(265, 10, 265 * 80) == "gram"
    assert fastpath.choose_gradient_path(90, 400, 90 * 3200) == "direct"
    assert fastpath.choose_gradient_path(1000, 2000, 16 * 10**6) == "fused"
    assert fastpath.choose_gradient_path(10**6, 10**4, 8 * 10**10) == "fused"  # Gram would be 800 MB
    ill = _problem("dataset=illposed")  # 180 train, 60 val, 60 test rows, 100 features
    assert fastpath.statistics_splits(ill) == ("train",)
    assert fastpath.statistics_splits(_problem("dataset=overparam")) == ()
    assert fastpath.statistics_splits(ill, "direct") == ()
    with pytest.raises(fastpath.PathError, match="must be one of auto, direct, fused, gram"):
        fastpath.training_for(ill, path="fast")


def test_statistics_are_computed_once_per_problem_and_hidden_from_solvers():
    p = _problem("dataset=wellposed")
    t1, s1 = fastpath.prepare(p)
    t2, s2 = fastpath.prepare(p)
    assert t1 is t2 is p.training and s1 is s2
    plan = fastpath.gradient_plan(t1)
    assert plan is fastpath.gradient_plan(t2) and plan.G is fastpath._gram(p, "train")[0]  # one Gram matrix
    assert not plan.G.flags.writeable and not s1.A.flags.writeable
    # what the solver can reach is made of training rows only
    np.testing.assert_allclose(plan.G, p.X_train.T @ p.X_train, rtol=1e-13)
    np.testing.assert_allclose(plan.c, p.X_train.T @ p.y_train, rtol=1e-13)
    assert s1.splits == ("train", "val", "test")
    np.testing.assert_allclose(s1.gram(2), p.X_test.T @ p.X_test, rtol=1e-13)
    # an explicit path leaves the shared training set alone
    fresh = fastpath.training_for(p, path="direct")
    assert fresh is not p.training and fastpath.gradient_plan(fresh) is None
    assert isinstance(fresh, TrainingSet) and fresh.L == p.training.L


def test_rerun_is_bit_for_bit_with_the_fast_paths(root):
    outs = [stopwise.run(["dataset=diabetes", "solver=nesterov", "budget.iterations=200"], root=root),
            stopwise.run(["dataset=wellposed", "solver=sgd", "solver.batch=0.05", "solver.average=tail",
                          "budget.iterations=100000", "budget.passes=4", "record.per_pass=8"], root=root)]
    store = Store(root)
    for out in outs:
        assert out.status == "completed"
        c = rerun_one(store, out.run_id)
        assert c.ok and c.max_diff == 0.0, c.problems
        meta = store.run_meta(out.run_id)
        assert meta["problem"]["evaluation"]["gradient"] == "gram"
        assert any(k.startswith("blas") for k in meta["threads"])

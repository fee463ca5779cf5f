"""Data layer: bundled and synthetic sources, splits, preprocessing, worked examples."""
import numpy as np
import pytest
from sklearn import datasets
from sklearn.linear_model import LinearRegression
from sklearn.metrics import mean_squared_error, r2_score

import stopwise
from stopwise.data import build_problem
from stopwise.config.spec import SpecError
from stopwise.config.compose import spec_from_overrides


def test_diabetes_shape_matches_the_loader_description():
    """scikit-learn's diabetes description: 442 samples x 10 features (Efron, Hastie, Johnstone, Tibshirani, "Least Angle Regression", 2004)."""
    p = stopwise.load_problem(["dataset=diabetes", "split.test=0.2", "split.val=0.2"])
    assert p.n_train + p.X_val.shape[0] + p.X_test.shape[0] == 442 and p.d == 10


def test_ols_bmi_worked_example_through_load_problem():
    """scikit-learn example "Ordinary Least Squares and Ridge Regression": bmi only, last 20 rows as test,
    OLS -> test MSE 2548.07, R^2 0.47, coefficient 938.238, intercept 152.919 (scikit-learn docs, example plot_ols)."""
    p = stopwise.load_problem(["dataset=diabetes", "split.kind=tail", "split.test=20", "split.val=0",
                               "dataset.features=[bmi]"])
    assert (p.n_train, p.X_test.shape[0], p.X_val.shape[0]) == (422, 20, 0)
    # centered target + standardized features: OLS without intercept = OLS with intercept
    w = np.linalg.lstsq(p.X_train, p.y_train, rcond=None)[0]
    pred = p.X_test @ w
    assert mean_squared_error(p.y_test, pred) == pytest.approx(2548.0724, abs=5e-4)
    assert r2_score(p.y_test, pred) == pytest.approx(0.47258, abs=5e-5)
    # the example uses scikit-learn's scaled copy of the data: x_scaled = (x - mean_all) / ||x - mean_all||
    raw = datasets.load_diabetes(scaled=False).data[:, 2]
    norm_all = np.linalg.norm(raw - raw.mean())
    coef_raw = w[0] / p.preprocessing["standardize"]["scale"][0]
    assert coef_raw * norm_all == pytest.approx(938.238, abs=1e-3)
    mean_train_scaled = (p.preprocessing["standardize"]["mean"][0] - raw.mean()) / norm_all
    intercept = p.preprocessing["center_target"]["mean"] - coef_raw * norm_all * mean_train_scaled
    assert intercept == pytest.approx(152.919, abs=1e-3)


def test_ols_all_features_tutorial_through_a_cgls_run(root):
    """scikit-learn tutorial "Statistical learning: supervised learning": all 10 features, last 20 rows as
    test, OLS -> MSE 2004.5676, R^2 0.58507, rel. tolerance 1e-4 (scikit-learn tutorial "Statistical learning", supervised learning, linear model). CGLS reaches OLS
    in at most d = 10 iterations in exact arithmetic; run 40 and read the final test error."""
    out = stopwise.run(["dataset=diabetes", "split.kind=tail", "split.test=20", "split.val=0", "solver=cgls",
                        "budget.iterations=40"], root=root)
    tr = stopwise.load_traces(root)
    assert out.status == "completed"
    assert tr["test_error"].iloc[-1] == pytest.approx(2004.5676, rel=1e-4)
    X, y = datasets.load_diabetes(return_X_y=True)
    ols = LinearRegression().fit(X[:-20], y[:-20])
    assert tr["test_error"].iloc[-1] == pytest.approx(mean_squared_error(y[-20:], ols.predict(X[-20:])), rel=1e-9)
    assert tr["val_error"].isna().all()


def test_preprocessing_is_fitted_on_training_rows_only():
    """Changing validation and test rows leaves the fitted transforms and the training arrays unchanged."""
    a = stopwise.load_problem(["dataset=diabetes", "split.kind=tail", "split.test=50", "split.val=50"])
    b = stopwise.load_problem(["dataset=diabetes", "split.kind=tail", "split.test=80", "split.val=20"])
    assert np.array_equal(a.X_train, b.X_train) and np.array_equal(a.y_train, b.y_train)
    assert a.preprocessing["standardize"] == b.preprocessing["standardize"]
    X, y = datasets.load_diabetes(return_X_y=True)
    Xtr = datasets.load_diabetes(scaled=False).data[:342]
    assert np.allclose(a.X_train.mean(axis=0), 0, atol=1e-12)
    # the same mean of n = 342 rows, possibly summed in another order: <= n eps relative apart
    np.testing.assert_allclose(a.preprocessing["standardize"]["mean"], Xtr.mean(axis=0),
                               rtol=Xtr.shape[0] * np.finfo(float).eps, atol=0)


def test_identical_specs_give_identical_bytes():
    o = ["dataset=illposed", "seed=3"]
    a, b = stopwise.load_problem(o), stopwise.load_problem(o)
    for k in ("X_train", "y_train", "X_val", "y_val", "X_test", "y_test", "w_true"):
        assert getattr(a, k).tobytes() == getattr(b, k).tobytes()
    c = stopwise.load_problem(["dataset=illposed", "seed=4"])
    assert not np.array_equal(a.y_train, c.y_train)


def test_worst_case_noise_has_exactly_the_stated_norm():
    p = stopwise.load_problem(["dataset=illposed", "dataset.params.noise_level=0.25"])
    e = p.y_train - p.X_train @ p.w_true
    assert np.linalg.norm(e) == pytest.approx(0.25, rel=1e-12)
    assert p.noise_kind == "norm" and p.noise_norm == pytest.approx(0.25)


def test_gaussian_noise_level_and_truth_of_the_wellposed_generator():
    p = stopwise.load_problem(["dataset=wellposed", "dataset.params.n=4000", "dataset.params.noise_level=0.3"])
    e = np.concatenate([p.y_train - p.X_train @ p.w_true, p.y_test - p.X_test @ p.w_true])
    assert e.std() == pytest.approx(0.3, rel=0.05)  # sample sd of 3200 Gaussian draws
    assert p.noise_kind == "gaussian"


def test_illposed_operator_singular_values_decay_fast():
    """A Gaussian convolution kernel is severely ill-posed: singular values decay faster than any power
    (numpy SVD of the generated operator)."""
    p = stopwise.load_problem(["dataset=illposed"])
    s = np.linalg.svd(p.X_train, compute_uv=False)
    assert s[30] / s[0] < 1e-4 and s[60] / s[0] < 1e-12


def test_overparameterized_generator_has_more_features_than_rows():
    p = stopwise.load_problem(["dataset=overparam"])
    assert p.d > p.n_train and np.linalg.matrix_rank(p.X_train) == p.n_train


def test_split_kinds():
    r = stopwise.load_problem(["dataset=diabetes", "split.kind=random", "split.test=0.25", "split.val=0.25"])
    assert (r.X_test.shape[0], r.X_val.shape[0]) == (110, 110)
    r2 = stopwise.load_problem(["dataset=diabetes", "split.kind=random", "split.test=0.25", "split.val=0.25",
                                "seed=1"])
    assert not np.array_equal(r.y_test, r2.y_test)
    idx = stopwise.load_problem(["dataset=diabetes", "split.kind=indices", "split.train_rows=[0,1,2,3,4,5]",
                                 "split.val_rows=[6,7]", "split.test_rows=[8,9,10]",
                                 "dataset.standardize=false", "dataset.center_target=false"])
    y = datasets.load_diabetes().target
    assert np.array_equal(idx.y_test, y[8:11]) and np.array_equal(idx.y_val, y[6:8])


@pytest.mark.parametrize("overrides,needle", [
    (["split.test=0.6", "split.val=0.4"], "no training rows"),
    (["split.kind=indices", "split.train_rows=[0,1]", "split.test_rows=[1,2]"], "overlap"),
    (["split.kind=indices", "split.train_rows=[0,1]", "split.test_rows=[9999]"], "lie in"),
    (["split.kind=sideways"], "one of random, tail, indices"),
    (["dataset.features=[nope]"], "no feature 'nope'"),
    (["dataset.params.loader=zzz"], "one of diabetes"),
])
def test_bad_data_specs_are_one_line(overrides, needle):
    with pytest.raises(SpecError) as e:
        spec = spec_from_overrides(overrides)
        build_problem(spec.dataset, spec.split, spec.seed)
    assert needle in str(e.value) and "\n" not in str(e.value)


@pytest.mark.parametrize("n,d", [(300, 40), (40, 300), (64, 64), (1, 5), (5, 1)])
def test_training_spectral_norm_matches_the_largest_singular_value(n, d, monkeypatch):
    """Reference: scipy.linalg.svdvals (LAPACK gesdd) of X_train. Both branches: the top
    eigenvalue of the smaller Gram matrix, and the full SVD above SPECTRUM_GRAM_MAX."""
    import scipy.linalg

    from stopwise.problem import problem as problem_module
    from stopwise.problem.problem import Problem

    rng = np.random.default_rng(n * 1000 + d)
    X = rng.standard_normal((n, d)) * np.logspace(0, -3, d)  # decaying column scales
    ref = float(scipy.linalg.svdvals(X)[0]) ** 2

    def make():
        return Problem(name="t", task="regression", X_train=X, y_train=rng.standard_normal(n),
                       X_val=X[:0], y_val=np.empty(0), X_test=X[:1], y_test=np.zeros(1))

    p = make()
    assert p.train_norm2_sq == pytest.approx(ref, rel=1e-13)
    assert p.L == pytest.approx(ref / n, rel=1e-13)
    if n >= d:  # the Gram matrix behind the constant is the one the Gram path shares
        np.testing.assert_allclose(p.gram_matrix("train"), X.T @ X, rtol=0, atol=1e-12 * ref)
        assert not p.gram_matrix("train").flags.writeable
    monkeypatch.setattr(problem_module, "SPECTRUM_GRAM_MAX", 0)
    assert make().train_norm2_sq == pytest.approx(ref, rel=1e-13)

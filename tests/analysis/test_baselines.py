"""Explicit-regularization baselines against scikit-learn's own estimators and searches.

References: sklearn.linear_model.Ridge (refit at a penalty), RidgeCV with the same
train/validation split (cv=[(train, val)]), Lasso / ElasticNet fitted alone at single
penalties, numpy.linalg.pinv (alpha = 0), and GridSearchCV with a PredefinedSplit for the
classifiers (LogisticRegression, LinearSVC).
"""
import math
import os

import numpy as np
import pandas as pd
import pytest
from sklearn.exceptions import ConvergenceWarning

import stopwise
from stopwise.analysis.baselines import (
    BASELINE_COLUMNS,
    BaselineError,
    baseline_params,
    ensure_baseline,
    fit_path,
    lasso_alpha_max,
    load_baselines,
    ridge_svd_path,
)
from stopwise.cli import main
from stopwise.problem.problem import Problem


def regression(name="diabetes", extra=()):
    return stopwise.load_problem([f"dataset={name}", *extra])


def stacked(p):
    X = np.vstack([p.X_train, p.X_val])
    y = np.concatenate([p.y_train, p.y_val])
    tr = np.arange(p.n_train)
    va = np.arange(p.n_train, X.shape[0])
    return X, y, tr, va


# ---------------------------------------------------------------- ridge

@pytest.mark.parametrize("name", ["diabetes", "wellposed", "illposed"])
def test_ridge_path_equals_sklearn_ridge_and_ridgecv(name):
    from sklearn.linear_model import Ridge, RidgeCV

    p = regression(name)
    res = fit_path(p, "ridge")
    assert res.n_fits == 1 and res.penalties.size == 100
    k = res.selected
    a = float(res.penalties[k])
    # weights along the path equal Ridge refitted at each penalty (spot checks)
    for j in (0, 30, 60, 99):
        ref = Ridge(alpha=float(res.penalties[j]), fit_intercept=False, solver="svd").fit(p.X_train, p.y_train)
        np.testing.assert_allclose(res.coefs[j], ref.coef_, rtol=1e-7, atol=1e-10 * np.abs(ref.coef_).max())
    # selected penalty: the test error equals Ridge refitted there
    ref = Ridge(alpha=a, fit_intercept=False).fit(p.X_train, p.y_train)
    assert res.test_error[k] == pytest.approx(np.mean((ref.predict(p.X_test) - p.y_test) ** 2), rel=1e-8)
    assert res.val_error[k] == pytest.approx(np.mean((ref.predict(p.X_val) - p.y_val) ** 2), rel=1e-8)
    # RidgeCV searching the same grid on the same train/validation split picks the same penalty
    X, y, tr, va = stacked(p)
    cv = RidgeCV(alphas=res.penalties, fit_intercept=False, cv=[(tr, va)], scoring="neg_mean_squared_error").fit(X, y)
    assert cv.alpha_ == a
    assert -cv.best_score_ == pytest.approx(res.val_error[k], rel=1e-7)


def test_ridge_at_zero_is_the_minimum_norm_solution():
    """Reference: numpy.linalg.pinv on an overparameterized design (d > n)."""
    p = regression("overparam")
    w = ridge_svd_path(p.X_train, p.y_train, np.array([0.0]))[0]
    np.testing.assert_allclose(w, np.linalg.pinv(p.X_train) @ p.y_train, rtol=1e-9, atol=1e-12)


def test_ridge_grid_is_relative_to_the_spectral_norm():
    p = regression("wellposed")
    res = fit_path(p, "ridge", {"n_penalties": 5, "low": 1e-4, "high": 1.0})
    s2 = np.linalg.norm(p.X_train, 2) ** 2
    np.testing.assert_allclose(res.penalties, np.geomspace(1e-4 * s2, s2, 5), rtol=1e-12)


# ---------------------------------------------------------------- lasso and elastic net

@pytest.mark.parametrize("method,l1", [("lasso", 1.0), ("elastic_net", 0.3)])
def test_coordinate_descent_paths_equal_single_fits(method, l1):
    from sklearn.linear_model import ElasticNet

    p = regression("wellposed")
    params = {"n_penalties": 12} if method == "lasso" else {"n_penalties": 12, "l1_ratio": l1}
    res = fit_path(p, method, params)
    amax = lasso_alpha_max(p.X_train, p.y_train, l1)
    np.testing.assert_allclose(res.penalties.max(), amax, rtol=1e-12)
    assert res.n_fits == 12 and res.notes["not_converged"] == 0
    for j in (0, 5, 11):
        ref = ElasticNet(alpha=float(res.penalties[j]), l1_ratio=l1, fit_intercept=False, tol=1e-10,
                         max_iter=100000).fit(p.X_train, p.y_train)
        # the path stops coordinate descent at tol 1e-7, the reference at 1e-10
        np.testing.assert_allclose(res.coefs[j], ref.coef_, atol=1e-5 * max(1.0, np.abs(ref.coef_).max()))

        def objective(w, a=float(res.penalties[j])):
            r = p.y_train - p.X_train @ w
            return r @ r / (2 * p.n_train) + a * l1 * np.abs(w).sum() + a * (1 - l1) * (w @ w) / 2

        assert objective(res.coefs[j]) <= objective(ref.coef_) * (1 + 1e-6)
    # alpha_max is the smallest penalty giving zero weights (sklearn's ElasticNet decides)
    zero = ElasticNet(alpha=amax, l1_ratio=l1, fit_intercept=False).fit(p.X_train, p.y_train)
    below = ElasticNet(alpha=0.98 * amax, l1_ratio=l1, fit_intercept=False).fit(p.X_train, p.y_train)
    assert not zero.coef_.any() and below.coef_.any()


def test_explicit_penalties_in_any_order_keep_their_rows():
    from sklearn.linear_model import Lasso

    p = regression("diabetes")
    alphas = [0.5, 5.0, 0.05]
    res = fit_path(p, "lasso", {"penalties": alphas})
    assert res.penalties.tolist() == alphas
    X, y, n = p.X_train, p.y_train, p.n_train
    # P(w) = ||y - X w||^2 / (2n) + a ||w||_1 is mu-strongly convex with mu = lambda_min(X^T X / n)
    # > 0 here (n > d, full rank), so ||w - w*||^2 <= 2 (P(w) - P*) / mu <= 2 gap(w) / mu, with
    # gap(w) = P(w) - D(theta) the duality gap at the dual-feasible theta = r / max(1,
    # ||X^T r||_inf / (n a)), D(theta) = (theta^T y - ||theta||^2 / 2) / n (Boyd, Vandenberghe,
    # Convex Optimization, 2004, Section 5.5 and Eq. 9.11, from memory)
    mu = np.linalg.eigvalsh(X.T @ X / n)[0]

    def gap(w, a):
        r = y - X @ w
        theta = r / max(1.0, np.abs(X.T @ r).max() / (n * a))
        return r @ r / (2 * n) + a * np.abs(w).sum() - (theta @ y - theta @ theta / 2) / n

    for j, a in enumerate(alphas):
        ref = Lasso(alpha=a, fit_intercept=False, tol=1e-10, max_iter=100000).fit(X, y)
        bound = sum(math.sqrt(2 * max(gap(w, a), 0.0) / mu) for w in (res.coefs[j], ref.coef_))
        assert np.linalg.norm(res.coefs[j] - ref.coef_) <= bound
        # regression guard (project's own measurement, not an outside fact): the two coordinate
        # descents (tol 1e-7 and 1e-10) agree to 5.8e-5 at most, much closer than the bound above
        # (0.06..0.28, diabetes is nearly collinear); far below the distance between rows of
        # different alphas, so a row out of order fails
        np.testing.assert_allclose(res.coefs[j], ref.coef_, rtol=1e-4, atol=1e-4)
    assert min(np.abs(res.coefs[i] - res.coefs[k]).max() for i in range(3) for k in range(i)) > 1e-1


# ---------------------------------------------------------------- classification

def classification_problem(loader, binary: bool) -> Problem:
    """A Problem built here from scikit-learn data: standardized on training rows,
    labels -1/+1 (binary) or 0..K-1 (multiclass), random 60/20/20 split."""
    from sklearn import datasets

    X, y = getattr(datasets, loader)(return_X_y=True)
    rng = np.random.default_rng(0)
    idx = rng.permutation(len(y))
    n_te = n_va = len(y) // 5
    te, va, tr = np.sort(idx[:n_te]), np.sort(idx[n_te:n_te + n_va]), np.sort(idx[n_te + n_va:])
    mu, sd = X[tr].mean(0), X[tr].std(0)
    sd[sd == 0] = 1.0
    Z = (X - mu) / sd
    lab = np.where(y == 1, 1.0, -1.0) if binary else y.astype(np.float64)
    return Problem(name=loader, task="binary" if binary else "multiclass",
                   X_train=Z[tr], y_train=lab[tr], X_val=Z[va], y_val=lab[va], X_test=Z[te], y_test=lab[te])


@pytest.mark.parametrize("loader,binary,method", [("load_breast_cancer", True, "logistic"),
                                                  ("load_wine", False, "logistic"),
                                                  ("load_breast_cancer", True, "linear_svm"),
                                                  ("load_wine", False, "linear_svm")])
def test_classifier_paths_equal_grid_search_on_the_same_split(loader, binary, method):
    import warnings

    from sklearn.linear_model import LogisticRegression
    from sklearn.model_selection import GridSearchCV, PredefinedSplit
    from sklearn.svm import LinearSVC

    p = classification_problem(loader, binary)
    grid = list(np.geomspace(1e-3, 1e2, 8))
    res = fit_path(p, method, {"penalties": grid})
    assert res.n_fits == 8
    X, y, tr, va = stacked(p)
    fold = np.r_[np.full(tr.size, -1), np.zeros(va.size, dtype=int)]
    est = (LogisticRegression(max_iter=2000) if method == "logistic" else LinearSVC(max_iter=2000, dual="auto"))
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", ConvergenceWarning)
        gs = GridSearchCV(est, {"C": grid}, cv=PredefinedSplit(fold), scoring="accuracy", refit=False).fit(X, y.astype(int))
    assert res.penalties[res.selected] == gs.best_params_["C"]
    assert res.val_error[res.selected] == pytest.approx(1 - gs.best_score_, abs=1e-12)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", ConvergenceWarning)
        ref = est.set_params(C=gs.best_params_["C"]).fit(p.X_train, p.y_train.astype(int))
    assert res.test_error[res.selected] == pytest.approx(1 - ref.score(p.X_test, p.y_test.astype(int)), abs=1e-12)


# ---------------------------------------------------------------- test data never used for selection

@pytest.mark.parametrize("method", ["ridge", "lasso", "elastic_net"])
def test_selection_ignores_test_data(method):
    p = regression("wellposed")
    rng = np.random.default_rng(1)
    q = Problem(name=p.name, task=p.task, X_train=p.X_train, y_train=p.y_train, X_val=p.X_val, y_val=p.y_val,
                X_test=rng.standard_normal(p.X_test.shape), y_test=rng.standard_normal(p.y_test.size) * 100)
    a, b = fit_path(p, method, {"n_penalties": 20}), fit_path(q, method, {"n_penalties": 20})
    assert a.selected == b.selected and np.array_equal(a.val_error, b.val_error)
    assert not np.array_equal(a.test_error, b.test_error)


def test_no_validation_rows_selects_nothing():
    p = regression("diabetes", ["split.val=0"])
    res = fit_path(p, "ridge", {"n_penalties": 5})
    assert res.selected is None and np.isnan(res.val_error).all() and np.isfinite(res.test_error).all()


# ---------------------------------------------------------------- bad input

@pytest.mark.parametrize("method,params,needle", [
    ("bogus", {}, "unknown baseline 'bogus'; valid: ridge"),
    ("ridge", {"penalties": [-1.0]}, "penalties"),
    ("ridge", {"penalties": []}, "non-empty list"),
    ("lasso", {"eps": 2.0}, "eps=2.0"),
    ("logistic", {"fit_intercept": "yes"}, "true or false"),
    ("ridge", {"nope": 1}, "no parameter 'nope'"),
])
def test_bad_baseline_requests_are_one_line(method, params, needle):
    with pytest.raises(BaselineError) as e:
        fit_path(regression("wellposed"), method, params)
    assert needle in str(e.value) and "\n" not in str(e.value)


def test_classifier_on_a_regression_problem_names_the_valid_methods():
    with pytest.raises(BaselineError, match="for regression: ridge, lasso, elastic_net"):
        fit_path(regression("wellposed"), "logistic")


# ---------------------------------------------------------------- store: same splits as the runs, reuse

@pytest.fixture(scope="module")
def camp(tmp_path_factory):
    root = tmp_path_factory.mktemp("bl") / "results"
    assert main(["sweep", "dataset=diabetes,wellposed", "solver=gd", "seed=0,1", "budget.iterations=5",
                 f"results_root={root}"]) == 0
    return root


def test_ensure_baselines_stores_one_path_per_split_and_method(camp):
    df = stopwise.ensure_baselines(camp, "adhoc")
    assert list(df.columns) == list(BASELINE_COLUMNS)
    files = sorted((camp / "baselines").glob("*.parquet"))
    assert len(files) == 4 * 3 == df["baseline_id"].nunique()  # 2 datasets x 2 seeds x ridge/lasso/elastic_net
    assert (df.groupby("baseline_id")["selected"].sum() == 1).all()
    stamps = [os.stat(f).st_mtime_ns for f in files]
    again = stopwise.ensure_baselines(camp, "adhoc")  # reused, not recomputed
    assert [os.stat(f).st_mtime_ns for f in files] == stamps
    pd.testing.assert_frame_equal(again, df)
    assert not list((camp / "baselines").glob(".*"))  # no temporary files left behind


def test_baselines_see_exactly_the_runs_splits(camp):
    """A huge ridge penalty gives w = 0, whose test error the runs recorded at iteration 0;
    equal errors mean the baseline rebuilt the very same test rows and targets."""
    store = stopwise.results.store.Store(camp)
    runs = stopwise.load_runs(camp, "adhoc")
    traces = stopwise.load_traces(camp, "adhoc")
    for rid in runs["run_id"]:
        cfg = store.run_meta(rid)["config"]
        from stopwise.analysis.baselines import data_spec

        spec = data_spec(cfg["dataset"], cfg["split"], cfg["seed"])
        path = ensure_baseline(camp, spec, "ridge", {"penalties": [1e15]})
        bl = pd.read_parquet(path)
        t0 = traces[(traces["run_id"] == rid) & (traces["iteration"] == 0)]
        assert bl["test_error"].iloc[0] == pytest.approx(float(t0["test_error"].iloc[0]), rel=1e-9)
        assert bl["val_error"].iloc[0] == pytest.approx(float(t0["val_error"].iloc[0]), rel=1e-9)
    assert set(load_baselines(camp, "adhoc")["dataset"]) == {"diabetes", "wellposed"}
    assert load_baselines(camp / "elsewhere").empty


def test_stored_selection_matches_a_fresh_fit(camp):
    from stopwise.analysis.baselines import baseline_id, data_spec

    df = stopwise.ensure_baselines(camp, "adhoc", methods=["ridge"])
    spec_ = stopwise.spec_from_overrides(["dataset=diabetes", "seed=1"])
    bid = baseline_id(data_spec(spec_.dataset, spec_.split, spec_.seed), "ridge")[:16]
    sel = df[(df["baseline_id"] == bid) & df["selected"]]
    assert len(sel) == 1 and (sel["method"] == "ridge").all()
    p = stopwise.load_problem(["dataset=diabetes", "seed=1"])
    res = fit_path(p, "ridge")
    assert math.isclose(float(sel["penalty"].iloc[0]), float(res.penalties[res.selected]), rel_tol=1e-12)
    assert float(sel["test_error"].iloc[0]) == pytest.approx(res.test_error[res.selected], rel=1e-12)


def test_baselines_command(camp, capsys):
    assert main(["baselines", "adhoc", "--root", str(camp), "--method", "ridge"]) == 0
    out = capsys.readouterr().out
    assert "ridge" in out and "baseline paths" in out
    assert main(["baselines", "adhoc", "--root", str(camp), "--method", "nope"]) == 2
    assert capsys.readouterr().err.startswith("stopwise: error: unknown baseline 'nope'")


def test_params_normalize_for_identity():
    assert baseline_params("ridge", {"penalties": [1, 2]}).penalties == [1.0, 2.0]

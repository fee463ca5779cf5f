"""Gradient methods on the logistic and softmax losses, end to end and against scikit-learn."""
import numpy as np
import pandas as pd
import pytest
from sklearn.datasets import load_iris
from sklearn.linear_model import LogisticRegression

import stopwise
from stopwise.problem.problem import TrainingSet
from stopwise.solvers import SOLVERS, get_solver
from stopwise.core.params import ParamError, make_params

CLASSIFICATION_SOLVERS = ("gd_normalized", "nesterov_normalized", "hinge_diagonal", "relu_net")


def iris_full(classes):
    X, t = load_iris(return_X_y=True)
    keep = np.isin(t, classes)
    X, t = X[keep], t[keep]
    X = (X - X.mean(0)) / X.std(0)
    return X, t


def run_solver(train, name, steps, **params):
    sd = get_solver(name)
    p = sd.params(**params)
    st = sd.init(train, p, np.random.default_rng(0))
    for _ in range(steps):
        st = sd.step(train, p, st)
    return st.w


def test_logistic_gd_reaches_sklearn_on_nonseparable_data():
    # iris versicolor vs virginica is not separable (UCI iris description, Fisher 1936 data, from memory;
    # LP-checked in tests/problem/test_margins.py), so the logistic
    # loss has a unique minimizer: scikit-learn's unpenalized LogisticRegression (C=inf; its
    # intercept is our constant column's weight)
    X, t = iris_full([1, 2])
    y = np.where(t == 2, 1.0, -1.0)
    Z = np.hstack([X, np.ones((len(y), 1))])
    tr = TrainingSet(Z, y, L=np.linalg.norm(Z, 2) ** 2 / (4 * len(y)), task="binary", loss="logistic")
    ref = LogisticRegression(C=np.inf, tol=1e-12, max_iter=100000).fit(X, t == 2)
    w_ref = np.append(ref.coef_.ravel(), ref.intercept_)
    w = run_solver(tr, "nesterov", 20000)
    # bound: for a mu-strongly convex f, ||w - w*|| <= ||grad f(w)|| / mu (Nesterov, Introductory
    # Lectures on Convex Optimization, 2004, Thm 2.1.10), applied to both points; mu is the least
    # Hessian eigenvalue (Z^T diag(s (1 - s)) Z / n) at either point (the two are 1e-8 apart
    # relatively, so the Hessian is the same along the segment up to that order)
    def least_curvature(v):
        s = 1 / (1 + np.exp(-y * (Z @ v)))
        return np.linalg.eigvalsh((Z.T * (s * (1 - s))) @ Z / len(y))[0]

    mu = min(least_curvature(w), least_curvature(w_ref))
    bound = (np.linalg.norm(tr.gradient(w)) + np.linalg.norm(tr.gradient(w_ref))) / mu
    assert np.linalg.norm(w - w_ref) <= bound < 1e-6 * np.linalg.norm(w_ref)


def test_softmax_gd_reaches_sklearn_multinomial():
    # three iris classes (not separable): softmax GD reaches the training loss of scikit-learn's
    # unpenalized multinomial LogisticRegression, and the same class probabilities (the
    # weights are defined up to a common shift of the class columns)
    X, t = iris_full([0, 1, 2])
    Z = np.hstack([X, np.ones((len(t), 1))])
    n = len(t)
    tr = TrainingSet(Z, t.astype(float), L=np.linalg.norm(Z, 2) ** 2 / (2 * n), task="multiclass",
                     loss="softmax", k=3)
    ref = LogisticRegression(C=np.inf, tol=1e-12, max_iter=100000).fit(X, t)
    W = run_solver(tr, "nesterov", 20000)
    P_ref = ref.predict_proba(X)
    S = Z @ W.reshape(5, 3)
    P = np.exp(S - S.max(1, keepdims=True))
    P /= P.sum(1, keepdims=True)
    loss_ref = -np.mean(np.log(P_ref[np.arange(n), t]))
    W_ref = np.vstack([ref.coef_.T, ref.intercept_]).ravel()  # same layout as W (5 rows x 3 classes)
    # bounds: D = W - W_ref without its common shift of the class columns (f is invariant to it);
    # convexity gives |f(W) - f(W_ref)| <= max(||grad f(W)||, ||grad f(W_ref)||) ||D||; the
    # Bregman divergence of f is the mean row KL(p_ref || p) (log-sum-exp), so the mean KL is
    # f(W) - f(W_ref) - <grad f(W_ref), D> and, by Pinsker's inequality, every row's
    # max_k |p_k - p_ref,k| <= ||p - p_ref||_1 / 2 <= sqrt(2 n mean KL) / 2
    D = (W - W_ref).reshape(5, 3)
    D = (D - D.mean(1, keepdims=True)).ravel()
    g, g_ref = tr.gradient(W), tr.gradient(W_ref)
    gap = tr.value(W) - tr.value(W_ref)
    assert abs(gap) <= max(np.linalg.norm(g), np.linalg.norm(g_ref)) * np.linalg.norm(D)
    mean_kl = gap - g_ref @ D
    assert np.abs(P - P_ref).max() <= np.sqrt(2 * n * max(mean_kl, 0.0)) / 2
    # regression guard (project's own measurement, not an outside fact): relative loss gap
    # 8.3e-7 and largest probability difference 2.4e-5 measured; the bounds above allow
    # about 3e-4 (relative) and 1.6e-3
    assert tr.value(W) == pytest.approx(loss_ref, rel=1e-5)
    assert np.allclose(P, P_ref, atol=1e-3)


@pytest.mark.parametrize("dataset", ["breast_cancer", "wine", "digits"])
def test_gd_descends_with_step_one_over_L(root, dataset):
    # descent lemma (Nesterov, Introductory Lectures on Convex Optimization, 2004, Thm 2.1.5):
    # with L a valid smoothness constant, a step 1/L never increases the objective
    out = stopwise.run([f"dataset={dataset}", "solver=gd", "budget.iterations=200"], root=root)
    df = pd.read_parquet(out.path)
    assert out.status == "completed"
    assert np.all(np.diff(df["train_loss"]) <= 1e-15)
    assert df["train_error"].iloc[-1] < df["train_error"].iloc[1] or df["train_error"].iloc[-1] == 0.0
    assert df["test_error"].iloc[-1] < 0.15  # regression guard (project's own measurement, not an outside fact)


def test_binary_softmax_run_equals_logistic_run(root):
    # with W_0 = 0, GD on the two-class softmax keeps W = [-v/2, v/2] and v follows logistic GD
    # (L_softmax = 2 L_logistic makes the steps match): every recorded column agrees
    args = ["dataset=iris_setosa_versicolor", "solver=nesterov", "budget.iterations=100"]
    a = pd.read_parquet(stopwise.run(args, root=root).path)
    b = pd.read_parquet(stopwise.run(args + ["dataset.loss=softmax"], root=root).path)
    assert (b["loss"] == "softmax").all()
    for c in ("train_loss", "train_error", "val_loss", "test_loss", "test_error", "svm_dist"):
        assert np.allclose(a[c], b[c], rtol=1e-10, atol=1e-14, equal_nan=True), c
    assert np.allclose(b["w_norm"], a["w_norm"] / np.sqrt(2), rtol=1e-10)


@pytest.mark.parametrize("name", CLASSIFICATION_SOLVERS)
def test_params_outside_their_constraints_are_rejected(name):
    import dataclasses

    sd = SOLVERS[name]
    for f in dataclasses.fields(sd.params):
        c = f.metadata.get("constraint")
        if c is None:
            continue
        with pytest.raises(ParamError) as e:
            make_params(sd.params, {f.name: c.outside()}, "solver")
        assert f"solver.{f.name}=" in str(e.value) and "\n" not in str(e.value)


@pytest.mark.parametrize("name,dataset", [("gd_normalized", "digits"), ("nesterov_normalized", "wine"),
                                          ("hinge_diagonal", "digits_0v1"), ("relu_net", "breast_cancer")])
def test_every_classification_solver_runs(root, name, dataset):
    out = stopwise.run([f"dataset={dataset}", f"solver={name}", "budget.iterations=30"], root=root)
    assert out.status == "completed", out.message
    df = pd.read_parquet(out.path)
    assert len(df) == 31 and df["test_error"].between(0, 1).all()



def test_error_curves_with_zero_test_error():
    # separable classification problems reach test error 0: the log-log error curves of the
    # report must still draw (a panel without positive errors gets a note instead)
    import pandas as pd

    from stopwise.report.figures import curves

    traces = pd.DataFrame({"run_id": ["a"] * 3 + ["b"] * 3, "passes": [0.0, 1.0, 2.0] * 2,
                           "test_error": [1.0, 0.0, 0.0, 1.0, 0.2, 0.1]})
    tuned = pd.DataFrame({"dataset": ["sep", "other"], "method": ["gd", "gd"], "seed": [0, 0], "run_id": ["a", "b"]})
    stops = pd.DataFrame({"run_id": ["a", "b"], "rule": ["holdout", "holdout"], "selected_passes": [1.0, 2.0],
                          "test_error": [0.0, 0.1], "reference": [False, False]})
    plot = curves(traces, tuned, stops, "holdout")
    assert plot.png[:8] == b"\x89PNG\r\n\x1a\n"

"""The two-layer ReLU network without biases: gradient, homogeneity, seeding, minibatches,
and the margin behaviour of Lyu and Li (ICLR 2020)."""
import numpy as np
import pandas as pd
import pytest
from scipy.optimize import check_grad
from sklearn.metrics import log_loss

import stopwise
from stopwise.problem.models import TwoLayerReLU
from stopwise.problem.problem import TrainingSet
from stopwise.running.record import make_recorder
from stopwise.solvers import get_solver

from helpers.classif_refs import iris_setosa_versicolor


def small(seed=0, n=30, d=4):
    rng = np.random.default_rng(seed)
    X = rng.standard_normal((n, d))
    y = np.where(rng.random(n) < 0.5, -1.0, 1.0)
    return X, y, rng


def test_gradient_matches_finite_differences():
    # reference: scipy.optimize.check_grad (random theta: no row sits on a ReLU kink)
    X, y, rng = small()
    model = TwoLayerReLU(4, 7)
    theta = rng.standard_normal(model.dim)
    f = lambda t: model.logistic_value_and_gradient(X, y, t)[0]  # noqa: E731
    g = lambda t: model.logistic_value_and_gradient(X, y, t)[1]  # noqa: E731
    assert check_grad(f, g, theta, epsilon=1e-7) < 1e-6
    # the loss is the mean logistic loss of the scores (sklearn.metrics.log_loss)
    s = model.scores(X, theta)
    assert f(theta) == pytest.approx(log_loss(y > 0, 1 / (1 + np.exp(-s))), rel=1e-10)


def test_homogeneous_of_degree_two():
    X, y, rng = small()
    model = TwoLayerReLU(4, 5)
    theta = rng.standard_normal(model.dim)
    for c in (0.1, 3.0):
        assert np.allclose(model.scores(X, c * theta), c * c * model.scores(X, theta), rtol=1e-13)
    score = model.scorer(X)
    assert np.array_equal(score(theta), model.scores(X, theta))


def test_recorder_uses_the_network_margin():
    X, y = iris_setosa_versicolor()
    from stopwise.problem.problem import Problem

    p = Problem(name="t", task="binary", X_train=X[::2], y_train=y[::2], X_val=X[1::4], y_val=y[1::4],
                X_test=X[3::4], y_test=y[3::4])
    model = TwoLayerReLU(5, 6)
    theta = np.random.default_rng(3).standard_normal(model.dim)
    rec = make_recorder(p, loss="logistic", model=model)
    rec.record(0, 0.0, 0.0, theta)
    cols = rec.result()
    s = model.scores(p.X_train, theta)
    assert cols["margin"][0] == pytest.approx(np.min(p.y_train * s) / (theta @ theta), rel=1e-12)
    st = model.scores(p.X_test, theta)
    assert cols["test_loss"][0] == pytest.approx(log_loss(p.y_test > 0, 1 / (1 + np.exp(-st))), rel=1e-10)
    assert cols["test_error"][0] == pytest.approx(np.mean(p.y_test * st <= 0))
    assert np.isnan(cols["svm_dist"][0]) and "separable" not in rec.info


def logistic_set(X, y):
    return TrainingSet(X, y, L=np.linalg.norm(X, 2) ** 2 / (4 * len(y)), task="binary", loss="logistic")


def test_smoothed_margin_increases_after_separation():
    # Lyu and Li (ICLR 2020), Theorem 4.1 (gradient flow; Appendix E for small-step GD): once
    # the summed loss sum_i log(1 + exp(-q_i)) < log 2, the smoothed normalized margin
    # log(1 / (exp(sum_i l_i) - 1)) / ||theta||^2 never decreases, and it lower-bounds the
    # normalized margin min_i q_i / ||theta||^2
    X, y = iris_setosa_versicolor()
    tr = logistic_set(X, y)
    sd = get_solver("relu_net")
    p = sd.params(width=16, step_scale=0.5)
    st = sd.init(tr, p, np.random.default_rng(0))
    model = TwoLayerReLU(5, 16)
    smoothed = []
    for _ in range(4000):
        st = sd.step(tr, p, st)
        q = y * model.scores(X, st.w)
        total = np.logaddexp(0, -q).sum()
        if total < np.log(2):
            rho2 = st.w @ st.w
            smoothed.append(np.log(1 / np.expm1(total)) / rho2)
            assert smoothed[-1] <= q.min() / rho2
    assert len(smoothed) > 3000
    assert np.all(np.diff(smoothed) >= -1e-12)
    assert smoothed[-1] > smoothed[0]


def test_seeded_and_minibatches(root):
    X, y = iris_setosa_versicolor()
    tr = logistic_set(X, y)
    sd = get_solver("relu_net")
    full = sd.params(width=8, batch=0)
    big = sd.params(width=8, batch=1000)
    a = sd.init(tr, full, np.random.default_rng(5))
    b = sd.init(tr, big, np.random.default_rng(5))
    assert np.array_equal(a.w, b.w)
    for _ in range(5):
        a, b = sd.step(tr, full, a), sd.step(tr, big, b)
    assert np.array_equal(a.w, b.w) and a.passes == b.passes == 5.0  # batch >= n is full batch
    # minibatches of 32 over 100 rows: blocks of a fresh permutation each epoch
    mb = sd.params(width=8, batch=32)
    s = sd.init(tr, mb, np.random.default_rng(5))
    assert sorted(s.perm) == list(range(100))
    passes = []
    for _ in range(4):
        s = sd.step(tr, mb, s)
        passes.append(s.passes)
    assert np.allclose(passes, [0.32, 0.64, 0.96, 1.0]) and s.epoch == 1 and s.pos == 0
    # same seed, same trace; another seed, another initialization
    args = ["dataset=iris_setosa_versicolor", "solver=relu_net", "solver.batch=16", "budget.iterations=20"]
    r1 = pd.read_parquet(stopwise.run(args, root=root).path)
    r2 = pd.read_parquet(stopwise.run(args, root=root / "again").path)
    r3 = pd.read_parquet(stopwise.run(args + ["seed=1"], root=root).path)
    assert r1.drop(columns="seconds").equals(r2.drop(columns="seconds"))
    assert r1["train_loss"].iloc[0] != r3["train_loss"].iloc[0]
    assert r1["margin"].iloc[-1] > r1["margin"].iloc[0]

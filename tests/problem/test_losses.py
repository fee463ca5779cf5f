"""Losses checked against SciPy finite differences and scikit-learn's metrics."""
import numpy as np
import pytest
from scipy.optimize import approx_fprime, check_grad
from scipy.special import logsumexp, softmax
from sklearn.metrics import accuracy_score, hinge_loss, log_loss, zero_one_loss

from stopwise.problem import losses
from stopwise.problem.losses import (
    LossError,
    check_loss,
    errors_from_scores,
    logistic_log_gradient,
    resolve_loss,
    softmax_log_gradient,
    value_from_scores,
)
from stopwise.problem.problem import TrainingSet


def data(n=40, d=5, k=None, seed=0):
    rng = np.random.default_rng(seed)
    X = rng.standard_normal((n, d))
    if k is None:
        y = np.where(rng.random(n) < 0.5, -1.0, 1.0)
    else:
        y = rng.integers(0, k, n).astype(float)
    return X, y, rng


@pytest.mark.parametrize("name,k", [("logistic", None), ("squares", None), ("softmax", 3), ("softmax", 5)])
def test_gradient_matches_finite_differences(name, k):
    # reference: scipy.optimize.check_grad (forward differences)
    X, y, rng = data(k=k)
    kk = k or 1
    loss = losses.get_loss(name)
    w = 0.5 * rng.standard_normal(X.shape[1] * kk)
    err = check_grad(lambda v: loss.value(X, y, v, kk), lambda v: loss.gradient(X, y, v, kk), w, epsilon=1e-7)
    assert err < 1e-5 * max(1.0, np.linalg.norm(loss.gradient(X, y, w, kk)))


def test_hinge_subgradient():
    # away from the kinks the subgradient is the gradient (scipy approx_fprime), and at any
    # point it satisfies the subgradient inequality f(v) >= f(w) + <g, v - w> (convexity)
    X, y, rng = data()
    w = rng.standard_normal(5)
    g = losses.hinge_gradient(X, y, w)
    fd = approx_fprime(w, lambda v: losses.hinge_value(X, y, v), 1e-8)
    assert np.allclose(g, fd, atol=1e-6)
    f = losses.hinge_value(X, y, w)
    for _ in range(50):
        v = w + rng.standard_normal(5)
        assert losses.hinge_value(X, y, v) >= f + g @ (v - w) - 1e-12


def test_values_match_sklearn_metrics():
    # references: sklearn.metrics.log_loss, hinge_loss, zero_one_loss, accuracy_score
    X, y, rng = data(n=60)
    w = rng.standard_normal(5)
    s = X @ w
    p1 = 1.0 / (1.0 + np.exp(-s))
    assert losses.logistic_value(X, y, w) == pytest.approx(log_loss(y > 0, p1), rel=1e-10)
    assert losses.hinge_value(X, y, w) == pytest.approx(hinge_loss(y, s), rel=1e-12)
    assert errors_from_scores(s, y) == pytest.approx(zero_one_loss(y, np.sign(s)))
    Xm, ym, rng = data(n=60, k=4, seed=1)
    W = rng.standard_normal(5 * 4)
    S = Xm @ W.reshape(5, 4)
    assert losses.softmax_value(Xm, ym, W, 4) == pytest.approx(log_loss(ym, softmax(S, axis=1), labels=range(4)),
                                                               rel=1e-10)
    assert errors_from_scores(S, ym) == pytest.approx(1 - accuracy_score(ym, S.argmax(axis=1)))


def test_ties_count_as_errors():
    # at w = 0 every margin is 0: every row is misclassified, binary and multiclass alike
    X, y, _ = data()
    assert errors_from_scores(X @ np.zeros(5), y) == 1.0
    Xm, ym, _ = data(k=3)
    assert errors_from_scores(np.zeros((40, 3)), ym) == 1.0


def test_binary_softmax_equals_logistic():
    # W = [-w/2, w/2] gives softmax scores differing by <w, x>: the softmax loss of class
    # indices (y > 0) is the logistic loss, and the gradient of W maps to the logistic one
    X, y, rng = data()
    w = rng.standard_normal(5)
    W = np.column_stack([-w / 2, w / 2]).ravel()
    assert losses.softmax_value(X, y, W, 2) == pytest.approx(losses.logistic_value(X, y, w), rel=1e-12)
    G = losses.softmax_gradient(X, y, W, 2).reshape(5, 2)
    assert np.allclose(G[:, 1] - G[:, 0], 2 * losses.logistic_gradient(X, y, w), atol=1e-14)
    assert np.allclose(G[:, 1], -G[:, 0], atol=1e-14)


def test_smoothness_constants_bound_the_hessian():
    # L = ||X||^2/(4n) (logistic) and ||X||^2/(2n) (softmax, K=2) are attained at w = 0 and
    # bound the Hessian elsewhere; Hessian from finite differences of the gradient (SciPy)
    X, y, rng = data()
    n, d = X.shape
    nx2 = np.linalg.norm(X, 2) ** 2

    def hess_max(grad, w):
        H = np.array([approx_fprime(w, lambda v, j=j: grad(v)[j], 1e-6) for j in range(w.size)])
        return np.linalg.eigvalsh((H + H.T) / 2).max()

    lg = lambda v: losses.logistic_gradient(X, y, v)  # noqa: E731
    assert hess_max(lg, np.zeros(d)) == pytest.approx(nx2 / (4 * n), rel=1e-4)
    assert hess_max(lg, rng.standard_normal(d)) <= nx2 / (4 * n) * (1 + 1e-4)
    sg = lambda v: losses.softmax_gradient(X, y, v, 2)  # noqa: E731
    assert hess_max(sg, np.zeros(2 * d)) == pytest.approx(nx2 / (2 * n), rel=1e-4)
    Xm, ym, _ = data(k=4)
    sg4 = lambda v: losses.softmax_gradient(Xm, ym, v, 4)  # noqa: E731
    assert hess_max(sg4, rng.standard_normal(4 * d)) <= np.linalg.norm(Xm, 2) ** 2 / (2 * n)


@pytest.mark.parametrize("name,k", [("logistic", 1), ("softmax", 3)])
def test_log_gradient_is_gradient_of_log_loss(name, k):
    # grad log f = grad f / f, checked with scipy.optimize.check_grad on log f
    X, y, rng = data(k=None if name == "logistic" else k)
    loss = losses.get_loss(name)
    w = rng.standard_normal(X.shape[1] * k)
    logf, g = loss.log_gradient(X, y, w, k)
    assert logf == pytest.approx(np.log(loss.value(X, y, w, k)), rel=1e-12)
    assert np.allclose(g, loss.gradient(X, y, w, k) / loss.value(X, y, w, k), rtol=1e-10, atol=1e-14)
    err = check_grad(lambda v: np.log(loss.value(X, y, v, k)), lambda v: loss.log_gradient(X, y, v, k)[1], w,
                     epsilon=1e-7)
    assert err < 1e-5


def test_log_gradient_survives_underflow():
    # For huge margins q the logistic loss and sigma(-q) both equal exp(-q) to relative
    # accuracy exp(-q), so grad log f -> -sum_i y_i x_i softmax(-q)_i: an exact limit computed
    # here with scipy.special.softmax, where f itself underflows to 0.
    X, y, rng = data()
    w = rng.standard_normal(5)
    sep = y * np.sign(X @ w)
    X = X * sep[:, None]  # flip rows so that w separates them
    c0 = 40.0 / np.min(y * (X @ w))  # every margin >= 40: exp(-q) approximations exact to 1e-17
    for c in (c0, 1e3 * c0):
        q = y * (X @ (c * w))
        limit = -(X.T @ (y * softmax(-q)))
        logf, g = logistic_log_gradient(X, y, c * w)
        assert np.allclose(g, limit, rtol=1e-9, atol=1e-300)
        assert logf == pytest.approx(logsumexp(-q) - np.log(len(q)), rel=1e-12)
    c = 1e3 * c0
    assert losses.logistic_value(X, y, c * w) == 0.0  # the plain loss has underflowed
    # softmax: K = 2 with W = [-w/2, w/2] is the logistic case
    W = np.column_stack([-c / 2 * w, c / 2 * w]).ravel()
    _, G = softmax_log_gradient(X, y, W, 2)
    G = G.reshape(5, 2)
    _, g = logistic_log_gradient(X, y, c * w)
    assert np.allclose(G[:, 1], g, rtol=1e-9) and np.allclose(G[:, 0], -g, rtol=1e-9)


def test_value_from_scores_matches_value():
    X, y, rng = data(k=3)
    W = rng.standard_normal(15)
    assert value_from_scores("softmax", X @ W.reshape(5, 3), y) == losses.softmax_value(X, y, W, 3)


def test_training_set_dispatch_and_bad_losses():
    X, y, rng = data()
    w = rng.standard_normal(5)
    tr = TrainingSet(X, y, L=1.0, task="binary", loss="logistic")
    assert np.array_equal(tr.gradient(w), losses.logistic_gradient(X, y, w))
    assert tr.value(w) == losses.logistic_value(X, y, w)
    assert check_loss("multiclass", None) == "softmax" and check_loss("binary", None) == "logistic"
    for task, loss in (("regression", "logistic"), ("multiclass", "hinge"), ("binary", "cubic")):
        with pytest.raises(LossError) as e:
            check_loss(task, loss)
        assert "\n" not in str(e.value) and "valid:" in str(e.value)
    with pytest.raises(LossError, match="conflicts"):
        resolve_loss("binary", "logistic", "hinge")
    assert resolve_loss("binary", None, "hinge") == "hinge"

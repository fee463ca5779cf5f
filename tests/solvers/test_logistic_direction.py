"""Gradient descent on the logistic loss over separable data converges in direction to the
hard-margin SVM, slowly (Soudry, Hoffer, Nacson, Gunasekar, Srebro, JMLR 19, 2018); loss-
normalized steps are much faster (Nacson et al., AISTATS 2019; Ji and Telgarsky, ALT 2021)."""
import math

import numpy as np
import pandas as pd
import pytest

import stopwise
from stopwise.problem.margins import normalized_margin
from stopwise.problem.problem import TrainingSet
from stopwise.solvers import get_solver

from helpers.classif_refs import iris_setosa_versicolor, separable_gaussian, slsqp_hard_margin, svc_hard_margin


def logistic_set(X, y):
    n = X.shape[0]
    return TrainingSet(X, y, L=np.linalg.norm(X, 2) ** 2 / (4 * n), task="binary", loss="logistic")


def checkpoints(train, solver, checks, **params):
    sd = get_solver(solver)
    p = sd.params(**params)
    st = sd.init(train, p, np.random.default_rng(0))
    out = {}
    for t in range(1, max(checks) + 1):
        st = sd.step(train, p, st)
        if t in checks:
            out[t] = st.w.copy()
    return out


def dist(w, u):
    return float(np.linalg.norm(w / np.linalg.norm(w) - u))


def soudry_checks(X, y, top):
    """Iterates of GD at t = 10^k, with step 1/||X||^2 on the summed loss (step_scale 1/4 on
    the mean loss), and the SVC(kernel="linear", C=1e6) hard-margin solution."""
    w_svm = svc_hard_margin(X, y)
    ts = [10 ** k for k in range(1, top + 1)]
    ws = checkpoints(logistic_set(X, y), "gd", set(ts), step_scale=0.25)
    return w_svm, ts, ws


def test_iris_direction_approaches_svm():
    # Soudry, Hoffer, Nacson, Gunasekar, Srebro, JMLR 2018, Thm 3: the distance to the SVM
    # direction falls like 1/log t. The level of distance x log t (2.0..2.5) is a regression
    # guard (this iteration's own value, not a published one); the long run is slow.
    Z, y = iris_setosa_versicolor()
    w_svm, ts, ws = soudry_checks(Z, y, 4)
    u = w_svm / np.linalg.norm(w_svm)
    d = [dist(ws[t], u) for t in ts]
    assert all(a > b for a, b in zip(d, d[1:]))
    prod = [di * math.log(t) for di, t in zip(d, ts)]
    assert all(a < b for a, b in zip(prod, prod[1:]))  # still rising towards its level at 1e4
    # regression guard (project's own measurement, not an outside fact)
    assert 2.0 < prod[-1] < 2.5
    # ||w_t|| grows like log t: w_t = w_svm log t + rho_t with rho_t bounded (Soudry et al.
    # Thm 3), so the growth per decade rises towards ||w_svm|| ln 10 and never beyond
    norms = [np.linalg.norm(ws[t]) for t in ts]
    slope = np.diff(norms) / (np.linalg.norm(w_svm) * math.log(10))
    # the slope's limit 1 is Soudry et al. Thm 3; the band 0.3..1.0 for the decades up to 1e4 is a
    # regression guard (project's own measurement, not an outside fact): 0.56, 0.64, 0.72 measured
    assert all(0.3 < s < 1.0 for s in slope) and all(a < b for a, b in zip(slope, slope[1:]))
    rho = [np.linalg.norm(ws[t] - w_svm * math.log(t)) for t in ts]
    steps = np.diff(rho)
    assert all(a > b for a, b in zip(steps[1:], steps[2:]))  # increments of rho shrink


@pytest.mark.slow
def test_iris_direction_levels_off():
    # Soudry et al. 2018, Thm 3: distance x log t stays bounded (rho_t converges). The level
    # 2.2..2.5 and the 0.05 flatness are a regression guard (this iteration's own value).
    Z, y = iris_setosa_versicolor()
    w_svm, ts, ws = soudry_checks(Z, y, 6)
    u = w_svm / np.linalg.norm(w_svm)
    prod = {t: dist(ws[t], u) * math.log(t) for t in ts}
    # regression guard (project's own measurement, not an outside fact)
    for t in (10**4, 10**5, 10**6):
        assert 2.2 < prod[t] < 2.5
    assert abs(prod[10**6] - prod[10**5]) < 0.05
    rho = [np.linalg.norm(ws[t] - w_svm * math.log(t)) for t in (10**4, 10**5, 10**6)]
    assert rho[2] - rho[1] < rho[1] - rho[0]


def test_generated_problem_direction():
    # a generated separable problem: distance decreases, distance x log t stays bounded
    X, y = separable_gaussian()
    w_svm, ts, ws = soudry_checks(X, y, 4)
    u = w_svm / np.linalg.norm(w_svm)
    d = [dist(ws[t], u) for t in ts[1:]]
    assert all(a > b for a, b in zip(d, d[1:]))
    prod = [di * math.log(t) for di, t in zip(d, ts[1:])]
    # regression guard (project's own measurement, not an outside fact): bounded (Soudry et al. 2018, Thm 3), the levels measured here
    assert max(prod) < 0.7 and max(prod) - min(prod) < 0.1
    norms = [np.linalg.norm(ws[t]) for t in ts]
    slope = np.diff(norms) / (np.linalg.norm(w_svm) * math.log(10))
    # limit 1 (Soudry et al. Thm 3); the band 0.3..1.0 is a regression guard (project's own
    # measurement, not an outside fact): 0.38, 0.58, 0.76 measured
    assert all(0.3 < s < 1.0 for s in slope)


@pytest.mark.parametrize("make", [iris_setosa_versicolor, separable_gaussian])
def test_normalized_steps_are_faster(make):
    # Nacson et al. 2019 / Ji and Telgarsky 2021: steps divided by the loss converge in
    # direction far faster than fixed steps (rate ~1/t against 1/log t); momentum on them
    # faster still (Ji, Srebro, Telgarsky 2021). Reference direction and margin: SciPy SLSQP.
    X, y = make()
    w_qp = slsqp_hard_margin(X, y)
    u, gamma = w_qp / np.linalg.norm(w_qp), 1 / np.linalg.norm(w_qp)
    tr = logistic_set(X, y)
    ts = {1000, 10**4}
    fixed = checkpoints(tr, "gd", ts, step_scale=1.0)
    norm_loss = checkpoints(tr, "gd_normalized", ts, normalize="loss")
    norm_grad = checkpoints(tr, "gd_normalized", ts, normalize="gradient")
    # the rates: a decade of iterations divides the distance by about 10 with normalized
    # steps, and by far less than 2 with a fixed step
    # derived from the rates: 1/log t gives a ratio log(1e4)/log(1e3) = 4/3 < 2 per decade,
    # 1/t gives 10 > 5
    assert dist(fixed[10**4], u) > dist(fixed[1000], u) / 2
    for run in (norm_loss, norm_grad):
        assert dist(run[10**4], u) < dist(run[1000], u) / 5
        assert dist(run[10**4], u) < dist(fixed[10**4], u) / 5
    nest = checkpoints(tr, "nesterov_normalized", {1000}, normalize="loss")[1000]
    assert dist(nest, u) < 1e-3
    fixed, norm_loss = fixed[10**4], norm_loss[10**4]
    # regression guard (project's own measurement, not an outside fact): the margin gaps 5e-3, 5e-4 and 1e-2 (the cited papers give rates, not these values)
    assert gamma - normalized_margin(X, y, norm_loss) < 5e-3
    assert abs(gamma - normalized_margin(X, y, nest)) < 5e-4
    assert gamma - normalized_margin(X, y, fixed) > 1e-2
    # momentum drives the loss below what float64 holds; the log-domain steps stay exact
    late = checkpoints(tr, "nesterov_normalized", {3000}, normalize="loss")[3000]
    assert tr.value(late) == 0.0 and dist(late, u) < dist(nest, u)


def test_loss_normalized_step_descends_log_loss():
    # normalize = loss is gradient descent on log f, which is R^2-smooth (R = max_i ||x_i||,
    # since sigma'(q) <= log(1 + e^-q)); with step 1/R^2 the descent lemma (Nesterov 2004,
    # Thm 2.1.5) gives log f(w_{t+1}) <= log f(w_t) - ||grad log f||^2 / (2 R^2)
    from stopwise.problem.losses import logistic_log_gradient

    X, y = separable_gaussian()
    tr = logistic_set(X, y)
    R2 = float(np.max(np.sum(X * X, axis=1)))
    sd = get_solver("gd_normalized")
    p = sd.params(normalize="loss")
    st = sd.init(tr, p, None)
    for _ in range(2000):
        logf, g = logistic_log_gradient(X, y, st.w)
        nxt = sd.step(tr, p, st)
        assert np.allclose(nxt.w, st.w - g / R2, rtol=1e-12, atol=1e-12)
        assert logistic_log_gradient(X, y, nxt.w)[0] <= logf - (g @ g) / (2 * R2) + 1e-9 * abs(logf)
        st = nxt


def test_schedule_special_cases():
    X, y = iris_setosa_versicolor()
    tr = logistic_set(X, y)
    # normalize = none, power = 0 is plain gradient descent, bit for bit
    a = checkpoints(tr, "gd", {30}, step_scale=0.7)[30]
    b = checkpoints(tr, "gd_normalized", {30}, step_scale=0.7, normalize="none", power=0.0)[30]
    assert np.array_equal(a, b)
    # normalize = loss: w_{t+1} = w_t - (s/R^2) (t+1)^p grad f / f, written out in plain numpy
    w = np.zeros(5)
    eta = 0.5 / np.max(np.sum(X * X, axis=1))
    for t in range(40):
        q = y * (X @ w)
        f = np.mean(np.log1p(np.exp(-q)))
        g = -(X.T @ (y / (1 + np.exp(q)))) / len(y)
        w = w - eta * (t + 1.0) ** -0.5 * g / f
    c = checkpoints(tr, "gd_normalized", {40}, step_scale=0.5, normalize="loss", power=-0.5)[40]
    assert np.allclose(c, w, rtol=1e-10)
    # increasing steps: normalize = none, power = p scales the gradient step by (t+1)^p
    w = np.zeros(5)
    for t in range(20):
        w = w - 0.3 / tr.L * (t + 1.0) ** 0.5 * tr.gradient(w)
    d = checkpoints(tr, "gd_normalized", {20}, step_scale=0.3, normalize="none", power=0.5)[20]
    assert np.allclose(d, w, rtol=1e-12)


def test_recorded_direction_through_the_runner(root):
    out = stopwise.run(["dataset=iris_setosa_versicolor", "solver=gd", "budget.iterations=3000",
                        "record.every=100"], root=root)
    df = pd.read_parquet(out.path)
    p = stopwise.load_problem(["dataset=iris_setosa_versicolor"])
    w_qp = slsqp_hard_margin(p.X_train, p.y_train)
    d = df["svm_dist"].to_numpy()[1:]
    assert np.all(np.diff(d) < 0) and d[-1] < d[0]
    # the recorded margins never exceed the largest one, 1/||w_svm|| (SLSQP)
    assert np.nanmax(df["margin"]) < 1 / np.linalg.norm(w_qp)
    assert df["train_error"].iloc[-1] == 0.0

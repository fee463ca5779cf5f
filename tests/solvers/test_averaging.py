"""The iterate-averaging wrapper: its averages equal averages of separately stored iterates
(numpy means over the stored base trajectory), for SGD and for any other solver."""
import math

import numpy as np
import pytest

from stopwise.data import build_problem
from stopwise.running.runner import execute
from stopwise.solvers import get_solver
from stopwise.solvers.averaging import AveragingError, AveragingParams, averaged, tail_start
from stopwise.core.params import make_params
from stopwise.config.compose import spec_from_overrides


def _problem(name):
    spec = spec_from_overrides([f"dataset={name}"])
    return build_problem(spec.dataset, spec.split, spec.seed)


def _trajectory(defn, train, values, steps, budget=None):
    p = make_params(defn.params, values, "solver")
    st = defn.start(train, p, np.random.default_rng(5), budget or {"iterations": steps, "passes": None})
    out = [st]
    for _ in range(steps):
        st = defn.step(train, p, st)
        out.append(st)
    return out


SGD_BASE = {"batch": 4.0, "sampling": "epochs", "step_scale": 0.5, "schedule": "sqrt"}


def test_full_tail_and_ema_equal_averages_of_the_stored_iterates():
    prob = _problem("wellposed")
    sgd = get_solver("sgd")
    steps = 120
    plain = _trajectory(sgd, prob.training, dict(SGD_BASE, average="none"), steps)
    W = np.stack([s.w for s in plain])  # W[t] = base iterate w_t, stored separately

    full = _trajectory(sgd, prob.training, dict(SGD_BASE, average="full"), steps)
    for t in range(1, steps + 1):
        np.testing.assert_allclose(full[t].w, W[1:t + 1].mean(axis=0), rtol=1e-12, atol=1e-14)
        np.testing.assert_array_equal(full[t].inner.w, W[t])  # averaging never moves the base iterate
        assert full[t].passes == plain[t].passes and full[t].iteration == t

    tail = _trajectory(sgd, prob.training, dict(SGD_BASE, average="tail", tail=0.25), steps)
    s = steps - math.ceil(0.25 * steps) + 1
    assert tail[-1].start == s == 91
    for t in range(1, steps + 1):
        ref = W[t] if t < s else W[s:t + 1].mean(axis=0)
        np.testing.assert_allclose(tail[t].w, ref, rtol=1e-12, atol=1e-14)

    beta = 0.9
    ema = _trajectory(sgd, prob.training, dict(SGD_BASE, average="ema", ema_decay=beta), steps)
    for t in range(1, steps + 1):
        # closed form of the recursion: beta^t w_0 + sum_{s=1}^t (1 - beta) beta^(t-s) w_s
        wts = np.array([beta**t] + [(1 - beta) * beta ** (t - r) for r in range(1, t + 1)])
        np.testing.assert_allclose(ema[t].w, wts @ W[:t + 1], rtol=1e-11, atol=1e-13)


def test_tail_horizon_follows_a_pass_budget():
    """With a pass budget ending the run first, the horizon is the step that reaches it:
    b = 24 of 240 rows, 5 passes -> T = 50 steps, last 40% -> iterates 31..50."""
    assert tail_start(0.4, 10**6, 5.0, 24 / 240) == 31
    assert tail_start(0.4, 40, 5.0, 24 / 240) == 25  # the iteration budget is shorter
    assert tail_start(1.0, 50, None, 0.1) == 1
    spec = spec_from_overrides(["dataset=wellposed", "solver=sgd", "solver.batch=24", "solver.average=tail",
                                "solver.tail=0.4", "budget.iterations=1000000", "budget.passes=5"])
    tr = execute(spec)
    assert tr.columns["iteration"][-1] == 50


def test_the_wrapper_applies_to_any_solver():
    """Wrapping gradient descent (not stochastic): the full average equals the numpy mean
    of the stored gd iterates; the derived params class carries both sets of fields."""
    gd = get_solver("gd")
    wrapped = averaged(gd, name="gd_avg")
    assert issubclass(wrapped.params, AveragingParams) and issubclass(wrapped.params, gd.params)
    prob = _problem("diabetes")
    base = _trajectory(gd, prob.training, {"step_scale": 1.0}, 30)
    avg = _trajectory(wrapped, prob.training, {"step_scale": 1.0, "average": "full"}, 30)
    W = np.stack([s.w for s in base])
    np.testing.assert_allclose(avg[-1].w, W[1:].mean(axis=0), rtol=1e-12)
    none = _trajectory(wrapped, prob.training, {"step_scale": 1.0, "average": "none"}, 30)
    assert type(none[-1]) is type(base[-1])  # no averaging: the base solver's own states
    np.testing.assert_array_equal(none[-1].w, base[-1].w)


def test_tail_averaging_without_a_budget_is_a_clear_error():
    sgd = get_solver("sgd")
    prob = _problem("diabetes")
    p = make_params(sgd.params, {"average": "tail"}, "solver")
    with pytest.raises(AveragingError, match="tail averaging needs the run's budget"):
        sgd.init(prob.training, p, np.random.default_rng(0))

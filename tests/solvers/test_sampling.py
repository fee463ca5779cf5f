"""docs/methods.md, "How a run's random numbers are drawn", is precise enough to reproduce a
run outside stopwise: SGD's default sampling and Kaczmarz's row stream, reimplemented here
with numpy alone from that text (stopwise gives only the problem's arrays and, for the
comparison, its own iterates)."""
from __future__ import annotations

import numpy as np
import pytest

import stopwise
from stopwise.config.compose import spec_from_overrides
from stopwise.running.runner import execute, run_rng
from stopwise.solvers import get_solver

RUN_STREAM = 0x5017E5  # as written in docs/methods.md


# ---------------------------------------------------------------- reimplementations (numpy only)

def documented_key(seed: int) -> int:
    rng = np.random.default_rng([seed, RUN_STREAM])
    return int(rng.integers(0, 2**63 - 1))


def sgd_default_rows(seed: int, n: int, steps: int) -> list[int]:
    key = documented_key(seed)
    rows: list[int] = []
    k = 0
    while len(rows) < steps:
        rows += np.random.default_rng([key, k]).permutation(n).tolist()
        k += 1
    return rows[:steps]


def sgd_textbook(X: np.ndarray, y: np.ndarray, rows: list[int]) -> list[np.ndarray]:
    """w_{t+1} = w_t - eta x_i (x_i^T w_t - y_i), eta = 1 / max_i ||x_i||^2."""
    eta = 1.0 / max(float(x @ x) for x in X)
    w = np.zeros(X.shape[1])
    out = [w]
    for i in rows:
        w = w - eta * (X[i] * (X[i] @ w - y[i]))
        out.append(w)
    return out


def sgd_in_the_projects_operation_order(X: np.ndarray, y: np.ndarray, rows: list[int]) -> list[np.ndarray]:
    """The same update with the floating-point operations in the order docs/methods.md gives."""
    eta = 1.0 / float(np.einsum("ij,ij->i", X, X).max())
    w = np.zeros(X.shape[1])
    out = [w]
    for i in rows:
        xb = X[[i]]
        r = xb @ w
        r -= y[[i]]
        g = xb.T @ r
        g /= 1
        w = w + g * (-eta)
        out.append(w)
    return out


def kaczmarz_documented(X: np.ndarray, y: np.ndarray, seed: int, steps: int) -> tuple[list[int], list[np.ndarray]]:
    n = X.shape[0]
    key = documented_key(seed)
    r = np.einsum("ij,ij->i", X, X)
    c = np.cumsum(r)
    cdf = c / c[-1]
    rows: list[int] = []
    k = 0
    while len(rows) < steps:
        u = np.random.default_rng([key, k]).random(n)
        rows += np.searchsorted(cdf, u, side="right").tolist()
        k += 1
    rows = rows[:steps]
    w = np.zeros(X.shape[1])
    out = [w]
    for i in rows:
        w = w + (y[i] - X[i] @ w) / r[i] * X[i]
        out.append(w)
    return rows, out


# ---------------------------------------------------------------- the project's own

def project_states(overrides: list[str], steps: int):
    spec = spec_from_overrides(overrides)
    prob = stopwise.load_problem(overrides)
    sd = get_solver(spec.solver)
    st = sd.start(prob.training, spec.params, run_rng(spec), spec.budget)
    states = [st]
    for _ in range(steps):
        st = sd.step(prob.training, spec.params, st)
        states.append(st)
    return spec, prob, states


@pytest.mark.parametrize("seed", [0, 3])
def test_sgd_default_sampling_reimplemented_with_numpy_alone_gives_the_projects_iterates(seed):
    steps = 700  # more than two passes over diabetes' 265 training rows
    overrides = ["dataset=diabetes", "solver=sgd", f"seed={seed}"]
    spec, prob, states = project_states(overrides, steps)
    X, y, n = prob.X_train, prob.y_train, prob.n_train
    rows = sgd_default_rows(seed, n, steps)
    # the rows: the project's state holds its current block (a permutation) and the position
    assert states[0].key == documented_key(seed)
    for st in states[1:]:
        want = np.random.default_rng([documented_key(seed), st.block_index]).permutation(n)
        assert np.array_equal(st.block, want)
    assert [int(st.block[st.pos - 1]) for st in states[1:]] == rows
    # the iterates: the textbook update to rounding (its products associate differently from the
    # project's 1-row matrix products), the documented operation order bit for bit
    mine = sgd_textbook(X, y, rows)
    scale = max(np.abs(w).max() for w in mine)
    assert max(np.abs(a.w - b).max() for a, b in zip(states, mine)) <= 1e-12 * scale
    exact = sgd_in_the_projects_operation_order(X, y, rows)
    assert all(np.array_equal(a.w, b) for a, b in zip(states, exact))
    # and the runner's recorded trace is that of these iterates
    tr = execute(spec_from_overrides(overrides + [f"budget.iterations={steps}", "record.every=50"])).columns
    for it, wn in zip(tr["iteration"], tr["w_norm"]):
        assert wn == pytest.approx(np.linalg.norm(exact[int(it)]), rel=1e-14)


def test_kaczmarz_rows_and_iterates_reimplemented_with_numpy_alone():
    steps = 1000
    overrides = ["dataset=wellposed", "solver=kaczmarz", "seed=2"]
    _, prob, states = project_states(overrides, steps)
    rows, mine = kaczmarz_documented(prob.X_train, prob.y_train, 2, steps)
    got = []
    for a, b in zip(states, states[1:]):
        got.append(int(b.block[b.pos - 1]))
    assert got == rows
    scale = max(np.abs(w).max() for w in mine)
    assert max(np.abs(a.w - b).max() for a, b in zip(states, mine)) <= 1e-12 * scale


def test_the_generator_depends_on_the_seed_only():
    a = run_rng(spec_from_overrides(["solver=sgd", "seed=5", "solver.step_scale=0.3"]))
    b = run_rng(spec_from_overrides(["solver=kaczmarz", "dataset=wellposed", "seed=5"]))
    assert a.integers(0, 2**63 - 1) == b.integers(0, 2**63 - 1) == documented_key(5)

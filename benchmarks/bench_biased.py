"""Cost per step of the biased solvers relative to gradient descent, measured in the same run.

Each solver takes the same number of steps on the same Gaussian least-squares problem; the
printed ratio is (seconds per step) / (seconds per gradient-descent step). All of them do
one product with X and one with X^T per step, so ratios near 1 mean the prox, the dual
bookkeeping and the state records cost little next to the data pass.

    python benchmarks/bench_biased.py
"""
from __future__ import annotations

import time

import numpy as np

from stopwise.problem.problem import TrainingSet
from stopwise.solvers import get_solver
from stopwise.core.params import make_params

CASES = [
    ("gd", {}),
    ("mirror_descent", {"lam": 1.0}),
    ("mirror_descent", {"lam": 1.0, "bias": "group_l1", "group_size": 5}),
    ("mirror_nesterov", {"lam": 1.0, "restart": "gradient"}),
    ("chambolle_pock", {"bias": "l1"}),
    ("chambolle_pock", {"bias": "tv"}),
]


def seconds_per_step(name: str, params: dict, train: TrainingSet, steps: int) -> float:
    sdef = get_solver(name)
    p = make_params(sdef.params, params, "solver")
    state = sdef.init(train, p, np.random.default_rng(0))
    t0 = time.perf_counter()
    for _ in range(steps):
        state = sdef.step(train, p, state)
    return (time.perf_counter() - t0) / steps


def main(rounds: int = 5) -> None:
    for n, d, steps in ((100, 400, 1000), (400, 2000, 100)):
        rng = np.random.default_rng(0)
        X = rng.standard_normal((n, d))
        y = X @ rng.standard_normal(d)
        train = TrainingSet(X, y, L=float(np.linalg.norm(X, 2)) ** 2 / n)
        best = [np.inf] * len(CASES)
        for _ in range(rounds):  # interleaved, best of rounds: the peer sees the same machine load
            for i, (name, params) in enumerate(CASES):
                best[i] = min(best[i], seconds_per_step(name, params, train, steps))
        print(f"n={n} d={d}: gradient descent {best[0] * 1e6:.1f} us per step (best of {rounds} interleaved rounds)")
        for (name, params), t in zip(CASES[1:], best[1:]):
            label = name + "".join(f" {k}={v}" for k, v in params.items())
            print(f"  {label:<58} {t / best[0]:5.2f} x gd")


if __name__ == "__main__":
    main()

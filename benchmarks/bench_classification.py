"""Cost of the classification paths, as ratios against a peer measured in the same run.

    step cost      logistic / softmax / hinge-diagonal / normalized / network steps against
                   one least-squares gradient-descent step on the same matrix
    record cost    one classification row of the recorder against one regression row

Run by hand: ``python benchmarks/bench_classification.py``. No assertions; prints ratios.
"""
from __future__ import annotations

import timeit

import numpy as np

from stopwise.problem.problem import Problem, TrainingSet
from stopwise.running.record import make_recorder
from stopwise.solvers import get_solver

N, D, K = 4000, 100, 5
REPEAT, NUMBER = 5, 200


def best(fn) -> float:
    return min(timeit.repeat(fn, repeat=REPEAT, number=NUMBER)) / NUMBER


def step_timer(train: TrainingSet, name: str, **params):
    sd = get_solver(name)
    p = sd.params(**params)
    st = sd.init(train, p, np.random.default_rng(0))
    for _ in range(3):
        st = sd.step(train, p, st)
    return lambda: sd.step(train, p, st)


def main() -> None:
    rng = np.random.default_rng(0)
    X = rng.standard_normal((N, D))
    w0 = rng.standard_normal(D)
    yb = np.sign(X @ w0 + 0.5 * rng.standard_normal(N))
    ym = rng.integers(0, K, N).astype(float)
    s2 = np.linalg.norm(X, 2) ** 2 / N
    sq = TrainingSet(X, X @ w0, L=s2, task="regression", loss="squares")
    lg = TrainingSet(X, yb, L=s2 / 4, task="binary", loss="logistic")
    hg = TrainingSet(X, yb, L=s2, task="binary", loss="hinge")
    sm = TrainingSet(X, ym, L=s2 / 2, task="multiclass", loss="softmax", k=K)

    peer = best(step_timer(sq, "gd"))
    rows = [
        ("gd, logistic", best(step_timer(lg, "gd"))),
        ("gd_normalized (loss), logistic", best(step_timer(lg, "gd_normalized"))),
        ("nesterov_normalized (loss), logistic", best(step_timer(lg, "nesterov_normalized"))),
        (f"gd, softmax K={K}", best(step_timer(sm, "gd"))),
        ("hinge_diagonal, dual_accelerated", best(step_timer(hg, "hinge_diagonal"))),
        ("hinge_diagonal, primal_dual", best(step_timer(hg, "hinge_diagonal", update="primal_dual", step_scale=0.9))),
        ("relu_net width 32, full batch", best(step_timer(lg, "relu_net", width=32))),
    ]
    print(f"step cost on a {N} x {D} matrix, relative to one least-squares gd step ({peer * 1e6:.0f} us)")
    for name, t in rows:
        print(f"  {name:<40} {t / peer:6.2f}x")

    tr, va, te = np.arange(0, N, 2), np.arange(1, N, 4), np.arange(3, N, 4)

    def problem(task, y):
        return Problem(name="bench", task=task, X_train=X[tr], y_train=y[tr], X_val=X[va], y_val=y[va],
                       X_test=X[te], y_test=y[te])

    reg = make_recorder(problem("regression", X @ w0), capacity=REPEAT * NUMBER + 10)
    peer_rec = best(lambda: reg.record(0, 0.0, 0.0, w0))
    pb = problem("binary", yb)
    cls = make_recorder(pb, capacity=REPEAT * NUMBER + 10)  # computes the hard-margin reference once, here
    pm = problem("multiclass", ym)
    Wm = rng.standard_normal(D * K)
    mc = make_recorder(pm, capacity=REPEAT * NUMBER + 10)
    print(f"record cost relative to one regression row ({peer_rec * 1e6:.0f} us)")
    print(f"  {'binary logistic row (separable: ' + str(cls.info.get('separable')) + ')':<40} "
          f"{best(lambda: cls.record(0, 0.0, 0.0, w0)) / peer_rec:6.2f}x")
    print(f"  {f'multiclass softmax row, K={K}':<40} {best(lambda: mc.record(0, 0.0, 0.0, Wm)) / peer_rec:6.2f}x")


if __name__ == "__main__":
    main()

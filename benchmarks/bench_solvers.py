"""Cost table: every registered regression solver's cost per data pass, as a ratio against
gradient descent measured in the same run on the same training set.

Each solver takes ``steps`` steps (enough for ``PASSES`` data passes: one step is one pass
for the full-gradient methods, ``1 / n`` of a pass for ``kaczmarz`` and a ``b / n`` of one
for ``sgd``) on one least-squares training set through the direct gradient path (two reads
of X per gradient), interleaved over rounds, best of the rounds. Set-up work done once per
run (``init``: a kernel matrix, the spectrum of the Hessian) is printed apart. Solvers that
refuse the training set (``SolverDef.check``) are listed with their one line.

    python benchmarks/bench_solvers.py [n d]      # default 2000 x 100
"""
from __future__ import annotations

import sys
import time
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).parent))
from _common import blas_threads, machine  # noqa: E402

from stopwise.core.errors import SpecError  # noqa: E402
from stopwise.core.params import make_params  # noqa: E402
from stopwise.problem.problem import TrainingSet  # noqa: E402
from stopwise.solvers import SOLVERS  # noqa: E402

PASSES = 20
ROUNDS = 7


def training(n: int, d: int, seed: int = 0) -> TrainingSet:
    rng = np.random.default_rng(seed)
    X = rng.standard_normal((n, d)) * np.arange(1, d + 1) ** -0.5
    y = X @ rng.standard_normal(d) + 0.1 * rng.standard_normal(n)
    return TrainingSet(X, y, L=float(np.linalg.norm(X, 2)) ** 2 / n)


def measure(name: str, train: TrainingSet) -> tuple[float, float, float]:
    """(seconds of init, seconds per step, data passes per step)."""
    sd = SOLVERS[name]
    p = make_params(sd.params, {}, "solver")
    t0 = time.perf_counter()
    st = sd.start(train, p, np.random.default_rng(0), {"iterations": 10**9, "passes": None})
    t_init = time.perf_counter() - t0
    st = sd.step(train, p, st)  # the first step: passes per step
    per = st.passes
    steps = max(1, int(round(PASSES / per))) if per > 0 else PASSES
    t0 = time.perf_counter()
    for _ in range(steps):
        st = sd.step(train, p, st)
    return t_init, (time.perf_counter() - t0) / steps, per


def main() -> None:
    n, d = (int(sys.argv[1]), int(sys.argv[2])) if len(sys.argv) > 2 else (2000, 100)
    blas_threads()
    print("machine:\n" + machine())
    train = training(n, d)
    names, refused = [], {}
    for name, sd in sorted(SOLVERS.items()):
        if "regression" not in sd.tasks:
            continue
        if sd.check is not None:
            try:
                sd.check(train, make_params(sd.params, {}, "solver"))
            except SpecError as e:
                refused[name] = str(e)
                continue
        names.append(name)
    best = {k: (np.inf, np.inf, 0.0) for k in names}
    for _ in range(ROUNDS):  # interleaved: every solver sees the same machine load
        for k in names:
            t_init, t_step, per = measure(k, train)
            old = best[k]
            best[k] = (min(old[0], t_init), min(old[1], t_step), per)
    gd_pass = best["gd"][1] / best["gd"][2]
    print(f"\n{n} x {d} least squares, direct gradient path, default params, best of {ROUNDS} interleaved rounds; "
          f"gradient descent {gd_pass * 1e6:.0f} us per data pass")
    print(f"{'solver':<22}{'passes/step':>12}{'us/step':>10}{'us/pass':>10}{'x gd/pass':>11}{'init ms':>9}")
    for k in names:
        t_init, t_step, per = best[k]
        t_pass = t_step / per if per > 0 else float("nan")
        print(f"{k:<22}{per:12.4g}{t_step * 1e6:10.1f}{t_pass * 1e6:10.0f}{t_pass / gd_pass:11.2f}{t_init * 1e3:9.1f}")
    for k, why in refused.items():
        print(f"{k:<22}refused: {why}")


if __name__ == "__main__":
    main()

"""Benchmark 2: full-batch step cost against the memory-bandwidth limit measured in the same run.

For an X of about 320 MB (far larger than every cache), the peer is the time to read X
once, measured three ways (a max reduction, a column sum, a BLAS matrix-vector product);
the fastest is the bandwidth limit. Each gradient path (and both variants of the compiled
one-pass kernel, and a BLAS loop over 1 MiB row blocks for comparison) and a whole
gradient-descent step through the solver are timed and reported as multiples of that one
read. Shapes: tall X (n > d, where the automatic choice is the Gram path; the fused path
is forced for comparison), a wide X (n < d, where the automatic choice is the fused
path), and short rows (d = 100 and 10), where the kernel variant matters most.

    .venv/bin/python benchmarks/bench_bandwidth.py
"""
from __future__ import annotations

import sys
import time
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).parent))
from _common import blas_threads, best_of, machine  # noqa: E402

from stopwise.running import fastpath, kernels  # noqa: E402
from stopwise.problem.problem import TrainingSet  # noqa: E402
from stopwise.solvers import get_solver  # noqa: E402
from stopwise.core.params import make_params  # noqa: E402


def one_shape(n: int, d: int, repeat: int) -> None:
    rng = np.random.default_rng(0)
    X = rng.standard_normal((n, d))
    y = rng.standard_normal(n)
    w = rng.standard_normal(d) / np.sqrt(d)
    v = np.ones(d)
    mb = X.nbytes / 2**20
    print(f"\nX: {n} x {d} float64 = {mb:.0f} MiB; automatic gradient path: "
          f"{fastpath.choose_gradient_path(n, d, X.nbytes)}")
    reads = {"max reduction X.max()": lambda: X.max(), "column sum X.sum(axis=0)": lambda: X.sum(axis=0),
             "BLAS product X @ v": lambda: X @ v}
    times = {k: best_of(f, repeat) for k, f in reads.items()}
    one_read = min(times.values())
    for k, t in times.items():
        print(f"  read X once, {k:26s} {t * 1e3:8.2f} ms  {X.nbytes / t / 1e9:6.1f} GB/s")
    print(f"  one read of X (fastest above)      {one_read * 1e3:8.2f} ms")

    direct = lambda: X.T @ (X @ w - y) / n  # noqa: E731
    fused = fastpath.FusedGradient(X, y)
    B = max(1, 2**20 // (8 * d))
    blocks = [(X[s:s + B], y[s:s + B]) for s in range(0, n, B)]

    def blas_blocks():  # the previous blocked path: two BLAS products per 1 MiB block
        g = np.zeros(d)
        for Xb, yb in blocks:
            g += Xb.T @ (Xb @ w - yb)
        return g / n
    t0 = time.perf_counter()
    gram = fastpath.GramGradient(X, y) if n > d else None
    t_gram_setup = time.perf_counter() - t0
    ref = direct()
    assert np.allclose(fused(w), ref, rtol=1e-10, atol=1e-12)
    rr, gg = np.empty(n), np.empty(d)
    rows = [("direct X^T (X w - y), BLAS", direct), (f"BLAS on 1 MiB row blocks ({B} rows)", blas_blocks),
            (f"fused, automatic variant ({fused.variant})", lambda: fused(w))]
    for kind in ("rows", "quads"):
        rows.append((f"  fused kernel, variant {kind}", lambda kind=kind: kernels.residual_gradient(X, w, y, rr, gg, kind)))
    if gram is not None:
        assert np.allclose(gram(w), ref, rtol=1e-9, atol=1e-10)
        rows.append(("Gram (G w - c)", lambda: gram(w)))
    gd = get_solver("gd")
    gp = make_params(gd.params, {"step_scale": 1.0}, "solver")
    L = 1.0  # the step size does not change the cost
    for name, plan in (("fused", fused), ("Gram", gram)):
        if plan is None:
            continue
        tr = fastpath.attach_plan(TrainingSet(X, y, L), plan)
        st = gd.init(tr, gp, None)
        holder = [st]

        def step(tr=tr, holder=holder):
            holder[0] = gd.step(tr, gp, holder[0])
        rows.append((f"gd step through the solver, {name}", step))
    # paired measurements: each repeat times one read of X and then every method, so that a
    # load change on a shared machine hits both sides of a ratio alike
    ratios = {name: [] for name, _ in rows}
    best = {name: float("inf") for name, _ in rows}
    for _ in range(repeat):
        read = min(best_of(f, 1) for f in reads.values())
        for name, fn in rows:
            t = best_of(fn, 1)
            best[name] = min(best[name], t)
            ratios[name].append(t / read)
    print(f"  {'gradient / step':40s} {'best ms':>8s} {'best / best read':>17s} {'median paired ratio':>20s}")
    for name, _ in rows:
        print(f"  {name:40s} {best[name] * 1e3:8.2f} {best[name] / one_read:17.3f} {np.median(ratios[name]):20.3f}")
    if gram is not None:
        print(f"  Gram set-up once per problem: {t_gram_setup * 1e3:.0f} ms = {t_gram_setup / one_read:.0f} reads of X "
              f"(paid back after {t_gram_setup / max(best_of(direct, 3) - best_of(lambda: gram(w), 3), 1e-12):.0f} "
              f"direct steps)")
    del X


def main() -> None:
    blas_threads()
    print("machine:\n" + machine())
    print("targets: fused step <= 1.5 x one read of X per data pass; Gram step far below")
    kernels.residual_gradient(np.ones((4, 2)), np.ones(2), np.ones(4), np.empty(4), np.empty(2))  # compile
    for n, d in ((100_000, 400), (16_000, 2_500), (2_500, 16_000), (400_000, 100), (4_000_000, 10)):
        one_shape(n, d, repeat=7)


if __name__ == "__main__":
    main()

"""Benchmark: a 100,000 x 50,000 CSR design at 0.1% density, end to end.

Targets (issue 19): gd and sgd each run in under 1 GiB peak memory, and one full-gradient
step costs at most 1.5 times one read of the design's nonzeros.

1. A random CSR matrix (seeded: 5,000,000 stored entries, standard normal values, about 50
   per row) and targets from a random truth plus noise are written to an svmlight file.
2. For each of gd and sgd, a child process runs ``stopwise.run`` on that file with
   ``dataset.params.design=sparse`` (the path of ``stopwise run`` and of a campaign's runs:
   the spec, the data check that builds the problem from the file and stores it in the
   problem cache, then the solver loop with its recorder) and reports its own peak resident
   memory (``resource.getrusage(RUSAGE_SELF).ru_maxrss``): each solver is measured alone,
   imports included.
3. In this process, the problem is built the same way and one full-gradient step of the
   solver (the plan ``auto`` picks, the compiled one-pass CSR kernel; and a whole ``gd``
   step through the solver) is timed against its peer measured in the same run: one read
   of the training rows' nonzeros (a compiled loop summing ``data[k] * v[indices[k]]``,
   which reads every value and column index once and gathers from a vector, as the
   gradient must). SciPy's two products ``X.T @ (X @ w - y)`` are shown for comparison,
   and so is a plain stream of the same values and indices without the gather (the
   memory's bandwidth limit), with the ratios to it.

    .venv/bin/python benchmarks/bench_sparse.py            # the full size
    BENCH_SPARSE_ROWS=20000 .venv/bin/python benchmarks/bench_sparse.py   # a quicker look
"""
from __future__ import annotations

import json
import os
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).parent))
from _common import best_of, blas_threads, machine  # noqa: E402

ROWS = int(os.environ.get("BENCH_SPARSE_ROWS", "100000"))
COLS = int(os.environ.get("BENCH_SPARSE_COLS", "50000"))
DENSITY = 0.001
GIB = 2**30
SOLVERS = {"gd": ["solver=gd", "budget.iterations=20"],
           "sgd": ["solver=sgd", "solver.batch=0.01", "budget.iterations=200", "record.every=20"]}


def overrides(path: Path) -> list[str]:
    return ["dataset=file", f"dataset.params.path={path}", "dataset.params.design=sparse",
            "dataset.params.task=regression", f"dataset.params.n_features={COLS}"]


def write_file(path: Path) -> int:
    import scipy.sparse as sp
    from sklearn.datasets import dump_svmlight_file

    rng = np.random.default_rng(19)
    X = sp.random(ROWS, COLS, density=DENSITY, format="csr", random_state=rng, data_rvs=rng.standard_normal)
    w = rng.standard_normal(COLS)
    y = X @ w + 0.5 * rng.standard_normal(ROWS)
    dump_svmlight_file(X, y, str(path), zero_based=False)
    return int(X.nnz)


def child(solver: str, path: str, root: str) -> None:
    import resource

    import stopwise

    t0 = time.perf_counter()
    out = stopwise.run(overrides(Path(path)) + SOLVERS[solver], root=root)
    took = time.perf_counter() - t0
    peak = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss * 1024  # kilobytes on Linux
    print(json.dumps({"status": out.status, "message": out.message, "iterations": out.iterations,
                      "seconds": took, "solver_seconds": out.seconds, "peak": peak}))


def measure_child(solver: str, path: Path, tmp: Path) -> dict:
    env = dict(os.environ, STOPWISE_CACHE=str(tmp / f"cache-{solver}"), STOPWISE_CACHE_MIN_SECONDS="0")
    res = subprocess.run([sys.executable, __file__, "--child", solver, str(path), str(tmp / f"results-{solver}")],
                         capture_output=True, text=True, env=env)
    if res.returncode != 0:
        raise SystemExit(f"child {solver} failed:\n{res.stderr}")
    return json.loads(res.stdout.strip().splitlines()[-1])


def step_cost(path: Path) -> None:
    from numba import njit

    from stopwise.config.compose import spec_from_overrides
    from stopwise.data import build_problem
    from stopwise.running import fastpath
    from stopwise.solvers import get_solver

    @njit(nogil=True, fastmath={"reassoc", "contract"}, boundscheck=False)
    def read_nonzeros(data, indices, v):  # the peer: every stored value and index read once
        s = 0.0
        for k in range(data.shape[0]):
            s += data[k] * v[indices[k]]
        return s

    @njit(nogil=True, fastmath={"reassoc", "contract"}, boundscheck=False)
    def stream_nonzeros(data, indices):  # the memory's limit: the same bytes, no gather
        s = 0.0
        t = 0
        for k in range(data.shape[0]):
            s += data[k]
            t += indices[k]
        return s + t

    spec = spec_from_overrides(overrides(path) + SOLVERS["gd"])
    problem = build_problem(spec.dataset, spec.split, spec.seed)
    X, y = problem.X_train, problem.y_train
    train, _ = fastpath.prepare(problem, problem.training_set(None), "auto")
    n, d = X.shape
    nbytes = X.data.nbytes + X.indices.nbytes + X.indptr.nbytes
    print(f"\ntraining rows: {n} x {d} CSR, {X.nnz} stored entries, {nbytes / 2**20:.0f} MiB "
          f"(values, column indices, row pointers); gradient path: {train.path}")
    rng = np.random.default_rng(0)
    w = rng.standard_normal(d) / np.sqrt(d)
    v = np.ones(d)
    read_nonzeros(X.data, X.indices, v)  # compile
    repeat = 15
    stream_nonzeros(X.data, X.indices)  # compile
    one_read = best_of(lambda: read_nonzeros(X.data, X.indices, v), repeat)
    stream = best_of(lambda: stream_nonzeros(X.data, X.indices), repeat)
    print(f"  one read of the nonzeros (peer)        {one_read * 1e3:8.2f} ms  {nbytes / one_read / 1e9:5.1f} GB/s")
    print(f"  the same bytes streamed, no gather     {stream * 1e3:8.2f} ms  {nbytes / stream / 1e9:5.1f} GB/s "
          f"(no gather: the memory's limit once the design outgrows the caches; the peer is {one_read / stream:4.2f}x it)")
    ref = X.T @ (X @ w - y) / n
    assert np.allclose(train.gradient(w), ref, rtol=1e-10, atol=1e-12 * np.abs(ref).max())
    gd = get_solver("gd")
    state = gd.start(train, spec.params, None, spec.budget)
    rows = [("gradient, automatic plan (fused CSR kernel)", lambda: train.gradient(w)),
            ("gd step through the solver", lambda: gd.step(train, spec.params, state)),
            ("SciPy X.T @ (X @ w - y) / n (comparison)", lambda: X.T @ (X @ w - y) / n)]
    for name, fn in rows:
        fn()
        t = best_of(fn, repeat)
        print(f"  {name:40s} {t * 1e3:8.2f} ms  ratio to one read: {t / one_read:5.2f}  "
              f"(to the stream: {t / stream:5.2f})")


def main() -> None:
    blas_threads()  # the CSR products use no BLAS; capped as in every benchmark
    print("stopwise benchmark: a sparse design end to end")
    print(machine())
    with tempfile.TemporaryDirectory(prefix="bench-sparse-") as tmp:
        tmp = Path(tmp)
        path = tmp / "design.svm"
        t0 = time.perf_counter()
        nnz = write_file(path)
        print(f"\ndesign: {ROWS} x {COLS} CSR at density {DENSITY:g}: {nnz} stored entries; svmlight file "
              f"{path.stat().st_size / 2**20:.0f} MiB written in {time.perf_counter() - t0:.1f} s")
        print("\npeak memory of one run through stopwise.run (a child process per solver, imports included):")
        for solver in SOLVERS:
            r = measure_child(solver, path, tmp)
            print(f"  {solver:4s} {r['status']:9s} {r['iterations']:4d} iterations  peak RSS "
                  f"{r['peak'] / GIB:5.2f} GiB (target < 1 GiB: ratio {r['peak'] / GIB:4.2f})  "
                  f"run {r['seconds']:6.1f} s, solver {r['solver_seconds']:6.2f} s")
        step_cost(path)


if __name__ == "__main__":
    if len(sys.argv) > 1 and sys.argv[1] == "--child":
        child(*sys.argv[2:5])
    else:
        main()

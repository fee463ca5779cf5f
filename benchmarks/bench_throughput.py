"""Benchmark 1: whole-run throughput of stopwise against a plain hand-written loop.

The peer is what a researcher would write without stopwise: numpy steps, scikit-learn's
``mean_squared_error`` on train / validation / test after every iterate, rows collected
as dicts into a pandas DataFrame, one Parquet file per run. Both sides run every distinct
run of the demo campaign (``campaigns/demo.yaml``) on the same arrays (data loading is
excluded from both), with the same divergence rule, and must produce the same numbers.

    .venv/bin/python benchmarks/bench_throughput.py
"""
from __future__ import annotations

import math
import sys
import tempfile
import time
from pathlib import Path

import numpy as np
import pandas as pd
from sklearn.metrics import mean_squared_error

sys.path.insert(0, str(Path(__file__).parent))
from _common import blas_threads, machine  # noqa: E402

from stopwise.sweep.campaign import expand  # noqa: E402
from stopwise.data import cached_problem  # noqa: E402
from stopwise.running.runner import execute, save  # noqa: E402
from stopwise.solvers.krylov import TOL as CGLS_TOL  # noqa: E402
from stopwise.results.store import Store  # noqa: E402


def hand_loop(problem, solver: str, params: dict, iterations: int, out: Path, factor: float = 1e10):
    X, y = problem.X_train, problem.y_train
    n, d = X.shape
    L = np.linalg.norm(X, 2) ** 2 / n
    eta = params.get("step_scale", 1.0) / L
    beta = params.get("momentum", 0.5)
    w = np.zeros(d)
    w_prev = w.copy()
    rows = []
    # CGLS state
    r = y.copy()
    s = X.T @ r
    p = s.copy()
    gamma = s @ s
    converged = False
    loss0 = None
    t0 = time.perf_counter()
    for t in range(iterations + 1):
        if t > 0:
            if solver == "gd":
                w = w - eta * X.T @ (X @ w - y) / n
            elif solver == "heavy_ball":
                w, w_prev = w - eta * X.T @ (X @ w - y) / n + beta * (w - w_prev), w
            elif solver == "nesterov":
                k = t - 1
                mom = (k - 1) / (k + 2) if k > 0 else 0.0
                v = w + mom * (w - w_prev)
                w, w_prev = v - eta * X.T @ (X @ v - y) / n, w
            elif solver == "cgls":
                if converged:
                    break
                q = X @ p
                alpha = gamma / (q @ q)
                w = w + alpha * p
                r = r - alpha * q
                s = X.T @ r
                gamma_new = s @ s
                p = s + gamma_new / gamma * p
                gamma = gamma_new
                # stop at a least-squares solution (LSQR's tests, Paige and Saunders 1982)
                nx, nr = np.sqrt(L * n), np.linalg.norm(r)
                converged = (np.sqrt(gamma) <= CGLS_TOL * nx * nr
                             or nr <= CGLS_TOL * (nx * np.linalg.norm(w) + np.linalg.norm(y)))
            if not np.all(np.isfinite(w)):
                break
        train = mean_squared_error(y, X @ w)
        row = {"iteration": t, "passes": float(t), "seconds": time.perf_counter() - t0,
               "train_loss": train / 2, "train_error": train,
               "val_error": mean_squared_error(problem.y_val, problem.X_val @ w),
               "test_error": mean_squared_error(problem.y_test, problem.X_test @ w),
               "w_norm": float(np.linalg.norm(w)), "residual_norm": math.sqrt(train * n),
               "dist_truth": float(np.linalg.norm(w - problem.w_true)) if problem.w_true is not None else math.nan}
        rows.append(row)
        if solver == "cgls" and converged:
            break
        if loss0 is None:
            loss0 = train / 2
        elif not math.isfinite(train) or train / 2 > factor * loss0:
            break
    df = pd.DataFrame(rows)
    df.insert(0, "solver", solver)
    df.insert(1, "dataset", problem.name)
    for k, v in params.items():
        df[k] = v
    df.to_parquet(out)
    return df


def _same_numbers(ours: pd.DataFrame, theirs: pd.DataFrame) -> float:
    """Largest difference between the two sides, relative to the quantity's size at w = 0:
    root errors are compared (a residual that shrank to rounding level in an
    interpolating run has no relative digits left in either side)."""
    assert len(ours) == len(theirs)
    worst = 0.0
    for col in ("train_error", "val_error", "test_error", "w_norm", "dist_truth"):
        x, y = ours[col].to_numpy(float), theirs[col].to_numpy(float)
        assert (np.isfinite(x) == np.isfinite(y)).all(), col
        fin = np.isfinite(x)
        if not fin.any():
            continue
        if col.endswith("_error"):
            x, y = np.sqrt(x[fin]), np.sqrt(y[fin])
            ref = max(float(y[0]), 1e-300)
        else:
            x, y = x[fin], y[fin]
            ref = max(float(np.max(np.abs(y))), 1e-300)
        worst = max(worst, float(np.max(np.abs(x - y))) / ref)
    return worst


def main() -> None:
    blas_threads()
    print("machine:\n" + machine())
    exp = expand("demo", [])
    specs, seen = [], set()
    for s in exp.specs:
        if s.run_id not in seen:
            seen.add(s.run_id)
            specs.append(s)
    problems = {s.run_id: cached_problem(s.dataset, s.split, s.seed) for s in specs}  # loaded for both sides
    print(f"\n{len(specs)} distinct runs of the demo campaign (budget {specs[0].budget['iterations']} iterations each)")

    wall = {"stopwise": 0.0, "hand": 0.0, "store": 0.0}
    cpu = {"stopwise": 0.0, "hand": 0.0, "store": 0.0}
    worst, rows = {"completed": 0.0, "diverged": 0.0}, 0
    with tempfile.TemporaryDirectory() as a, tempfile.TemporaryDirectory() as b:
        store = Store(a)
        # interleaved run by run, so that both sides see the same load on a shared machine
        for i, s in enumerate(specs):
            # what run_spec does (check, execute, save), with the durable write timed apart
            t, c = time.perf_counter(), time.process_time()
            assert not store.is_done(s.run_id)
            trace = execute(s)
            t1, c1 = time.perf_counter(), time.process_time()
            save(s, trace, store)
            wall["store"] += time.perf_counter() - t1
            cpu["store"] += time.process_time() - c1
            wall["stopwise"] += time.perf_counter() - t
            cpu["stopwise"] += time.process_time() - c
            t, c = time.perf_counter(), time.process_time()
            theirs = hand_loop(problems[s.run_id], s.solver, s.identity()["solver"]["params"], s.budget["iterations"],
                               Path(b) / f"run{i}.parquet", s.budget["diverge_factor"])
            wall["hand"] += time.perf_counter() - t
            cpu["hand"] += time.process_time() - c
            ours = pd.read_parquet(store.run_path(s.run_id))
            kind = "diverged" if trace.status == "diverged" else "completed"
            worst[kind] = max(worst[kind], _same_numbers(ours, theirs))
            rows += len(ours)
    print(f"recorded rows: {rows}; same numbers: largest difference relative to the value at w = 0 "
          f"{worst['completed']:.1e} (runs that did not diverge), {worst['diverged']:.1e} (diverged runs, whose "
          "errors grew by orders of magnitude before the divergence rule ended them)")
    print(f"{'':12s}{'wall s':>10s}{'rows/s':>10s}{'cpu s':>10s}")
    for k, name in (("stopwise", "stopwise"), ("hand", "hand loop")):
        print(f"{name:12s}{wall[k]:10.3f}{rows / wall[k]:10.0f}{cpu[k]:10.3f}")
    print(f"  of which stopwise's atomic Parquet writes (temporary file, fsync, rename): "
          f"{wall['store']:.3f} s wall, {cpu['store']:.3f} s cpu")
    print(f"ratio hand loop / stopwise: {wall['hand'] / wall['stopwise']:.1f}x wall time, "
          f"{cpu['hand'] / cpu['stopwise']:.1f}x cpu time  (target >= 10x)")


if __name__ == "__main__":
    main()

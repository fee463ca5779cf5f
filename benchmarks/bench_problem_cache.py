"""Processed-problem cache: time of a disk-cache hit against a fresh load + preprocessing of
the same spec, measured in the same run (the peer is the fresh build). Run by hand:

    .venv/bin/python benchmarks/bench_problem_cache.py
"""
from __future__ import annotations

import os
import shutil
import sys
import tempfile
import time

import numpy as np
import pandas as pd


def best_of(fn, repeat=5):
    times = []
    for _ in range(repeat):
        t0 = time.perf_counter()
        fn()
        times.append(time.perf_counter() - t0)
    return min(times)


def main(n_rows: int = 20000) -> None:
    tmp = tempfile.mkdtemp(prefix="stopwise-bench-")
    os.environ["STOPWISE_CACHE"] = os.path.join(tmp, "cache")
    from stopwise import data
    from stopwise.data import build_problem, cached_problem
    from stopwise.config.compose import spec_from_overrides

    rng = np.random.default_rng(0)
    df = pd.DataFrame(rng.normal(size=(n_rows, 16)), columns=[f"x{j}" for j in range(16)])
    for j in range(4):
        df[f"c{j}"] = rng.choice([f"level{k}" for k in range(12)], n_rows)
    df.loc[rng.choice(n_rows, n_rows // 20, replace=False), "x3"] = np.nan
    df["y"] = df["x0"] - 2 * df["x1"] + rng.normal(size=n_rows)
    path = os.path.join(tmp, "table.csv")
    df.to_csv(path, index=False)
    spec = spec_from_overrides(["dataset=file", f"dataset.params.path={path}", "dataset.params.target=y"])

    fresh = best_of(lambda: build_problem(spec.dataset, spec.split, spec.seed))
    cached_problem(spec.dataset, spec.split, spec.seed)  # store the entry

    def hit():
        data._CACHE.clear()  # no in-process memo: read the files
        cached_problem(spec.dataset, spec.split, spec.seed)

    disk = best_of(hit)
    p = cached_problem(spec.dataset, spec.split, spec.seed)
    print(f"file source, {n_rows} rows -> {p.d} features after one-hot encoding (CSV, {os.path.getsize(path) / 1e6:.1f} MB)")
    print(f"fresh load + preprocessing  {fresh * 1e3:8.1f} ms")
    print(f"disk cache hit              {disk * 1e3:8.1f} ms   (includes hashing the file for the key)")
    print(f"ratio fresh / hit           {fresh / disk:8.1f}x")
    shutil.rmtree(tmp, ignore_errors=True)


if __name__ == "__main__":
    main(int(sys.argv[1]) if len(sys.argv) > 1 else 20000)

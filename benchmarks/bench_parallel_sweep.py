"""Wall-clock of one campaign run sequentially (Hydra's basic launcher) and with
``--jobs N`` (Hydra's joblib launcher, N worker processes, cores // N BLAS threads each),
measured in the same session on the same machine; prints the speed-up ratio and checks
that both produced the same traces. Run by hand: ``.venv/bin/python benchmarks/bench_parallel_sweep.py``.
"""
from __future__ import annotations

import os
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import pandas as pd
import pyarrow.parquet as pq

SWEEP = ["sweep", "dataset=illposed", "solver=gd,nesterov,heavy_ball", "seed=0,1,2,3",
         "budget.iterations=10000"]


def sweep(root: Path, *extra: str) -> float:
    t0 = time.perf_counter()
    subprocess.run([sys.executable, "-m", "stopwise.cli", *SWEEP, f"results_root={root}", *extra],
                   check=True, capture_output=True, text=True)
    return time.perf_counter() - t0


def same(a: Path, b: Path) -> bool:
    fa = sorted((a / "runs").glob("*.parquet"))
    fb = sorted((b / "runs").glob("*.parquet"))
    if [p.name for p in fa] != [p.name for p in fb]:
        return False
    for x, y in zip(fa, fb):
        dx = pq.read_table(x).to_pandas().drop(columns=["seconds"])
        dy = pq.read_table(y).to_pandas().drop(columns=["seconds"])
        try:
            pd.testing.assert_frame_equal(dx, dy, check_exact=True)
        except AssertionError:
            return False
    return True


def main() -> None:
    from stopwise.cli import cores

    n = max(2, min(4, cores()))
    with tempfile.TemporaryDirectory(prefix="stopwise-bench-") as tmp:
        tmp = Path(tmp)
        seq = sweep(tmp / "seq")
        par = sweep(tmp / "par", "--jobs", str(n))
        ok = same(tmp / "seq", tmp / "par")
        # the same commands again: every run is skipped, what remains is the launchers' overhead
        seq_skip = sweep(tmp / "seq")
        par_skip = sweep(tmp / "par", "--jobs", str(n))
    runs = 3 * 4
    print(f"campaign: {runs} runs of 10000 iterations on the ill-posed problem; {cores()} cores, "
          f"load average {os.getloadavg()[0]:.1f}")
    print(f"sequential (basic launcher)      {seq:7.2f} s")
    print(f"--jobs {n} (joblib launcher)       {par:7.2f} s")
    print(f"speed-up sequential / --jobs {n}: {seq / par:.2f}x   traces identical: {ok}")
    print(f"all runs stored (skipped): sequential {seq_skip:.2f} s, --jobs {n} {par_skip:.2f} s "
          f"(launcher and config overhead, {runs} jobs)")
    print("note: other processes on the machine take cores from the workers; compare with the load average")


if __name__ == "__main__":
    main()

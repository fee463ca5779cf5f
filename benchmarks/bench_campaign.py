"""What a campaign costs beyond its runs' compute, measured on the command a user types.

Every figure times the whole `stopwise sweep ...` command in a fresh process, against
peers measured in the same session on the same machine:

- the start-up of a Python process that imports what a sweep imports (the floor of any
  command), and the runs' own compute (the ``seconds`` each trace records);
- overhead per job beyond its run's compute (target <= 10 ms): the slope of a sweep's wall
  time over its job count (the 32-run sweep a new user writes first against the large
  campaign below, both sequential), less the runs' mean compute; and the fixed cost of a
  sweep beyond start-up (Hydra's compositions, the data loader's imports);
- resume: the same command again with every run stored, against the first sweep
  (target <= 10%), and against start-up + one listing of the store;
- expansion of a 10,000-job sweep in-process (compose, validate into RunSpecs, manifest;
  target <= 5 s);
- a 10,000-run campaign of 100-iteration diabetes runs end to end with `--jobs 2`
  (target <= 60 s) against the same campaign sequential (target speed-up >= 1.6x); both
  must store the same traces.

    .venv/bin/python benchmarks/bench_campaign.py            # the full figures (~6 min)
    .venv/bin/python benchmarks/bench_campaign.py --runs 2000  # a smaller large campaign
"""
from __future__ import annotations

import argparse
import subprocess
import sys
import tempfile
import time
from pathlib import Path

sys.path.insert(0, str(Path(__file__).parent))
from _common import machine  # noqa: E402

SMALL = ["dataset=diabetes", "solver=gd,nesterov", "solver.step_scale=0.3,0.6,0.9,1.2", "seed=0,1,2,3",
         "budget.iterations=100"]
IMPORTS = "import stopwise.cli, stopwise.sweep.campaign, hydra, omegaconf"


def large(runs: int) -> list[str]:
    seeds = max(1, runs // 4)
    return ["dataset=diabetes", "solver=gd,nesterov", "solver.step_scale=0.5,1.0", f"seed=range(0,{seeds})",
            "budget.iterations=100"]


def timed(*args: str, cwd: Path) -> tuple[float, str]:
    t0 = time.perf_counter()
    res = subprocess.run([sys.executable, "-m", "stopwise.cli", *args], capture_output=True, text=True, cwd=cwd)
    wall = time.perf_counter() - t0
    if res.returncode != 0:
        raise SystemExit(f"stopwise {' '.join(args[:4])} ... failed:\n{res.stderr[-3000:]}")
    return wall, res.stdout


def startup() -> float:
    best = float("inf")
    for _ in range(3):
        t0 = time.perf_counter()
        subprocess.run([sys.executable, "-c", IMPORTS], check=True)
        best = min(best, time.perf_counter() - t0)
    return best


def compute_seconds(root: Path) -> tuple[float, int]:
    import stopwise

    runs = stopwise.load_runs(root)
    return float(runs["seconds"].sum()), len(runs)


def listing(root: Path) -> float:
    import json

    from stopwise.results.store import Store

    (manifest,) = (root / "campaigns").glob("*.json")
    ids = json.loads(manifest.read_text())["run_ids"]
    t0 = time.perf_counter()
    Store(root).statuses(ids)
    return time.perf_counter() - t0


def same_traces(a: Path, b: Path) -> bool:
    import pyarrow.parquet as pq

    fa, fb = sorted((a / "runs").glob("*.parquet")), sorted((b / "runs").glob("*.parquet"))
    if [p.name for p in fa] != [p.name for p in fb]:
        return False
    for x, y in zip(fa, fb):
        tx, ty = pq.read_table(x).drop(["seconds"]), pq.read_table(y).drop(["seconds"])
        if not tx.to_pandas().equals(ty.to_pandas()):  # bit for bit, NaN equal to NaN
            return False
    return True


def main() -> None:
    ap = argparse.ArgumentParser()
    ap.add_argument("--runs", type=int, default=10000, help="runs of the large campaign (default 10000)")
    a = ap.parse_args()
    print(machine())
    tmp = Path(tempfile.mkdtemp(prefix="stopwise-bench-campaign-"))
    up = startup()
    print(f"\npeer: start-up of a process importing what a sweep imports: {up:.2f} s")

    # 1. the first sweep a new user writes, and its resume
    root = tmp / "small"
    first, out = timed("sweep", *SMALL, f"results_root={root}", cwd=tmp)
    comp, n = compute_seconds(root)
    again, _ = timed("sweep", *SMALL, f"results_root={root}", cwd=tmp)
    lst = listing(root)
    per_job = (first - up - comp) / n * 1e3
    print(f"\n1. {n}-run sweep: {first:.2f} s wall, runs' compute {comp:.3f} s")
    print(f"   (wall - start-up - compute) / jobs: {per_job:.1f} ms (fixed costs included; was ~440 ms)")
    print(f"   resume, every run stored: {again:.2f} s = {again / first:.0%} of the first sweep "
          f"(start-up {up:.2f} s + listing {lst * 1e3:.1f} ms + expansion/launch check {again - up - lst:.2f} s)")

    # 2. expansion of a 10,000-job sweep (in this process, Hydra's import paid before)
    from stopwise.sweep.campaign import expand

    expand(None, ["solver=gd", f"results_root={tmp / 'x'}"])
    t0 = time.perf_counter()
    exp = expand(None, [*large(10000), f"results_root={tmp / 'x'}"])
    exp_s = time.perf_counter() - t0
    print(f"\n2. expansion of {len(exp.jobs)} jobs into {len(exp.run_ids)} validated runs: {exp_s:.2f} s "
          f"({exp_s / len(exp.jobs) * 1e6:.0f} us per job; target <= 5 s)")

    # 3. the large campaign: sequential, --jobs 2, resume
    seq_root, par_root = tmp / "seq", tmp / "par"
    # threads=1 on both sides: --jobs 2 gives each worker cores // 2 = 1 BLAS thread, and a
    # trace is bit for bit only at the same thread count (docs/reliability.md)
    seq, _ = timed("sweep", *large(a.runs), "threads=1", f"results_root={seq_root}", cwd=tmp)
    comp_l, n_l = compute_seconds(seq_root)
    par, out = timed("sweep", *large(a.runs), "--jobs", "2", f"results_root={par_root}", cwd=tmp)
    res_l, _ = timed("sweep", *large(a.runs), "--jobs", "2", f"results_root={par_root}", cwd=tmp)
    ok = same_traces(seq_root, par_root)
    slope = (seq - first) / (n_l - n) - comp_l / n_l
    fixed = first - up - n * (slope + comp_l / n_l)
    print(f"\n   overhead per job beyond its compute (slope of wall time over jobs): {slope * 1e3:.1f} ms "
          f"(target <= 10 ms; was ~440 ms); fixed cost of a sweep beyond start-up: {fixed:.2f} s")
    print(f"\n3. {n_l}-run campaign (100-iteration diabetes runs), runs' compute {comp_l:.1f} s:")
    print(f"   sequential {seq:.1f} s ({(seq - up) / n_l * 1e3:.1f} ms per run beyond start-up)")
    print(f"   --jobs 2   {par:.1f} s (target <= 60 s); speed-up {seq / par:.2f}x (target >= 1.6x)")
    print(f"   resume     {res_l:.1f} s = {res_l / par:.0%} of the --jobs 2 sweep (target <= 10%)")
    print(f"   same traces sequential and --jobs 2 (seconds aside): {ok}")
    if not ok:
        raise SystemExit("traces differ")


if __name__ == "__main__":
    main()

"""How long does ranking a campaign of a few thousand stored runs take?

Synthesizes N trace files (default 2000, 301 recorded iterates each, the recorder's
columns plus the run-level ones) in a temporary results root with a campaign manifest,
then times, in the same process:

  select   stopwise.select with the holdout rule (reads the columns the rules need)
  rank     tuning, targets, passes to target (reads 4 columns of the tuned runs only),
           ranks, rank tests and profiles
  peer     stopwise.load_traces on the same campaign reading every column of every file,
           which is what a ranking that read whole traces would pay before computing anything

and prints the ratios. Run by hand: .venv/bin/python benchmarks/bench_rank.py [N]
"""
from __future__ import annotations

import sys
import tempfile
import time
from pathlib import Path

import numpy as np

from stopwise.results.query import load_traces
from stopwise.analysis.rank import gather, rank, read_traces
from stopwise.results.store import Store

ROWS = 301
DATASETS = ("alpha", "beta", "gamma", "delta")
SOLVERS = {"gd": ("step_scale",), "nesterov": ("step_scale",), "heavy_ball": ("step_scale", "momentum")}


def synthesize(root: Path, n_runs: int, seed: int = 0) -> str:
    """Write ``n_runs`` traces shaped like the runner's, and a manifest naming them."""
    rng = np.random.default_rng(seed)
    store = Store(root)
    it = np.arange(ROWS)
    run_ids = []
    k = 0
    while k < n_runs:
        for d_i, d in enumerate(DATASETS):
            for solver, params in SOLVERS.items():
                if k >= n_runs:
                    break
                s = int(k // (len(DATASETS) * len(SOLVERS)))
                p = {"step_scale": float(0.1 + 0.1 * (s % 19))}
                if "momentum" in params:
                    p["momentum"] = float(0.5 + 0.1 * (s % 4))
                rid = f"{k:016x}"
                rate = p["step_scale"] * (1 + d_i) * 0.05
                base = np.exp(-rate * it) + 0.2 + 0.001 * it * rng.random()
                cols = {"iteration": it.astype(np.int64), "passes": it.astype(float),
                        "seconds": np.cumsum(rng.random(ROWS)) * 1e-4,
                        "train_loss": base / 2, "train_error": base, "val_error": base + 0.01 * rng.random(ROWS),
                        "test_error": base + 0.01 * rng.random(ROWS), "w_norm": np.sqrt(1 + it),
                        "residual_norm": np.sqrt(base * 200), "dist_truth": np.full(ROWS, np.nan)}
                seed_ = s % 5
                cfg = {"dataset": {"name": d}, "split": {"kind": "random", "test": 0.2, "val": 0.2},
                       "solver": solver, "params": p, "seed": seed_, "budget": {"iterations": ROWS - 1},
                       "record": {"every": 1}, "stopping": {"rule": "budget", "halt": False, "params": {}}}
                meta = {"run_id": rid, "config": cfg, "status": "completed", "message": "",
                        "problem": {"n_train": 200, "n_val": 60, "n_test": 60, "d": 20, "L": 1.0,
                                    "task": "regression", "noise_kind": None, "noise_level": None,
                                    "noise_norm": None},
                        "summary": {"iterations": ROWS - 1}}
                run_level = {"run_id": rid, "dataset": d, "task": "regression", "solver": solver, "seed": seed_,
                             "status": "completed", **p}
                store.write_run(rid, cols, run_level, meta)
                run_ids.append(rid)
                k += 1
    manifest = {"campaign_id": "be7c400000000000", "name": "bench", "run_ids": run_ids,
                "stopping": [{"rule": "budget", "halt": False, "params": {}}], "created": time.time()}
    store.write_campaign(manifest)
    return "bench"


def main(n_runs: int = 2000) -> None:
    with tempfile.TemporaryDirectory() as tmp:
        root = Path(tmp) / "results"
        t0 = time.perf_counter()
        campaign = synthesize(root, n_runs)
        t_write = time.perf_counter() - t0
        size = sum(p.stat().st_size for p in (root / "runs").glob("*.parquet"))
        print(f"{n_runs} traces x {ROWS} iterates written in {t_write:.1f} s ({size / 2**20:.1f} MiB)")

        clock = Clock()
        with clock("select"):
            data = gather(root, campaign, "holdout", baselines="none", references=False)
        with clock("rank"):
            r = rank(data.selections, data.rule, target="none", include_baselines=False)
        with clock("rank_target"):
            r2 = rank(data.selections, data.rule, traces=lambda ids: read_traces(root, ids), target=0.25,
                      include_baselines=False)
        with clock("peer"):
            full = load_traces(root, campaign)
        assert len(full) == n_runs * ROWS and r2.test is not None and r.test is not None

        print(f"{'':45s}{'wall s':>9s}{'cpu s':>9s}")
        for key, label in (("select", "select (rule columns of every trace)"),
                           ("rank", "rank without target (no trace read)"),
                           ("rank_target", f"rank with target (4 columns of {r2.replicates['run_id'].nunique()} runs)"),
                           ("peer", f"peer: every column of every trace ({full.shape[1]})")):
            w, c = clock.times[key]
            print(f"{label:45s}{w:9.2f}{c:9.2f}")
        for label, num in (("select + rank with target", ("select", "rank_target")), ("rank with target", ("rank_target",))):
            w = sum(clock.times[k][0] for k in num) / clock.times["peer"][0]
            c = sum(clock.times[k][1] for k in num) / clock.times["peer"][1]
            print(f"ratio {label} / peer read: wall {w:.3f}, cpu {c:.3f}")


class Clock:
    """Wall and process CPU time of named blocks (CPU time is steadier on a shared machine)."""

    def __init__(self):
        self.times: dict[str, tuple[float, float]] = {}

    def __call__(self, name: str):
        clock = self

        class _Block:
            def __enter__(self):
                self.w, self.c = time.perf_counter(), time.process_time()

            def __exit__(self, *exc):
                clock.times[name] = (time.perf_counter() - self.w, time.process_time() - self.c)

        return _Block()

if __name__ == "__main__":
    main(int(sys.argv[1]) if len(sys.argv) > 1 else 2000)

"""``stopwise ls --summary``: the configuration tuned on validation error over every seed,
shown as medians and ranges over its seeds, never the single luckiest run."""
import io
from contextlib import redirect_stderr, redirect_stdout

import numpy as np
import pandas as pd
import pyarrow.parquet as pq
import pytest

from stopwise.cli import SUMMARY_NOTE, main, summary_table


def runs_table(rows):
    cols = ["run_id", "dataset", "solver", "seed", "status", "step_scale", "iterations", "passes", "seconds",
            "best_val_error", "best_val_iteration", "test_at_best_val", "final_test_error", "message"]
    return pd.DataFrame([dict(zip(cols, r)) for r in rows], columns=cols)


def test_the_luckiest_seed_does_not_choose_and_every_seed_counts():
    # step 1.0 has the single lowest validation error (seed 2: .05) but the higher mean
    # (.05 + .40 + .42) / 3 = .29 against step 0.5's (.20 + .21 + .22) / 3 = .21
    df = runs_table([
        ("a0", "A", "gd", 0, "completed", 0.5, 9, 9, .1, .20, 5, .31, .35, ""),
        ("a1", "A", "gd", 1, "completed", 0.5, 9, 9, .1, .21, 5, .33, .36, ""),
        ("a2", "A", "gd", 2, "completed", 0.5, 9, 9, .1, .22, 5, .30, .34, ""),
        ("b0", "A", "gd", 0, "completed", 1.0, 9, 9, .1, .40, 5, .50, .55, ""),
        ("b1", "A", "gd", 1, "diverged", 1.0, 9, 9, .1, .42, 5, .52, np.nan, "diverged"),
        ("b2", "A", "gd", 2, "completed", 1.0, 9, 9, .1, .05, 5, .10, .12, ""),
    ])
    (row,) = summary_table(df).to_dict("records")
    assert row["tuned config"] == "step_scale=0.5" and row["seeds"] == "3/3"
    assert row["runs"] == 6 and row["diverged"] == 1 and row["failed"] == 0
    assert row["val error (median)"] == .21 and row["test at best val (median)"] == .31
    assert row["test at best val (range)"] == "0.3..0.33"
    assert row["final test error (median)"] == .35
    assert "seed" not in row  # no single seed stands for the configuration


def cli(*args):
    out, err = io.StringIO(), io.StringIO()
    with redirect_stdout(out), redirect_stderr(err):
        code = main(list(args))
    return code, out.getvalue(), err.getvalue()


def test_ls_summary_on_stored_runs_matches_the_traces(tmp_path):
    root = tmp_path / "results"
    assert main(["sweep", "dataset=wellposed", "solver=gd", "solver.step_scale=0.5,1.0", "seed=0,1,2",
                 "budget.iterations=30", f"results_root={root}"]) == 0
    code, out, err = cli("ls", "--root", str(root), "--summary")
    assert code == 0, err
    assert SUMMARY_NOTE in out
    # by hand from the raw files: best validation error per run, averaged over seeds per step scale
    per = []
    for p in (root / "runs").glob("*.parquet"):
        t = pq.read_table(p, columns=["step_scale", "seed", "val_error", "test_error"]).to_pandas()
        i = int(np.argmin(t["val_error"].to_numpy()))
        per.append((float(t["step_scale"][0]), int(t["seed"][0]), t["val_error"][i], t["test_error"][i]))
    per = pd.DataFrame(per, columns=["step", "seed", "val", "test"])
    best = per.groupby("step")["val"].mean().idxmin()
    mine = per[per.step == best]
    line = next(ln for ln in out.splitlines() if ln.startswith("wellposed"))
    assert f"step_scale={best:g}" in line and "3/3" in line
    assert f"{np.median(mine.test):.4g}" in line and f"{mine.test.min():.4g}..{mine.test.max():.4g}" in line

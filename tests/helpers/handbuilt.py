"""Hand-built selection, baseline and trace tables in the shapes rank.py reads.

Shapes follow stopwise.select (one row per run and rule), stopwise.load_baselines (one
row per penalty value) and stopwise.load_traces (one row per recorded iterate).
The numbers are made up for the tests; each test states what it expects by hand.
"""
from __future__ import annotations

import numpy as np
import pandas as pd


def selection_row(run_id, dataset, solver, seed, val, test, rule="holdout", passes=10.0, spent=None,
                  iteration=None, status="completed", **params):
    return dict(run_id=run_id, dataset=dataset, solver=solver, seed=seed, **params, status=status, rule=rule,
                reference=(rule == "oracle"),
                selected_iteration=(None if val is None else (iteration if iteration is not None else int(passes))),
                selected_passes=(np.nan if val is None else passes),
                passes_spent=(np.nan if val is None else (spent if spent is not None else passes)),
                val_error=(np.nan if val is None else val), test_error=(np.nan if test is None else test),
                train_error=0.1, reason="hand-built")


def selections(rows) -> pd.DataFrame:
    df = pd.DataFrame(rows)
    df["selected_iteration"] = df["selected_iteration"].astype("Int64")
    return df


def random_campaign(rng, datasets=("A", "B", "C", "D"), seeds=(0, 1, 2), rules=("holdout", "oracle")):
    """Three solver families with 1-4 configurations each, random errors, every rule."""
    families = {"gd": [dict(step_scale=s) for s in (0.5, 1.0, 1.9)],
                "heavy_ball": [dict(step_scale=s, momentum=m) for s in (0.5, 1.0) for m in (0.5, 0.9)],
                "cgls": [dict()]}
    rows = []
    for d in datasets:
        for seed in seeds:
            for solver, cfgs in families.items():
                for c in cfgs:
                    rid = f"{d}-{seed}-{solver}-" + "-".join(f"{v:g}" for v in c.values())
                    for rule in rules:
                        rows.append(selection_row(rid, d, solver, seed, float(rng.random()), float(rng.random()),
                                                  rule=rule, passes=float(rng.integers(1, 50)), **c))
    return selections(rows)


def trace(run_id, test_errors, passes=None) -> pd.DataFrame:
    n = len(test_errors)
    return pd.DataFrame({"run_id": run_id, "iteration": np.arange(n),
                         "passes": np.arange(n, dtype=float) if passes is None else np.asarray(passes, float),
                         "test_error": np.asarray(test_errors, dtype=float)})


def baseline_rows(dataset, seed, method, penalties, vals, tests):
    """One row per penalty; the penalty with the lowest validation error is ``selected``."""
    k = int(np.argmin(vals))
    return [dict(baseline_id=f"{dataset}-{seed}-{method}-{p:g}", dataset=dataset, seed=seed, method=method,
                 penalty=p, val_error=v, test_error=t, selected=(i == k), n_fits=len(penalties), seconds=0.01)
            for i, (p, v, t) in enumerate(zip(penalties, vals, tests))]

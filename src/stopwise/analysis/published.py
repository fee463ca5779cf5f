"""Published scores of OpenML tasks beside a campaign's methods.

For a dataset whose runs are on an OpenML task's own folds (``dataset=openml
dataset.params.task_id=T split.kind=indices``, which a suite expands into), the summary of
the evaluations of the runs uploaded to OpenML for ``T`` (kept by ``stopwise datasets fetch``;
:mod:`stopwise.data.openml_scores`) is set beside each method's mean test error over the
task's splits.

OpenML scores a run over the predictions of all of the task's folds and repeats together.
A method's ``test error`` in the ranking is its mean over seeds, and on a task's splits the
seed is the split's index (one split per seed), so it is the mean over the splits the
campaign ran; it equals the pooled error when every split ran and the test parts have
equal sizes (they differ by at most one row in k-fold cross-validation). A gap is therefore
computed only when the campaign ran every split of the task, one split per seed, and the
method has a valid selection on each; otherwise the published numbers are shown alone with
a note saying why.

Conversions are used only where exact on the same test rows: the misclassification rate
(the trace's error of a classification run) is ``1 - predictive_accuracy``; the mean squared
error (the trace's error of a regression run, in the target's units: centering the target
does not change it) is ``root_mean_squared_error ** 2``. The best and median errors are
computed over the uploaded runs' converted values when the summary is fetched. The area
under the ROC curve has no such conversion: it is shown as published, labelled.

    gap to best   = test error - error of the best uploaded run
    gap to median = test error - median error of the uploaded runs

(positive: the method's error is higher than the published one).

>>> TRACE_ERROR["classification"], TRACE_ERROR["regression"]
('misclassification rate', 'mean squared error')
>>> list(published_table(pd.DataFrame(), None).columns[:5])
['dataset', 'task_id', 'measure', 'method', 'test_error']
"""
from __future__ import annotations

from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd

TASK_COLUMNS = ("dataset", "task_id", "kind", "splits_run", "splits_total", "one_split_per_seed")
PUBLISHED_COLUMNS = ("dataset", "task_id", "measure", "method", "test_error", "error_metric", "error_best",
                     "error_median", "gap_best", "gap_median", "published_best", "published_median", "n_runs",
                     "best_run_id", "best_flow_name", "fetched", "splits", "note")
# the error a trace records, by the task's kind
TRACE_ERROR = {"classification": "misclassification rate", "regression": "mean squared error"}


def task_datasets(root: str | Path, runs: pd.DataFrame) -> pd.DataFrame:
    """Per dataset whose stored runs are on an OpenML task's predefined folds: the task, its
    kind, how many of its splits the runs cover, how many it has, and whether each seed
    stands for one split (as a suite's expansion makes it). ``runs`` has ``dataset`` and
    ``run_id`` columns (a selection table); only the first run of a dataset is read unless
    it is on a task, so campaigns without OpenML tasks cost one metadata read per dataset."""
    from stopwise.data.openml_source import read_task, task_kind, task_splits
    from stopwise.results.store import Store

    store = Store(root)

    def on_task(rid: str) -> tuple[str, int, tuple[int, int], Any] | None:
        """(dataset, task, (repeat, fold), seed) of a run on a task's folds; None otherwise,
        also for metadata that is not what stopwise writes (results folders are data)."""
        try:
            cfg = (store.run_meta(rid) or {}).get("config") or {}
            ds, split = cfg.get("dataset") or {}, cfg.get("split") or {}
            tid = (ds.get("params") or {}).get("task_id") if ds.get("source") == "openml" else None
            if tid is None or split.get("kind") != "indices" or split.get("train_rows") is not None:
                return None
            tid, pair = int(tid), (int(split.get("repeat", 0)), int(split.get("fold", 0)))
            seed = cfg.get("seed")
            if tid <= 0 or not isinstance(seed, (int, type(None))):
                return None
            return str(ds.get("name")), tid, pair, seed
        except (AttributeError, TypeError, ValueError):
            return None

    seen: dict[str, dict[str, Any]] = {}
    pairs = runs[["dataset", "run_id"]].drop_duplicates("run_id") if len(runs) else runs
    for _, g in pairs.groupby("dataset", sort=True):
        ids = [str(r) for r in g["run_id"]]
        if on_task(ids[0]) is None:
            continue
        for rid in ids:
            got = on_task(rid)
            if got is None:
                continue
            name, tid, pair, seed = got
            d = seen.setdefault(name, {"task_ids": set(), "pairs": set(), "by_seed": {}})
            d["task_ids"].add(tid)
            d["pairs"].add(pair)
            d["by_seed"].setdefault(seed, set()).add(pair)
    rows = []
    for name, d in sorted(seen.items()):
        if len(d["task_ids"]) != 1:
            continue  # two tasks under one dataset name: nothing to compare with
        (tid,) = d["task_ids"]
        rows.append({"dataset": name, "task_id": tid, "kind": task_kind(read_task(tid)),
                     "splits_run": len(d["pairs"]), "splits_total": len(task_splits(tid)),
                     "one_split_per_seed": all(len(v) == 1 for v in d["by_seed"].values())
                     and len(d["by_seed"]) == len(d["pairs"])})
    return pd.DataFrame(rows, columns=list(TASK_COLUMNS))


def published_table(table: pd.DataFrame, tasks: pd.DataFrame | None) -> pd.DataFrame:
    """One row per (task dataset, measure, method) where a gap is computed, else one row per
    (task dataset, measure) with the published numbers alone and a note. ``table`` is a
    ranking's per-(dataset, method) table (``dataset, method, seeds, valid, test_error``);
    ``tasks`` is :func:`task_datasets`."""
    from stopwise.data.openml_scores import read_scores

    rows: list[dict[str, Any]] = []
    if tasks is None or tasks.empty:
        return pd.DataFrame(columns=list(PUBLISHED_COLUMNS))
    for t in tasks.itertuples(index=False):
        rec = read_scores(int(t.task_id))
        base = {"dataset": t.dataset, "task_id": int(t.task_id), "splits": f"{t.splits_run}/{t.splits_total}"}
        if rec is None:
            rows.append(dict(base, measure="-", method="-", note="no published scores stored: stopwise datasets "
                                                                  f"fetch --task {t.task_id}"))
            continue
        same = t.splits_run == t.splits_total and bool(t.one_split_per_seed)
        why_not = "" if same else (f"the campaign ran {t.splits_run} of the task's {t.splits_total} splits"
                                   if t.splits_run != t.splits_total else
                                   "some seed holds runs on two splits: the means are not over the task's splits")
        ours = table[table["dataset"] == t.dataset] if "dataset" in table.columns else table.iloc[0:0]
        for m in rec["measures"]:
            pub = dict(base, measure=m["measure"], n_runs=m.get("n_runs", 0), published_best=m.get("best", np.nan),
                       published_median=m.get("median", np.nan), best_run_id=m.get("best_run_id"),
                       best_flow_name=m.get("best_flow_name"), fetched=rec.get("fetched"))
            if not m.get("n_runs"):
                rows.append(dict(pub, method="-", note="no uploaded run has a value of this measure"))
                continue
            metric = m.get("error_metric")
            if metric is None or metric != TRACE_ERROR.get(t.kind):
                rows.append(dict(pub, method="-", note="published value only: no trace records this measure "
                                                        "and it does not convert exactly into one a trace records"))
                continue
            pub.update(error_metric=metric, error_best=m["error_best"], error_median=m["error_median"])
            if not same:
                rows.append(dict(pub, method="-", note=f"published value only: {why_not}"))
                continue
            for o in ours.itertuples(index=False):
                full = int(o.valid) == int(o.seeds) and int(o.seeds) == t.splits_total
                te = float(o.test_error)
                row = dict(pub, method=o.method, test_error=te)
                if full and np.isfinite(te):
                    row.update(gap_best=te - m["error_best"], gap_median=te - m["error_median"], note="")
                else:
                    row["note"] = "no gap: the method has no valid selection on every split"
                rows.append(row)
    out = pd.DataFrame(rows)
    for c in PUBLISHED_COLUMNS:
        if c not in out.columns:
            out[c] = np.nan
    return out[list(PUBLISHED_COLUMNS)].reset_index(drop=True)


__all__ = ["PUBLISHED_COLUMNS", "TRACE_ERROR", "published_table", "task_datasets"]

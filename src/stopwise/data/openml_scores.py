"""Published scores of an OpenML task: a summary of the evaluations of the runs uploaded for it.

``stopwise datasets fetch --task T`` (and ``--suite``) asks the server, through
``openml.evaluations.list_evaluations(measure, tasks=[T], size=None)``, for every uploaded
run's value of the task's measures, and keeps a summary with its provenance in
``<openml cache>/stopwise/evaluations/<T>.json`` (:func:`store_scores`); ranking and the
report read only that file (:func:`read_scores`), so they work offline.

Measures fetched: ``predictive_accuracy`` and ``area_under_roc_curve`` for classification
tasks, ``root_mean_squared_error`` for regression tasks. Per measure the summary holds the
number of runs with a value, the best and the median value, the best run's id, flow id and
flow name (ties: the lowest run id), and, when the measure converts exactly into the error a
stopwise trace records on the same test rows, that error's best and median over the same
runs (:data:`TRACE_ERRORS`): the misclassification rate is ``1 - accuracy``, the mean squared
error is ``RMSE ** 2``. The area under the ROC curve has no such conversion and is kept as
published.

>>> s = summarize([(0.9, 11, 5, "a"), (0.95, 12, 6, "b"), (0.8, 13, 5, "a")], "predictive_accuracy")
>>> s["best"], s["best_run_id"], s["median"], s["n_runs"]
(0.95, 12, 0.9, 3)
>>> round(s["error_best"], 12), s["error_metric"]
(0.05, 'misclassification rate')
"""
from __future__ import annotations

import json
import math
from pathlib import Path
from typing import Any, Callable, Iterable

import numpy as np

from stopwise.core.files import atomic_write_bytes
from stopwise.data.openml_source import openml_lock, openml_module, read_task, task_kind
from stopwise.data.openml_suite import fetch_date, stopwise_root

SCORES_FORMAT = 1
MEASURES = {"classification": ("predictive_accuracy", "area_under_roc_curve"),
            "regression": ("root_mean_squared_error",)}
HIGHER_IS_BETTER = {"predictive_accuracy": True, "area_under_roc_curve": True, "root_mean_squared_error": False}
# measure -> (the trace's error it converts into exactly, the conversion)
TRACE_ERRORS: dict[str, tuple[str, Callable[[np.ndarray], np.ndarray]]] = {
    "predictive_accuracy": ("misclassification rate", lambda v: 1.0 - v),
    "root_mean_squared_error": ("mean squared error", lambda v: v * v),
}


def scores_path(task_id: int, root: Path | None = None) -> Path:
    return stopwise_root(root) / "evaluations" / f"{int(task_id)}.json"


def summarize(rows: Iterable[tuple[float | None, int, int, str]], measure: str) -> dict[str, Any]:
    """Summary of ``(value, run_id, flow_id, flow_name)`` rows of one measure (rows without a
    finite value are left out)."""
    vals = [(float(v), int(r), int(f), str(n)) for v, r, f, n in rows if v is not None and math.isfinite(float(v))]
    out: dict[str, Any] = {"measure": measure, "n_runs": len(vals),
                           "higher_is_better": HIGHER_IS_BETTER.get(measure, True)}
    if not vals:
        return out
    sign = -1.0 if out["higher_is_better"] else 1.0
    best = min(vals, key=lambda x: (sign * x[0], x[1]))
    v = np.array([x[0] for x in vals])
    out.update(best=best[0], median=float(np.median(v)), best_run_id=best[1], best_flow_id=best[2],
               best_flow_name=best[3])
    if measure in TRACE_ERRORS:
        name, conv = TRACE_ERRORS[measure]
        e = conv(v)
        out.update(error_metric=name, error_best=float(e.min()), error_median=float(np.median(e)))
    return out


def scores_record(task_id: int, kind: str, summaries: list[dict[str, Any]]) -> dict[str, Any]:
    openml = openml_module()
    return {"format": SCORES_FORMAT, "task_id": int(task_id), "kind": kind, "fetched": fetch_date(),
            "server": str(openml.config.server), "source": "openml.evaluations.list_evaluations",
            "measures": summaries}


def store_scores(record: dict[str, Any], root: Path | None = None) -> None:
    atomic_write_bytes(scores_path(record["task_id"], root), json.dumps(record, indent=1, sort_keys=True).encode(),
                       durable=False)


def read_scores(task_id: int, root: Path | None = None) -> dict[str, Any] | None:
    """The stored summary of a task's published scores, or None (not fetched, unreadable)."""
    try:
        rec = json.loads(scores_path(task_id, root).read_text(encoding="utf-8"))
    except (OSError, ValueError):
        return None
    ok = isinstance(rec, dict) and rec.get("task_id") == int(task_id) and isinstance(rec.get("measures"), list) \
        and all(isinstance(m, dict) and isinstance(m.get("measure"), str) for m in rec["measures"])
    return rec if ok else None


def fetch_scores(task_id: int) -> str:
    """Ask the server for the evaluations of every run uploaded for a (cached) task, store
    their summary and return a one-line account. When the server cannot be reached and a
    summary is stored, the stored one is kept and the line says so; otherwise the error
    propagates."""
    openml = openml_module()
    task = read_task(int(task_id))
    kind = task_kind(task)
    if kind is None:
        return f"task {task_id}: no published scores kept (not a supervised classification or regression task)"
    try:
        summaries = []
        for measure in MEASURES[kind]:
            with openml_lock():
                evals = openml.evaluations.list_evaluations(measure, tasks=[int(task_id)], size=None,
                                                            output_format="object")
            summaries.append(summarize(((e.value, e.run_id, e.flow_id, e.flow_name) for e in evals.values()), measure))
    except Exception as e:  # noqa: BLE001 - network down: keep what is stored
        old = read_scores(int(task_id))
        if old is None:
            raise
        first = str(e).strip().splitlines()[0] if str(e).strip() else type(e).__name__
        return (f"task {task_id}: published scores not refreshed ({type(e).__name__}: {first[:120]}); "
                f"kept those fetched on {old.get('fetched')}")
    rec = scores_record(int(task_id), kind, summaries)
    store_scores(rec)
    parts = [f"{m['measure']} over {m['n_runs']} runs" + (f", best {m['best']:.6g}" if m["n_runs"] else "")
             for m in summaries]
    return f"task {task_id}: published scores kept ({'; '.join(parts)})"


__all__ = ["HIGHER_IS_BETTER", "MEASURES", "TRACE_ERRORS", "fetch_scores", "read_scores", "scores_path",
           "scores_record", "store_scores", "summarize"]

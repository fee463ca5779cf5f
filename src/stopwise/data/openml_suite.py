"""OpenML benchmark suites as dataset lists (``dataset=openml_suite``).

A benchmark suite is a list of OpenML tasks (``openml.study.get_suite``). A campaign names
one with ``dataset=openml_suite dataset.params.suite=ID`` (or the suite's alias), and
``stopwise sweep`` expands every job on it into one job per task and split of the task
(:func:`suite_tasks` lists them; :mod:`stopwise.sweep.campaign` builds the jobs): the task's
own predefined folds (``split.kind=indices``, ``split.repeat``, ``split.fold``), with the
seed set to the split's index, so that a task's splits are its replicates. Each expanded job
is exactly the single-task job ``dataset=openml dataset.params.task_id=T``, with the same run
id.

openml itself keeps no copy of a suite (every ``get_suite`` asks the server), so
``stopwise datasets fetch --suite ID`` stores the suite's task list in stopwise's own file
``<openml cache>/stopwise/suites/<id>.json`` (:func:`store_suite`) and warms every task;
afterwards the expansion reads only that file and openml's cache, never the network.

>>> dataset_name("kr-vs-kp", 3)
'kr-vs-kp-t3'
>>> dataset_name("credit approval (v2)", 29)
'credit_approval__v2-t29'
"""
from __future__ import annotations

import json
import re
import time
from dataclasses import dataclass
from pathlib import Path
from typing import Any

from stopwise.core.files import atomic_write_bytes
from stopwise.core.params import Interval, param
from stopwise.data.openml_source import (
    OpenMLCacheError,
    OpenMLParams,
    cache_root,
    openml_lock,
    openml_module,
    read_description,
    resolve,
    task_kind,
    task_splits,
)
from stopwise.data.sources import RawData, SourceDef, register_source

SUITE_FORMAT = 1


def stopwise_root(root: Path | None = None) -> Path:
    """stopwise's own files inside openml's cache root (moved with it)."""
    return (root or cache_root()) / "stopwise"


def suite_path(suite_id: int, root: Path | None = None) -> Path:
    return stopwise_root(root) / "suites" / f"{int(suite_id)}.json"


def fetch_date() -> str:
    return time.strftime("%Y-%m-%d", time.gmtime())


def suite_record(suite: Any) -> dict[str, Any]:
    """What is kept of an ``openml.study.OpenMLBenchmarkSuite``: id, alias, name, task and
    dataset ids, the fetch date and the server."""
    openml = openml_module()
    return {"format": SUITE_FORMAT, "suite_id": int(suite.study_id), "alias": suite.alias, "name": suite.name,
            "tasks": [int(t) for t in (suite.tasks or [])], "data": [int(d) for d in (suite.data or [])],
            "fetched": fetch_date(), "server": str(openml.config.server)}


def store_suite(suite: Any, root: Path | None = None) -> dict[str, Any]:
    """Write a suite's record (atomically) where :func:`read_suite` finds it; returns it."""
    rec = suite_record(suite)
    atomic_write_bytes(suite_path(rec["suite_id"], root), json.dumps(rec, indent=1, sort_keys=True).encode(),
                       durable=False)
    return rec


def _read(path: Path) -> dict[str, Any] | None:
    try:
        rec = json.loads(path.read_text(encoding="utf-8"))
    except (OSError, ValueError):
        return None
    ok = (isinstance(rec, dict) and isinstance(rec.get("suite_id"), int) and isinstance(rec.get("tasks"), list)
          and all(isinstance(t, int) and not isinstance(t, bool) and t > 0 for t in rec["tasks"]))
    return rec if ok else None


def cached_suites(root: Path | None = None) -> list[dict[str, Any]]:
    """Every readable suite record in the cache, by id."""
    d = stopwise_root(root) / "suites"
    if not d.is_dir():
        return []
    recs = [_read(p) for p in sorted(d.glob("*.json")) if p.stem.isdigit()]
    return sorted((r for r in recs if r is not None), key=lambda r: r["suite_id"])


def read_suite(ref: Any, root: Path | None = None) -> dict[str, Any] | None:
    """The cached record of a suite named by id or alias (exact alias first, then ignoring
    case), or None."""
    text = str(ref).strip()
    if text.isdigit():
        return _read(suite_path(int(text), root))
    recs = cached_suites(root)
    hits = [r for r in recs if r.get("alias") == text] or \
           [r for r in recs if str(r.get("alias") or "").casefold() == text.casefold()]
    return hits[0] if hits else None


def dataset_name(openml_name: Any, task_id: int) -> str:
    """A task's dataset name in runs and tables: the OpenML dataset's name (characters other
    than letters, digits, ``_``, ``.``, ``-`` replaced by ``_``) and the task id."""
    base = re.sub(r"[^A-Za-z0-9_.-]", "_", str(openml_name or "openml")).strip("._-") or "openml"
    return f"{base[:48]}-t{int(task_id)}"


# ---------------------------------------------------------------- the source

@dataclass(frozen=True)
class SuiteParams:
    suite: str | None = param(None, None, "OpenML benchmark suite: its id or alias (cached by `stopwise datasets fetch --suite`)")
    splits: int | None = param(None, Interval(1, None, integer=True),
                               "the first N splits of each task, in (repeat, fold) order (default: all)")


def check_suite(p: SuiteParams) -> None:
    if p.suite is None or not str(p.suite).strip():
        raise OpenMLCacheError("dataset.source=openml_suite needs dataset.params.suite (an OpenML suite id or alias)")


def load_suite(p: SuiteParams) -> RawData:
    """A suite is a list of datasets, not one: only ``stopwise sweep`` expands it."""
    check_suite(p)
    raise OpenMLCacheError(f"dataset=openml_suite (suite {p.suite}) names a list of OpenML tasks, not one dataset: "
                           "run it with stopwise sweep, which expands it into one dataset per task, or choose one "
                           "task with dataset=openml dataset.params.task_id=T")


register_source(SourceDef("openml_suite", SuiteParams, load_suite,
                          "an OpenML benchmark suite: one dataset per task, expanded by `stopwise sweep` "
                          "(warm it with `stopwise datasets fetch --suite`)", check=check_suite))


@dataclass(frozen=True)
class SuiteTask:
    """One task of a cached suite, as a campaign uses it."""

    task_id: int
    data_id: int
    name: str                         # dataset.name of its runs
    kind: str                         # classification | regression
    splits: tuple[tuple[int, int], ...]  # (repeat, fold) pairs, in order


def suite_tasks(p: SuiteParams, root: Path | None = None) -> tuple[dict[str, Any], list[SuiteTask]]:
    """The cached suite record and its tasks, every one checked to be in openml's cache
    (the same check a single-task run makes); missing pieces are one line naming the tasks
    and the command that warms them."""
    check_suite(p)
    root = root or cache_root()
    ref = str(p.suite).strip()
    rec = read_suite(ref, root)
    hint = f"stopwise datasets fetch --suite {ref}"
    if rec is None:
        raise OpenMLCacheError(f"OpenML suite {ref} is not in the cache ({stopwise_root(root) / 'suites'}); warm it on "
                               f"a machine with network: {hint}")
    out: list[SuiteTask] = []
    missing: list[int] = []
    unsupported: list[int] = []
    for tid in rec["tasks"]:
        try:
            did, task = resolve(OpenMLParams(task_id=tid), root)
        except OpenMLCacheError as e:
            (unsupported if "not a supervised" in str(e) else missing).append(tid)
            continue
        splits = tuple(task_splits(tid, root))
        if not splits:
            missing.append(tid)
            continue
        desc = read_description(did, root) or {}
        out.append(SuiteTask(tid, did, dataset_name(desc.get("name"), tid), task_kind(task) or "?", splits))
    if missing:
        shown = ", ".join(map(str, missing[:8])) + (f" (and {len(missing) - 8} more)" if len(missing) > 8 else "")
        raise OpenMLCacheError(f"OpenML suite {ref}: task{'s' if len(missing) > 1 else ''} {shown} "
                               f"{'are' if len(missing) > 1 else 'is'} not in the OpenML cache ({root}); warm "
                               f"{'them' if len(missing) > 1 else 'it'} on a machine with network: {hint}")
    if unsupported and not out:
        raise OpenMLCacheError(f"OpenML suite {ref} has no supervised classification or regression task")
    names = [t.name for t in out]
    if len(set(names)) != len(names):  # pragma: no cover - the task id makes names unique
        raise OpenMLCacheError(f"OpenML suite {ref}: two tasks share a dataset name")
    return dict(rec, unsupported=unsupported), out


# ---------------------------------------------------------------- warming the cache (network)

def fetch_suite(ref: str) -> tuple[dict[str, Any], str]:
    """Ask the server for a suite (``openml.study.get_suite``, by id or alias) and store its
    task list. When the server cannot be reached and the suite is already cached, the stored
    list is used and the summary line says so (its tasks are then warmed from the cache as
    ``fetch --task`` does offline). Returns (the record, a one-line summary)."""
    openml = openml_module()
    from openml.exceptions import OpenMLServerException

    key: Any = int(ref) if str(ref).isdigit() else str(ref)
    try:
        with openml_lock():
            suite = openml.study.get_suite(key)
        rec = store_suite(suite)
        how = "fetched"
    except OpenMLServerException:
        raise
    except Exception as e:  # noqa: BLE001 - network down: fall back to the stored list
        rec = read_suite(ref)
        if rec is None:
            raise
        first = str(e).strip().splitlines()[0] if str(e).strip() else type(e).__name__
        how = f"server not reached ({type(e).__name__}: {first[:120]}); kept the task list stored on {rec.get('fetched')}"
    label = rec.get("alias") or rec.get("name") or ""
    return rec, (f"suite {rec['suite_id']} ({label}): {len(rec['tasks'])} task(s), {how}; "
                 f"use dataset=openml_suite dataset.params.suite={rec['suite_id']}")


__all__ = ["SuiteParams", "SuiteTask", "cached_suites", "dataset_name", "fetch_suite", "read_suite", "store_suite",
           "suite_record", "suite_tasks"]

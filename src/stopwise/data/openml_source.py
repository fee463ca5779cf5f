"""OpenML datasets and tasks, read through the ``openml`` package and its own cache.

Runs never touch the network: a run reads only what is already in OpenML's cache
directory (``openml.config.get_cache_directory()``, which follows the ``cachedir`` entry of
openml's config file and the ``OPENML_CACHE_DIR`` environment variable). Before openml is
called, the files it would need are checked, because openml deletes a dataset's or task's
whole cache folder when a call on it fails; a missing file is reported as one line naming
the id and the command that warms the cache on a machine with network::

    stopwise datasets fetch 61            # a dataset
    stopwise datasets fetch --task 59     # a task (its dataset, features and folds)
    stopwise datasets fetch --suite 99    # a benchmark suite: its task list and every task

Calls into openml are serialized across processes with a file lock, since openml's
cache writes are not safe under concurrent jobs.

Two things openml does not cache are kept by stopwise in its own files under the same
cache root (``<root>/stopwise/``), written when the cache is warmed:

- ``suites/<id>.json``: a benchmark suite's id, alias, name and task list, as
  ``openml.study.get_suite`` returned them (openml asks the server on every call), so a
  campaign over a suite expands offline (``dataset=openml_suite``);
- ``evaluations/<task id>.json``: a summary of the evaluations of the runs uploaded to
  OpenML for a task (``openml.evaluations.list_evaluations``): per measure the number of
  runs, the best and median value, the best run's id and flow, and the fetch date.
"""
from __future__ import annotations

import contextlib
import hashlib
import os
import xml.etree.ElementTree as ET
from dataclasses import dataclass
from pathlib import Path
from typing import Any, Iterator

import numpy as np

from stopwise.data.errors import DataError
from stopwise.core.params import Choice, Interval, param
from stopwise.data.sources import RawData, SourceDef, register_source
from stopwise.data.tabular import TASK_CHOICES, is_categorical_dtype, split_target

OML_NS = "{http://openml.org/openml}"
ID = Interval(1, None, integer=True)
CLASSIFICATION_TASK_TYPES = (1, 3)   # supervised classification, learning curve
REGRESSION_TASK_TYPES = (2,)


class OpenMLCacheError(DataError):
    """An OpenML dataset or task that is not (fully) in the local cache (one line)."""


def openml_module():
    import openml

    return openml


def cache_root() -> Path:
    """openml's cache directory for the configured server (it honours OPENML_CACHE_DIR)."""
    return Path(openml_module().config.get_cache_directory())


@dataclass(frozen=True)
class OpenMLParams:
    data_id: int | None = param(None, ID, "OpenML dataset id")
    name: str | None = param(None, None, "OpenML dataset name (with version, instead of data_id)")
    version: int | None = param(None, ID, "dataset version (required with name)")
    task_id: int | None = param(None, ID, "OpenML task id: its target and predefined folds (split.kind=indices)")
    target: str | None = param(None, None, "target column (default: the task's, else the dataset's default target)")
    task: str = param("auto", Choice(TASK_CHOICES), "auto: from the OpenML task type, else from the target's type")


def fetch_hint(kind: str, ref: Any) -> str:
    return f"stopwise datasets fetch --task {ref}" if kind == "task" else f"stopwise datasets fetch {ref}"


def _text(root: ET.Element, tag: str) -> str | None:
    el = root.find(f".//{OML_NS}{tag}")
    return el.text.strip() if el is not None and el.text is not None else None


def read_description(did: int, root: Path | None = None) -> dict[str, str] | None:
    """Fields of a cached dataset description, or None when it is not cached."""
    path = (root or cache_root()) / "datasets" / str(did) / "description.xml"
    try:
        tree = ET.parse(path).getroot()
    except (OSError, ET.ParseError):
        return None
    out = {}
    for child in tree:
        if child.tag.startswith(OML_NS) and child.text is not None:
            out[child.tag[len(OML_NS):]] = child.text.strip()
    return out


def data_file(did: int, desc: dict[str, str], root: Path | None = None) -> Path | None:
    """The cached data file openml will read (Parquet when the description has a Parquet
    URL, else ARFF), or None when it is missing."""
    d = (root or cache_root()) / "datasets" / str(did)
    skip_pq = os.environ.get("OPENML_SKIP_PARQUET", "false").casefold() == "true"
    if "parquet_url" in desc and not skip_pq:
        for name in (f"dataset_{did}.pq", "dataset.pq"):
            if (d / name).is_file():
                return d / name
        return None
    return d / "dataset.arff" if (d / "dataset.arff").is_file() else None


def cached_dataset_ids(root: Path | None = None) -> list[int]:
    d = (root or cache_root()) / "datasets"
    if not d.is_dir():
        return []
    return sorted(int(p.name) for p in d.iterdir() if p.name.isdigit() and (p / "description.xml").is_file())


def cached_task_ids(root: Path | None = None) -> list[int]:
    d = (root or cache_root()) / "tasks"
    if not d.is_dir():
        return []
    return sorted(int(p.name) for p in d.iterdir() if p.name.isdigit() and (p / "task.xml").is_file())


def read_task(tid: int, root: Path | None = None) -> dict[str, Any] | None:
    """Task type, dataset id, target and split dimensions (``repeats``, ``folds``: None when
    the description does not state them) of a cached task, or None."""
    path = (root or cache_root()) / "tasks" / str(tid) / "task.xml"
    try:
        tree = ET.parse(path).getroot()
    except (OSError, ET.ParseError):
        return None
    dims: dict[str, int | None] = {"repeats": None, "folds": None}
    for el in tree.iter(f"{OML_NS}parameter"):
        key = {"number_repeats": "repeats", "number_folds": "folds"}.get(el.get("name", ""))
        if key and el.text and el.text.strip().isdigit():
            dims[key] = int(el.text.strip())
    try:
        return {"task_type_id": int(_text(tree, "task_type_id") or 0), "data_id": int(_text(tree, "data_set_id") or 0),
                "target": _text(tree, "target_feature"), **dims}
    except ValueError:
        return None


def task_kind(task: dict[str, Any] | None) -> str | None:
    """``classification`` or ``regression`` for a supervised task (from :func:`read_task`), else None."""
    if task is None:
        return None
    if task["task_type_id"] in CLASSIFICATION_TASK_TYPES:
        return "classification"
    return "regression" if task["task_type_id"] in REGRESSION_TASK_TYPES else None


def task_splits(tid: int, root: Path | None = None) -> list[tuple[int, int]]:
    """The (repeat, fold) pairs of a cached task, in order: from the description's number of
    repeats and folds, else from the split file itself."""
    root = root or cache_root()
    t = read_task(tid, root)
    if t is not None and t["repeats"] and t["folds"]:
        return [(r, f) for r in range(t["repeats"]) for f in range(t["folds"])]
    seen: set[tuple[int, int]] = set()
    try:
        with open(root / "tasks" / str(tid) / "datasplits.arff", encoding="utf-8") as fh:
            data = False
            for line in fh:
                if not data:
                    data = line.strip().upper() == "@DATA"
                    continue
                parts = line.strip().split(",")
                if len(parts) >= 4:
                    seen.add((int(float(parts[2])), int(float(parts[3]))))
    except (OSError, ValueError):
        return []
    return sorted(seen)


def resolve(p: OpenMLParams, root: Path | None = None) -> tuple[int, dict[str, Any] | None]:
    """The dataset id (and cached task facts) a config names, checking the cache only."""
    root = root or cache_root()
    task = None
    if p.task_id is not None:
        task = read_task(p.task_id, root)
        if task is None or not (root / "tasks" / str(p.task_id) / "datasplits.arff").is_file():
            raise OpenMLCacheError(f"OpenML task {p.task_id} is not in the OpenML cache ({root}); warm it on a machine "
                                   f"with network: {fetch_hint('task', p.task_id)}")
        if task["task_type_id"] not in CLASSIFICATION_TASK_TYPES + REGRESSION_TASK_TYPES:
            raise OpenMLCacheError(f"OpenML task {p.task_id} is not a supervised classification or regression task")
        if p.data_id is not None and p.data_id != task["data_id"]:
            raise OpenMLCacheError(f"OpenML task {p.task_id} is on dataset {task['data_id']}, not dataset.params.data_id={p.data_id}")
        did = task["data_id"]
    elif p.data_id is not None:
        did = p.data_id
    elif p.name is not None:
        if p.version is None:
            raise OpenMLCacheError("dataset.params.name needs dataset.params.version (names are not unique on OpenML)")
        hits = [i for i in cached_dataset_ids(root)
                if (lambda d: d is not None and d.get("name") == p.name and d.get("version") == str(p.version))(read_description(i, root))]
        if not hits:
            raise OpenMLCacheError(f"OpenML dataset {p.name!r} version {p.version} is not in the OpenML cache ({root}); "
                                   f"warm it on a machine with network: {fetch_hint('data', f'{p.name}@{p.version}')}")
        did = hits[0]
    else:
        raise OpenMLCacheError("dataset.source=openml needs dataset.params.data_id, name and version, or task_id")
    desc = read_description(did, root)
    what = f"OpenML dataset {did}" + (f" (of task {p.task_id})" if p.task_id is not None else "")
    hint = fetch_hint("task", p.task_id) if p.task_id is not None else fetch_hint("data", did)
    if desc is None or data_file(did, desc, root) is None:
        raise OpenMLCacheError(f"{what} is not in the OpenML cache ({root}); warm it on a machine with network: {hint}")
    if task is not None and task["task_type_id"] in CLASSIFICATION_TASK_TYPES and \
            not (root / "datasets" / str(did) / "features.xml").is_file():
        raise OpenMLCacheError(f"{what} has no cached features file ({root}); warm it on a machine with network: {hint}")
    return did, task


def check_openml(p: OpenMLParams) -> None:
    if p.task_id is None and p.data_id is None and p.name is None:
        raise OpenMLCacheError("dataset.source=openml needs dataset.params.data_id, name and version, or task_id")
    if p.name is not None and p.version is None and p.data_id is None and p.task_id is None:
        raise OpenMLCacheError("dataset.params.name needs dataset.params.version (names are not unique on OpenML)")


@contextlib.contextmanager
def openml_lock(root: Path | None = None) -> Iterator[None]:
    """An exclusive lock over openml calls, shared by every process using this cache."""
    root = root or cache_root()
    try:
        import fcntl
    except ImportError:  # pragma: no cover - no POSIX locks: rely on a warm cache
        yield
        return
    try:
        root.mkdir(parents=True, exist_ok=True)
        fh = open(root / "stopwise.lock", "a+b")
    except OSError:  # a read-only cache (a shared mount): nothing to serialize against
        yield
        return
    with fh:
        fcntl.flock(fh.fileno(), fcntl.LOCK_EX)
        try:
            yield
        finally:
            fcntl.flock(fh.fileno(), fcntl.LOCK_UN)


def load_openml(p: OpenMLParams) -> RawData:
    """Load a cached OpenML dataset (and task) through ``openml.datasets.get_dataset`` /
    ``openml.tasks.get_task``; the predefined folds of a task become ``RawData.folds``."""
    check_openml(p)
    openml = openml_module()
    root = cache_root()
    did, tinfo = resolve(p, root)
    with openml_lock(root):
        task = None
        if p.task_id is not None:
            task = openml.tasks.get_task(p.task_id, download_splits=True)
        ds = openml.datasets.get_dataset(did, download_data=True, download_qualities=False,
                                         download_features_meta_data=False)
        df, _, cat_ind, names = ds.get_data(target=None)
        folds = None
        if task is not None:
            split = task.download_split()
            folds = {(int(r), int(f)): (np.asarray(s[0].train, dtype=np.int64), np.asarray(s[0].test, dtype=np.int64))
                     for r, per in split.split.items() for f, s in per.items()}
    target = p.target or (task.target_name if task is not None else None) or ds.default_target_attribute
    if target is not None and "," in str(target):
        target = str(target).split(",")[0]
    kind = p.task
    if task is not None and kind == "auto":
        kind = "classification" if tinfo["task_type_id"] in CLASSIFICATION_TASK_TYPES else "regression"
    where = f"OpenML dataset {did}"
    frame, y, kind = split_target(df, target, kind, where)
    cat = tuple(c for c, is_cat in zip(names, cat_ind) if is_cat and c in frame.columns)
    cat = tuple(sorted(set(cat) | {c for c in frame.columns if is_categorical_dtype(frame[c])}, key=list(frame.columns).index))
    info = {"origin": "openml", "data_id": did, "openml_name": ds.name, "version": ds.version, "target": target}
    if task is not None:
        info["task_id"] = p.task_id
        info["folds"] = sorted([list(k) for k in folds])
    return RawData(X=None, y=y, task=kind, feature_names=tuple(frame.columns), frame=frame, categorical=cat,
                   folds=folds, info=info)


def openml_fingerprint(p: OpenMLParams) -> str:
    check_openml(p)
    root = cache_root()
    did, task = resolve(p, root)
    h = hashlib.sha256(f"openml:{did}".encode())
    files = [data_file(did, read_description(did, root) or {}, root)]
    if p.task_id is not None:
        files += [root / "tasks" / str(p.task_id) / "task.xml", root / "tasks" / str(p.task_id) / "datasplits.arff"]
    for f in files:
        with open(f, "rb") as fh:
            for chunk in iter(lambda: fh.read(1 << 20), b""):
                h.update(chunk)
    return h.hexdigest()


register_source(SourceDef("openml", OpenMLParams, load_openml,
                          "OpenML datasets and tasks from openml's local cache (warm it with `stopwise datasets fetch`)",
                          fingerprint=openml_fingerprint, check=check_openml))


# ---------------------------------------------------------------- warming the cache (network)

def fetch_dataset(ref: str) -> str:
    """Download a dataset into openml's cache (``ID`` or ``NAME@VERSION``) and let openml
    build its own derived files, so later runs only read. Returns a one-line summary."""
    openml = openml_module()
    with openml_lock():
        if "@" in ref:
            name, version = ref.rsplit("@", 1)
            ds = openml.datasets.get_dataset(name, version=int(version), download_data=True,
                                             download_features_meta_data=True, download_qualities=False)
        else:
            ds = openml.datasets.get_dataset(int(ref), download_data=True, download_features_meta_data=True,
                                             download_qualities=False)
        df, *_ = ds.get_data()
    return (f"dataset {ds.dataset_id} ({ds.name}, version {ds.version}): {df.shape[0]} rows x {df.shape[1]} columns, "
            f"default target {ds.default_target_attribute}")


def fetch_task(tid: int) -> str:
    openml = openml_module()
    with openml_lock():
        task = openml.tasks.get_task(int(tid), download_splits=True, download_data=True,
                                     download_features_meta_data=True, download_qualities=False)
        ds = task.get_dataset()
        df, *_ = ds.get_data()
        reps, folds, _ = task.get_split_dimensions()
    return (f"task {tid} ({task.task_type}) on dataset {ds.dataset_id} ({ds.name}): {df.shape[0]} rows, "
            f"target {task.target_name}, {reps} repeat(s) x {folds} fold(s)")

"""The dataset catalog: every dataset a run can use, with its size, task and source.

Listed: the dataset configs (``conf/dataset/*.yaml``: bundled data, generators, OpenML
datasets and suites and the user's files that have a config), the bundled loaders and
generator sources that no config uses, and every dataset, task and suite in OpenML's local
cache. Reading
the catalog never touches the network and writes nothing.
"""
from __future__ import annotations

from dataclasses import asdict, dataclass
from pathlib import Path
from typing import Any

from stopwise.data.errors import DataError
from stopwise.data.sources import SOURCES

GENERATOR_TASKS = {"synthetic": "regression", "sparse": "regression", "integral": "regression",
                   "spectral": "regression", "separable": "binary", "phillips": "regression",
                   "shaw": "regression", "baart": "regression", "heat": "regression", "gravity": "regression"}
# The note of a classical test problem: its published source and discretization
GENERATOR_NOTES = {"phillips": "Phillips 1962, Galerkin", "shaw": "Shaw 1972, midpoint rule",
                   "baart": "Baart 1982, Galerkin", "heat": "Carasso 1982 / Hansen 2007, collocation",
                   "gravity": "Hansen 2007, midpoint rule"}


@dataclass
class Entry:
    name: str
    source: str
    task: str
    rows: Any
    columns: Any
    use: str
    note: str = ""


def _openml_shape(data_id: int, root: Path) -> tuple[Any, Any, str, str]:
    """Rows, feature columns, task and name of a cached OpenML dataset, from its
    description and the Parquet file's metadata (openml itself is not called)."""
    import pyarrow.parquet as pq

    from stopwise.data.openml_source import data_file, read_description

    desc = read_description(data_id, root)
    if desc is None:
        return "?", "?", "?", ""
    f = data_file(data_id, desc, root)
    name = desc.get("name", "")
    if f is None or f.suffix != ".pq":
        return "?", "?", "?", name
    schema = pq.read_schema(f)
    md = pq.read_metadata(f)
    target = desc.get("default_target_attribute")
    cols = md.num_columns - (1 if target in schema.names else 0)
    ignore = {desc.get("row_id_attribute"), desc.get("ignore_attribute")} - {None}
    cols -= sum(1 for n in schema.names if n in ignore)
    task = "?"
    if target in schema.names:
        import pyarrow as pa

        t = schema.field(target).type
        task = "classification" if pa.types.is_dictionary(t) or pa.types.is_string(t) else "regression"
    return md.num_rows, cols, task, name


def _file_shape(p: dict[str, Any]) -> tuple[Any, Any]:
    """Rows and feature columns of a file config (an svmlight file: its matrix's shape)."""
    import pandas as pd

    from stopwise.data.tabular import FileParams, _file_format, read_svmlight

    params = FileParams(**p)
    fmt = _file_format(params)
    if fmt == "svmlight":
        X, _, _ = read_svmlight(params)
        return X.shape[0], X.shape[1]
    if fmt == "parquet":
        import pyarrow.parquet as pq

        md = pq.read_metadata(params.path)
        return md.num_rows, md.num_columns - 1
    df = pd.read_csv(params.path, sep=params.sep)
    return df.shape[0], df.shape[1] - 1


def _suite_entry(name: str, use: str, p: dict[str, Any]) -> Entry:
    """A suite config: its tasks' kinds, and how many tasks (rows and columns vary by task)."""
    from stopwise.data.openml_suite import SuiteParams, suite_tasks

    if p.get("suite") is None:
        return Entry(name, "openml_suite", "mixed", "-", "-", use + " dataset.params.suite=ID",
                     "template: set the suite (stopwise sweep expands it into one dataset per task)")
    try:
        rec, tasks = suite_tasks(SuiteParams(**p))
    except DataError:
        return Entry(name, "openml_suite", "?", "?", "?", use, f"not cached: stopwise datasets fetch --suite {p['suite']}")
    kinds = sorted({t.kind for t in tasks})
    return Entry(name, "openml_suite", "/".join(kinds), "-", "-", use,
                 f"suite {rec['suite_id']} {rec.get('alias') or ''}: {len(tasks)} tasks".replace("  ", " "))


def describe_config(name: str, cfg: dict[str, Any]) -> Entry:
    src_name = cfg.get("source", "?")
    params = dict(cfg.get("params") or {})
    use = f"dataset={name}"
    if src_name not in SOURCES:
        return Entry(name, src_name, "?", "?", "?", use, "unknown source")
    src = SOURCES[src_name]
    try:
        from stopwise.core.params import make_params

        p = asdict(make_params(src.params, params, f"dataset.params ({src_name})"))
    except ValueError as e:
        return Entry(name, src_name, "?", "?", "?", use, str(e))
    if src_name in GENERATOR_TASKS:
        return Entry(name, src_name, GENERATOR_TASKS[src_name], p.get("n", "?"), p.get("d", "?"), use,
                     p.get("generator") or p.get("kernel") or GENERATOR_NOTES.get(src_name, ""))
    if src_name == "file":
        if not p.get("path"):
            return Entry(name, "file", p.get("task", "auto"), "-", "-", use + " dataset.params.path=FILE dataset.params.target=COL",
                         "template: set path (and target, for CSV / Parquet)")
        try:
            rows, cols = _file_shape(p)
        except Exception as e:  # noqa: BLE001 - a catalog line, not a failure
            return Entry(name, "file", p.get("task", "auto"), "?", "?", use, f"unreadable: {type(e).__name__}")
        return Entry(name, "file", p.get("task", "auto"), rows, cols, use, p["path"])
    if src_name == "openml":
        from stopwise.data.openml_source import OpenMLParams, cache_root, resolve

        if p.get("data_id") is None and p.get("task_id") is None and p.get("name") is None:
            return Entry(name, "openml", p.get("task", "auto"), "-", "-",
                         use + " dataset.params.data_id=ID dataset.name=NAME", "template: set data_id or task_id")
        try:
            did, _ = resolve(OpenMLParams(**p))
        except DataError:
            ref = p.get("task_id") or p.get("data_id") or f"{p.get('name')}@{p.get('version')}"
            flag = "--task " if p.get("task_id") else ""
            return Entry(name, "openml", p.get("task", "auto"), "?", "?", use,
                         f"not cached: stopwise datasets fetch {flag}{ref}")
        rows, cols, task, oname = _openml_shape(did, cache_root())
        return Entry(name, "openml", task if p.get("task") == "auto" else p["task"], rows, cols, use,
                     f"OpenML {did} {oname}".strip())
    if src_name == "openml_suite":
        return _suite_entry(name, use, p)
    # bundled and anything else: load it (these are small)
    try:
        raw = src.load(make_params(src.params, params, "dataset.params"))
    except ValueError as e:
        return Entry(name, src_name, "?", "?", "?", use, str(e))
    return Entry(name, src_name, raw.task, raw.n_rows, len(raw.feature_names), use, raw.info.get("origin", ""))


def entries() -> list[Entry]:
    from omegaconf import OmegaConf

    from stopwise.config.spec import conf_dir, group_options
    from stopwise.data.sources import SKLEARN_LOADERS

    out: list[Entry] = []
    used_sources, used_loaders, used_openml = set(), set(), set()
    for name in group_options("dataset"):
        cfg = OmegaConf.to_container(OmegaConf.load(conf_dir() / "dataset" / f"{name}.yaml"), resolve=True)
        if not isinstance(cfg, dict):
            continue
        e = describe_config(name, cfg)
        out.append(e)
        used_sources.add(cfg.get("source"))
        params = cfg.get("params") or {}
        if cfg.get("source") == "sklearn":
            used_loaders.add(params.get("loader"))
        if cfg.get("source") == "openml" and e.note.startswith("OpenML "):
            used_openml.add(int(e.note.split()[1]))
    for loader in SKLEARN_LOADERS:
        if loader not in used_loaders:
            e = describe_config(loader, {"source": "sklearn", "params": {"loader": loader}})
            e.use = f"dataset.source=sklearn dataset.params.loader={loader} dataset.name={loader}"
            out.append(e)
    for name, task in GENERATOR_TASKS.items():
        if name not in used_sources and name in SOURCES:
            e = describe_config(name, {"source": name})
            e.use = f"dataset.source={name} dataset.name={name}"
            out.append(e)
    try:
        from stopwise.data.openml_source import (
            cache_root,
            cached_dataset_ids,
            cached_task_ids,
            read_task,
        )

        root = cache_root()
        for did in cached_dataset_ids(root):
            if did in used_openml:
                continue
            rows, cols, task, oname = _openml_shape(did, root)
            out.append(Entry(f"openml-{did}", "openml", task, rows, cols,
                             f"dataset=openml dataset.params.data_id={did} dataset.name=openml-{did}",
                             f"cached: {oname}"))
        for tid in cached_task_ids(root):
            t = read_task(tid, root) or {}
            did = t.get("data_id")
            rows, cols, _, oname = _openml_shape(did, root) if did else ("?", "?", "?", "")
            kind = {1: "classification", 2: "regression", 3: "classification"}.get(t.get("task_type_id"), "?")
            out.append(Entry(f"openml-task-{tid}", "openml", kind, rows, cols,
                             f"dataset=openml dataset.params.task_id={tid} split.kind=indices",
                             f"cached task on dataset {did} {oname}".strip()))
        from stopwise.data.openml_suite import cached_suites

        for rec in cached_suites(root):
            n_cached = sum(1 for t in rec["tasks"] if t in set(cached_task_ids(root)))
            out.append(Entry(f"openml-suite-{rec['suite_id']}", "openml_suite", "mixed", "-", "-",
                             f"dataset=openml_suite dataset.params.suite={rec['suite_id']}",
                             f"cached suite {rec.get('alias') or rec.get('name') or ''}: {len(rec['tasks'])} tasks "
                             f"({n_cached} cached), fetched {rec.get('fetched')}"))
    except ImportError:  # pragma: no cover - openml is a dependency
        pass
    return out


def format_table(items: list[Entry]) -> str:
    head = ("name", "source", "task", "rows", "columns", "use", "note")
    rows = [head] + [(e.name, e.source, e.task, str(e.rows), str(e.columns), e.use, e.note) for e in items]
    widths = [max(len(r[i]) for r in rows) for i in range(len(head) - 1)]
    lines = []
    for r in rows:
        cells = [r[i].rjust(widths[i]) if i in (3, 4) else r[i].ljust(widths[i]) for i in range(len(head) - 1)]
        lines.append("  ".join(cells + [r[-1]]).rstrip())
    return "\n".join(lines)

"""Read stored traces and runs into pandas (only the columns asked for)."""
from __future__ import annotations

import math
import warnings
from pathlib import Path
from typing import Any, Iterable

import pandas as pd
import pyarrow as pa
import pyarrow.parquet as pq

from stopwise.results.schema import FORMER_COLUMNS, one_line as _one_line, read_trace
from stopwise.results.store import Store


def _files(store: Store, campaign: str | None) -> list[Path]:
    if campaign is None:
        return store.run_files()
    return store.run_files(store.find_campaign(campaign)["run_ids"])


def _match(value: Any, want: Any) -> bool:
    if isinstance(want, (list, tuple, set, frozenset)):
        return value in want
    return value == want


def load_traces(root: str | Path = "results", campaign: str | None = None,
                columns: Iterable[str] | None = None, **filters: Any) -> pd.DataFrame:
    """All stored iterates as one DataFrame (one row per recorded iterate).

    ``campaign`` is a campaign name or id; ``filters`` compare run-level columns
    (``solver="gd"``, ``dataset=["diabetes", "illposed"]``, ``step_scale=0.5``).
    Unreadable files are skipped with a warning naming them.
    """
    store = Store(root)
    want = list(columns) if columns is not None else None
    tables = []
    schema_so_far = None
    for path in _files(store, campaign):
        if filters:
            try:
                names = pq.read_schema(path).names
                first = pq.read_table(path, columns=[k for k in filters if k in names]).slice(0, 1)
            except Exception as e:  # a corrupted file must not sink the whole query
                warnings.warn(f"skipping unreadable trace {path}: {type(e).__name__}: {_one_line(e)}", stacklevel=2)
                continue
            row = first.to_pylist()[0] if first.num_rows else None
            if row is None or any(k not in row or not _match(row[k], v) for k, v in filters.items()):
                continue
        table = read_trace(path, want)
        if table is None:
            continue
        try:  # a file whose column types cannot join the others (e.g. tampered) is skipped by name
            merged = table.schema if schema_so_far is None else pa.unify_schemas(
                [schema_so_far, table.schema], promote_options="permissive")
        except Exception as e:
            warnings.warn(f"skipping unreadable trace {path}: {type(e).__name__}: {_one_line(e)}", stacklevel=2)
            continue
        schema_so_far = merged
        tables.append(table)
    if not tables:
        return pd.DataFrame(columns=want or [])
    table = pa.concat_tables(tables, promote_options="permissive")
    return table.to_pandas()


# Columns of load_runs (one row per run, from file metadata; docs/schema.md, "Reading").
RUN_COLUMNS = ("run_id", "dataset", "solver", "seed", "status", "iterations", "passes", "seconds",
               "best_val_error", "best_val_iteration", "test_at_best_val", "final_test_error", "message")


def load_runs(root: str | Path = "results", campaign: str | None = None) -> pd.DataFrame:
    """One row per stored run, from file metadata: identity, params, status and summary."""
    store = Store(root)
    rows = []
    for path in _files(store, campaign):
        try:
            meta = store.read_meta(path)
            cfg = meta.get("config", {})
            s = meta.get("summary", {})
            row = {"run_id": meta.get("run_id"), "dataset": cfg.get("dataset", {}).get("name"),
                   "solver": cfg.get("solver"), "seed": cfg.get("seed"), "status": meta.get("status")}
            for k, v in (cfg.get("params") or {}).items():
                k = FORMER_COLUMNS.get(k, k)  # a run stored before a rename shows today's name
                if k not in RUN_COLUMNS:
                    row[k] = v
            for k in ("iterations", "passes", "seconds", "best_val_error", "best_val_iteration",
                      "test_at_best_val", "final_test_error"):
                row[k] = s.get(k, math.nan)
            row["message"] = meta.get("message", "")
        except Exception as e:  # unreadable, or metadata of the wrong shape
            warnings.warn(f"skipping unreadable trace {path}: {type(e).__name__}: {_one_line(e)}", stacklevel=2)
            continue
        rows.append(row)
    if not rows:
        return pd.DataFrame(columns=list(RUN_COLUMNS))
    df = pd.DataFrame(rows)
    base = [c for c in RUN_COLUMNS if c in df.columns and c not in ("message",)]
    params = [c for c in df.columns if c not in RUN_COLUMNS]
    return df[base[:5] + params + base[5:] + ["message"]].sort_values(
        ["dataset", "solver", "seed", "run_id"], kind="stable").reset_index(drop=True)

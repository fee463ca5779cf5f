"""The trace schema: the columns every stored trace has, their types, and the one reader.

A trace file (``runs/<run_id16>.parquet``, docs/schema.md) holds the run-level columns
(one value repeated on every row), then the base per-iterate columns, then extras (task
columns, residual statistics, metric sets, solver metrics), which vary by run and are not
fixed here. :data:`TRACE_SCHEMA` declares the first two groups; the writer
(:class:`~stopwise.results.store.Store`) and the recorder take their names and order from it,
and :func:`read_trace` checks a file against it before reading.

Types. Integer columns are ``int64`` and measurements ``float64`` when written; a reader
accepts any integer type for an integer column and any number for a measurement, and a
column of nulls for any but ``iteration`` (``dist_truth`` is null when the truth is unknown), so that a file is refused only when a column
has the wrong kind (a string where a number belongs).
"""
from __future__ import annotations

import warnings
from pathlib import Path
from typing import Iterable

import pyarrow as pa
import pyarrow.parquet as pq

from stopwise.core.errors import StopwiseError

RUN_LEVEL_SCHEMA = pa.schema([
    ("run_id", pa.string()),
    ("dataset", pa.string()),
    ("task", pa.string()),
    ("loss", pa.string()),
    ("solver", pa.string()),
    ("seed", pa.int64()),
    ("status", pa.string()),
])

BASE_SCHEMA = pa.schema([
    ("iteration", pa.int64()),
    ("passes", pa.float64()),
    ("seconds", pa.float64()),
    ("train_loss", pa.float64()),
    ("train_error", pa.float64()),
    ("val_error", pa.float64()),
    ("test_error", pa.float64()),
    ("w_norm", pa.float64()),
    ("residual_norm", pa.float64()),
    ("dist_truth", pa.float64()),
])

TRACE_SCHEMA = pa.schema(list(RUN_LEVEL_SCHEMA) + list(BASE_SCHEMA))

RUN_LEVEL: tuple[str, ...] = tuple(RUN_LEVEL_SCHEMA.names)     # in the order they are written
BASE_COLUMNS: tuple[str, ...] = tuple(BASE_SCHEMA.names)        # in the order they are recorded
STATUSES = ("completed", "diverged", "failed")


NOT_NULL = ("iteration",)  # every other declared column may be all null (e.g. dist_truth)


def _kind_fits(name: str, declared: pa.DataType, found: pa.DataType) -> bool:
    if pa.types.is_null(found):
        return name not in NOT_NULL
    if pa.types.is_string(declared):
        return pa.types.is_string(found) or pa.types.is_large_string(found)
    if pa.types.is_integer(declared):
        return pa.types.is_integer(found)
    return pa.types.is_floating(found) or pa.types.is_integer(found)


def type_mismatches(schema: pa.Schema) -> list[str]:
    """``"<column> is <type>"`` for every declared column of ``schema`` of the wrong kind.

    ``loss`` is declared but not checked: older traces have no such column and a string
    there is all that is ever written."""
    return [f"{f.name} is {schema.field(f.name).type}" for f in TRACE_SCHEMA
            if f.name in schema.names and f.name != "loss" and not _kind_fits(f.name, f.type, schema.field(f.name).type)]


class SchemaError(StopwiseError, TypeError):
    """A trace whose declared columns have the wrong types."""


def one_line(e: BaseException) -> str:
    """An error's text on one line (whitespace runs folded), at most 300 characters.

    >>> one_line(ValueError("first line\\n  second   line"))
    'first line second line'
    """
    return " ".join(str(e).split())[:300]


# Param columns renamed since traces were first written: {former name: today's name}.
# The same map as stopwise.config.spec.RENAMED_SOLVER_KEYS (checked by a test); kept
# here because the results schema sits below the config package.
FORMER_COLUMNS = {"batch_size": "batch"}


def read_trace(path: str | Path, columns: Iterable[str] | None = None, *,
               stacklevel: int = 3) -> pa.Table | None:
    """The columns of ``columns`` (all when None) that the trace at ``path`` has, after
    checking its declared columns against :data:`TRACE_SCHEMA`; None, with a warning naming
    the file, when it is unreadable or of the wrong schema (one bad file never sinks a
    query).
    """
    try:
        schema = pq.read_schema(path)
        wrong = type_mismatches(schema)
        if wrong:
            raise SchemaError("column types differ from the trace schema: " + ", ".join(wrong))
        former = {old: new for old, new in FORMER_COLUMNS.items() if old in schema.names and new not in schema.names}
        if columns is None:
            cols = None
        else:
            back = {new: old for old, new in former.items()}
            cols = [back.get(c, c) for c in columns if c in schema.names or c in back]
        table = pq.read_table(path, columns=cols)
        if former:  # a trace written before a param was renamed reads under today's name
            table = table.rename_columns([former.get(n, n) for n in table.column_names])
        return table
    except Exception as e:
        warnings.warn(f"skipping unreadable trace {path}: {type(e).__name__}: {one_line(e)}", stacklevel=stacklevel)
        return None


__all__ = ["BASE_COLUMNS", "BASE_SCHEMA", "RUN_LEVEL", "RUN_LEVEL_SCHEMA", "STATUSES", "SchemaError",
           "FORMER_COLUMNS", "TRACE_SCHEMA", "read_trace", "type_mismatches"]

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


# ---------------------------------------------------------------- bytes on disk and their checks
#
# Every Parquet file of a results root (traces, baselines) is written with a CRC-32 on each
# page (``write_page_checksum``) and read with the pages' CRCs verified, so a changed byte
# in a page fails the read (readers then skip the file by name) instead of decoding to
# another number. Beside the ``stopwise`` metadata (JSON, under :data:`META_KEY`) a file
# carries ``stopwise.checksums`` (:data:`CHECKSUMS_KEY`): the SHA-256 of the decoded data
# (:func:`data_digest`) and of the metadata's bytes. Readers of metadata check the second;
# ``stopwise verify`` checks both, and that the file's bytes are exactly what the writer
# makes of its content (:func:`encode_bytes`), which names a changed byte anywhere in the file.

META_KEY = b"stopwise"
CHECKSUMS_KEY = b"stopwise.checksums"
# snappy rather than zstd (a trace's pages are small: zstd costs a quarter more time for
# files 4% smaller); no dictionary encoding and no min/max statistics (a trace's columns are
# a few hundred values: they cost a fifth of the encoding and save a reader nothing)
WRITE_OPTIONS = {"compression": "snappy", "write_page_checksum": True, "use_dictionary": False,
                 "write_statistics": False}


def encode_bytes(table: pa.Table) -> pa.Buffer:
    """``table`` (with its schema metadata) as Parquet, the one way stopwise encodes it, in
    an Arrow buffer (bytes-like, not copied) that the caller writes in one call. (A Python
    file object given to the Parquet writer costs a call back into Python for every small
    write: about as much again as the encoding for a trace of a hundred rows.)"""
    sink = pa.BufferOutputStream()
    pq.write_table(table, sink, **WRITE_OPTIONS)
    return sink.getvalue()


def read_table(path, columns=None) -> pa.Table:
    """``pyarrow.parquet.read_table`` with every page's CRC verified (files written before
    checksums were stored have none to verify and read as before)."""
    return pq.read_table(path, columns=columns, page_checksum_verification=True)


_KINDS: dict = {}  # Arrow type -> (its name, how data_digest reads its values)


def _kind(t: pa.DataType) -> tuple[str, str]:
    hit = _KINDS.get(t)
    if hit is None:
        kind = ("null" if pa.types.is_null(t) else "number" if pa.types.is_floating(t) or pa.types.is_integer(t)
                else "bool" if pa.types.is_boolean(t) else "string" if pa.types.is_string(t) else "other")
        hit = _KINDS[t] = (str(t), kind)
    return hit


def _digest_column(h, name: str, arr: pa.Array) -> None:
    """Feed one column of :func:`data_digest` into the hash ``h``."""
    import json

    import numpy as np

    type_name, kind = _kind(arr.type)
    n, nulls = len(arr), arr.null_count
    h.update(f"{name}\0{type_name}\0{n}\0{nulls}\0".encode())
    if nulls:
        h.update(np.asarray(arr.is_null().to_numpy(zero_copy_only=False), dtype=np.uint8).tobytes())
    if kind == "null" or nulls == n:
        return
    if kind == "number" and not nulls:
        h.update(np.ascontiguousarray(arr.to_numpy()))
    elif kind in ("number", "bool"):
        vals = arr.fill_null(False if kind == "bool" else 0) if nulls else arr
        h.update(np.ascontiguousarray(vals.to_numpy(zero_copy_only=False)))
    elif kind == "string" and not nulls:
        # the strings' bytes and their boundaries (offsets from 0), little-endian
        _, offsets, data = arr.buffers()
        offs = np.frombuffer(offsets, dtype=np.int32, count=n + 1, offset=arr.offset * 4)
        lo, hi = int(offs[0]), int(offs[-1])
        h.update((offs - lo).astype("<i4").tobytes())
        h.update(memoryview(data)[lo:hi] if data is not None else b"")
    else:
        h.update(json.dumps(arr.to_pylist(), default=str).encode())


def data_digest(table: pa.Table) -> str:
    """SHA-256 of a table's decoded content, independent of how it is encoded: each column's
    name, type, length, null mask and values in order (schema metadata aside).

    >>> t = pa.table({"a": [1.0, None], "b": ["x", "y"]})
    >>> data_digest(t) == data_digest(pa.table({"a": [1.0, None], "b": ["x", "y"]}))
    True
    >>> data_digest(t) == data_digest(pa.table({"a": [1.0, 0.0], "b": ["x", "y"]}))  # null is not 0
    False
    """
    import hashlib


    h = hashlib.sha256()
    for name, col in zip(table.column_names, table.columns):
        arr = col.chunk(0) if col.num_chunks == 1 else (col.combine_chunks() if col.num_chunks else pa.array([], col.type))
        _digest_column(h, name, arr)
    return h.hexdigest()


class ColumnDigest:
    """:func:`data_digest` of a trace computed from the values being written, column by column
    (a writer knows each column's type and nulls without asking Arrow): the same bytes in the
    same order, at a fraction of the cost. ``constant`` is a run-level column as
    :meth:`stopwise.results.store.Store.write_run` writes it (one value on every row: bool,
    int, float, None or a string, anything else as its JSON), ``values`` a per-iterate
    column given as the NumPy array and the Arrow array made from it, ``nulls`` a column of
    nulls. ``tests/results/test_bit_rot.py`` checks it against :func:`data_digest`."""

    def __init__(self):
        import hashlib

        self._h = hashlib.sha256()

    def _head(self, name: str, type_name: str, n: int, nulls: int) -> None:
        self._h.update(f"{name}\0{type_name}\0{n}\0{nulls}\0".encode())

    def constant(self, name: str, value, n: int) -> None:
        import json

        import numpy as np

        if isinstance(value, bool):
            self._head(name, "bool", n, 0)
            self._h.update(np.full(n, value, dtype=np.bool_))
        elif isinstance(value, int):
            self._head(name, "int64", n, 0)
            self._h.update(np.full(n, value, dtype=np.int64))
        elif isinstance(value, float):
            self._head(name, "double", n, 0)
            self._h.update(np.full(n, value, dtype=np.float64))
        elif value is None:
            self.nulls(name, n, "string")
        else:
            b = (value if isinstance(value, str) else json.dumps(value, sort_keys=True)).encode()
            self._head(name, "string", n, 0)
            if n:  # data_digest reads nothing more of an empty column
                self._h.update((np.arange(n + 1, dtype=np.int64) * len(b)).astype("<i4").tobytes())
                self._h.update(b * n)

    def values(self, name: str, v, arr: pa.Array) -> None:
        import numpy as np

        dtype = getattr(v, "dtype", None)
        if dtype == np.float64 and arr.type == pa.float64() and v.ndim == 1 and arr.null_count == 0:
            self._head(name, "double", len(v), 0)
            self._h.update(np.ascontiguousarray(v))
        elif dtype == np.int64 and arr.type == pa.int64() and v.ndim == 1 and arr.null_count == 0:
            self._head(name, "int64", len(v), 0)
            self._h.update(np.ascontiguousarray(v))
        else:  # anything else: the general reading of the Arrow array
            _digest_column(self._h, name, arr)

    def nulls(self, name: str, n: int, type_name: str) -> None:
        import numpy as np

        self._head(name, type_name, n, n)
        if n:
            self._h.update(np.ones(n, dtype=np.uint8).tobytes())

    def hexdigest(self) -> str:
        return self._h.hexdigest()


def seal(table: pa.Table, meta: bytes, data: str | None = None) -> pa.Table:
    """``table`` with ``meta`` (the ``stopwise`` metadata's JSON bytes) and the checksums of
    both as its schema metadata, ready for :func:`encode_bytes`. ``data``: the table's
    :func:`data_digest` when the writer has it already (:class:`ColumnDigest`)."""
    import json

    version = pa.__version__
    sums = {"data": data if data is not None else data_digest(table), "metadata": _meta_digest(meta, version),
            "pyarrow": version}
    return table.replace_schema_metadata({META_KEY: meta, CHECKSUMS_KEY: json.dumps(sums, sort_keys=True).encode()})


def _meta_digest(meta: bytes, version: str) -> str:
    """SHA-256 of the metadata's bytes and the writing pyarrow version (which decides
    whether ``verify`` can compare the file's bytes with a fresh encoding)."""
    import hashlib

    return hashlib.sha256(meta + b"\0" + str(version).encode()).hexdigest()


def _sums(md: dict) -> dict | None:
    import json

    raw = md.get(CHECKSUMS_KEY)
    if raw is None:
        return None
    try:
        sums = json.loads(raw)
    except ValueError:
        return {}
    return sums if isinstance(sums, dict) else {}


def metadata_problem(md: dict) -> str:
    """Why a file's schema metadata ``md`` (``{bytes: bytes}``) is not what was written, or
    '' (also for files written before checksums were stored: see :func:`has_checksums`)."""

    sums = _sums(md)
    if sums is None:
        return ""
    if not all(isinstance(sums.get(k), str) for k in ("metadata", "data", "pyarrow")):
        return "its checksums are malformed (a changed byte)"
    if _meta_digest(md.get(META_KEY, b""), sums["pyarrow"]) != sums["metadata"]:
        return "its metadata differ from what was written (checksum mismatch: a changed byte)"
    return ""


def has_checksums(md: dict) -> bool:
    return CHECKSUMS_KEY in md


def written_by(md: dict) -> str | None:
    """The pyarrow version that wrote a file with checksums (None without them)."""
    sums = _sums(md)
    return sums.get("pyarrow") if sums else None


def encoding_problem(path, table: pa.Table) -> str:
    """For a file written by this pyarrow version: why its bytes are not exactly what
    :func:`encode_bytes` makes of its decoded ``table`` (schema metadata included), or ''. A
    changed byte that decodes to the same content (in a page header, the footer's
    statistics or its writer string) is named here."""
    with open(path, "rb") as fh:
        stored = fh.read()
    if encode_bytes(table).to_pybytes() != stored:
        return "its bytes differ from the encoding of its content (a changed byte in the file's structure)"
    return ""


def data_problem(table: pa.Table) -> str:
    """Why a decoded ``table`` (schema metadata included) is not the data that was written, or ''."""
    md = table.schema.metadata or {}
    sums = _sums(md)
    if not sums:
        return "" if sums is None else "its checksums are malformed (a changed byte)"
    if data_digest(table) != sums.get("data"):
        return "its data differ from what was written (checksum mismatch: a changed byte)"
    return ""


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
        changed = metadata_problem(schema.metadata or {})
        if changed:
            raise SchemaError(changed)
        wrong = type_mismatches(schema)
        if wrong:
            raise SchemaError("column types differ from the trace schema: " + ", ".join(wrong))
        former = {old: new for old, new in FORMER_COLUMNS.items() if old in schema.names and new not in schema.names}
        if columns is None:
            cols = None
        else:
            back = {new: old for old, new in former.items()}
            cols = [back.get(c, c) for c in columns if c in schema.names or c in back]
        table = read_table(path, columns=cols)
        if cols is None:
            changed = data_problem(table)
            if changed:
                raise SchemaError(changed)
        if former:  # a trace written before a param was renamed reads under today's name
            table = table.rename_columns([former.get(n, n) for n in table.column_names])
        return table
    except Exception as e:
        warnings.warn(f"skipping unreadable trace {path}: {type(e).__name__}: {one_line(e)}", stacklevel=stacklevel)
        return None


__all__ = ["BASE_COLUMNS", "BASE_SCHEMA", "RUN_LEVEL", "RUN_LEVEL_SCHEMA", "STATUSES", "SchemaError",
           "FORMER_COLUMNS", "TRACE_SCHEMA", "WRITE_OPTIONS", "ColumnDigest", "data_digest", "data_problem", "encode_bytes",
           "encoding_problem", "has_checksums", "metadata_problem", "written_by", "seal", "META_KEY", "CHECKSUMS_KEY", "read_table", "read_trace", "type_mismatches"]

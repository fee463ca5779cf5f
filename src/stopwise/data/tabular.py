"""Tabular sources: the user's own CSV / Parquet files.

A tabular source returns the raw feature columns as a DataFrame (``RawData.frame``); the
encoding of categorical columns, imputation and scaling happen after the split, fitted on
the training rows only (see :mod:`stopwise.data.preprocess`).
"""
from __future__ import annotations

import hashlib
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import numpy as np

from stopwise.data.errors import DataError
from stopwise.core.params import Choice, param
from stopwise.data.sources import RawData, SourceDef, register_source

TASK_CHOICES = ("auto", "regression", "binary", "multiclass")
FORMATS = ("auto", "csv", "parquet")


class TabularError(DataError):
    """Bad tabular data or options (one line)."""


def _short_list(names: list[str], limit: int = 12) -> str:
    shown = ", ".join(str(n) for n in names[:limit])
    return shown + (f", ... ({len(names)} in all)" if len(names) > limit else "")


def is_categorical_dtype(series: Any) -> bool:
    """Non-numeric columns (object, string, category, bool) are categorical."""
    import pandas as pd

    dt = series.dtype
    if isinstance(dt, pd.CategoricalDtype) or pd.api.types.is_bool_dtype(dt):
        return True
    return not pd.api.types.is_numeric_dtype(dt)


def split_target(df: Any, target: str | None, task: str, where: str) -> tuple[Any, np.ndarray, str]:
    """Separate the target column and decide the task.

    ``auto``: a numeric target means regression; a non-numeric one means classification,
    ``binary`` with two distinct labels and ``multiclass`` with more (``classification``
    asks for that choice even for numeric labels). Returns the feature
    frame, the target (float64 with NaN for regression; original labels as an object array
    with None for missing labels otherwise) and the task.
    """
    import pandas as pd

    cols = [str(c) for c in df.columns]
    if target is None:
        raise TabularError(f"{where} needs a target column: set dataset.params.target (columns: {_short_list(cols)})")
    if target not in cols:
        raise TabularError(f"{where} has no column {target!r} for the target; valid: {_short_list(cols)}")
    df = df.copy()
    df.columns = cols
    y = df[target]
    frame = df.drop(columns=[target])
    numeric = pd.api.types.is_numeric_dtype(y.dtype) and not pd.api.types.is_bool_dtype(y.dtype)
    if task == "auto":
        task = "regression" if numeric else "classification"
    if task == "regression":
        if not numeric:
            try:
                yv = pd.to_numeric(y, errors="raise")
            except (ValueError, TypeError):
                bad = next((v for v in y.dropna().tolist() if not _is_number(v)), None)
                raise TabularError(f"target column {target!r} of {where} is not numeric (value {bad!r}); a regression "
                                   "target must hold numbers (set dataset.params.task=binary or multiclass for "
                                   "class labels)") from None
        else:
            yv = y
        return frame, np.asarray(yv, dtype=np.float64), "regression"
    labels = y.astype(object).where(y.notna(), None).to_numpy(dtype=object)
    present = [v for v in labels if v is not None]
    k = len(set(present))
    if task == "classification":
        task = "binary" if k == 2 else "multiclass"
    if k < 2:
        raise TabularError(f"target column {target!r} of {where} has {k} distinct label(s); classification needs at least 2")
    if task == "binary" and k != 2:
        raise TabularError(f"target column {target!r} of {where} has {k} distinct labels; task=binary needs exactly 2 "
                           "(use task=multiclass)")
    return frame, labels, task


def _is_number(v: Any) -> bool:
    try:
        float(v)
        return True
    except (TypeError, ValueError):
        return False


def file_digest(path: Path) -> str:
    h = hashlib.sha256()
    with open(path, "rb") as fh:
        for chunk in iter(lambda: fh.read(1 << 20), b""):
            h.update(chunk)
    return h.hexdigest()


# ---------------------------------------------------------------- the user's files

ROW_ORDERS = ("exchangeable", "signal")


@dataclass(frozen=True)
class FileParams:
    path: str | None = param(None, None, "CSV or Parquet file (relative paths: from the working directory)")
    target: str | None = param(None, None, "name of the target column")
    format: str = param("auto", Choice(FORMATS), "auto (by suffix: .parquet/.pq is Parquet, else CSV), csv, parquet")
    task: str = param("auto", Choice(TASK_CHOICES), "auto: numeric target -> regression, labels -> classification")
    sep: str = param(",", None, "CSV field separator")
    row_order: str = param("exchangeable", Choice(ROW_ORDERS),
                           "signal: the rows are samples of a signal in file order (time, position), "
                           "so the residual's NCP statistic is recorded; exchangeable: row order means nothing")


def _file_format(p: FileParams) -> str:
    if p.format != "auto":
        return p.format
    return "parquet" if Path(p.path).suffix.lower() in (".parquet", ".pq") else "csv"


def check_file(p: FileParams) -> None:
    if not p.path:
        raise TabularError("dataset.source=file needs dataset.params.path (a CSV or Parquet file)")
    path = Path(p.path)
    if not path.is_file():
        raise TabularError(f"dataset file {p.path!r} not found" if not path.exists()
                           else f"dataset file {p.path!r} is not a regular file")
    if p.target is None:
        raise TabularError("dataset.source=file needs dataset.params.target (the target column)")


def load_file(p: FileParams) -> RawData:
    """Read the whole file with pandas (``read_csv`` / ``read_parquet``), then split off
    the target column. Columns of non-numeric type are categorical."""
    import pandas as pd

    check_file(p)
    fmt = _file_format(p)
    try:
        df = pd.read_parquet(p.path) if fmt == "parquet" else pd.read_csv(p.path, sep=p.sep)
    except Exception as e:  # unreadable file: one line
        first = str(e).strip().splitlines()[0] if str(e).strip() else type(e).__name__
        raise TabularError(f"cannot read dataset file {p.path!r} as {fmt}: {first}") from None
    if df.shape[0] == 0:
        raise TabularError(f"dataset file {p.path!r} has no rows")
    frame, y, task = split_target(df, p.target, p.task, f"file {p.path!r}")
    cat = tuple(c for c in frame.columns if is_categorical_dtype(frame[c]))
    return RawData(X=None, y=y, task=task, feature_names=tuple(frame.columns), frame=frame, categorical=cat,
                   info={"origin": f"file ({fmt})", "path": p.path, "target": p.target})


def file_fingerprint(p: FileParams) -> str:
    check_file(p)
    return file_digest(Path(p.path))


register_source(SourceDef("file", FileParams, load_file, "the user's own CSV or Parquet file",
                          fingerprint=file_fingerprint, check=check_file, row_order=lambda p: p.row_order))

"""Tabular sources: the user's own CSV, Parquet and svmlight / LIBSVM files.

A CSV or Parquet source returns the raw feature columns as a DataFrame (``RawData.frame``);
the encoding of categorical columns, imputation and scaling happen after the split, fitted
on the training rows only (see :mod:`stopwise.data.preprocess`). An svmlight file is read
by scikit-learn's ``load_svmlight_file`` into a CSR matrix (:func:`read_svmlight`), which
stays sparse from the file to the solver with ``design=sparse`` and is made dense with
``design=dense`` (within the bound of :mod:`stopwise.problem.design`); ``auto`` chooses by
the file's density (:data:`SPARSE_DENSITY`). The choice is stated in ``RawData.info["design"]``.
"""
from __future__ import annotations

import hashlib
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import numpy as np

from stopwise.data.errors import DataError
from stopwise.core.params import Choice, Interval, param
from stopwise.data.sources import RawData, SourceDef, register_source

TASK_CHOICES = ("auto", "regression", "binary", "multiclass")
FORMATS = ("auto", "csv", "parquet", "svmlight")
SVMLIGHT_SUFFIXES = (".svm", ".svmlight", ".libsvm")
INDEX_BASES = ("auto", "zero", "one")
DESIGNS = ("auto", "sparse", "dense")
# design=auto keeps an svmlight file's design sparse when at most this fraction of its
# entries is stored: a CSR entry costs 12 bytes (value and column index) against 8 for a
# dense one, and a product over CSR entries runs a few times slower per entry than BLAS on
# dense rows, so below a tenth of the entries sparse is the smaller and the faster form.
SPARSE_DENSITY = 0.1


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
    path: str | None = param(None, None, "CSV, Parquet or svmlight file (relative paths: from the working directory)")
    target: str | None = param(None, None, "name of the target column (CSV / Parquet; an svmlight line starts with its label)")
    format: str = param("auto", Choice(FORMATS), "auto (by suffix: .parquet/.pq is Parquet, .svm/.svmlight/.libsvm "
                                                 "is svmlight, else CSV), csv, parquet, svmlight")
    task: str = param("auto", Choice(TASK_CHOICES), "auto: numeric target -> regression, labels -> classification "
                                                    "(svmlight: two distinct labels -> binary, real labels -> regression)")
    sep: str = param(",", None, "CSV field separator")
    row_order: str = param("exchangeable", Choice(ROW_ORDERS),
                           "signal: the rows are samples of a signal in file order (time, position), "
                           "so the residual's NCP statistic is recorded; exchangeable: row order means nothing")
    index_base: str = param("auto", Choice(INDEX_BASES),
                            "svmlight feature indices: zero (first feature 0), one (first feature 1, LIBSVM's "
                            "convention), auto (one-based unless some line uses index 0, as load_svmlight_file decides)",
                            omit_default=True)
    n_features: int | None = param(None, Interval(1, None, integer=True),
                                   "svmlight: number of features (default: the largest index in the file)",
                                   omit_default=True)
    design: str = param("dense", Choice(DESIGNS),
                        "svmlight: sparse (the CSR matrix goes to the solver as it is; features scaled "
                        "without centering), dense (a dense copy; features centered and scaled), or auto "
                        f"(sparse when at most {SPARSE_DENSITY:g} of the entries are stored, the setting of "
                        "conf/dataset/file.yaml); a config without the key means dense",
                        omit_default=True)


def _file_format(p: FileParams) -> str:
    if p.format != "auto":
        return p.format
    suffix = Path(p.path).suffix.lower()
    if suffix in (".parquet", ".pq"):
        return "parquet"
    return "svmlight" if suffix in SVMLIGHT_SUFFIXES else "csv"


def check_file(p: FileParams) -> None:
    if not p.path:
        raise TabularError("dataset.source=file needs dataset.params.path (a CSV, Parquet or svmlight file)")
    path = Path(p.path)
    if not path.is_file():
        raise TabularError(f"dataset file {p.path!r} not found" if not path.exists()
                           else f"dataset file {p.path!r} is not a regular file")
    svm = _file_format(p) == "svmlight"
    if svm and p.target is not None:
        raise TabularError(f"dataset.params.target={p.target!r} does not apply to the svmlight file {p.path!r}: "
                           "each line starts with its label (drop dataset.params.target)")
    if not svm and p.target is None:
        raise TabularError("dataset.source=file needs dataset.params.target (the target column)")
    if not svm and (p.index_base != "auto" or p.n_features is not None):
        raise TabularError("dataset.params.index_base and n_features apply to svmlight files only "
                           "(set dataset.params.format=svmlight, or drop them)")
    if not svm and p.design == "sparse":
        raise TabularError(f"dataset.params.design=sparse applies to svmlight files only, not the {_file_format(p)} "
                           f"file {p.path!r} (valid here: dense, auto)")


def resolve_file(p: FileParams) -> FileParams:
    """The params with ``design=auto`` decided: for an svmlight file, ``sparse`` when at most
    :data:`SPARSE_DENSITY` of its entries are stored (the file is read to count them; the
    count is kept for the file's size and modification time), else ``dense``; every other
    file is ``dense``. The run identity carries ``design`` only when it is sparse, so runs
    on dense designs keep the ids they had before the option existed."""
    import dataclasses

    if p.design != "auto":
        return p
    check_file(p)
    if _file_format(p) != "svmlight":
        return dataclasses.replace(p, design="dense")
    n, d, nnz = svmlight_counts(p)
    sparse = n * d > 0 and nnz <= SPARSE_DENSITY * n * d
    return dataclasses.replace(p, design="sparse" if sparse else "dense")


_COUNTS: dict[tuple, tuple[int, int, int]] = {}


def svmlight_counts(p: FileParams) -> tuple[int, int, int]:
    """(rows, features, stored entries) of an svmlight file as :func:`read_svmlight` reads it."""
    st = Path(p.path).stat()
    key = (str(Path(p.path).resolve()), st.st_size, st.st_mtime_ns, p.index_base, p.n_features)
    hit = _COUNTS.get(key)
    if hit is None:
        X, _, _ = read_svmlight(p)
        hit = _COUNTS[key] = (int(X.shape[0]), int(X.shape[1]), int(X.nnz))
        if len(_COUNTS) > 64:
            _COUNTS.pop(next(iter(_COUNTS)))
    return hit


def read_svmlight(p: FileParams) -> tuple[Any, np.ndarray, int]:
    """(X as a ``scipy.sparse`` CSR matrix of float64, the labels, the index base) of an
    svmlight / LIBSVM file, read by ``sklearn.datasets.load_svmlight_file``.

    The file is read with its indices as written (``zero_based=True``); a one-based file then
    loses the empty column 0. ``auto`` takes the file as one-based unless some line uses
    index 0, the rule of ``load_svmlight_file(zero_based="auto")``, so the matrix equals what
    scikit-learn's own loader returns for the same choice (``n_features`` pads columns)."""
    import scipy.sparse as sp
    from sklearn.datasets import load_svmlight_file

    try:
        X, y = load_svmlight_file(p.path, zero_based=True, dtype=np.float64)
    except Exception as e:  # malformed line, bad label: one line
        first = str(e).strip().splitlines()[0] if str(e).strip() else type(e).__name__
        raise TabularError(f"cannot read dataset file {p.path!r} as svmlight: {first}") from None
    X = sp.csr_matrix(X)
    has_zero = bool(X.nnz) and int(X.indices.min()) == 0
    base = {"zero": 0, "one": 1}.get(p.index_base, 0 if has_zero else 1)
    if base == 1 and has_zero:
        raise TabularError(f"dataset file {p.path!r} uses feature index 0, which a one-based file cannot "
                           "(set dataset.params.index_base=zero or auto)")
    d = max(X.shape[1] - base, 0)
    if p.n_features is not None:
        if d > p.n_features:
            raise TabularError(f"dataset file {p.path!r} has feature index {d - 1 + base}, beyond "
                               f"dataset.params.n_features={p.n_features} ({'one' if base else 'zero'}-based)")
        d = p.n_features
    cols = X.indices - base if base else X.indices
    X = sp.csr_matrix((X.data, cols, X.indptr), shape=(X.shape[0], d))
    return X, np.asarray(y, dtype=np.float64), base


def svmlight_target(y: np.ndarray, task: str, where: str) -> tuple[np.ndarray, str]:
    """The task and targets of svmlight labels (always numbers). ``auto``: two distinct
    labels are a binary task, labels that are not all whole numbers a regression; more than
    two whole-number labels are refused as ambiguous (class codes or counts?), naming the
    two choices. Class labels are kept as Python numbers (whole ones as int), for the
    label encoding after the split (binary -1/+1, multiclass 0..K-1)."""
    distinct = np.unique(y[np.isfinite(y)])
    if task == "auto":
        whole = bool(np.all(distinct == np.round(distinct)))
        if distinct.size == 2:
            task = "binary"
        elif not whole:
            task = "regression"
        else:
            raise TabularError(f"{where} has {distinct.size} distinct whole-number labels: set dataset.params.task="
                               "multiclass (class codes) or regression (counts)")
    if task == "regression":
        return y, "regression"
    if task == "classification":
        task = "binary" if distinct.size == 2 else "multiclass"
    if distinct.size < 2:
        raise TabularError(f"{where} has {distinct.size} distinct label(s); classification needs at least 2")
    if task == "binary" and distinct.size != 2:
        raise TabularError(f"{where} has {distinct.size} distinct labels; task=binary needs exactly 2 (use task=multiclass)")
    labels = np.array([int(v) if float(v).is_integer() else float(v) for v in y.tolist()], dtype=object)
    return labels, task


def densify(X: Any, where: str) -> np.ndarray:
    """A dense float64 copy of an svmlight file's design (``design=dense``), refused in one
    line when it would take more than half of this machine's memory
    (:func:`stopwise.problem.design.densify`)."""
    from stopwise.problem.design import DesignError, densify as _densify

    try:
        return _densify(X, where, "set dataset.params.design=sparse to keep it sparse")
    except DesignError as e:
        raise TabularError(str(e)) from None


def load_file(p: FileParams) -> RawData:
    """Read the whole file with pandas (``read_csv`` / ``read_parquet``), then split off
    the target column; columns of non-numeric type are categorical. An svmlight file is
    read by :func:`read_svmlight` and kept sparse or densified by ``design``
    (``info['design']`` says which)."""
    import pandas as pd

    check_file(p)
    fmt = _file_format(p)
    if fmt == "svmlight":
        return _load_svmlight(p)
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


def _load_svmlight(p: FileParams) -> RawData:
    where = f"file {p.path!r}"
    X, y, base = read_svmlight(p)
    if X.shape[0] == 0:
        raise TabularError(f"dataset file {p.path!r} has no rows")
    if X.shape[1] == 0:
        raise TabularError(f"dataset file {p.path!r} has no feature (every line holds only a label)")
    labels, task = svmlight_target(y, p.task, where)
    n, d = X.shape
    nnz = int(X.nnz)
    p = resolve_file(p)
    info = {"origin": "file (svmlight)", "path": p.path, "index_base": base,
            "design": {"stored": "csr", "used": "csr" if p.design == "sparse" else "dense", "nnz": nnz,
                       "density": nnz / (n * d)}}
    names = tuple(f"x{j + base}" for j in range(d))  # the file's own feature numbers
    if p.design == "sparse":
        from stopwise.problem.design import as_csr

        return RawData(X=as_csr(X), y=labels, task=task, feature_names=names, info=info)
    return RawData(X=densify(X, where), y=labels, task=task, feature_names=names, info=info)


def file_fingerprint(p: FileParams) -> str:
    check_file(p)
    return file_digest(Path(p.path))


register_source(SourceDef("file", FileParams, load_file, "the user's own CSV, Parquet or svmlight / LIBSVM file",
                          fingerprint=file_fingerprint, check=check_file, row_order=lambda p: p.row_order,
                          resolve=resolve_file))

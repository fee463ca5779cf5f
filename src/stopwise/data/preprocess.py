"""Preprocessing fitted on the training rows only.

Every transform here is fitted on the training part and then applied unchanged to the
validation and test parts, so changing validation or test rows never changes a fitted
value. Each step returns a JSON-ready record of what it did (stored in
``Problem.preprocessing`` and in each run's metadata).

Order (see docs/datasets.md)::

    row filter (missing target; missing features when missing=drop)
    -> impute (mean for numbers, most frequent for categories)   SimpleImputer
    -> one-hot encode categorical columns                          OneHotEncoder
    -> drop columns constant on the training rows
    -> standardize  x' = (x - mean) / std  (std 1 for std 0)
                    a sparse (CSR) design: x' = x / std, no centering (scale_sparse)
    -> random features (RBFSampler or Nystroem), optional
    -> label encoding (classification) or target centering (regression)
"""
from __future__ import annotations

import warnings
from dataclasses import dataclass
from typing import Any

import numpy as np

from stopwise.data.errors import DataError
from stopwise.core.params import Choice, Interval, param

MISSING = ("impute", "drop")
RF_KINDS = ("rbf_sampler", "nystroem")


class PreprocessError(DataError):
    """Data that preprocessing cannot handle (one line)."""


@dataclass(frozen=True)
class RandomFeaturesParams:
    kind: str = param("rbf_sampler", Choice(RF_KINDS),
                      "rbf_sampler: random Fourier features (Rahimi and Recht, 2007); nystroem: Nystroem "
                      "features from training rows (Williams and Seeger, 2001)")
    n_components: int = param(256, Interval(1, None, integer=True), "number of random features")
    gamma: float | None = param(None, Interval(0.0, None, low_closed=False),
                                "RBF kernel exp(-gamma ||x - x'||^2); default 1 / (number of input features)")
    seed: int = param(0, Interval(0, 2**32 - 1, integer=True), "seed of the random features")


def _plain(v: Any) -> Any:
    """numpy scalars -> Python scalars (for JSON records)."""
    return v.item() if isinstance(v, np.generic) else v


def _category_strings(values: Any) -> np.ndarray:
    """A column as an object array of strings, NaN where missing."""
    import pandas as pd

    s = pd.Series(values).astype(object)
    miss = s.isna().to_numpy()
    out = np.array([str(v) for v in s.to_numpy()], dtype=object)
    out[miss] = np.nan
    return out


def table_to_numeric(parts: list[Any], categorical: tuple[str, ...], missing: str,
                     where: str) -> tuple[list[np.ndarray], tuple[str, ...], dict[str, Any]]:
    """Impute and one-hot encode three DataFrames (train, val, test) with the same columns,
    fitting on the first. Columns keep their order; a categorical column ``c`` becomes
    ``c=v`` for each training category ``v`` (sorted), and categories unseen in training
    encode as all zeros."""
    from sklearn.impute import SimpleImputer
    from sklearn.preprocessing import OneHotEncoder

    train = parts[0]
    cols = list(train.columns)
    if not cols:
        raise PreprocessError(f"{where} has no feature columns left")
    record: dict[str, Any] = {}
    cat_set = set(categorical)
    blocks: list[list[np.ndarray]] = [[] for _ in parts]
    names: list[str] = []
    imputed_num: dict[str, float] = {}
    imputed_cat: dict[str, str] = {}
    onehot: dict[str, list[str]] = {}
    for c in cols:
        if train[c].isna().all():
            raise PreprocessError(f"column {c!r} of {where} has no values on the training rows (all missing); "
                                  f"leave it out with dataset.drop_features=[{c}]")
        if c in cat_set:
            vals = [_category_strings(p[c]).reshape(-1, 1) for p in parts]
            if missing == "impute" and any(np.any(_isnan_obj(v)) for v in vals):
                imp = SimpleImputer(strategy="most_frequent", missing_values=np.nan)
                imp.fit(vals[0])
                vals = [imp.transform(v) if v.shape[0] else v for v in vals]
                imputed_cat[c] = str(imp.statistics_[0])
            enc = OneHotEncoder(handle_unknown="ignore", sparse_output=False, dtype=np.float64)
            enc.fit(vals[0])
            cats = [str(v) for v in enc.categories_[0]]
            onehot[c] = cats
            for b, v in zip(blocks, vals):
                b.append(enc.transform(v) if v.shape[0] else np.empty((0, len(cats))))
            names.extend(f"{c}={v}" for v in cats)
        else:
            vals = [np.asarray(p[c], dtype=np.float64).reshape(-1, 1) for p in parts]
            if missing == "impute" and any(np.isnan(v).any() for v in vals):
                imp = SimpleImputer(strategy="mean")
                imp.fit(vals[0])
                vals = [imp.transform(v) if v.shape[0] else v for v in vals]
                imputed_num[c] = float(imp.statistics_[0])
            for b, v in zip(blocks, vals):
                b.append(v)
            names.append(c)
    Xs = [np.ascontiguousarray(np.hstack(b), dtype=np.float64) if b else np.empty((p.shape[0], 0))
          for b, p in zip(blocks, parts)]
    if imputed_num or imputed_cat:
        record["impute"] = {"numeric_mean": imputed_num, "categorical_most_frequent": imputed_cat}
    if onehot:
        record["one_hot"] = onehot
    return Xs, tuple(names), record


def _isnan_obj(v: np.ndarray) -> np.ndarray:
    return np.array([isinstance(x, float) and x != x for x in v.ravel()], dtype=bool)


def drop_constant(Xs: list[np.ndarray], names: tuple[str, ...], w_true: np.ndarray | None):
    """Remove columns whose training values are all equal (peak-to-peak 0, the exact test
    that scikit-learn's ``VarianceThreshold(0)`` applies). A CSR design keeps its form (its
    column extremes count the implicit zeros)."""
    X = Xs[0]
    if X.shape[0] == 0 or X.shape[1] == 0:
        return Xs, names, w_true, []
    if hasattr(X, "tocsr"):
        keep = np.asarray((X.max(axis=0) - X.min(axis=0)).toarray()).ravel() > 0
        if keep.all():
            return Xs, names, w_true, []
        from stopwise.problem.design import as_csr

        dropped = [names[j] for j in np.flatnonzero(~keep)]
        Xs = [as_csr(x[:, keep]) for x in Xs]
        return Xs, tuple(n for n, k in zip(names, keep) if k), (w_true[keep] if w_true is not None else None), dropped
    keep = np.ptp(X, axis=0) > 0
    if keep.all():
        return Xs, names, w_true, []
    dropped = [names[j] for j in np.flatnonzero(~keep)]
    Xs = [np.ascontiguousarray(x[:, keep]) for x in Xs]
    names = tuple(n for n, k in zip(names, keep) if k)
    if w_true is not None:
        w_true = w_true[keep]
    return Xs, names, w_true, dropped


def standardize(Xs: list[np.ndarray], w_true: np.ndarray | None):
    """``x' = (x - mean) / std`` with the training mean and population std (std 0 -> 1).
    Agrees with scikit-learn's ``StandardScaler`` up to rounding. The truth is mapped to
    the new coordinates, ``w' = std * w`` (exact when the target is centered)."""
    mu = Xs[0].mean(axis=0)
    sd = Xs[0].std(axis=0)
    sd_safe = np.where(sd > 0, sd, 1.0)
    Xs = [(x - mu) / sd_safe for x in Xs]
    if w_true is not None:
        w_true = w_true * sd_safe
    return Xs, w_true, {"mean": mu.tolist(), "scale": sd_safe.tolist()}


SPARSE_SCALING = "x / std over the training rows, not centered (as StandardScaler(with_mean=False))"


def scale_sparse(Xs: list[Any], w_true: np.ndarray | None):
    """Scaling without centering for CSR designs: ``x' = x / std`` with the training rows'
    population standard deviation per column (std 0 -> 1), the transform of scikit-learn's
    ``StandardScaler(with_mean=False)``. Centering would fill every implicit zero, so it is
    not done: the stored entries keep their places and only their values change. The
    variance is computed in two passes over the stored entries, ``(sum_nz (x - mean)^2 +
    (n - nnz_j) mean^2) / n``, as scikit-learn's ``mean_variance_axis`` does. The truth is
    mapped as by :func:`standardize`, ``w' = std * w``."""
    import scipy.sparse as sp

    X = Xs[0]
    n, d = X.shape
    cols = X.indices
    counts = np.bincount(cols, minlength=d)
    mu = np.bincount(cols, weights=X.data, minlength=d) / max(n, 1)
    dev = X.data - mu[cols]
    var = (np.bincount(cols, weights=dev * dev, minlength=d) + (n - counts) * mu * mu) / max(n, 1)
    sd = np.sqrt(var)
    sd_safe = np.where(sd > 0, sd, 1.0)
    out = [sp.csr_matrix((x.data / sd_safe[x.indices], x.indices.copy(), x.indptr.copy()), shape=x.shape)
           for x in Xs]
    if w_true is not None:
        w_true = w_true * sd_safe
    return out, w_true, {"centered": False, "scaled": SPARSE_SCALING, "scale": sd_safe.tolist()}


def random_features(Xs: list[np.ndarray], rf: RandomFeaturesParams):
    """Map rows through scikit-learn's ``RBFSampler`` or ``Nystroem`` fitted on the training
    rows (``Nystroem`` takes its landmarks from them; at most n_train components)."""
    from sklearn.kernel_approximation import Nystroem, RBFSampler

    d_in = Xs[0].shape[1]
    gamma = rf.gamma if rf.gamma is not None else 1.0 / max(d_in, 1)
    n_comp = rf.n_components
    if rf.kind == "rbf_sampler":
        tr = RBFSampler(gamma=gamma, n_components=n_comp, random_state=rf.seed)
    else:
        n_comp = min(n_comp, Xs[0].shape[0])
        tr = Nystroem(kernel="rbf", gamma=gamma, n_components=n_comp, random_state=rf.seed)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        tr.fit(Xs[0])
    out = [np.ascontiguousarray(tr.transform(x) if x.shape[0] else np.empty((0, n_comp)), dtype=np.float64)
           for x in Xs]
    names = tuple(f"rf{j}" for j in range(out[0].shape[1]))
    return out, names, {"kind": rf.kind, "n_components": int(out[0].shape[1]), "gamma": float(gamma),
                        "seed": rf.seed, "input_features": int(d_in)}


def encode_labels(ys: list[np.ndarray], task: str, given: list | None, where: str):
    """Binary labels -> -1.0 / +1.0 (the second class in sorted order is +1), multiclass
    -> 0.0 .. K-1 (sorted order, as scikit-learn's ``LabelEncoder``), fitted on the
    training labels. A source that already encodes (``info['classes']`` given and labels
    already in {-1, +1} / {0..K-1}) is kept as it is.

    >>> parts = [np.array(["b", "a"], dtype=object), np.array(["a"], dtype=object), np.array(["b"], dtype=object)]
    >>> ys, classes = encode_labels(parts, "binary", None, "demo")
    >>> ys[0].tolist(), classes
    ([1.0, -1.0], ['a', 'b'])
    """
    if given is not None:
        codes = set(np.unique(np.concatenate([np.asarray(y, dtype=np.float64) for y in ys])).tolist()) \
            if all(_numeric(y) for y in ys) else None
        ok = {-1.0, 1.0} if task == "binary" else set(float(i) for i in range(len(given)))
        if codes is not None and codes <= ok:
            return [np.asarray(y, dtype=np.float64) for y in ys], list(given)
    labels = [np.asarray(y, dtype=object) for y in ys]
    if not all(_numeric(y) for y in labels):
        labels = [np.array([str(v) for v in y], dtype=object) for y in labels]
    classes = sorted(set(labels[0].tolist()))
    if task == "binary" and len(classes) != 2:
        raise PreprocessError(f"{where}: the training rows hold {len(classes)} class(es) {classes[:5]}; "
                              "a binary task needs both classes in the training rows")
    if task == "multiclass" and len(classes) < 2:
        raise PreprocessError(f"{where}: the training rows hold a single class {classes}; "
                              "classification needs at least 2")
    index = {c: i for i, c in enumerate(classes)}
    for part, y in zip(("validation", "test"), labels[1:]):
        unseen = sorted({v for v in y.tolist() if v not in index}, key=str)
        if unseen:
            raise PreprocessError(f"{where}: class {unseen[0]!r} appears in the {part} rows but not in the training rows; "
                                  "use more training rows or another seed")
    out = []
    for y in labels:
        codes = np.array([index[v] for v in y.tolist()], dtype=np.float64)
        out.append(2.0 * codes - 1.0 if task == "binary" else codes)
    return out, [_plain(c) for c in classes]


def _numeric(y: np.ndarray) -> bool:
    return all(isinstance(v, (int, float, np.integer, np.floating)) and not isinstance(v, bool) for v in
               np.asarray(y, dtype=object).tolist())

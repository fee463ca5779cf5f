"""Data: sources -> split -> noise -> row filter -> preprocessing (fitted on training rows) -> Problem.

:func:`build_problem` makes the Problem a run sees; :func:`cached_problem` returns the same
Problem from an in-process memo or from the processed-problem cache on disk
(:mod:`stopwise.data.cache`), building and storing it on a miss; :func:`prepare_problems`
builds the distinct data specs it is given up front, so bad data input is reported as one
line before any file is written, and later jobs (in any process) read the cached copy of
a costly one.
"""
from __future__ import annotations

import json
import time
from collections import OrderedDict
from dataclasses import asdict, fields
from typing import Any, Iterable

import numpy as np

from stopwise.problem.design import as_csr, is_sparse
from stopwise.problem.problem import Problem
from stopwise.core.params import ParamError, make_params
from stopwise.data import cache as _cache
from stopwise.data.errors import DataError
from stopwise.data.preprocess import (
    MISSING,
    RandomFeaturesParams,
    drop_constant,
    encode_labels,
    random_features,
    scale_sparse,
    standardize,
    table_to_numeric,
)
from stopwise.data.sources import SOURCES, RawData, SourceDef  # noqa: F401
from stopwise.data.split import SPLIT_KINDS, SplitError, carve_validation, split_rows  # noqa: F401
from stopwise.data import classical, generators, openml_source, openml_suite, tabular  # noqa: E402,F401  (register their sources)

# Preprocessing options added after the first release. A key at its default is left out
# of the normalized config, so configs that do not use them keep their run ids.
PREP_DEFAULTS: dict[str, Any] = {"drop_features": None, "categorical": None, "missing": "impute",
                                 "drop_constant": True, "random_features": None, "center_features": False,
                                 "add_constant": False}


def get_source(name: str) -> SourceDef:
    return SOURCES.get(name)


def _omitted(params: Any, name: str, value: Any) -> bool:
    f = next(f for f in fields(params) if f.name == name)
    return bool(f.metadata.get("omit_default")) and value == f.default


def _names_option(key: str, v: Any) -> list[str] | None:
    if v is None:
        return None
    if isinstance(v, str) or not isinstance(v, (list, tuple)) or not all(isinstance(x, str) for x in v):
        raise DataError(f"dataset.{key}={v!r} is invalid: must be a list of column names")
    return list(v)


def _prep_option(key: str, v: Any) -> Any:
    if key in ("drop_features", "categorical"):
        return _names_option(key, v)
    if key == "missing":
        if v not in MISSING:
            raise DataError(f"dataset.missing={v!r} is invalid: must be one of {', '.join(MISSING)}")
        return v
    if key in ("drop_constant", "center_features", "add_constant"):
        if not isinstance(v, bool):
            raise DataError(f"dataset.{key}={v!r} is invalid: must be true or false")
        return v
    if key == "random_features":
        if v is None or (isinstance(v, dict) and v.get("kind") is None):
            return None  # off (the schema's default has kind: null)
        if not isinstance(v, dict):
            raise DataError(f"dataset.random_features={v!r} is invalid: must be a mapping (kind, n_components, gamma, seed)")
        try:
            return asdict(make_params(RandomFeaturesParams, dict(v), "dataset.random_features"))
        except ParamError as e:
            raise DataError(str(e)) from None
    raise DataError(f"unknown dataset option {key!r}")  # pragma: no cover


def file_dataset_name(path: Any) -> str:
    """The name of a ``dataset=file`` dataset: the file's stem (``runs/a.csv`` -> ``a``)."""
    from pathlib import PurePath

    return PurePath(str(path)).stem or str(path)


def normalize_dataset(cfg: dict[str, Any]) -> dict[str, Any]:
    """Validate a dataset config and return it with typed, defaulted source params."""
    src = get_source(cfg.get("source"))
    try:
        params = make_params(src.params, dict(cfg.get("params") or {}), f"dataset.params ({src.name})")
        task = src.check(params) if src.check is not None else None
        if src.resolve is not None:
            params = src.resolve(params)
    except ValueError as e:
        raise DataError(str(e)) from None
    out = dict(cfg)
    out["params"] = {k: v for k, v in asdict(params).items() if not _omitted(params, k, v)}
    path = getattr(params, "path", None) if src.name == "file" else None
    if path and out.get("name") in (None, "", "file"):
        out["name"] = file_dataset_name(path)  # a file is named after itself unless dataset.name says otherwise
    out["features"] = _names_option("features", cfg.get("features"))
    for key, default in PREP_DEFAULTS.items():
        v = _prep_option(key, out.pop(key, default))
        if v != default:
            out[key] = v
    for key in ("standardize", "center_target"):
        if key in out and not isinstance(out[key], bool):
            raise DataError(f"dataset.{key}={out[key]!r} is invalid: must be true or false")
    # The classification loss: left out at its default (null, or the task's default when the
    # source can tell the task), so runs that do not choose a loss keep their identity.
    loss = out.pop("loss", None)
    if loss is not None:
        from stopwise.problem.losses import DEFAULT_LOSS, LOSS_NAMES, TASK_LOSSES

        if loss not in LOSS_NAMES:
            raise DataError(f"dataset.loss={loss!r} is invalid: must be one of {', '.join(LOSS_NAMES)} "
                            "(or null for the task's default)")
        if task is not None and loss not in TASK_LOSSES[task]:
            raise DataError(f"dataset.loss={loss!r} does not apply to {cfg.get('name')!r}, a {task} problem; "
                            f"valid: {', '.join(TASK_LOSSES[task])}")
        if task is None or loss != DEFAULT_LOSS[task]:  # the task's default is implied
            out["loss"] = loss
    return out


def dataset_task(dataset: dict[str, Any]) -> str | None:
    """The task of a (normalized) dataset config when its source can tell without loading
    data (regression / binary / multiclass), else None."""
    src = get_source(dataset.get("source"))
    if src.check is None:
        return None
    try:
        return src.check(make_params(src.params, dict(dataset.get("params") or {}), "dataset.params"))
    except ValueError:
        return None


def _row_order(src: SourceDef, params: Any) -> str:
    return src.row_order(params) if src.row_order is not None else "exchangeable"


def dataset_row_order(dataset: dict[str, Any]) -> str:
    """``signal`` or ``exchangeable``: the row order of a (normalized) dataset config, as its
    source declares it (known without loading data; see :attr:`Problem.signal_rows`)."""
    src = get_source(dataset.get("source"))
    return _row_order(src, make_params(src.params, dict(dataset.get("params") or {}), "dataset.params"))


def _noise(raw: RawData, parts: list[np.ndarray]) -> list[np.ndarray]:
    """Noise for train/val/test rows. ``norm``: the training noise has exactly norm
    ``noise_level``, the other parts the same root-mean-square value."""
    if raw.noise == "none" or raw.noise_level == 0.0:
        return [np.zeros(p.size) for p in parts]
    rng = np.random.default_rng(list(raw.noise_seed))
    e = rng.standard_normal(raw.n_rows)
    out = [e[p] for p in parts]
    if raw.noise == "gaussian":
        return [raw.noise_level * x for x in out]
    n_train = parts[0].size
    rms = raw.noise_level / np.sqrt(n_train)
    scaled = []
    for x in out:
        nrm = float(np.linalg.norm(x))
        scaled.append(x * (rms * np.sqrt(x.size) / nrm) if nrm > 0 else x)
    return scaled


def _select(raw: RawData, dataset: dict[str, Any], where: str):
    """Apply ``features`` (keep, in that order) and ``drop_features``."""
    names = list(raw.feature_names)
    keep = list(range(len(names)))
    feats, drops = dataset.get("features"), dataset.get("drop_features")
    shown = ", ".join(names[:12]) + (f", ... ({len(names)} in all)" if len(names) > 12 else "")
    if feats:
        keep = []
        for f in feats:
            if f not in names:
                raise DataError(f"{where} has no feature {f!r}; valid: {shown}")
            keep.append(names.index(f))
    if drops:
        for f in drops:
            if f not in names:
                raise DataError(f"{where} has no feature {f!r} to drop; valid: {shown}")
        keep = [j for j in keep if names[j] not in drops]
    if keep == list(range(len(names))):
        return raw.X, raw.frame, tuple(names), raw.w_true
    if not keep:
        raise DataError(f"{where}: no feature columns left after dataset.features / dataset.drop_features")
    sel = tuple(names[j] for j in keep)
    if raw.frame is not None:
        return None, raw.frame[list(sel)], sel, None
    w = raw.w_true[keep] if raw.w_true is not None else None
    return raw.X[:, keep], None, sel, w


def _split(raw: RawData, split: dict[str, Any], seed: int):
    kind = split.get("kind", "random")
    rows = (split.get("train_rows"), split.get("val_rows"), split.get("test_rows"))
    val = float(split.get("val", 0.2))
    if kind == "indices" and rows[0] is None and rows[2] is None:
        if raw.folds is None:
            raise SplitError("split.kind=indices needs split.train_rows and split.test_rows, or an OpenML task "
                             "(dataset.params.task_id) whose predefined folds it uses")
        key = (int(split.get("repeat", 0)), int(split.get("fold", 0)))
        if key not in raw.folds:
            reps = sorted({r for r, _ in raw.folds})
            folds = sorted({f for _, f in raw.folds})
            raise SplitError(f"split.repeat={key[0]}, split.fold={key[1]} is not a fold of this task; valid: repeat in "
                             f"{reps[0]}..{reps[-1]}, fold in {folds[0]}..{folds[-1]}")
        train, test = raw.folds[key]
        return carve_validation(np.asarray(train), np.asarray(test), val, int(seed), raw.n_rows)
    return split_rows(raw.n_rows, kind, float(split.get("test", 0.2)), val, int(seed), rows)


def _nan_rows(X: Any) -> np.ndarray:
    """Rows of a CSR matrix holding a NaN among their stored entries."""
    rows = np.repeat(np.arange(X.shape[0]), np.diff(X.indptr))
    bad = np.zeros(X.shape[0], dtype=bool)
    bad[rows[np.isnan(X.data)]] = True
    return bad


def sp_hstack(blocks: list[Any]) -> Any:
    import scipy.sparse as sp

    return sp.hstack(blocks, format="csr")


def _missing_target(y: np.ndarray) -> np.ndarray:
    if y.dtype == object:
        return np.array([v is None or (isinstance(v, float) and v != v) for v in y.tolist()], dtype=bool)
    return np.isnan(y)


def build_problem(dataset: dict[str, Any], split: dict[str, Any], seed: int) -> Problem:
    """Build the Problem a run sees. Identical inputs give identical arrays."""
    dataset = normalize_dataset(dataset)
    src = get_source(dataset["source"])
    name = str(dataset.get("name") or dataset["source"])
    where = f"dataset {name!r}"
    params = make_params(src.params, dataset["params"], "dataset.params")
    raw = _load_raw(src, params)
    X, frame, names, w_true = _select(raw, dataset, where)
    sparse = X is not None and is_sparse(X)
    try:
        parts = list(_split(raw, split, seed))
    except SplitError as e:
        raise DataError(str(e)) from None
    classify = raw.task in ("binary", "multiclass")
    if classify:
        ys = [np.asarray(raw.y, dtype=object)[idx] for idx in parts]
    else:
        noise = _noise(raw, parts)
        ys = [np.asarray(raw.y, dtype=np.float64)[idx] + e for idx, e in zip(parts, noise)]

    # row filter: rows without a target; rows with a missing feature when missing=drop
    missing = dataset.get("missing", "impute")
    dropped: dict[str, dict[str, int]] = {}
    labels = ("train", "val", "test")
    for i, idx in enumerate(parts):
        bad = _missing_target(ys[i])
        n_target = int(bad.sum())
        n_feat = 0
        if missing == "drop":
            fbad = (frame.iloc[idx].isna().any(axis=1).to_numpy() if frame is not None
                    else _nan_rows(X[idx]) if sparse else np.isnan(X[idx]).any(axis=1))
            n_feat = int((fbad & ~bad).sum())
            bad = bad | fbad
        if bad.any():
            parts[i], ys[i] = idx[~bad], ys[i][~bad]  # a dropped row takes its noise with it
            dropped[labels[i]] = {"missing_target": n_target, "missing_features": n_feat}
    if parts[0].size == 0:
        raise DataError(f"{where}: no training rows left after dropping rows with missing values")
    if parts[2].size == 0:
        raise DataError(f"{where}: no test rows left after dropping rows with missing values")
    if parts[1].size == 0 and "val" in dropped:
        raise DataError(f"{where}: no validation rows left after dropping rows with missing values")
    tr, va, te = parts

    prep: dict[str, Any] = {"fitted_on": "training rows", "n_train": int(tr.size),
                            "n_val": int(va.size), "n_test": int(te.size)}
    if dropped:
        prep["dropped_rows"] = dropped
    if frame is not None:
        cats = set(raw.categorical) | set(dataset.get("categorical") or [])
        unknown = sorted(c for c in cats if c not in frame.columns and c in (dataset.get("categorical") or []))
        if unknown:
            raise DataError(f"{where} has no column {unknown[0]!r} to treat as categorical; valid: "
                            + ", ".join(list(frame.columns)[:12]))
        Xs, names, rec = table_to_numeric([frame.iloc[idx] for idx in (tr, va, te)],
                                          tuple(c for c in frame.columns if c in cats), missing, where)
        prep.update(rec)
    elif sparse:
        Xs = [as_csr(X[idx]) for idx in (tr, va, te)]  # rows of a CSR matrix: its stored entries only
    else:
        Xs = [np.array(X[idx], dtype=np.float64) for idx in (tr, va, te)]
    if dataset.get("drop_constant", True):
        Xs, names, w_true, gone = drop_constant(Xs, names, w_true)
        if gone:
            prep["constant_removed"] = gone
        if Xs[0].shape[1] == 0:
            raise DataError(f"{where}: every feature column is constant on the training rows")
    if sparse and dataset.get("center_features", False):
        raise DataError(f"{where}: dataset.center_features=true would fill every implicit zero of its sparse "
                        "design; set it false, or dataset.params.design=dense")
    if sparse and dataset.get("standardize", True):
        Xs, w_true, rec = scale_sparse(Xs, w_true)  # scaled, not centered: centering would densify
        prep["scale"] = rec
    elif dataset.get("standardize", True):
        Xs, w_true, rec = standardize(Xs, w_true)
        prep["standardize"] = rec
    elif dataset.get("center_features", False):
        # centering alone (features keep their scale): a model without intercept on the
        # centered data equals the model with an unpenalized intercept on the raw data
        mu = Xs[0].mean(axis=0)
        Xs = [x - mu for x in Xs]
        prep["center_features"] = {"mean": mu.tolist()}
    rf = dataset.get("random_features")
    if rf:
        Xs, names, rec = random_features(Xs, RandomFeaturesParams(**rf))
        prep["random_features"] = rec
        w_true = None
    if dataset.get("add_constant", False):
        # a column of ones after scaling and random features: a bias that solvers treat as a weight
        Xs = [as_csr(sp_hstack([x, np.ones((x.shape[0], 1))])) if is_sparse(x)
              else np.hstack([x, np.ones((x.shape[0], 1))]) for x in Xs]
        names = tuple(names) + ("const",)
        if w_true is not None:
            w_true = np.append(w_true, 0.0)
        prep["add_constant"] = True
    info = dict(raw.info, row_order=_row_order(src, params),
                rows={"train": tr.tolist(), "val": va.tolist(), "test": te.tolist()})
    if classify:
        ys, classes = encode_labels(ys, raw.task, raw.info.get("classes"), where)
        info["classes"] = classes
        prep["labels"] = {"classes": classes,
                          "encoding": "-1/+1 (second class +1)" if raw.task == "binary" else "0..K-1 (in the order of classes)"}
    elif dataset.get("center_target", True):
        ybar = float(ys[0].mean())
        ys = [y - ybar for y in ys]
        prep["center_target"] = {"mean": ybar}
    noise_kind = None if raw.noise == "none" else raw.noise
    from stopwise.problem.losses import LossError, check_loss

    try:
        check_loss(raw.task, dataset.get("loss"))
    except LossError as e:
        raise DataError(f"dataset {dataset.get('name')!r}: {e}") from None
    return Problem(
        name=name, task=raw.task,
        X_train=Xs[0], y_train=ys[0], X_val=Xs[1], y_val=ys[1], X_test=Xs[2], y_test=ys[2],
        w_true=None if w_true is None else np.array(w_true, dtype=np.float64),
        noise_level=None if noise_kind is None else raw.noise_level, noise_kind=noise_kind,
        feature_names=tuple(names), preprocessing=_cache.jsonable(prep), info=_cache.jsonable(info),
        loss=dataset.get("loss"),
    )


_RAW: "OrderedDict[tuple, RawData]" = OrderedDict()
_RAW_SIZE = 4


def _load_raw(src: SourceDef, params: Any) -> RawData:
    """``src.load(params)``, kept in memory for the next problems of the same data: a sweep
    over seeds splits the same raw data many times. Only sources without a fingerprint
    (the data scikit-learn ships, generators: their output is a function of their params)
    are kept; a file or an OpenML dataset is read again. Kept arrays are read-only, so no
    problem built from them can change them."""
    if src.fingerprint is not None:
        return src.load(params)
    key = (src.name, json.dumps(_cache.jsonable(asdict(params)), sort_keys=True))
    hit = _RAW.get(key)
    if hit is not None:
        _RAW.move_to_end(key)
        return hit
    disk = _cache.raw_key(src.name, key[1], src.raw_cache) if src.raw_cache else None
    raw = _cache.read_raw(disk) if disk is not None else None
    if raw is None:
        raw = src.load(params)
        if disk is not None:
            _cache.write_raw(disk, raw)
    for a in (raw.X, raw.y, raw.w_true):
        if isinstance(a, np.ndarray):
            a.flags.writeable = False
    _RAW[key] = raw
    if len(_RAW) > _RAW_SIZE:
        _RAW.popitem(last=False)
    return raw


_KEYS: "OrderedDict[str, str]" = OrderedDict()  # problem keys of data specs without a fingerprint


def problem_key(dataset: dict[str, Any], split: dict[str, Any], seed: int) -> str:
    """Content address of the Problem a data spec produces (see :mod:`stopwise.data.cache`).

    Keys of sources without a fingerprint (data scikit-learn ships, generators: a function of
    their params) are remembered in this process, since every run of a chunk asks again; a
    file's or an OpenML dataset's key is computed afresh, as its bytes may have changed."""
    try:
        memo = json.dumps([dataset, split, int(seed)], sort_keys=True)
    except (TypeError, ValueError):
        memo = None
    if memo is not None and memo in _KEYS:
        return _KEYS[memo]
    dataset = normalize_dataset(dataset)
    src = get_source(dataset["source"])
    fp = None
    if src.fingerprint is not None:
        fp = src.fingerprint(make_params(src.params, dataset["params"], "dataset.params"))
    key = _cache.spec_key(dataset, dict(split), int(seed), fp)
    if memo is not None and src.fingerprint is None:
        _KEYS[memo] = key
        if len(_KEYS) > 4096:
            _KEYS.popitem(last=False)
    return key


# A problem that builds faster than this is not written to the on-disk cache: reading
# it back would cost about as much as building it (diabetes: ~1 ms) and every write is a
# file pair per run. Costly problems (OpenML, large generators, random features) are cached.
# STOPWISE_CACHE_MIN_SECONDS overrides it (0: cache every problem).
CACHE_MIN_SECONDS = 0.05


def cache_min_seconds() -> float:
    """The build time from which a problem is written to the on-disk cache."""
    import os

    text = os.environ.get("STOPWISE_CACHE_MIN_SECONDS", "")
    try:
        v = float(text) if text else CACHE_MIN_SECONDS
    except ValueError:
        v = CACHE_MIN_SECONDS
    return v if v >= 0 else CACHE_MIN_SECONDS

_CACHE: "OrderedDict[str, Problem]" = OrderedDict()
_CACHE_SIZE = 8


class _KeepNorm:
    """``Problem.on_norm`` hook: keep a norm that took at least :func:`cache_min_seconds`
    (a plain object, so a problem still pickles)."""

    def __init__(self, key: str) -> None:
        self.key = key

    def __call__(self, value: float, seconds: float) -> None:
        if seconds >= cache_min_seconds():
            _cache.write_norm(self.key, value)


def _remember(key: str, prob: Problem) -> Problem:
    """Keep ``prob`` in this process; its ``||X_train||_2^2`` is read from the on-disk cache
    when kept there, else kept there once computed in at least :func:`cache_min_seconds`."""
    if "train_norm2_sq" not in prob.__dict__ and not prob.on_norm:
        kept = _cache.read_norm(key)
        if kept is not None:
            prob.__dict__["train_norm2_sq"] = kept  # where functools.cached_property keeps it
        else:
            prob.on_norm.append(_KeepNorm(key))
    _CACHE[key] = prob
    _CACHE.move_to_end(key)
    if len(_CACHE) > _CACHE_SIZE:
        _CACHE.popitem(last=False)
    return prob


def cached_problem(dataset: dict[str, Any], split: dict[str, Any], seed: int) -> Problem:
    """:func:`build_problem` through the in-process memo and the on-disk problem cache."""
    key = problem_key(dataset, split, seed)
    hit = _CACHE.get(key)
    if hit is not None:
        _CACHE.move_to_end(key)
        return hit
    prob = _cache.read(key)
    if prob is None:
        t0 = time.perf_counter()
        prob = build_problem(dataset, split, seed)
        if time.perf_counter() - t0 >= cache_min_seconds():
            _cache.write(key, prob)
    return _remember(key, prob)


def prepare_problems(specs: Iterable[Any]) -> int:
    """Build every distinct data spec of ``specs`` (RunSpecs) that is not cached yet, then
    keep them all in this process and store the costly ones in the on-disk cache (those
    that took at least :func:`cache_min_seconds`). Raises :class:`DataError` on the first
    bad one, before anything is written. Returns the number of distinct data specs."""
    todo: list[tuple[str, Problem, float]] = []
    seen: set[str] = set()
    for s in specs:
        key = problem_key(s.dataset, s.split, s.seed)
        if key in seen:
            continue
        seen.add(key)
        if key in _CACHE or _cache.read(key) is not None:
            continue
        t0 = time.perf_counter()
        prob = build_problem(s.dataset, s.split, s.seed)
        todo.append((key, prob, time.perf_counter() - t0))
    least = cache_min_seconds()
    for key, prob, took in todo:
        if took >= least:
            _cache.write(key, prob)
        _remember(key, prob)
    return len(seen)


__all__ = ["DataError", "RawData", "SourceDef", "SOURCES", "build_problem", "cached_problem", "dataset_row_order", "get_source",
           "normalize_dataset", "prepare_problems", "problem_key", "split_rows"]


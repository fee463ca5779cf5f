"""Data: sources -> split -> noise -> preprocessing (fitted on training rows) -> Problem."""
from __future__ import annotations

import json
from collections import OrderedDict
from dataclasses import asdict
from typing import Any

import numpy as np

from ..problem import Problem
from ..solvers.base import ParamError, make_params
from .sources import SOURCES, RawData, SourceDef  # noqa: F401
from .split import SPLIT_KINDS, SplitError, split_rows  # noqa: F401


from ..errors import SpecError  # noqa: E402


class DataError(SpecError):
    """Bad dataset or split configuration; the message is one line."""


def get_source(name: str) -> SourceDef:
    try:
        return SOURCES[name]
    except KeyError:
        raise DataError(f"unknown dataset source {name!r}; valid: {', '.join(sorted(SOURCES))}") from None


def normalize_dataset(cfg: dict[str, Any]) -> dict[str, Any]:
    """Validate a dataset config and return it with typed, defaulted source params."""
    src = get_source(cfg.get("source"))
    try:
        params = make_params(src.params, dict(cfg.get("params") or {}), f"dataset.params ({src.name})")
    except ParamError as e:
        raise DataError(str(e)) from None
    out = dict(cfg)
    out["params"] = asdict(params)
    out["features"] = list(cfg["features"]) if cfg.get("features") is not None else None
    for key in ("standardize", "center_target", "center_features"):
        if key in out and not isinstance(out[key], bool):
            raise DataError(f"dataset.{key}={out[key]!r} is invalid: must be true or false")
    if not out.get("center_features"):
        out.pop("center_features", None)  # part of the run identity only when switched on
    return out


def _noise(raw: RawData, parts: list[np.ndarray]) -> list[np.ndarray]:
    """Noise for train/val/test rows. ``norm``: the training noise has exactly norm
    ``noise_level``, the other parts the same root-mean-square value."""
    if raw.noise == "none" or raw.noise_level == 0.0:
        return [np.zeros(p.size) for p in parts]
    rng = np.random.default_rng(list(raw.noise_seed))
    e = rng.standard_normal(raw.X.shape[0])
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


def build_problem(dataset: dict[str, Any], split: dict[str, Any], seed: int) -> Problem:
    """Build the Problem a run sees. Identical inputs give identical arrays."""
    dataset = normalize_dataset(dataset)
    src = get_source(dataset["source"])
    raw = src.load(make_params(src.params, dataset["params"], "dataset.params"))
    X, names, w_true = raw.X, raw.feature_names, raw.w_true
    feats = dataset.get("features")
    if feats:
        cols = []
        for f in feats:
            if f not in names:
                raise DataError(f"dataset {dataset.get('name')!r} has no feature {f!r}; valid: {', '.join(names)}")
            cols.append(names.index(f))
        X, names = X[:, cols], tuple(names[c] for c in cols)
        w_true = w_true[cols] if w_true is not None else None
    try:
        tr, va, te = split_rows(X.shape[0], split.get("kind", "random"), float(split.get("test", 0.2)),
                                float(split.get("val", 0.2)), int(seed),
                                (split.get("train_rows"), split.get("val_rows"), split.get("test_rows")))
    except SplitError as e:
        raise DataError(str(e)) from None
    noise = _noise(raw, [tr, va, te])
    ys = [raw.y[idx] + e for idx, e in zip((tr, va, te), noise)]
    Xs = [np.array(X[idx], dtype=np.float64) for idx in (tr, va, te)]
    prep: dict[str, Any] = {"fitted_on": "training rows", "n_train": int(tr.size),
                            "n_val": int(va.size), "n_test": int(te.size)}
    if dataset.get("standardize", True):
        mu = Xs[0].mean(axis=0)
        sd = Xs[0].std(axis=0)
        sd_safe = np.where(sd > 0, sd, 1.0)
        Xs = [(x - mu) / sd_safe for x in Xs]
        if w_true is not None:
            w_true = w_true * sd_safe
        prep["standardize"] = {"mean": mu.tolist(), "scale": sd_safe.tolist()}
    elif dataset.get("center_features", False):
        # centering alone (features keep their scale): a model without intercept on the
        # centered data equals the model with an unpenalized intercept on the raw data
        mu = Xs[0].mean(axis=0)
        Xs = [x - mu for x in Xs]
        prep["center_features"] = {"mean": mu.tolist()}
    if raw.task == "regression" and dataset.get("center_target", True):
        ybar = float(ys[0].mean())
        ys = [y - ybar for y in ys]
        prep["center_target"] = {"mean": ybar}
    noise_kind = None if raw.noise == "none" else raw.noise
    return Problem(
        name=str(dataset.get("name") or dataset["source"]), task=raw.task,
        X_train=Xs[0], y_train=ys[0], X_val=Xs[1], y_val=ys[1], X_test=Xs[2], y_test=ys[2],
        w_true=None if w_true is None else np.array(w_true, dtype=np.float64),
        noise_level=None if noise_kind is None else raw.noise_level, noise_kind=noise_kind,
        feature_names=tuple(names), preprocessing=prep,
        info=dict(raw.info, rows={"train": tr.tolist(), "val": va.tolist(), "test": te.tolist()}),
    )


_CACHE: "OrderedDict[str, Problem]" = OrderedDict()
_CACHE_SIZE = 8


def cached_problem(dataset: dict[str, Any], split: dict[str, Any], seed: int) -> Problem:
    """:func:`build_problem` memoized in this process on the canonical data spec."""
    key = json.dumps([dataset, split, int(seed)], sort_keys=True, default=str)
    hit = _CACHE.get(key)
    if hit is not None:
        _CACHE.move_to_end(key)
        return hit
    prob = build_problem(dataset, split, seed)
    _CACHE[key] = prob
    if len(_CACHE) > _CACHE_SIZE:
        _CACHE.popitem(last=False)
    return prob

"""Processed-problem cache: content addressed, safe under concurrent processes.

A processed Problem is stored as two files named by the SHA-256 of its data spec::

    <cache>/problems/<key32>.npz    the float64 arrays (numpy .npz, read with allow_pickle=False);
                                    a CSR design as its three arrays X_<split>__data (float64),
                                    X_<split>__indices and X_<split>__indptr (integers), its
                                    shape in the JSON (``csr``)
    <cache>/problems/<key32>.json   everything else (names, task, noise, preprocessing record, info)

The key covers the normalized dataset config, the split, the seed, a digest of the
underlying data (the bytes of a user's file or of an OpenML cache entry), the cache
format and the versions of numpy, scikit-learn and pandas; so a changed spec, changed
data or a changed library reads a different entry, and an entry is never stale.
Both files are written atomically (temporary name, fsync, rename), the arrays first, so a
reader that finds the JSON finds complete arrays; concurrent writers of one key write
the same bytes. Nothing is pickled. The JSON carries the SHA-256 of the arrays' file
(``arrays_sha256``) and of its own other fields (``meta_sha256``); an entry whose bytes
changed after it was written (bit rot, a hand edit) is not used but rebuilt, with a warning
naming it, and ``stopwise verify`` names it (:func:`check_entry`).

Beside an entry, ``<key32>.norm.json`` may keep ``||X_train||_2^2`` of the same problem
(the smoothness constant's part that costs: ARPACK's top singular value of a large sparse
design takes seconds to minutes), written once a process has computed it in at least the
cache's threshold time, with the versions of numpy and SciPy that computed it and its own
checksum; it is used only under the same versions, so a process that reads it runs with
the bits a process that computes it would get.

The cache lives in ``$STOPWISE_CACHE`` when set (``off`` disables it), else in the
user's cache directory (``$XDG_CACHE_HOME/stopwise`` or ``~/.cache/stopwise`` on Linux,
``~/Library/Caches/stopwise`` on macOS, ``%LOCALAPPDATA%\\stopwise`` on Windows).
"""
from __future__ import annotations

import hashlib
import io
import json
import os
import sys
import zipfile
from pathlib import Path
from typing import Any

import numpy as np

from stopwise.core.files import atomic_write_bytes
from stopwise.problem.problem import Problem

CACHE_FORMAT = 3  # 2: Problem.info carries row_order; 3: checksums of both files
ENV = "STOPWISE_CACHE"
ARRAYS = ("X_train", "y_train", "X_val", "y_val", "X_test", "y_test")
DESIGNS = ("X_train", "X_val", "X_test")
CSR_PARTS = ("data", "indices", "indptr")
_VERSIONS: dict[str, str] | None = None


def default_cache_dir() -> Path:
    if sys.platform == "darwin":
        return Path.home() / "Library" / "Caches" / "stopwise"
    if os.name == "nt":
        return Path(os.environ.get("LOCALAPPDATA", Path.home() / "AppData" / "Local")) / "stopwise"
    xdg = os.environ.get("XDG_CACHE_HOME")
    return (Path(xdg) if xdg else Path.home() / ".cache") / "stopwise"


def cache_dir() -> Path | None:
    """Root of stopwise's cache, or None when disabled with ``STOPWISE_CACHE=off``."""
    v = os.environ.get(ENV)
    if v is not None and v.strip().lower() in ("off", "none", "0", "false", "no"):
        return None
    return Path(v).expanduser() if v else default_cache_dir()


def library_versions() -> dict[str, str]:
    global _VERSIONS
    if _VERSIONS is None:
        import importlib.metadata as md

        out = {}
        for pkg in ("numpy", "scikit-learn", "pandas"):
            try:
                out[pkg] = md.version(pkg)
            except md.PackageNotFoundError:  # pragma: no cover
                out[pkg] = "?"
        _VERSIONS = out
    return _VERSIONS


def spec_key(dataset: dict[str, Any], split: dict[str, Any], seed: int, fingerprint: str | None) -> str:
    """SHA-256 of the canonical JSON of everything that determines the processed arrays."""
    doc = {"format": CACHE_FORMAT, "dataset": dataset, "split": split, "seed": int(seed),
           "data": fingerprint, "versions": library_versions()}
    text = json.dumps(doc, sort_keys=True, separators=(",", ":"), default=str)
    return hashlib.sha256(text.encode()).hexdigest()


def _paths(root: Path, key: str) -> tuple[Path, Path]:
    d = root / "problems"
    return d / f"{key[:32]}.npz", d / f"{key[:32]}.json"


def jsonable(obj: Any) -> Any:
    """A JSON round trip of ``obj`` (tuples -> lists, numpy scalars -> numbers), so a fresh
    Problem and a cached one carry equal records."""
    def default(o: Any) -> Any:
        if isinstance(o, np.generic):
            return o.item()
        if isinstance(o, np.ndarray):
            return o.tolist()
        return str(o)

    return json.loads(json.dumps(obj, default=default, allow_nan=True))


def _meta_sha(meta: dict) -> str:
    rest = {k: v for k, v in meta.items() if k != "meta_sha256"}
    return hashlib.sha256(json.dumps(rest, sort_keys=True).encode()).hexdigest()


def check_entry(json_path: Path) -> str:
    """Why a cache entry (its ``.json`` and ``.npz``; a kept norm, its ``.norm.json``) is
    not what was written, or ''."""
    try:
        meta = json.loads(Path(json_path).read_text())
    except (OSError, ValueError) as e:
        return f"unreadable: {type(e).__name__}: {' '.join(str(e).split())[:200]}"
    if not isinstance(meta, dict):
        return "not a JSON object"
    if meta.get("format") != (RAW_FORMAT if Path(json_path).parent.name == "raw" else CACHE_FORMAT):
        return ""  # another cache format: never read, so never wrong (left for its own version)
    if meta.get("meta_sha256") != _meta_sha(meta):
        return "its fields differ from what was written (checksum mismatch: a changed byte)"
    if meta.get("kind") == NORM_KIND:
        return ""  # a kept norm has no arrays file
    try:
        data = Path(json_path).with_suffix(".npz").read_bytes()
    except OSError as e:
        return f"its arrays file is unreadable: {type(e).__name__}: {e.strerror or e}"
    if hashlib.sha256(data).hexdigest() != meta.get("arrays_sha256"):
        return "its arrays differ from what was written (checksum mismatch: a changed byte)"
    return ""


def entries(root: Path | None = None) -> list[Path]:
    """The JSON files of the cache's entries: processed problems and kept raw data (each
    beside its ``.npz``) and kept norms (:func:`is_norm_file`, alone)."""
    root = root if root is not None else cache_dir()
    if root is None:
        return []
    return [p for d in (root / "problems", root / "raw") if d.is_dir() for p in sorted(d.glob("*.json"))]


def read(key: str, root: Path | None = None) -> Problem | None:
    """The cached Problem for ``key``, or None (missing, unreadable, changed since it was
    written, or for another key)."""
    root = root if root is not None else cache_dir()
    if root is None:
        return None
    npz_path, json_path = _paths(root, key)
    try:
        meta = json.loads(json_path.read_text())
        if meta.get("key") != key or meta.get("format") != CACHE_FORMAT:
            return None
        data = npz_path.read_bytes()
        if meta.get("meta_sha256") != _meta_sha(meta) or hashlib.sha256(data).hexdigest() != meta.get("arrays_sha256"):
            import warnings

            warnings.warn(f"cached problem {json_path} changed since it was written (checksum mismatch); "
                          "building it again", stacklevel=3)
            return None
        with np.load(io.BytesIO(data), allow_pickle=False) as z:
            arrays = {k: np.array(z[k]) for k in z.files}
    except (OSError, ValueError, KeyError, EOFError, zipfile.BadZipFile):  # damaged: rebuild
        return None
    csr = meta.get("csr") or {}
    if csr:
        arrays = _csr_from_parts(arrays, csr)
        if arrays is None:
            return None
    want = set(ARRAYS) | ({"w_true"} if meta.get("has_truth") else set())
    if set(arrays) != want or any(a.dtype != np.float64 for a in arrays.values()):
        return None
    return Problem(name=meta["name"], task=meta["task"], w_true=arrays.pop("w_true", None),
                   noise_level=meta["noise_level"], noise_kind=meta["noise_kind"],
                   feature_names=tuple(meta["feature_names"]), preprocessing=meta["preprocessing"],
                   info=meta["info"], loss=meta.get("loss"), **{k: arrays[k] for k in ARRAYS})


def _csr_from_parts(arrays: dict, csr: dict) -> dict | None:
    """The arrays with each CSR design rebuilt from its three parts and its stored shape, or
    None when the parts do not make a valid CSR matrix of float64."""
    import scipy.sparse as sp

    out = dict(arrays)
    for k, shape in csr.items():
        if k not in DESIGNS:
            return None
        try:
            data, indices, indptr = (out.pop(f"{k}__{part}") for part in CSR_PARTS)
        except KeyError:
            return None
        if data.dtype != np.float64 or indices.dtype.kind != "i" or indptr.dtype.kind != "i":
            return None
        try:
            X = sp.csr_matrix((data, indices, indptr), shape=tuple(int(v) for v in shape))
            X.check_format(full_check=True)
        except (ValueError, TypeError):
            return None
        out[k] = X
    return out


def write(key: str, problem: Problem, root: Path | None = None) -> Path | None:
    """Store ``problem`` under ``key`` (atomic; arrays first). Returns the JSON path."""
    root = root if root is not None else cache_dir()
    if root is None:
        return None
    npz_path, json_path = _paths(root, key)
    arrays = {k: getattr(problem, k) for k in ARRAYS}
    if problem.w_true is not None:
        arrays["w_true"] = problem.w_true
    csr = {}
    if problem.sparse:
        for k in DESIGNS:
            X = arrays.pop(k)
            csr[k] = list(X.shape)
            for part in CSR_PARTS:
                arrays[f"{k}__{part}"] = getattr(X, part)
    buf = io.BytesIO()
    np.savez(buf, **arrays)
    data = buf.getvalue()
    atomic_write_bytes(npz_path, data, durable=False)  # a cache: a lost file is rebuilt
    meta = {"key": key, "format": CACHE_FORMAT, "name": problem.name, "task": problem.task,
            "noise_level": problem.noise_level, "noise_kind": problem.noise_kind,
            "feature_names": list(problem.feature_names), "has_truth": problem.w_true is not None,
            "preprocessing": problem.preprocessing, "info": problem.info, "loss": problem.loss,
            "shapes": {k: list(v.shape) for k, v in arrays.items()},
            "arrays_sha256": hashlib.sha256(data).hexdigest()}
    if csr:
        meta["csr"] = csr
    meta = jsonable(meta)
    meta["meta_sha256"] = _meta_sha(meta)
    atomic_write_bytes(json_path, json.dumps(meta, sort_keys=True).encode(), durable=False)
    return json_path


# ---------------------------------------------------------------- ||X_train||_2^2 of a problem

NORM_KIND = "norm"


def _norm_path(root: Path, key: str) -> Path:
    return root / "problems" / f"{key[:32]}.norm.json"


def is_norm_file(path: Path) -> bool:
    """Whether a file of :func:`entries` is a kept norm (not a problem's entry)."""
    return Path(path).name.endswith(".norm.json")


def norm_versions() -> dict[str, str]:
    """The versions of the libraries whose routines compute the norm (LAPACK through numpy,
    ARPACK through SciPy)."""
    import scipy

    return {"numpy": np.__version__, "scipy": scipy.__version__}


def read_norm(key: str, root: Path | None = None) -> float | None:
    """The kept ``||X_train||_2^2`` of the problem ``key``, or None (none kept, changed since
    it was written, or computed under other versions of numpy or SciPy)."""
    root = root if root is not None else cache_dir()
    if root is None:
        return None
    try:
        meta = json.loads(_norm_path(root, key).read_text())
    except (OSError, ValueError):
        return None
    if not isinstance(meta, dict) or meta.get("key") != key or meta.get("kind") != NORM_KIND \
            or meta.get("format") != CACHE_FORMAT or meta.get("meta_sha256") != _meta_sha(meta) \
            or meta.get("versions") != norm_versions():
        return None
    value = meta.get("train_norm2_sq")
    if not isinstance(value, float) or not np.isfinite(value) or value < 0:
        return None
    return value


def write_norm(key: str, value: float, root: Path | None = None) -> None:
    """Keep ``||X_train||_2^2`` of the problem ``key`` (atomic); a cache that cannot be
    written only costs the next process the computation."""
    root = root if root is not None else cache_dir()
    if root is None or not np.isfinite(value):
        return
    meta = {"key": key, "format": CACHE_FORMAT, "kind": NORM_KIND, "train_norm2_sq": float(value),
            "versions": norm_versions()}  # concurrent writers of one key write the same bytes
    meta["meta_sha256"] = _meta_sha(meta)
    try:
        atomic_write_bytes(_norm_path(root, key), json.dumps(meta, sort_keys=True).encode(), durable=False)
    except OSError:
        pass


# ---------------------------------------------------------------- raw data of sources that allow it
#
# A source that declares ``raw_cache`` (the packages whose versions decide its data, e.g. the
# tables scikit-learn ships) may keep its raw numeric data here, so that another process
# reads a few arrays instead of importing those packages (scikit-learn takes seconds to
# import; its diabetes table is 35 KB). Same layout and checks as a processed problem:
# ``raw/<key32>.npz`` + ``raw/<key32>.json`` with the SHA-256 of both; a changed or
# missing entry is loaded from the source again.

RAW_FORMAT = 1


def raw_key(source: str, params: Any, packages: tuple[str, ...]) -> str:
    import importlib.metadata as md

    versions = {}
    for pkg in packages:
        try:
            versions[pkg] = md.version(pkg)
        except md.PackageNotFoundError:
            versions[pkg] = "?"
    doc = {"format": RAW_FORMAT, "source": source, "params": params, "versions": versions}
    return hashlib.sha256(json.dumps(doc, sort_keys=True, separators=(",", ":"), default=str).encode()).hexdigest()


def _raw_paths(root: Path, key: str) -> tuple[Path, Path]:
    d = root / "raw"
    return d / f"{key[:32]}.npz", d / f"{key[:32]}.json"


def read_raw(key: str, root: Path | None = None):
    """The kept raw data for ``key`` (a RawData), or None."""
    from stopwise.data.sources import RawData

    root = root if root is not None else cache_dir()
    if root is None:
        return None
    npz_path, json_path = _raw_paths(root, key)
    try:
        meta = json.loads(json_path.read_text())
        if meta.get("key") != key or meta.get("format") != RAW_FORMAT or meta.get("meta_sha256") != _meta_sha(meta):
            return None
        data = npz_path.read_bytes()
        if hashlib.sha256(data).hexdigest() != meta.get("arrays_sha256"):
            return None
        with np.load(io.BytesIO(data), allow_pickle=False) as z:
            arrays = {k: np.array(z[k]) for k in z.files}
    except (OSError, ValueError, KeyError, EOFError, zipfile.BadZipFile):
        return None
    if set(arrays) - {"X", "y", "w_true"} or "X" not in arrays or "y" not in arrays:
        return None
    return RawData(X=arrays["X"], y=arrays["y"], task=meta["task"], feature_names=tuple(meta["feature_names"]),
                   w_true=arrays.get("w_true"), info=meta["info"])


def write_raw(key: str, raw: Any, root: Path | None = None) -> None:
    """Keep ``raw`` (numeric data only: X, y, w_true, names, task, info; a source with a noise
    model, a frame or folds is never kept) under ``key``."""
    root = root if root is not None else cache_dir()
    if root is None or raw.X is None or raw.frame is not None or raw.folds is not None or raw.noise != "none":
        return
    arrays = {"X": np.asarray(raw.X), "y": np.asarray(raw.y)}
    if raw.w_true is not None:
        arrays["w_true"] = np.asarray(raw.w_true)
    if any(a.dtype == object for a in arrays.values()):
        return
    npz_path, json_path = _raw_paths(root, key)
    buf = io.BytesIO()
    np.savez(buf, **arrays)
    data = buf.getvalue()
    try:
        atomic_write_bytes(npz_path, data, durable=False)
        meta = jsonable({"key": key, "format": RAW_FORMAT, "task": raw.task, "feature_names": list(raw.feature_names),
                         "info": raw.info, "arrays_sha256": hashlib.sha256(data).hexdigest()})
        meta["meta_sha256"] = _meta_sha(meta)
        atomic_write_bytes(json_path, json.dumps(meta, sort_keys=True).encode(), durable=False)
    except OSError:  # a cache that cannot be written only costs the next process an import
        pass

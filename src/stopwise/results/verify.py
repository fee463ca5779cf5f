"""Check every trace and manifest under a results root; optionally move bad files aside.

A trace ``runs/<id16>.parquet`` is good when it reads back whole, carries the stopwise
metadata (a JSON object with ``run_id``, ``digest``, ``identity``, ``status``, ``config``),
the SHA-256 of its stored identity equals its stored digest, whose first 16 hex digits are
the file name and the ``run_id`` column; when the identity is still a valid configuration
that hashes to the same digest; and when it has the run-level columns and, unless the run
failed, the per-iterate columns with increasing iterations and non-decreasing passes.

Bytes: a trace's metadata must match the checksum stored beside it, every page its CRC,
and the decoded data the SHA-256 stored in the file (:mod:`stopwise.results.schema`); a file
written by this pyarrow version must moreover be byte for byte the encoding of its
content, so a changed byte anywhere in it is named. A trace written before checksums were
stored is checked as before and counted in a note.

Baselines (``baselines/<id16>.parquet``) get the same byte checks and the identity check
of their name; report folders (``reports/<name>/``) are checked against the
``checksums.json`` they were written with; the processed-problem cache (outside the root,
see :mod:`stopwise.data.cache`) entry by entry against the checksums in its JSON files.

A manifest ``campaigns/<id16>.json`` is good when it is a JSON object whose ``campaign_id``
is its file name and the first 16 hex digits of its ``digest``, the SHA-256 of its name,
run ids and post-hoc rules, and whose run ids are hex ids.

Checking only reads data: nothing named inside a results folder is imported, unpickled or
instantiated. ``quarantine`` moves each bad file (and each leftover temporary file older
than :data:`TEMP_GRACE_SECONDS`) to ``<root>/quarantine/<folder>/<name>``; readers never
look there. A bad cache entry is moved to the cache's own ``quarantine/`` (the next run
that needs it builds it again).
"""
from __future__ import annotations

import hashlib
import json
import os
import re
import time
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
import pyarrow as pa
import pyarrow.parquet as pq

from stopwise.core.errors import SpecError
from stopwise.config.spec import canonical_json, spec_from_identity
from stopwise.results.schema import (
    BASE_COLUMNS,
    RUN_LEVEL,
    STATUSES,
    data_problem,
    encoding_problem,
    has_checksums,
    metadata_problem,
    read_table,
    written_by,
)
from stopwise.results.store import (
    META_KEY,
    Store,
    StoreError,
    check_folder,
    check_manifest_shape,
    check_name,
    is_link_loop,
)

RUN_FILE = re.compile(r"^[0-9a-f]{16}\.parquet$")
MANIFEST_FILE = re.compile(r"^[0-9a-f]{16}\.json$")
DIGEST = re.compile(r"^[0-9a-f]{64}$")
QUARANTINE = "quarantine"
# A temporary file younger than this may belong to a write in progress and is left alone.
TEMP_GRACE_SECONDS = 15 * 60


@dataclass
class Finding:
    path: Path
    problem: str


@dataclass
class VerifyReport:
    root: Path
    traces: int = 0
    manifests: int = 0
    baselines: int = 0
    report_files: int = 0
    cached: int = 0
    unsealed: int = 0        # traces and baselines written before checksums were stored
    other_writer: int = 0    # files with checksums written by another pyarrow version
    bad: list[Finding] = field(default_factory=list)
    temporary: list[Finding] = field(default_factory=list)
    notes: list[Finding] = field(default_factory=list)
    moved: list[tuple[Path, Path]] = field(default_factory=list)

    @property
    def ok(self) -> bool:
        return not self.bad and not self.temporary


def _sha(obj) -> str:
    return hashlib.sha256(canonical_json(obj).encode()).hexdigest()


def _one_line(e: BaseException) -> str:
    return f"{type(e).__name__}: " + " ".join(str(e).split())[:200]


def _place_problem(path: Path, store: Store) -> str:
    if is_link_loop(path):
        return "a symbolic-link loop"
    if path.is_symlink() and not store.inside(path):
        return "links outside the results root"
    return ""


def _bytes_problem(path: Path, md: dict) -> tuple[str, pa.Table | None]:
    """(problem, table) after the byte checks of a Parquet file of the root: metadata
    checksum, every page's CRC, data checksum, and the file's encoding when this pyarrow
    version wrote it."""
    changed = metadata_problem(md)
    if changed:
        return changed, None
    try:
        table = read_table(path)
    except Exception as e:
        return f"unreadable data: {_one_line(e)}", None
    changed = data_problem(table)
    if changed:
        return changed, table
    if written_by(md) == pa.__version__:
        changed = encoding_problem(path, table)
    return changed, table


def check_trace(path: Path, store: Store) -> str:
    """The first problem of a trace file, or '' when it is good."""
    if not RUN_FILE.match(path.name):
        return "file name is not a 16-digit run id"
    place = _place_problem(path, store)
    if place:
        return place
    try:
        md = pq.read_schema(path).metadata or {}
    except Exception as e:
        return f"unreadable: {_one_line(e)}"
    if META_KEY not in md:
        return "no stopwise metadata"
    try:
        meta = json.loads(md[META_KEY])
    except ValueError as e:
        return f"metadata is not JSON: {_one_line(e)}"
    if not isinstance(meta, dict):
        return "metadata is not a JSON object"
    missing = [k for k in ("run_id", "digest", "identity", "status", "config") if k not in meta]
    if missing:
        return f"metadata lacks {', '.join(missing)}"
    rid, digest, status = meta["run_id"], meta["digest"], meta["status"]
    if not isinstance(digest, str) or not DIGEST.match(digest):
        return "metadata digest is not a SHA-256 hex digest"
    if rid != path.stem or digest[:16] != path.stem:
        return f"run id {rid!r} / digest {str(digest)[:16]} do not match the file name"
    try:
        stored_hash = _sha(meta["identity"])
    except Exception as e:  # noqa: BLE001 - any malformed content is a finding, never a crash
        return f"stored config cannot be hashed: {_one_line(e)}"
    if stored_hash != digest:
        return "stored config does not hash to its run id (config or digest altered)"
    if status not in STATUSES:
        return f"status {status!r} is not one of {', '.join(STATUSES)}"
    try:
        spec = spec_from_identity(meta["identity"])
    except SpecError as e:
        return f"stored config is not a valid configuration: {e}"
    except Exception as e:  # noqa: BLE001
        return f"stored config is not a valid configuration: {_one_line(e)}"
    if spec.digest != digest:
        written = (meta.get("versions") or {}).get("stopwise") if isinstance(meta.get("versions"), dict) else None
        return (f"stored config hashes to {spec.run_id} under this stopwise version "
                f"(written by stopwise {written or '?'})")
    problem, table = _bytes_problem(path, md)
    if problem:
        return problem
    names = set(table.column_names)
    lacking = [c for c in RUN_LEVEL if c not in names]
    if status != "failed":
        lacking += [c for c in BASE_COLUMNS if c not in names]
    if lacking:
        return f"missing columns: {', '.join(lacking)}"
    if table.num_rows:
        ids = set(table.column("run_id").to_pylist())
        if ids != {path.stem}:
            return "run_id column does not match the file name"
        statuses = set(table.column("status").to_pylist())
        if statuses != {status}:
            return f"status column {sorted(map(str, statuses))} differs from metadata status {status!r}"
    elif status != "failed":
        return f"a {status} run has no rows"
    if status != "failed":
        try:
            it = table.column("iteration").to_numpy(zero_copy_only=False).astype(np.float64)
            ps = table.column("passes").to_numpy(zero_copy_only=False).astype(np.float64)
        except Exception as e:
            return f"iteration/passes are not numeric: {_one_line(e)}"
        if not (np.all(np.diff(it) > 0) and np.all(np.diff(ps) >= 0)):
            return "iterations are not increasing or passes decrease"
    return ""


def check_baseline(path: Path, store: Store) -> str:
    """The first problem of a baseline file, or '' when it is good: its name is the digest
    of its stored identity, and its bytes pass the checks of a trace."""
    if not RUN_FILE.match(path.name):
        return "file name is not a 16-digit baseline id"
    place = _place_problem(path, store)
    if place:
        return place
    try:
        md = pq.read_schema(path).metadata or {}
        meta = json.loads(md[META_KEY])
        if not isinstance(meta, dict):
            return "metadata is not a JSON object"
    except KeyError:
        return "no stopwise metadata"
    except Exception as e:
        return f"unreadable: {_one_line(e)}"
    try:
        check_name(path, meta)
    except StoreError as e:
        return str(e).replace(f"{path}: ", "")
    problem, _ = _bytes_problem(path, md)
    return problem


def check_manifest(path: Path, store: Store) -> tuple[str, str]:
    """(problem, note) for a manifest file; problem '' when it is good."""
    if not MANIFEST_FILE.match(path.name):
        return "file name is not a 16-digit campaign id", ""
    place = _place_problem(path, store)
    if place:
        return place, ""
    try:
        m = json.loads(path.read_text())
    except (OSError, ValueError) as e:
        return f"unreadable: {_one_line(e)}", ""
    try:
        check_manifest_shape(m)
    except StoreError as e:
        return str(e), ""
    if m["campaign_id"] != path.stem:
        return "campaign_id does not match the file name", ""
    digest = m.get("digest")
    if not isinstance(digest, str) or not DIGEST.match(digest) or digest[:16] != path.stem:
        return "digest is missing or does not match the campaign id", ""
    from stopwise.results.store import campaign_digest

    try:
        again = campaign_digest(m.get("name", ""), m["run_ids"], m.get("stopping", []))
    except Exception as e:  # noqa: BLE001
        return f"cannot be hashed: {_one_line(e)}", ""
    if again != digest:
        return "name, run ids and rules do not hash to its campaign id (manifest altered)", ""
    stored = sum(1 for r in m["run_ids"] if store.run_path(r).exists())
    note = ""
    if stored < len(m["run_ids"]):
        note = (f"campaign {m.get('name')!r}: {len(m['run_ids']) - stored} of {len(m['run_ids'])} runs "
                "not stored (rerun its sweep to finish it)")
    return "", note


def _destination(store: Store, path: Path) -> Path:
    dest_dir = store.root / QUARANTINE / path.parent.name
    dest = dest_dir / path.name.lstrip(".")
    k = 1
    while dest.exists() or dest.is_symlink():
        dest = dest_dir / f"{path.name.lstrip('.')}.{k}"
        k += 1
    return dest


def _move(store: Store, path: Path) -> Path:
    from stopwise.data import cache

    croot = cache.cache_dir()
    if croot is not None and path.parent in (croot / "problems", croot / "raw") and path.suffix == ".json":
        dest_dir = croot / QUARANTINE
        dest_dir.mkdir(parents=True, exist_ok=True)
        for part in (path.with_suffix(".npz"), path):  # the entry's two files, arrays first
            if part.exists():
                os.replace(part, dest_dir / part.name)
        return dest_dir / path.name
    dest = _destination(store, path)
    dest.parent.mkdir(parents=True, exist_ok=True)
    os.replace(path, dest)  # same file system; a link is moved, never followed
    return dest


def _sealed(path: Path) -> str | None:
    """The pyarrow version that wrote a file with checksums, '' without them, None unreadable."""
    try:
        md = pq.read_schema(path).metadata or {}
    except Exception:
        return None
    return (written_by(md) or "") if has_checksums(md) else ""


def _count_writer(rep: VerifyReport, path: Path) -> None:
    by = _sealed(path)
    if by == "":
        rep.unsealed += 1
    elif by is not None and by != pa.__version__:
        rep.other_writer += 1


def _check_reports(rep: VerifyReport, store: Store) -> None:
    folder = store.root / "reports"
    if not folder.is_dir():
        return
    for report in sorted(p for p in folder.iterdir() if p.is_dir() and not p.is_symlink()):
        problems, n = check_folder(report)
        rep.report_files += n
        rep.bad.extend(Finding(path, problem) for path, problem in problems)


def _check_cache(rep: VerifyReport) -> None:
    from stopwise.data import cache

    for path in cache.entries():
        norm = cache.is_norm_file(path)
        rep.cached += not norm  # a kept norm belongs to its problem's entry
        problem = cache.check_entry(path)
        if problem:
            rep.bad.append(Finding(path, f"{'kept norm of a cached problem' if norm else 'cached problem'}: {problem}"))


def verify_root(root: str | os.PathLike, quarantine: bool = False, now: float | None = None,
                cache: bool = True) -> VerifyReport:
    """Check every trace, manifest, baseline and report under ``root``, and (``cache``) the
    processed-problem cache (see the module docstring)."""
    store = Store(root)
    if not store.root.is_dir():
        raise SpecError(f"results root {str(root)!r} is not a folder")
    rep = VerifyReport(root=store.root)
    now = time.time() if now is None else now
    if store.runs_dir.is_dir():
        for path in sorted(store.runs_dir.glob("*.parquet")):
            rep.traces += 1
            problem = check_trace(path, store)
            if problem:
                rep.bad.append(Finding(path, problem))
            else:
                _count_writer(rep, path)
    if store.baselines_dir.is_dir():
        for path in sorted(store.baselines_dir.glob("*.parquet")):
            rep.baselines += 1
            problem = check_baseline(path, store)
            if problem:
                rep.bad.append(Finding(path, problem))
            else:
                _count_writer(rep, path)
    _check_reports(rep, store)
    if cache:
        _check_cache(rep)
    if store.campaigns_dir.is_dir():
        for path in sorted(store.campaigns_dir.glob("*.json")):
            rep.manifests += 1
            problem, note = check_manifest(path, store)
            if problem:
                rep.bad.append(Finding(path, problem))
            elif note:
                rep.notes.append(Finding(path, note))
    for path in store.temporary_files():
        try:
            age = now - path.lstat().st_mtime
        except OSError:
            continue
        if age >= TEMP_GRACE_SECONDS:
            rep.temporary.append(Finding(path, f"leftover temporary file of an interrupted write ({age / 60:.0f} min old)"))
        else:
            rep.notes.append(Finding(path, f"temporary file {age:.0f} s old: a write may be in progress; left alone"))
    if rep.unsealed:
        rep.notes.append(Finding(store.root, f"{rep.unsealed} files written before checksums were stored: "
                                             "their bytes are checked against their run id and schema only"))
    if rep.other_writer:
        rep.notes.append(Finding(store.root, f"{rep.other_writer} files written by another pyarrow version: "
                                             "their checksums are checked, their encoding is not compared"))
    if quarantine:
        for f in rep.bad + rep.temporary:
            try:
                rep.moved.append((f.path, _move(store, f.path)))
            except OSError as e:
                rep.notes.append(Finding(f.path, f"could not move to quarantine: {_one_line(e)}"))
    return rep


__all__ = ["verify_root", "check_baseline", "check_trace", "check_manifest", "VerifyReport", "Finding", "QUARANTINE",
           "TEMP_GRACE_SECONDS"]

"""Content-addressed results store: one Parquet trace per run, one manifest per campaign.

Layout under a results root::

    runs/<run_id16>.parquet        a run's trace (run-level + per-iterate columns)
    campaigns/<campaign_id16>.json a campaign manifest (definition, hash, run ids)

Every write goes through :func:`stopwise.core.files.atomic_write` (a hidden temporary name in
the destination folder, flushed, fsynced, then renamed), so readers never see a partial file.
Results folders are data: nothing here imports, unpickles or instantiates anything
named inside them.
"""
from __future__ import annotations

import errno
import hashlib
import json
import os
import re
import stat
import warnings
from pathlib import Path
from typing import Any, Iterable

import numpy as np
import pyarrow as pa
import pyarrow.parquet as pq

from stopwise.core.files import atomic_write as _atomic_write  # noqa: F401  (the store's writes)
from stopwise.core.files import atomic_write_bytes
from stopwise.core.errors import StopwiseError
from stopwise.config.spec import canonical_json
from stopwise.results.schema import (META_KEY, RUN_LEVEL, STATUSES, ColumnDigest,  # noqa: F401
                                     encode_bytes, metadata_problem, read_table, seal)

_ID = re.compile(r"^[0-9a-f]{4,64}$")
_NAME = re.compile(r"^[A-Za-z0-9][A-Za-z0-9_.-]{0,63}$")  # the campaign file names' rule (campaign.NAME)


class StoreError(StopwiseError, ValueError):
    """A results folder's name, id or file that cannot be used; the message is one line."""


class Store:
    def __init__(self, root: str | os.PathLike = "results"):
        self.root = Path(root)

    # -------------------------------------------------- paths
    @property
    def runs_dir(self) -> Path:
        return self.root / "runs"

    @property
    def campaigns_dir(self) -> Path:
        return self.root / "campaigns"

    @property
    def baselines_dir(self) -> Path:
        return self.root / "baselines"

    def run_path(self, run_id: str) -> Path:
        if not _ID.match(run_id):
            raise StoreError(f"{run_id!r} is not a run id (hex digits)")
        return self.runs_dir / f"{run_id[:16]}.parquet"

    # -------------------------------------------------- runs
    def write_run(self, run_id: str, columns: dict[str, np.ndarray], run_level: dict[str, Any],
                  meta: dict[str, Any]) -> Path:
        """Write a run's trace atomically. ``run_level`` values are repeated on every row."""
        n = len(next(iter(columns.values()))) if columns else 0
        arrays, names = [], []
        digest = ColumnDigest()  # the data's checksum, from the values as they are written
        for k, v in run_level.items():
            names.append(k)
            arrays.append(_constant_column(v, n))
            digest.constant(k, v, n)
        for k, v in columns.items():
            names.append(k)
            if k == "dist_truth" and n and np.all(np.isnan(v)):
                arrays.append(pa.nulls(n, pa.float64()))
                digest.nulls(k, n, "double")
            else:
                arrays.append(_numbers(v))
                digest.values(k, v, arrays[-1])
        table = seal(pa.Table.from_arrays(arrays, names=names),
                     json.dumps(meta, sort_keys=True, default=_json_default).encode(), data=digest.hexdigest())
        path = self.run_path(run_id)
        try:
            atomic_write_bytes(path, encode_bytes(table))
        except OSError as e:
            raise StoreWriteError.of(e, path) from e
        return path

    def read_meta(self, path: Path) -> dict[str, Any]:
        md = pq.read_schema(path).metadata or {}
        if META_KEY not in md:
            raise StoreError(f"{path}: no stopwise metadata")
        changed = metadata_problem(md)
        if changed:
            raise StoreError(f"{path}: {changed}")
        meta = json.loads(md[META_KEY])
        if not isinstance(meta, dict):
            raise StoreError(f"{path}: stopwise metadata is not a JSON object")
        check_name(Path(path), meta)
        return meta

    def run_meta(self, run_id: str) -> dict[str, Any] | None:
        """Metadata of a stored run, or None when it is missing or unreadable."""
        path = self.run_path(run_id)
        if not path.exists() or not self.inside(path):
            return None
        try:
            return self.read_meta(path)
        except Exception:
            return None

    def is_done(self, run_id: str) -> bool:
        """A run is done when its file reads back with a final, non-failed status."""
        meta = self.run_meta(run_id)
        return meta is not None and meta.get("status") in ("completed", "diverged")

    def statuses(self, run_ids: Iterable[str]) -> dict[str, str]:
        """The stored status of each of ``run_ids`` that has a trace (``completed``,
        ``diverged``, ``failed``, or ``unreadable``), from one listing of the runs folder.

        Statuses are kept in ``index/status.json`` keyed by each file's size, change
        time and inode, so a campaign whose runs are all stored is checked without opening its
        traces; a file written or replaced since is read again."""
        wanted = set(run_ids)
        entries: dict[str, tuple[int, int, int]] = {}
        try:
            with os.scandir(self.runs_dir) as it:
                for e in it:
                    name = e.name
                    if name.endswith(".parquet") and not name.startswith(".") and name[:-8] in wanted:
                        try:
                            st = e.stat()
                        except OSError:  # a link that leads nowhere (or round in a loop)
                            continue
                        if not stat.S_ISREG(st.st_mode):  # never opened: a FIFO would block
                            continue
                        entries[name[:-8]] = (st.st_size, st.st_mtime_ns, st.st_ino)
        except FileNotFoundError:
            return {}
        index_path, index = self._status_index()
        out: dict[str, str] = {}
        changed = False
        for rid, stamp in entries.items():
            known = index.get(rid)
            if isinstance(known, list) and len(known) == 4 and tuple(known[:3]) == stamp:
                out[rid] = str(known[3])
                continue
            path = self.run_path(rid)
            status = "unreadable"
            if self.inside(path):
                try:
                    status = str(self.read_meta(path).get("status", "unreadable"))
                except Exception:
                    status = "unreadable"
            out[rid] = status
            if status != "unreadable":
                index[rid] = [*stamp, status]
                changed = True
        if changed:
            try:
                atomic_write_bytes(index_path, json.dumps(index, separators=(",", ":")).encode(), durable=False)
            except OSError:  # an index that cannot be written only costs time
                pass
        return out

    def _status_index(self) -> tuple[Path, dict]:
        """The status index's path and its entries ({} when missing or unreadable)."""
        index_path = self.root / "index" / "status.json"
        try:
            index = json.loads(index_path.read_text())
        except (OSError, ValueError):
            return index_path, {}
        return index_path, index if isinstance(index, dict) else {}

    def remember(self, entries: dict[str, list]) -> None:
        """Merge ``{run_id: [size, mtime_ns, inode, status]}`` into the status index: stamps
        taken by the process that wrote each trace, right after writing it, so that
        :meth:`statuses` need not open those traces again. A stamp that no longer matches its
        file (the file was replaced since) is simply read again by :meth:`statuses`."""
        if not entries:
            return
        index_path, index = self._status_index()
        for rid, entry in entries.items():
            if (isinstance(rid, str) and _ID.match(rid) and isinstance(entry, list) and len(entry) == 4
                    and all(isinstance(x, int) for x in entry[:3]) and entry[3] in STATUSES):
                index[rid] = entry
        try:
            atomic_write_bytes(index_path, json.dumps(index, separators=(",", ":")).encode(), durable=False)
        except OSError:  # an index that cannot be written only costs time
            pass

    def run_files(self, run_ids: Iterable[str] | None = None) -> list[Path]:
        """Stored trace files (hidden temporary files of writes in progress never match).
        A file that is a link leading outside the results root is skipped with a warning."""
        if run_ids is None:
            files = sorted(self.runs_dir.glob("*.parquet")) if self.runs_dir.is_dir() else []
        else:
            files = [p for p in (self.run_path(r) for r in run_ids) if p.exists()]
        out = []
        for p in files:
            if is_link_loop(p):
                warnings.warn(f"skipping {p}: a symbolic-link loop", stacklevel=2)
            elif self.inside(p):
                out.append(p)
            else:
                warnings.warn(f"skipping {p}: it links outside the results root {self.root}", stacklevel=2)
        return out

    def inside(self, path: Path) -> bool:
        """Whether ``path``, links followed, stays inside this results root (or inside its own
        folder, so that a root or a ``runs/`` folder that is itself a link keeps working).
        A link loop is not inside (Python 3.11's ``Path.resolve`` raises RuntimeError on one)."""
        try:
            real = Path(path).resolve()
            if real.parent == Path(path).parent.resolve():
                return True
            real.relative_to(self.root.resolve())
            return True
        except (ValueError, OSError, RuntimeError):
            return False

    def temporary_files(self) -> list[Path]:
        """Hidden temporary files left by writes that never finished (a killed process)."""
        out: list[Path] = []
        for d in (self.runs_dir, self.campaigns_dir):
            if d.is_dir():
                out.extend(sorted(d.glob(".*.tmp")))
        return out

    def resolve_run(self, prefix: str) -> str:
        """Full 16-digit file id of the unique run starting with ``prefix``."""
        if not _ID.match(prefix):
            raise StoreError(f"{prefix!r} is not a run or campaign id (hex digits)")
        hits = [p.stem for p in self.run_files() if p.stem.startswith(prefix[:16])]
        if len(hits) > 1:
            raise StoreError(f"run id prefix {prefix!r} is ambiguous ({len(hits)} runs)")
        return hits[0] if hits else ""

    # -------------------------------------------------- baselines
    def baseline_path(self, baseline_id: str) -> Path:
        if not _ID.match(baseline_id):
            raise StoreError(f"{baseline_id!r} is not a baseline id (hex digits)")
        return self.baselines_dir / f"{baseline_id[:16]}.parquet"

    def write_baseline(self, baseline_id: str, table: pa.Table, meta: dict[str, Any]) -> Path:
        """Write one baseline's table atomically with ``meta`` as its ``stopwise`` metadata."""
        table = seal(table.replace_schema_metadata(None), json.dumps(meta, sort_keys=True, default=_json_default).encode())
        path = self.baseline_path(baseline_id)
        atomic_write_bytes(path, encode_bytes(table))
        return path

    def has_baseline(self, baseline_id: str) -> bool:
        """Whether a readable baseline file with that id exists (inside the root)."""
        path = self.baseline_path(baseline_id)
        if not path.exists() or not self.inside(path):
            return False
        try:
            self.read_meta(path)
            read_table(path)  # every page's checksum verified
            return True
        except Exception:
            return False

    def baseline_files(self) -> list[Path]:
        """Stored baseline files; a link leading outside the root is skipped with a warning."""
        d = self.baselines_dir
        out = []
        for p in sorted(d.glob("*.parquet")) if d.is_dir() else []:
            if self.inside(p):
                out.append(p)
            else:
                warnings.warn(f"skipping {p}: it links outside the results root {self.root}", stacklevel=2)
        return out

    # -------------------------------------------------- campaigns
    def write_campaign(self, manifest: dict[str, Any]) -> Path:
        cid = manifest["campaign_id"]
        path = self.campaigns_dir / f"{cid[:16]}.json"
        atomic_write_bytes(path, json.dumps(manifest, indent=1, sort_keys=True).encode())
        return path

    def campaign_path(self, campaign_id: str) -> Path:
        if not _ID.match(campaign_id or ""):
            raise StoreError(f"{campaign_id!r} is not a campaign id (hex digits)")
        return self.campaigns_dir / f"{campaign_id[:16]}.json"

    def read_campaign(self, campaign_id: str) -> dict[str, Any] | None:
        """The manifest stored under exactly this campaign id, or None when it is missing,
        unreadable or malformed."""
        try:
            path = self.campaign_path(campaign_id)
            if not path.exists() or not self.inside(path):
                return None
            return check_manifest_shape(json.loads(path.read_text()))
        except (OSError, ValueError):
            return None

    def campaigns(self) -> list[dict[str, Any]]:
        out = []
        if not self.campaigns_dir.is_dir():
            return out
        for p in sorted(self.campaigns_dir.glob("*.json")):
            try:
                if is_link_loop(p):
                    raise StoreError("a symbolic-link loop")
                if not self.inside(p):
                    raise StoreError("it links outside the results root")
                out.append(check_manifest_shape(json.loads(p.read_text())))
            except (OSError, ValueError) as e:
                warnings.warn(f"skipping unreadable campaign manifest {p}: {e}", stacklevel=2)
        return out

    def find_campaign(self, ref: str) -> dict[str, Any]:
        """A campaign by id prefix, or the most recent one with that name."""
        all_ = self.campaigns()
        by_id = [c for c in all_ if _ID.match(ref or "") and c["campaign_id"].startswith(ref)]
        if len(by_id) == 1:
            return by_id[0]
        if len(by_id) > 1:
            raise StoreError(f"campaign id prefix {ref!r} is ambiguous")
        named = [c for c in all_ if c.get("name") == ref]
        if ref == "adhoc" and len({c["campaign_id"] for c in named}) > 1:  # different sweeps, not one campaign rerun
            raise StoreError(ambiguous_adhoc(named))
        if named:
            return max(named, key=lambda c: c["created"] if isinstance(c.get("created"), (int, float)) else 0)
        names = sorted({c.get("name", "?") for c in all_})
        raise StoreError(f"no campaign {ref!r} under {self.root}; known: {', '.join(names) or '(none)'}")


FOLDER_CHECKSUMS = "checksums.json"


def write_folder(folder: Path, files: list[tuple[Path, bytes]], mode: int | None = None) -> None:
    """Write ``files`` (paths inside ``folder``) atomically, in order, with
    :data:`FOLDER_CHECKSUMS` (the SHA-256 of each file, by its path relative to ``folder``)
    written just before the last file, so that ``stopwise verify`` can name any file of the
    folder changed after it was written. ``mode``: permissions of the written files."""
    folder = Path(folder)
    sums = {str(Path(p).relative_to(folder)): hashlib.sha256(data).hexdigest() for p, data in files}
    body = json.dumps({"format": 1, "files": sums}, indent=1, sort_keys=True).encode()
    order = list(files[:-1]) + [(folder / FOLDER_CHECKSUMS, body)] + list(files[-1:])
    for path, data in order:
        atomic_write_bytes(path, data)
        if mode is not None:
            os.chmod(path, mode)


def check_folder(folder: Path) -> tuple[list[tuple[Path, str]], int]:
    """(problems by file, files checked) of a folder written by :func:`write_folder`; a
    folder without :data:`FOLDER_CHECKSUMS` gives one problem naming that."""
    folder = Path(folder)
    try:
        doc = json.loads((folder / FOLDER_CHECKSUMS).read_text())
        sums = doc["files"]
        if not isinstance(sums, dict):
            raise ValueError("files is not a mapping")
    except FileNotFoundError:
        return [(folder, f"no {FOLDER_CHECKSUMS}: written before checksums were stored, or not by stopwise")], 0
    except (OSError, ValueError, KeyError, TypeError) as e:
        return [(folder / FOLDER_CHECKSUMS, f"unreadable: {type(e).__name__}: {e}")], 0
    out: list[tuple[Path, str]] = []
    for rel, want in sorted(sums.items()):
        path = folder / str(rel)
        if ".." in Path(str(rel)).parts or Path(str(rel)).is_absolute():
            out.append((folder / FOLDER_CHECKSUMS, f"names a file outside its folder: {rel!r}"))
            continue
        try:
            got = hashlib.sha256(path.read_bytes()).hexdigest()
        except OSError as e:
            out.append((path, f"listed in {FOLDER_CHECKSUMS} but unreadable: {e.strerror or e}"))
            continue
        if got != want:
            out.append((path, "differs from what was written (checksum mismatch: a changed byte)"))
    listed = {str(r) for r in sums} | {FOLDER_CHECKSUMS}
    for path in sorted(folder.rglob("*")):
        if path.is_file() and not path.name.startswith(".") and str(path.relative_to(folder)) not in listed:
            out.append((path, f"not listed in {FOLDER_CHECKSUMS}: added after the folder was written"))
    return out, len(sums)


def ambiguous_adhoc(named: list[dict[str, Any]]) -> str:
    """One line naming each ad hoc sweep (id and overrides), newest first."""
    def key(c):
        return c["created"] if isinstance(c.get("created"), (int, float)) else 0

    parts = []
    for c in sorted(named, key=key, reverse=True):
        over = " ".join(x for x in ((c.get("definition") or {}).get("overrides") or [])
                        if not str(x).startswith("results_root="))
        parts.append(f"{c['campaign_id']} ({over or 'no overrides'})")
    return (f"campaign name 'adhoc' is given to {len(named)} different sweeps: {'; '.join(parts)}; "
            "name one by its id (stopwise campaigns lists them)")


def check_manifest_shape(m: Any) -> dict[str, Any]:
    """The fields readers rely on, with the right types (raises StoreError otherwise)."""
    if not isinstance(m, dict):
        raise StoreError("manifest is not a JSON object")
    cid = m.get("campaign_id")
    if not isinstance(cid, str) or not _ID.match(cid):
        raise StoreError(f"manifest campaign_id {cid!r} is not a hex id")
    ids = m.get("run_ids")
    if not isinstance(ids, list) or not all(isinstance(r, str) and _ID.match(r) for r in ids):
        raise StoreError("manifest run_ids is not a list of hex run ids")
    name = m.get("name", "adhoc")
    if not isinstance(name, str) or not _NAME.match(name):
        # names become folder names (e.g. reports/<name>/): nothing may climb out of the root
        raise StoreError(f"manifest name {name!r} is not a campaign name (letters, digits, '_', '-', '.')")
    return m


def _numbers(v: np.ndarray) -> pa.Array:
    """A 1-D float64, int64 or bool numpy array as an Arrow array without nulls: the array
    ``pa.array`` makes of it, laid out from its buffer directly. (``pa.array`` and
    ``pa.scalar`` import pandas on their first call in a process, about 0.6 s that a
    campaign's worker would pay only for that; this never does.)"""
    if isinstance(v, np.ndarray) and v.ndim == 1 and v.dtype.isnative:
        if v.dtype == np.float64 or v.dtype == np.int64:
            v = np.ascontiguousarray(v)
            return pa.Array.from_buffers(_ARROW_NUMBERS[v.dtype.char], len(v), [None, pa.py_buffer(v)])
        if v.dtype == np.bool_:
            return pa.Array.from_buffers(pa.bool_(), len(v), [None, pa.py_buffer(np.packbits(v, bitorder="little"))])
    return pa.array(v)


_ARROW_NUMBERS = {np.dtype(np.float64).char: pa.float64(), np.dtype(np.int64).char: pa.int64()}


def _constant_column(v: Any, n: int) -> pa.Array:
    if isinstance(v, bool):
        return _numbers(np.full(n, v, dtype=np.bool_))
    if isinstance(v, int):
        return _numbers(np.full(n, v, dtype=np.int64))
    if isinstance(v, float):
        return _numbers(np.full(n, v, dtype=np.float64))
    if v is None:
        return pa.nulls(n, pa.string())
    if not isinstance(v, str):
        v = json.dumps(v, sort_keys=True)
    b = v.encode()
    if n * len(b) >= 2**31 - 1:  # beyond 32-bit offsets: let Arrow lay it out
        return pa.repeat(pa.scalar(v, pa.string()), n)
    # the string n times, laid out directly (a third of the time of pa.repeat for a string)
    offsets = np.arange(n + 1, dtype=np.int32) * np.int32(len(b))
    return pa.Array.from_buffers(pa.string(), n, [None, pa.py_buffer(offsets), pa.py_buffer(b * n)])


def _json_default(o: Any) -> Any:
    if isinstance(o, np.generic):
        return o.item()
    if isinstance(o, np.ndarray):
        return o.tolist()
    return str(o)


class StoreWriteError(StopwiseError, OSError):
    """A trace could not be stored (full disk, read-only or unwritable results root): one
    line naming the folder and the cause; nothing is left under the final name."""

    @classmethod
    def of(cls, e: OSError, path: Path) -> "StoreWriteError":
        name = errno.errorcode.get(e.errno or 0, "")
        why = {errno.ENOSPC: "the disk is full", errno.EDQUOT: "the disk quota is exhausted",
               errno.EROFS: "the file system is read-only", errno.EACCES: "permission denied",
               errno.EPERM: "permission denied", errno.EFBIG: "the file is too large"}.get(e.errno or -1,
                                                                                          e.strerror or str(e))
        err = cls(e.errno, f"could not store the trace in {Path(path).parent}: {why}"
                           + (f" ({name})" if name else ""))
        return err

    def __str__(self) -> str:
        return str(self.strerror)


def is_link_loop(path: Path) -> bool:
    """Whether following ``path``'s links goes round in a loop (``a -> a``, ``a -> b -> a``)."""
    try:
        os.stat(path)
        return False
    except OSError as e:
        return e.errno == errno.ELOOP


def check_name(path: Path, meta: dict[str, Any]) -> None:
    """A trace under a run id's name must hold that run: the SHA-256 of its stored identity
    is its stored digest, whose first 16 hex digits are the file name. A valid trace copied
    under another run's name raises StoreError naming both, so a resumed sweep runs the
    named run again and readers leave the file out (with their warning for unreadable
    traces). Names that are no run id (temporary files) are not checked."""
    stem = path.name[:-8] if path.name.endswith(".parquet") else path.name
    if not _ID.match(stem) or len(stem) != 16:
        return
    digest, ident = meta.get("digest"), meta.get("identity")
    if not isinstance(digest, str) or ident is None:
        raise StoreError(f"{path}: no stored identity and digest to check the file name against")
    actual = hashlib.sha256(canonical_json(ident).encode()).hexdigest()
    if actual != digest:
        raise StoreError(f"{path}: its stored identity hashes to {actual[:16]}, not to its stored digest {digest[:16]}: "
                         "the stored config does not hash to its run id")
    if digest[:16] != stem:
        raise StoreError(f"{path} holds the trace of run {digest[:16]}, not of run {stem}: a trace under another "
                         "run's name")


def campaign_digest(name: str, run_ids: list[str], stopping: list) -> str:
    """SHA-256 of a campaign's identity: its name, its run ids (as a set) and its post-hoc rules."""
    ident = {"name": name, "run_ids": sorted(run_ids), "stopping": stopping}
    return hashlib.sha256(canonical_json(ident).encode()).hexdigest()

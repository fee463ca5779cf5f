"""Atomic file writes: the one primitive every package that writes to disk uses.

A write goes to a hidden temporary name in the destination folder (``.<name>.<random>.tmp``),
is flushed, then renamed over the final name, so a reader sees either the old file or the
whole new one, never a partial file. A write that fails (or a process killed mid-write)
leaves at most the hidden temporary file, which readers never match.

Durability (surviving a power cut, not only a crash of the process) costs an ``fsync``,
about 5 ms per file on the machines here, more than a short run's compute. A write is
fsynced before its rename, unless it happens inside :func:`batched_sync`: there the files
are renamed at once and the file system is flushed in one ``syncfs`` when the batch ends
and at least once a second during it. After a power cut, a file of the last second may
then be empty or torn; readers treat such a trace as missing, so the next sweep runs it
again (docs/reliability.md).
"""
from __future__ import annotations

import ctypes
import os
import tempfile
import time
from contextlib import contextmanager
from pathlib import Path
from typing import BinaryIO, Callable, Iterator

_BATCH: list[dict] = []  # the open batched_sync contexts (innermost last)


def atomic_write(path: str | os.PathLike, write: Callable[[BinaryIO], object], durable: bool | None = None) -> None:
    """Call ``write(fh)`` on a temporary file beside ``path``, then rename it to ``path``.

    ``durable``: fsync before the rename (default: yes, unless inside :func:`batched_sync`,
    which flushes later; ``False`` for caches and indexes that are rebuilt when lost)."""
    path = Path(path)
    path.parent.mkdir(parents=True, exist_ok=True)
    sync_now = durable if durable is not None else not _BATCH
    fd, tmp = tempfile.mkstemp(prefix=f".{path.name}.", suffix=".tmp", dir=path.parent)
    try:
        with os.fdopen(fd, "wb") as fh:
            write(fh)
            fh.flush()
            if sync_now:
                os.fsync(fh.fileno())
        os.replace(tmp, path)
    except BaseException:
        try:
            os.unlink(tmp)
        except FileNotFoundError:
            pass
        raise
    if durable is None and _BATCH:
        batch = _BATCH[-1]
        batch["folders"].add(str(path.parent))
        if time.monotonic() - batch["last"] >= batch["every"]:
            _flush(batch)


def atomic_write_bytes(path: str | os.PathLike, data: bytes, durable: bool | None = None) -> None:
    """Write ``data`` to ``path`` atomically.

    >>> import pathlib, tempfile
    >>> d = pathlib.Path(tempfile.mkdtemp())
    >>> atomic_write_bytes(d / "a.bin", b"abc"); (d / "a.bin").read_bytes(), sorted(p.name for p in d.iterdir())
    (b'abc', ['a.bin'])
    """
    atomic_write(path, lambda fh: fh.write(data), durable=durable)


def sync_folder(folder: str | os.PathLike) -> None:
    """Flush the file system that holds ``folder`` (Linux ``syncfs``; elsewhere ``sync``)."""
    try:
        libc = ctypes.CDLL(None, use_errno=True)
        fd = os.open(folder, os.O_RDONLY)
        try:
            if libc.syncfs(fd) == 0:
                return
        finally:
            os.close(fd)
    except (OSError, AttributeError):
        pass
    os.sync()


def _flush(batch: dict) -> None:
    for folder in sorted(batch["folders"]):
        try:
            sync_folder(folder)
        except OSError:
            pass
    batch["folders"].clear()
    batch["last"] = time.monotonic()


@contextmanager
def batched_sync(every: float = 1.0) -> Iterator[None]:
    """Defer the fsync of atomic writes in this block: one file-system flush every
    ``every`` seconds and one at the end (see the module docstring for what it trades)."""
    batch = {"folders": set(), "last": time.monotonic(), "every": float(every)}
    _BATCH.append(batch)
    try:
        yield
    finally:
        _BATCH.remove(batch)
        _flush(batch)


__all__ = ["atomic_write", "atomic_write_bytes", "batched_sync", "sync_folder"]

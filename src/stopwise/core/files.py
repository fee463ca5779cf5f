"""Atomic file writes: the one primitive every package that writes to disk uses.

A write goes to a hidden temporary name in the destination folder (``.<name>.<random>.tmp``),
is flushed and fsynced, then renamed over the final name, so a reader sees either the old
file or the whole new one, never a partial file. A write that fails (or a process killed
mid-write) leaves at most the hidden temporary file, which readers never match.
"""
from __future__ import annotations

import os
import tempfile
from pathlib import Path
from typing import BinaryIO, Callable


def atomic_write(path: str | os.PathLike, write: Callable[[BinaryIO], object]) -> None:
    """Call ``write(fh)`` on a temporary file beside ``path``, then rename it to ``path``."""
    path = Path(path)
    path.parent.mkdir(parents=True, exist_ok=True)
    fd, tmp = tempfile.mkstemp(prefix=f".{path.name}.", suffix=".tmp", dir=path.parent)
    try:
        with os.fdopen(fd, "wb") as fh:
            write(fh)
            fh.flush()
            os.fsync(fh.fileno())
        os.replace(tmp, path)
    except BaseException:
        try:
            os.unlink(tmp)
        except FileNotFoundError:
            pass
        raise


def atomic_write_bytes(path: str | os.PathLike, data: bytes) -> None:
    """Write ``data`` to ``path`` atomically.

    >>> import pathlib, tempfile
    >>> d = pathlib.Path(tempfile.mkdtemp())
    >>> atomic_write_bytes(d / "a.bin", b"abc"); (d / "a.bin").read_bytes(), sorted(p.name for p in d.iterdir())
    (b'abc', ['a.bin'])
    """
    atomic_write(path, lambda fh: fh.write(data))


__all__ = ["atomic_write", "atomic_write_bytes"]

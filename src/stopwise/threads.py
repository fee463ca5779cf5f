"""BLAS threads: set once per process, before the first run, and recorded with every run.

The number comes from the environment variable ``STOPWISE_BLAS_THREADS``: a whole number
``>= 1`` (default ``1``) or ``library`` to keep whatever the BLAS library chose. One
thread is the default because campaigns get their parallelism from running many runs at
once, and because a fixed thread count keeps reruns on other machines bit for bit (a
threaded BLAS may split a sum differently). The setting is applied through threadpoolctl
to every BLAS library loaded in the process and is never changed afterwards; the thread
counts in force are stored in each trace's metadata (``threads``).
"""
from __future__ import annotations

import os

ENV = "STOPWISE_BLAS_THREADS"
DEFAULT = "1"

_applied: dict = {}


class ThreadsError(ValueError):
    """Invalid thread setting; the message is one line."""


def requested(value: str | int | None = None) -> int | None:
    """The thread count asked for (None: leave the library's choice). Raises ThreadsError."""
    raw = os.environ.get(ENV, DEFAULT) if value is None else value
    text = str(raw).strip()
    if text == "library":
        return None
    try:
        n = int(text)
    except ValueError:
        n = 0
    if n < 1 or str(n) != text.lstrip("+"):
        raise ThreadsError(f"{ENV}={text!r} is invalid: must be a whole number >= 1 or 'library'")
    return n


def configure(value: str | int | None = None) -> int | None:
    """Apply the BLAS thread count once per process; later calls change nothing.

    Returns the count applied by the first call (None when the library's choice is kept).
    """
    if "n" in _applied:
        return _applied["n"]
    n = requested(value)
    if n is not None:
        from threadpoolctl import threadpool_limits

        # kept referenced: the limits stay in force for the life of the process
        _applied["limiter"] = threadpool_limits(limits=n, user_api="blas")
    _applied["n"] = n
    return n


def configured() -> bool:
    return "n" in _applied

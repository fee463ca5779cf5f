"""Chunked launch: the pending runs of a campaign cut into chunk files of stored
identities, one launcher job per chunk, and one shared progress count.

Layout, under ``RESULTS/jobs/CAMPAIGN_ID/`` (Hydra's sweep folder for the campaign):

- ``chunks/K.json``: ``{"chunk": K, "runs": [[run_id, identity], ...]}``, written before
  the launch. A chunk rebuilds each RunSpec from its identity (plain data, validated like
  a fresh config; nothing is imported or executed from the file) and checks that it
  hashes to the listed run id.
- ``progress.json``: the launch's start time, the campaign's run count, the runs stored
  before the launch and the runs finished since; updated under an exclusive lock by
  every worker, so each progress line carries an exact count.

Runs that share a problem go to one chunk, next to each other, so a chunk builds each
problem once.
"""
from __future__ import annotations

import json
import math
import os
import sys
import time
from contextlib import contextmanager
from pathlib import Path
from typing import Any, Iterator

from stopwise.config.spec import RunSpec, SpecError, data_keys, spec_from_identity
from stopwise.core.files import atomic_write_bytes, batched_sync
from stopwise.results.store import Store, StoreError


def jobs_dir(store: Store, campaign_id: str) -> Path:
    return store.root / "jobs" / campaign_id


def chunk_path(store: Store, campaign_id: str, k: int) -> Path:
    return jobs_dir(store, campaign_id) / "chunks" / f"{int(k)}.json"


def problem_groups(specs: list[RunSpec]) -> list[list[RunSpec]]:
    """Runs of the same data (dataset, split, seed) together, first-seen order kept."""
    groups: dict[tuple[str, int], list[RunSpec]] = {}
    for key, s in zip(data_keys(specs), specs):
        groups.setdefault((key, s.seed), []).append(s)
    return list(groups.values())


def cut(specs: list[RunSpec], k: int) -> list[list[RunSpec]]:
    """``k`` chunks of near-equal run counts. Runs of one problem stay in one chunk (so it
    is built once) unless a group is larger than a chunk; groups are dealt to the chunk
    with the fewest runs so far, so a campaign whose datasets differ in cost mixes them."""
    target = math.ceil(len(specs) / k) if k else 0
    pieces: list[list[RunSpec]] = []
    for g in problem_groups(specs):
        pieces += [g[i:i + target] for i in range(0, len(g), target)] if len(g) > target else [g]
    chunks: list[list[RunSpec]] = [[] for _ in range(k)]
    for piece in pieces:
        min(chunks, key=len).extend(piece)
    return [c for c in chunks if c]


def write_plan(store: Store, campaign_id: str, pending: list[RunSpec], k: int, total: int,
               done_before: int) -> list[int]:
    """Cut ``pending`` into ``k`` chunks (:func:`cut`), write one chunk file each
    (replacing any of an earlier launch) and reset the progress count. Returns the sizes."""
    for name in ("chunks", "status"):
        folder = jobs_dir(store, campaign_id) / name
        if folder.is_dir():
            for old in folder.glob("*.json"):
                old.unlink()
    chunks = cut(pending, k)
    for i, part in enumerate(chunks):
        # {"chunk": i, "runs": [[run_id, identity], ...], "launcher": pid}, each identity the
        # canonical JSON its run id hashes (encoded once, when the id was computed)
        runs = ",".join(f'["{s.run_id}",{s.identity_text}]' for s in part)
        text = f'{{"chunk":{int(i)},"runs":[{runs}],"launcher":{os.getpid()}}}'
        atomic_write_bytes(chunk_path(store, campaign_id, i), text.encode(), durable=False)
    atomic_write_bytes(jobs_dir(store, campaign_id) / "progress.json",
                       json.dumps({"start": time.time(), "total": total, "before": done_before,
                                   "pending": len(pending), "done": 0}).encode(), durable=False)
    return [len(c) for c in chunks]


def read_chunk(store: Store, campaign_id: str, k: int) -> list[tuple[str, Any]]:
    return _read_chunk(store, campaign_id, k)[0]


def _read_chunk(store: Store, campaign_id: str, k: int) -> tuple[list[tuple[str, Any]], int | None]:
    """(the chunk's runs, the pid of the sweep that wrote it)."""
    path = chunk_path(store, campaign_id, k)
    try:
        doc = json.loads(path.read_text())
        runs = doc["runs"]
        if not isinstance(runs, list) or not all(isinstance(r, list) and len(r) == 2 for r in runs):
            raise ValueError("runs is not a list of [run_id, identity] pairs")
    except (OSError, ValueError, KeyError, TypeError) as e:
        raise StoreError(f"chunk file {path} is unreadable: {type(e).__name__}: {e}") from None
    launcher = doc.get("launcher")
    return [(str(r[0]), r[1]) for r in runs], (launcher if isinstance(launcher, int) else None)


def orphaned(launcher: int | None) -> bool:
    """Whether this process is a worker whose launching sweep is gone: it was started by the
    sweep (its parent was the launcher) and its parent has changed since (the sweep was
    killed, the worker re-parented). A chunk run in the sweep's own process, or on another
    machine (a SLURM task), is never orphaned by this test."""
    return launcher is not None and _PARENT.get("start") == launcher and os.getppid() != launcher


_PARENT: dict[str, int] = {}  # this process's parent when its first chunk began


class ProgressCount:
    """The launch's shared progress count (``progress.json``), held open for a chunk: each
    finished run adds one under an exclusive lock (so every progress line carries an exact
    count, across workers and machines that share the folder)."""

    def __init__(self, store: Store, campaign_id: str):
        try:
            self.fd: int | None = os.open(jobs_dir(store, campaign_id) / "progress.json", os.O_RDWR)
        except OSError:  # no progress file (Hydra driven directly): no count
            self.fd = None

    def add_one(self, began: float | None = None) -> dict[str, Any] | None:
        """Add one finished run; the count after it, or None when there is none to keep.
        ``began``: the wall-clock time the run began; the first finished run's is kept as
        the origin of the launch's pace (:func:`progress_prefix`)."""
        if self.fd is None:
            return None
        import fcntl

        try:
            fcntl.flock(self.fd, fcntl.LOCK_EX)
            try:
                state = json.loads(os.pread(self.fd, 1 << 16, 0) or b"{}")
                state["done"] = int(state.get("done", 0)) + 1
                if began is not None and "origin" not in state:
                    state["origin"] = float(began)
                out = json.dumps(state).encode()
                os.pwrite(self.fd, out, 0)
                os.ftruncate(self.fd, len(out))
                return state
            finally:
                fcntl.flock(self.fd, fcntl.LOCK_UN)
        except (OSError, ValueError, TypeError, AttributeError):
            return None

    def close(self) -> None:
        if self.fd is not None:
            os.close(self.fd)
            self.fd = None


def count_one(store: Store, campaign_id: str) -> dict[str, Any] | None:
    """Add one finished run to the launch's progress count (see :class:`ProgressCount`)."""
    counter = ProgressCount(store, campaign_id)
    try:
        return counter.add_one()
    finally:
        counter.close()


def eta_text(seconds: float) -> str:
    """Time left, rounded to the second.

    >>> eta_text(42.4), eta_text(125), eta_text(3 * 3600 + 60), eta_text(float("nan"))
    ('42s left', '2m05s left', '3h01m left', '')
    """
    if not math.isfinite(seconds) or seconds < 0:
        return ""
    s = int(round(seconds))
    if s >= 3600:
        return f"{s // 3600}h{(s % 3600) // 60:02d}m left"
    if s >= 60:
        return f"{s // 60}m{s % 60:02d}s left"
    return f"{s}s left"


def progress_prefix(state: dict[str, Any] | None) -> tuple[str, str]:
    """(``[done/total] ``, ``  ~time left``) from a progress count: ``done`` counts the
    runs stored before this launch too; the time left extrapolates this launch's pace,
    measured from the moment its first finished run began (``origin``), so that the start-up
    of the workers (seconds, against runs of milliseconds) does not inflate the estimate;
    a count without an origin measures from the launch's ``start``.

    >>> import time
    >>> progress_prefix({"start": time.time() - 10, "total": 120, "before": 20, "pending": 100, "done": 10})
    ('[ 30/120] ', '  ~1m30s left')
    >>> now = time.time()  # workers started 3 s after the launch; 10 runs in the 1 s since
    >>> progress_prefix({"start": now - 4, "origin": now - 1, "total": 100, "before": 0, "pending": 100, "done": 10})
    ('[ 10/100] ', '  ~9s left')
    """
    if not state:
        return "", ""
    total = int(state.get("total", 0))
    done = int(state.get("before", 0)) + int(state.get("done", 0))
    width = len(str(total))
    finished, pending = int(state.get("done", 0)), int(state.get("pending", 0))
    elapsed = time.time() - float(state.get("origin", state.get("start", time.time())))
    left = elapsed / finished * (pending - finished) if finished else math.nan
    eta = eta_text(left) if finished < pending else ""
    return f"[{min(done, total):>{width}}/{total}] ", (f"  ~{eta}" if eta else "")


def outcome_line(out) -> str:
    bv = out.best_val_error
    best = f"best val {bv:.4g} @ {out.best_val_iteration}" if isinstance(bv, float) and math.isfinite(bv) else "no val"
    what = "skipped (done)" if out.skipped else out.status
    extra = f"  ({out.message})" if out.status != "completed" and out.message else ""
    return (f"{what:<14} {out.label}  {out.iterations} it  {best}  {out.seconds:.3f} s  "
            f"{out.run_id}{extra}")


THREAD_VARS = ("OMP_NUM_THREADS", "OPENBLAS_NUM_THREADS", "MKL_NUM_THREADS", "BLIS_NUM_THREADS",
               "VECLIB_MAXIMUM_THREADS", "NUMEXPR_NUM_THREADS")


def worker_threads(cfg) -> int | None:
    """BLAS/OpenMP threads for one run in this worker: ``threads`` from the config (set by
    ``stopwise sweep --jobs N`` to cores // N), else the CPUs SLURM gave the task, else None
    (the libraries' own default)."""
    t = cfg.get("threads") if hasattr(cfg, "get") else None
    if t is not None:
        return int(t)
    slurm = os.environ.get("SLURM_CPUS_PER_TASK", "")
    return int(slurm) if slurm.isdigit() and int(slurm) > 0 else None


@contextmanager
def limited_threads(n: int | None) -> Iterator[None]:
    """Cap the BLAS/OpenMP pools at ``n`` threads for the duration (threadpoolctl), and set
    the usual environment variables for libraries loaded later in this process. The thread
    counts in force are what the runner records in each trace's metadata."""
    if n is None:
        yield
        return
    saved = {var: os.environ.get(var) for var in THREAD_VARS}
    os.environ.update({var: str(n) for var in THREAD_VARS})
    from threadpoolctl import threadpool_limits

    try:
        with threadpool_limits(limits=n):
            yield
    finally:
        for var, old in saved.items():
            if old is None:
                os.environ.pop(var, None)
            else:
                os.environ[var] = old


def run_chunk(root: str, campaign_id: str, k: int, threads: int | None = None) -> dict[str, int]:
    """Execute chunk ``k`` of a launch: every run in it that is not stored yet, one after
    another; a run's failure is stored as a failed run and never stops the others.
    Returns the count per outcome."""
    from stopwise.running.runner import run_spec

    store = Store(root)
    counts: dict[str, int] = {}
    stamps: dict[str, list] = {}  # each stored trace's status with its file's stamp (see chunk_statuses)
    runs, launcher = _read_chunk(store, campaign_id, k)
    _PARENT.setdefault("start", os.getppid())
    progress = ProgressCount(store, campaign_id)
    with limited_threads(threads), batched_sync():
        for j, (run_id, ident) in enumerate(runs):
            if orphaned(launcher):  # the sweep was killed: leave the rest to the next sweep, never run it twice
                print(f"stopped        chunk {k}: the sweep that launched it (pid {launcher}) is gone; "
                      f"{len(runs) - j} runs left for the next sweep", file=sys.stderr, flush=True)
                counts["left"] = len(runs) - j
                break
            began = time.time()
            try:
                spec = spec_from_identity(ident)
                if spec.run_id != run_id:
                    raise SpecError(f"chunk {k}: identity of {run_id} hashes to {spec.run_id}")
            except SpecError as e:
                print(f"failed         {run_id}  (invalid chunk entry: {e})", file=sys.stderr, flush=True)
                counts["invalid"] = counts.get("invalid", 0) + 1
                continue
            try:
                out = run_spec(spec, root, store=store)
            except Exception as e:  # the store itself failed (disk full, permissions): report, go on
                print(f"failed         {spec.label()}  {spec.run_id}  (could not store the trace: "
                      f"{type(e).__name__}: {e})".replace("\n", " "), file=sys.stderr, flush=True)
                counts["failed"] = counts.get("failed", 0) + 1
                continue
            what = "skipped" if out.skipped else out.status
            counts[what] = counts.get(what, 0) + 1
            if out.skipped:  # stored by an earlier attempt of this chunk (a requeue): counted then
                continue
            try:
                st = os.stat(out.path)
                stamps[spec.run_id] = [st.st_size, st.st_mtime_ns, st.st_ino, out.status]
            except (OSError, TypeError):
                pass
            try:
                head, tail = progress_prefix(progress.add_one(began))
                print(head + outcome_line(out) + tail, flush=True)
            except Exception:  # a progress line must never fail a run
                pass
    progress.close()
    try:
        atomic_write_bytes(jobs_dir(store, campaign_id) / "status" / f"{int(k)}.json",
                           json.dumps(stamps, separators=(",", ":")).encode(), durable=False)
    except OSError:  # the stamps only save the sweep's final count a read of these traces
        pass
    if counts.get("left") or orphaned(launcher):  # traces flushed above; nobody will ever collect this result
        os._exit(0)
    return counts


def chunk_statuses(store: Store, campaign_id: str) -> dict[str, list]:
    """The stamps the chunks of the last launch left (``{run_id: [size, mtime_ns, inode,
    status]}``): what the store's status index needs to count those runs without opening them."""
    out: dict[str, list] = {}
    folder = jobs_dir(store, campaign_id) / "status"
    for path in sorted(folder.glob("*.json")) if folder.is_dir() else []:
        try:
            doc = json.loads(path.read_text())
        except (OSError, ValueError):
            continue
        if isinstance(doc, dict):
            out.update(doc)
    return out


__all__ = ["chunk_path", "count_one", "cut", "problem_groups", "progress_prefix", "read_chunk", "run_chunk",
           "chunk_statuses", "orphaned", "write_plan"]

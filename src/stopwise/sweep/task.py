"""The task that Hydra's launcher runs for each job of a sweep (in this or another process)."""
from __future__ import annotations

import math
import os
import sys
from contextlib import contextmanager
from pathlib import Path
from typing import Iterator

from stopwise.running.runner import run_spec
from stopwise.config.spec import SpecError, spec_from_config
from stopwise.results.store import Store


def progress(root: str, campaign_id: str | None) -> str:
    """``done/total`` for a campaign, counted from the store (works across processes)."""
    if not campaign_id:
        return ""
    store = Store(root)
    manifest = store.read_campaign(campaign_id)
    if manifest is None:
        return ""
    ids = manifest["run_ids"]
    done = sum(1 for r in ids if store.run_path(r).exists())
    width = len(str(len(ids)))
    return f"[{done:>{width}}/{len(ids)}] "


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


def task(cfg) -> str:
    """Run one job of a sweep. Never raises for a run's own failure: Hydra stops a multirun
    (and skips its end-of-sweep callbacks) when a job raises, so every failure is caught here,
    stored as status ``failed`` when possible, and counted by ``stopwise sweep`` at the end."""
    try:
        spec = spec_from_config(cfg)
    except SpecError as e:  # pre-validated by the CLI; reached only when Hydra is driven directly
        print(f"error: {e}", file=sys.stderr)
        return "invalid"
    root = str(cfg.results_root)
    try:
        with limited_threads(worker_threads(cfg)):
            out = run_spec(spec, root)
    except Exception as e:  # the store itself failed (disk full, permissions): report, go on
        print(f"failed         {spec.label()}  {spec.run_id}  (could not store the trace: "
              f"{type(e).__name__}: {e})".replace("\n", " "), file=sys.stderr, flush=True)
        return "failed"
    try:
        print(progress(root, cfg.get("campaign_id")) + outcome_line(out), flush=True)
    except Exception:  # a progress line must never fail a run
        pass
    return out.status

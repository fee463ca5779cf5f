"""The task that Hydra's launcher runs for each job of a sweep (in this or another process)."""
from __future__ import annotations

import sys

from stopwise.running.runner import run_spec
from stopwise.config.spec import SpecError, spec_from_config
from stopwise.results.store import Store
from stopwise.sweep.chunks import THREAD_VARS, limited_threads, outcome_line, worker_threads  # noqa: F401


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


def task(cfg) -> str:
    """Run one job of a sweep: a chunk of stored run identities (what ``stopwise sweep``
    launches), or one composed config (Hydra's multirun driven directly). Never raises for
    a run's own failure: Hydra stops a multirun (and skips its end-of-sweep callbacks) when
    a job raises, so every failure is caught here, stored as status ``failed`` when
    possible, and counted by ``stopwise sweep`` at the end."""
    chunk = cfg.get("chunk") if hasattr(cfg, "get") else None
    if chunk is not None:
        from stopwise.results.store import StoreError
        from stopwise.sweep.chunks import run_chunk

        try:
            counts = run_chunk(str(cfg.results_root), str(cfg.campaign_id), int(chunk), worker_threads(cfg))
        except StoreError as e:
            print(f"error: {e}", file=sys.stderr, flush=True)
            return "invalid"
        return ", ".join(f"{v} {k}" for k, v in sorted(counts.items()))
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

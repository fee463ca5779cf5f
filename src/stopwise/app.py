"""The task that Hydra's launcher runs for each job of a sweep (in this or another process)."""
from __future__ import annotations

import math
import sys
from pathlib import Path

from .runner import run_spec
from .spec import SpecError, spec_from_config
from .store import Store


def progress(root: str, campaign_id: str | None) -> str:
    """``done/total`` for a campaign, counted from the store (works across processes)."""
    if not campaign_id:
        return ""
    import json

    store = Store(root)
    try:
        ids = json.loads((store.campaigns_dir / f"{campaign_id}.json").read_text())["run_ids"]
    except (OSError, ValueError, KeyError):
        return ""
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


def task(cfg) -> str:
    try:
        spec = spec_from_config(cfg)
    except SpecError as e:  # pre-validated by the CLI; reached only when Hydra is driven directly
        print(f"error: {e}", file=sys.stderr)
        return "invalid"
    root = str(cfg.results_root)
    out = run_spec(spec, root)
    print(progress(root, cfg.get("campaign_id")) + outcome_line(out), flush=True)
    return out.status

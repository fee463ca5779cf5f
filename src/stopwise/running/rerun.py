"""Recompute stored runs from their stored identity and compare with the stored traces.

The stored identity is plain JSON, validated through the same schema as a fresh config:
nothing named inside a results folder is imported or executed.
"""
from __future__ import annotations

import tempfile
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
from stopwise.results.schema import read_table

from stopwise.running.runner import execute, save
from stopwise.config.spec import SpecError, spec_from_identity
from stopwise.results.store import Store, StoreError

IGNORED = ("seconds",)  # wall-clock time is never expected to reproduce


@dataclass
class Comparison:
    run_id: str
    ok: bool
    max_diff: float = 0.0
    problems: list[str] = field(default_factory=list)


def compare_tables(stored, fresh) -> tuple[float, list[str]]:
    from stopwise.results.schema import FORMER_COLUMNS

    problems: list[str] = []
    renamed = {o: n for o, n in FORMER_COLUMNS.items() if o in stored.column_names and n not in stored.column_names}
    if renamed:  # stored before a param was renamed: compare under today's name
        stored = stored.rename_columns([renamed.get(c, c) for c in stored.column_names])
    if stored.num_rows != fresh.num_rows:
        problems.append(f"{stored.num_rows} stored rows vs {fresh.num_rows} recomputed")
    s_names, f_names = set(stored.column_names), set(fresh.column_names)
    if s_names != f_names:
        problems.append(f"columns differ: {sorted(s_names ^ f_names)}")
    worst = 0.0
    if problems:
        return float("inf"), problems
    for name in stored.column_names:
        if name in IGNORED:
            continue
        a = stored.column(name).to_numpy(zero_copy_only=False)
        b = fresh.column(name).to_numpy(zero_copy_only=False)
        if a.dtype.kind in "fi" and b.dtype.kind in "fi":
            a = a.astype(float)
            b = b.astype(float)
            same_nan = np.isnan(a) == np.isnan(b)
            if not same_nan.all():
                problems.append(f"{name}: missing values differ")
                worst = float("inf")
                continue
            fin = ~np.isnan(a)
            d = float(np.max(np.abs(a[fin] - b[fin]))) if fin.any() else 0.0
            if d > 0 or not np.array_equal(a[fin], b[fin]):
                problems.append(f"{name}: largest difference {d:.3g}")
            worst = max(worst, d)
        elif not (a == b).all() if len(a) else False:
            problems.append(f"{name}: values differ")
            worst = float("inf")
    return worst, problems


def rerun_one(store: Store, run_id: str) -> Comparison:
    path = store.run_path(run_id)
    try:
        meta = store.read_meta(path)
        stored = read_table(path)
    except Exception as e:
        return Comparison(run_id, False, float("inf"), [f"unreadable: {type(e).__name__}: {e}"])
    try:
        spec = spec_from_identity(meta.get("identity"))
    except (SpecError, KeyError, TypeError) as e:
        return Comparison(run_id, False, float("inf"), [f"stored config is invalid: {e}"])
    if spec.digest != meta.get("digest") or spec.run_id != path.stem:
        return Comparison(run_id, False, float("inf"),
                          ["stored config does not hash to its run id (file renamed or config tampered)"])
    trace = execute(spec)
    with tempfile.TemporaryDirectory(prefix="stopwise-rerun-") as tmp:
        fresh_path = save(spec, trace, Store(tmp)).path
        fresh = read_table(fresh_path)
        fresh_status = Store(tmp).read_meta(Path(fresh_path))["status"]
    worst, problems = compare_tables(stored, fresh)
    if fresh_status != meta.get("status"):
        problems.insert(0, f"status {meta.get('status')} stored vs {fresh_status} recomputed")
    return Comparison(run_id, not problems, worst, problems)


def resolve(store: Store, ref: str) -> tuple[str, list[str]]:
    """(kind, run ids) for a run id prefix or a campaign id/name."""
    try:
        rid = store.resolve_run(ref)
    except StoreError:
        rid = ""
    if rid:
        return "run", [rid]
    try:
        c = store.find_campaign(ref)
    except StoreError:
        raise StoreError(f"no run or campaign {ref!r} under {store.root}") from None
    return "campaign", [r for r in c["run_ids"] if store.run_path(r).exists()]

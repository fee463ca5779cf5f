"""Recompute stored runs from their stored identity and compare with the stored traces.

The stored identity is plain JSON, validated through the same schema as a fresh config:
nothing named inside a results folder is imported or executed.

Every column must reproduce bit for bit, except the wall-clock seconds and, for a run whose
hard-margin reference was computed by an earlier method (its stored ``svm_method`` differs
from today's), the columns measured against that reference (``svm_angle``, ``svm_dist``):
those may differ by no more than the reference direction moved (the bound of
:func:`reference_shift`), and the comparison says so in a note.
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
# Columns measured against the problem's hard-margin reference rather than computed from the
# run's iterates alone (running/classify.py).
REFERENCE_COLUMNS = ("svm_angle", "svm_dist")
# Rounding allowed on top of the bound when the reference moved: both columns are formed
# from unit vectors (a few ulps) and the bound from the stored directions.
REFERENCE_SLACK = 1e-12


@dataclass
class Comparison:
    run_id: str
    ok: bool
    max_diff: float = 0.0
    problems: list[str] = field(default_factory=list)
    notes: list[str] = field(default_factory=list)


def reference_shift(stored_info: dict, fresh_info: dict) -> tuple[float, float, str] | None:
    """When a run's hard-margin reference was computed by another method than today's
    (``svm_method`` in the run metadata's ``problem`` record), the distance and the angle
    between the stored and today's directions ``w* / ||w*||``, and the stored method; None
    when the method is the same (the columns must then reproduce bit for bit).

    The triangle inequality bounds what the move can do to the reference columns of any
    iterate v: ``| ||v - u_old|| - ||v - u_new|| | <= ||u_old - u_new||`` for ``svm_dist``
    and the same with the angle (a metric on the sphere) for ``svm_angle``.
    """
    old, new = stored_info.get("svm_method"), fresh_info.get("svm_method")
    if old == new or not isinstance(stored_info.get("svm_w"), list) or not isinstance(fresh_info.get("svm_w"), list):
        return None
    try:
        u = np.asarray(stored_info["svm_w"], dtype=float)
        v = np.asarray(fresh_info["svm_w"], dtype=float)
    except (TypeError, ValueError):
        return None
    if u.shape != v.shape or not (np.all(np.isfinite(u)) and np.linalg.norm(u) > 0):
        return None
    dist = float(np.linalg.norm(u / np.linalg.norm(u) - v / np.linalg.norm(v)))
    return dist, 2.0 * float(np.arcsin(min(dist / 2.0, 1.0))), str(old)


def compare_reference_columns(stored, fresh, shift: tuple[float, float, str]) -> tuple[list[str], list[str]]:
    """(problems, notes) for the reference columns of a run whose reference moved by
    ``shift`` (:func:`reference_shift`): each column may differ by at most the move."""
    dist, angle, old = shift
    problems, worst = [], {}
    for name, bound in (("svm_dist", dist), ("svm_angle", angle)):
        if name not in stored.column_names or name not in fresh.column_names:
            continue
        a = stored.column(name).to_numpy(zero_copy_only=False).astype(float)
        b = fresh.column(name).to_numpy(zero_copy_only=False).astype(float)
        if a.shape != b.shape or not np.array_equal(np.isnan(a), np.isnan(b)):
            problems.append(f"{name}: missing values differ")
            continue
        fin = ~np.isnan(a)
        d = float(np.max(np.abs(a[fin] - b[fin]))) if fin.any() else 0.0
        worst[name] = d
        if d > bound + REFERENCE_SLACK:
            problems.append(f"{name}: largest difference {d:.3g} exceeds the reference's move {bound:.3g}")
    notes = [] if problems else [
        f"hard-margin reference recomputed (stored: {old}), direction moved {angle:.3g} rad; "
        + ", ".join(f"{k} within it (largest difference {v:.3g})" for k, v in worst.items())]
    return problems, notes


def compare_tables(stored, fresh, skip: tuple[str, ...] = ()) -> tuple[float, list[str]]:
    """(largest difference, problems) over the columns of two traces, leaving out the
    wall-clock columns and ``skip``."""
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
        if name in IGNORED or name in skip:
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
        fresh_meta = Store(tmp).read_meta(Path(fresh_path))
    fresh_status = fresh_meta["status"]
    stored_info, fresh_info = meta.get("problem"), fresh_meta.get("problem")
    shift = (reference_shift(stored_info, fresh_info)
             if isinstance(stored_info, dict) and isinstance(fresh_info, dict) else None)
    worst, problems = compare_tables(stored, fresh, skip=REFERENCE_COLUMNS if shift else ())
    notes: list[str] = []
    if shift and not problems:
        ref_problems, notes = compare_reference_columns(stored, fresh, shift)
        problems += ref_problems
    if fresh_status != meta.get("status"):
        problems.insert(0, f"status {meta.get('status')} stored vs {fresh_status} recomputed")
    return Comparison(run_id, not problems, worst, problems, notes)


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

"""Post-hoc selection: every stopping rule on every stored trace of a campaign.

Rules read stored traces, so evaluating another rule, or the same rule with other
parameters, costs no run. One output row per (run, rule).
"""
from __future__ import annotations

import math
import warnings
from pathlib import Path
from typing import Any, Iterable, Sequence

import numpy as np
import pandas as pd

from stopwise.stopping.rules import (
    RuleContext,
    RuleError,
    get_rule,
    make_rule_params,
    rule_specs,
    trace_columns,
)
from stopwise.core.errors import SpecError
from stopwise.results.schema import one_line, read_trace
from stopwise.results.store import Store, StoreError

SELECT_COLUMNS = ("run_id", "dataset", "solver", "seed", "status", "rule", "reference", "selected_iteration",
                  "selected_passes", "passes_spent", "val_error", "test_error", "train_error", "reason", "outcome",
                  "last_test_error")
# errors of the selected iterate that every selection row reports
REPORTED = ("val_error", "test_error", "train_error")
_HEAD = SELECT_COLUMNS[:4]
_TAIL = SELECT_COLUMNS[4:]


class DatasetNameClash(SpecError):
    """Two different files stored under one dataset name (one line naming both)."""


def _check_file_names(loaded: list) -> None:
    seen: dict[str, str] = {}
    for _, meta, _, _ in loaded:
        d = ((meta or {}).get("config") or {}).get("dataset") or {}
        if d.get("source") != "file":
            continue
        path = str((d.get("params") or {}).get("path"))
        other = seen.setdefault(str(d.get("name")), path)
        if other != path:
            raise DatasetNameClash(f"dataset name {d.get('name')!r} belongs to runs on two files, {other} and {path}: "
                                   "ranking them as one dataset would hide one; select one campaign, or rerun one "
                                   "file under its own dataset.name")


def campaign_list(campaign: str | Sequence[str] | None) -> list[str] | None:
    """One campaign reference or several, as a list (``None`` stays None: every stored run).

    >>> campaign_list("demo"), campaign_list(["a", "b", "a"]), campaign_list(None)
    (['demo'], ['a', 'b'], None)
    """
    if campaign is None:
        return None
    refs = [campaign] if isinstance(campaign, str) else [str(c) for c in campaign]
    if not refs:
        raise StoreError("no campaign named: give at least one campaign name or id")
    return list(dict.fromkeys(refs))


def find_campaigns(store: Store, campaign: str | Sequence[str]) -> list[dict[str, Any]]:
    """The manifest of each named campaign (by name or id), each once even when named twice."""
    out: dict[str, dict[str, Any]] = {}
    for ref in campaign_list(campaign) or []:
        m = store.find_campaign(ref)
        out.setdefault(str(m["campaign_id"]), m)
    return list(out.values())


def campaign_run_ids(manifests: Sequence[dict[str, Any]]) -> list[str]:
    """The union of the campaigns' runs, in the order they are first listed: a run that
    several campaigns hold (the same run id) counts once."""
    return list(dict.fromkeys(str(r) for m in manifests for r in m.get("run_ids", [])))


def _campaign_rules(store: Store, campaign: str | Sequence[str] | None, metas: list[dict]) -> list[Any]:
    if campaign is not None:
        listed = [r for m in find_campaigns(store, campaign) for r in (m.get("stopping") or [])]
    else:
        listed = [(m.get("config") or {}).get("stopping") for m in metas]
    rules = [{"rule": r.get("rule"), "params": r.get("params") or {}} for r in listed if isinstance(r, dict)]
    return rules + ["oracle"]


def _read(store: Store, rid: str) -> tuple[dict | None, pd.DataFrame | None, str]:
    path = store.run_path(rid)
    if not path.exists():
        return None, None, "no trace stored (run not executed yet)"
    try:
        meta = store.read_meta(path)
    except Exception as e:  # an unreadable file must not sink the whole selection
        warnings.warn(f"skipping unreadable trace {path}: {type(e).__name__}: {one_line(e)}", stacklevel=3)
        return None, None, f"unreadable trace: {type(e).__name__}"
    wanted = dict.fromkeys((*trace_columns(), *REPORTED))  # what the rules read, then what a row reports
    table = read_trace(path, wanted, stacklevel=4)
    if table is None:
        return None, None, "unreadable trace"
    return meta, table.to_pandas(), ""


def select(root: str | Path = "results", campaign: str | Sequence[str] | None = None,
           rules: Iterable[Any] | None = None) -> pd.DataFrame:
    """Evaluate stopping rules on stored traces; one row per (run, rule).

    ``campaign``: a campaign name or id, several of them (the union of their runs, each run
    once), or None for every stored run.

    ``rules``: rule names, ``{"rule": NAME, "params": {...}}`` mappings or ``(NAME, params)``
    pairs. ``None`` means the rules named in the campaign manifest's ``stopping`` list
    (every stopping config its jobs used) plus ``oracle``; without a campaign, the
    stopping configs of the stored runs plus ``oracle``. The ``oracle`` rows carry
    ``reference=True`` and must never be ranked as a method.

    Columns: run_id, dataset, solver, seed, <solver params>, status, rule, reference,
    selected_iteration (nullable), selected_passes, passes_spent, val_error, test_error,
    train_error, reason, outcome, last_test_error. Errors are those of the selected iterate
    (NaN when none). ``outcome`` is ``stopped`` (the rule decided before the trace's end and
    later iterates cannot change it), ``not stopped`` (evaluated on the whole trace without
    deciding), ``not applicable`` (the rule cannot be evaluated on this trace, ``reason``
    says why) or ``no trace``; ``last_test_error`` is the test error of the trace's last
    row, what a run that its rule does not stop returns.
    """
    store = Store(root)
    if campaign is not None:
        run_ids = campaign_run_ids(find_campaigns(store, campaign))
    else:
        run_ids = [p.stem for p in store.run_files()]
    loaded = [(rid, *_read(store, rid)) for rid in run_ids]
    _check_file_names(loaded)
    specs = rule_specs(rules if rules is not None else
                       _campaign_rules(store, campaign, [m for _, m, _, _ in loaded if m]))
    # oracle last, once
    specs = [s for s in specs if s["rule"] != "oracle"] + [s for s in specs if s["rule"] == "oracle"]
    defs = [(s, get_rule(s["rule"]), make_rule_params(s["rule"], s["params"])) for s in specs]

    rows: list[dict[str, Any]] = []
    param_names: list[str] = []
    for rid, meta, trace, why in loaded:
        cfg = (meta or {}).get("config") or {}
        base: dict[str, Any] = {"run_id": rid if meta is None else meta.get("run_id", rid),
                                "dataset": (cfg.get("dataset") or {}).get("name"),
                                "solver": cfg.get("solver"), "seed": cfg.get("seed")}
        for k, v in (cfg.get("params") or {}).items():
            if k not in param_names:
                param_names.append(k)
            base[k] = v
        status = (meta or {}).get("status", "missing" if why.startswith("no trace") else "failed")
        ctx = RuleContext.from_problem_info((meta or {}).get("problem"))
        empty = trace is None or len(trace) == 0
        last_test = (float(trace["test_error"].iloc[-1]) if not empty and "test_error" in trace else math.nan)
        for spec, rdef, params in defs:
            row = dict(base, status=status, rule=spec["label"], reference=bool(rdef.reference))
            if empty:
                reason = why or (f"run {status}: {(meta or {}).get('message', '')}".rstrip(": ")
                                 if status == "failed" else "empty trace")
                row.update(selected_iteration=None, selected_passes=math.nan, passes_spent=0.0,
                           val_error=math.nan, test_error=math.nan, train_error=math.nan, reason=reason,
                           outcome="no trace", last_test_error=math.nan)
            else:
                sel = rdef.select(trace, ctx, params)
                r = sel.row

                def at(col: str) -> float:
                    return float(trace[col].iloc[r]) if r is not None and col in trace else math.nan

                row.update(selected_iteration=sel.iteration, selected_passes=sel.passes_selected,
                           passes_spent=sel.passes_spent, val_error=at("val_error"), test_error=at("test_error"),
                           train_error=at("train_error"), reason=sel.reason, outcome=sel.outcome,
                           last_test_error=last_test)
            rows.append(row)
    columns = list(_HEAD) + param_names + list(_TAIL)
    if not rows:
        return pd.DataFrame({c: pd.Series(dtype=object) for c in columns})
    df = pd.DataFrame(rows)
    for c in columns:
        if c not in df:
            df[c] = None
    df = df[columns]
    df["selected_iteration"] = df["selected_iteration"].astype("Int64")
    df["reference"] = df["reference"].astype(bool)
    for c in ("selected_passes", "passes_spent", "val_error", "test_error", "train_error", "last_test_error"):
        df[c] = df[c].astype(np.float64)
    return df.reset_index(drop=True)


def parse_rule_arg(text: str) -> dict[str, Any]:
    """``NAME`` or ``NAME:key=value[,key=value...]`` (values read as YAML scalars)."""
    import yaml

    name, _, rest = text.partition(":")
    name = name.strip()
    get_rule(name)  # one-line error for an unknown rule
    params: dict[str, Any] = {}
    for item in filter(None, (s.strip() for s in rest.split(","))):
        key, eq, value = item.partition("=")
        if not eq or not key.strip():
            raise RuleError(f"--rule {text!r}: parameters must be key=value, e.g. holdout:patience=5")
        try:
            params[key.strip()] = yaml.safe_load(value)
        except yaml.YAMLError:
            raise RuleError(f"--rule {text!r}: cannot read value {value!r}") from None
    make_rule_params(name, params)
    return {"rule": name, "params": params}


def format_table(df: pd.DataFrame) -> str:
    """An aligned plain-text table of a selection (reason last, floats to 4 digits)."""
    show = df.copy()
    show["reference"] = np.where(show["reference"], "yes", "")
    show["selected_iteration"] = show["selected_iteration"].map(lambda v: "-" if pd.isna(v) else str(int(v)))
    with pd.option_context("display.max_rows", 100000, "display.width", 250, "display.max_columns", 60,
                           "display.max_colwidth", 90, "display.float_format", "{:.4g}".format):
        return show.to_string(index=False, na_rep="-")


__all__ = ["SELECT_COLUMNS", "campaign_list", "campaign_run_ids", "find_campaigns", "select", "parse_rule_arg",
           "format_table", "StoreError"]

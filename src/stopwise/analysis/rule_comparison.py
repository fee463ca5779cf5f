"""Stopping rules compared: which rule to trust, on the campaign's own paths.

For every rule and every stored run (a solver configuration on a dataset, one seed), the
rule's choice on the run's trace is set against the oracle's (the recorded iterate of
smallest test error on the same path):

- ``relative_error``: test error of what the rule returns over the oracle's test error
  (1 = the rule found the best iterate of the path). A rule that stops returns its chosen
  iterate; a rule that does not stop returns its choice after the whole trace, or, when it
  chooses nothing (a discrepancy level never reached), the last iterate, what a run halted
  by that rule would have returned at the end of its budget. When the oracle's error is 0,
  the ratio is 1 if the rule's error is 0 too and infinite otherwise;
- ``excess_error``: the same as a difference (rule minus oracle);
- ``passes_spent``: data passes the rule needed before it could decide (the whole trace
  when it never decided);
- ``outcome``: ``stopped``, ``not stopped``, ``not applicable`` (the rule cannot be
  evaluated on that trace: no stated noise level, a column the trace lacks).

Only completed runs are compared: a diverged path has no meaningful oracle ratio for the
rules that never stop (a note counts the runs left out).

Per (dataset, method, configuration, rule) the table holds the median relative error over
seeds, mean excess, median passes, and the shares that did not stop and stopped at
iteration 0. Rules are then ranked across datasets with the statistics methods are ranked
with (average ranks, Friedman, Iman-Davenport, Nemenyi; Demsar 2006): a dataset's score
for a rule is the median relative error over its paths. Every pair of ranked rules is also
compared with the Wilcoxon signed-rank test over those datasets, Holm-corrected, as methods
are. A rule that is not applicable
on some dataset (or has no finite score there) is left out of the rank test with a note
that names the dataset and the reason: it is not counted as a tie. The rank test takes the rules that
apply on every dataset; when fewer than two do, it takes every rule on the datasets where
all of them apply.
"""
from __future__ import annotations

import math
from dataclasses import dataclass, field
from typing import Any, Iterable, Mapping, Sequence

import numpy as np
import pandas as pd

from stopwise.analysis.rankstats import RankTest, StatsError, friedman_test, pairwise_wilcoxon, rank_table

COMPARISON_COLUMNS = ("dataset", "method", "config", "rule", "runs", "applicable", "relative_error",
                      "excess_error", "passes_spent", "not_stopped", "stopped_at_0")


@dataclass
class RuleComparison:
    """What :func:`compare_rules` computes.

    ``per_run``  one row per (run, rule): relative_error, excess_error, passes_spent, outcome.
    ``table``    one row per (dataset, method, config, rule): medians and shares over seeds.
    ``scores``   datasets x rules median relative error (the ranked quantity).
    ``ranks``    datasets x rules ranks (1 best, ties averaged), of the rules and datasets in
                 the rank test only.
    ``test``     Friedman / Nemenyi statistics (None with fewer than 2 rules or datasets).
    ``summary``  one row per rule: median relative error, median passes, shares not
                 stopped / at 0 / not applicable over every run, average rank.
    ``pairwise`` Wilcoxon signed-rank test of every pair of ranked rules over the ranked
                 datasets, Holm-corrected (the function methods are compared with:
                 :func:`stopwise.analysis.rankstats.pairwise_wilcoxon`; columns ``method_a``,
                 ``method_b`` name the rules); empty with fewer than 2 rules or datasets.
    """

    rules: tuple[str, ...]
    per_run: pd.DataFrame
    table: pd.DataFrame
    scores: pd.DataFrame
    ranks: pd.DataFrame
    test: RankTest | None
    summary: pd.DataFrame
    notes: list[str] = field(default_factory=list)
    pairwise: pd.DataFrame = field(default_factory=pd.DataFrame)


def default_rules(campaign_rules: Iterable[Any] = ()) -> list[dict[str, Any]]:
    """The rules a campaign named, then every registered rule that is not a reference, at
    its defaults (a label appears once).

    >>> [r["label"] for r in default_rules([{"rule": "holdout", "params": {"patience": 5}}])][:3]
    ['holdout(patience=5)', 'budget', 'holdout']
    """
    from stopwise.stopping.rules import RULES, rule_specs

    specs = rule_specs([*campaign_rules, *[n for n, d in RULES.items() if not d.reference]])
    seen: set[str] = set()
    out = []
    for s in specs:
        if s["label"] not in seen and s["rule"] != "oracle":
            seen.add(s["label"])
            out.append({"rule": s["rule"], "params": s["params"], "label": s["label"]})
    return out


def _relative(err: np.ndarray, best: np.ndarray) -> np.ndarray:
    with np.errstate(divide="ignore", invalid="ignore"):
        r = err / best
    zero = best == 0
    r[zero & (err == 0)] = 1.0
    r[zero & (err > 0)] = np.inf
    return r


def per_run(selections: pd.DataFrame, method_by: Sequence[str] = ("solver",),
            params: Sequence[str] | None = None) -> pd.DataFrame:
    """One row per (run, non-reference rule) with the oracle's error on the same run beside
    the rule's (see the module's docstring)."""
    from stopwise.analysis.rank import config_labels, method_labels, param_columns

    need = {"run_id", "rule", "reference", "test_error", "last_test_error", "outcome", "passes_spent",
            "selected_iteration", "dataset", "seed"}
    missing = sorted(need - set(selections.columns))
    if missing:
        raise StatsError(f"the selection table lacks {', '.join(missing)}; make it with stopwise.select")
    sel = selections[selections["outcome"] != "no trace"]
    if "status" in sel.columns:
        sel = sel[sel["status"] == "completed"]
    oracle = sel[sel["rule"] == "oracle"].drop_duplicates("run_id").set_index("run_id")["test_error"]
    rows = sel[~sel["reference"].astype(bool)].copy()
    if rows.empty:
        return rows.assign(method=[], config=[], oracle_error=[], returned_error=[], relative_error=[],
                           excess_error=[])
    cols = param_columns(rows, tuple(method_by), params)
    rows["method"] = method_labels(rows, tuple(method_by)).to_numpy()
    rows["config"] = config_labels(rows, cols).to_numpy()
    rows["oracle_error"] = rows["run_id"].map(oracle).astype(float)
    chosen = rows["selected_iteration"].notna().to_numpy()
    returned = np.where(chosen, rows["test_error"].to_numpy(float), rows["last_test_error"].to_numpy(float))
    applicable = (rows["outcome"] != "not applicable").to_numpy()
    returned[~applicable] = np.nan
    rows["returned_error"] = returned
    best = rows["oracle_error"].to_numpy(float)
    rows["relative_error"] = _relative(returned, best)
    rows["excess_error"] = returned - best
    rows.loc[~applicable, ["relative_error", "excess_error", "passes_spent"]] = np.nan
    keep = ["run_id", "dataset", "method", "config", "seed", "rule", "outcome", "selected_iteration",
            "passes_spent", "oracle_error", "returned_error", "relative_error", "excess_error", "reason"]
    return rows[[c for c in keep if c in rows.columns]].reset_index(drop=True)


def _median(s: pd.Series) -> float:
    a = s.to_numpy(float)
    a = a[~np.isnan(a)]
    return float(np.median(a)) if a.size else math.nan


def compare_rules(selections: pd.DataFrame, method_by: Sequence[str] = ("solver",),
                  params: Sequence[str] | None = None, alpha: float = 0.05) -> RuleComparison:
    """Compare every non-reference rule of ``selections`` (a :func:`stopwise.select` table that
    holds the ``oracle`` rows) against the oracle and rank the rules across datasets."""
    runs = per_run(selections, method_by, params)
    notes: list[str] = []
    if "status" in selections.columns:
        other = selections.drop_duplicates("run_id")["status"]
        other = other[other != "completed"].value_counts()
        if len(other):
            notes.append("left out of the rule comparison: " + ", ".join(f"{v} {k} run(s)" for k, v in other.items())
                         + " (only completed paths are compared)")
    rules = tuple(dict.fromkeys(runs["rule"])) if not runs.empty else ()
    keys = ["dataset", "method", "config", "rule"]
    if runs.empty:
        empty = pd.DataFrame(columns=list(COMPARISON_COLUMNS))
        return RuleComparison(rules, runs, empty, pd.DataFrame(), pd.DataFrame(), None, pd.DataFrame(),
                              ["no stored run has a trace to compare rules on"])
    app = runs["outcome"] != "not applicable"
    g = runs.assign(applicable=app, not_stopped=(runs["outcome"] == "not stopped") & app,
                    at0=(runs["selected_iteration"] == 0).fillna(False) & (runs["outcome"] == "stopped"))
    table = (g.groupby(keys, sort=False)
             .agg(runs=("run_id", "size"), applicable=("applicable", "sum"),
                  relative_error=("relative_error", _median), excess_error=("excess_error", "mean"),
                  passes_spent=("passes_spent", _median), not_stopped=("not_stopped", "sum"),
                  stopped_at_0=("at0", "sum"))
             .reset_index())
    # one order whatever order the runs were listed in (a campaign, or several): datasets,
    # methods and configurations sorted, rules in the order they were given
    position = {r: i for i, r in enumerate(rules)}
    table = (table.assign(_rule=table["rule"].map(position))
             .sort_values(["dataset", "method", "config", "_rule"], kind="stable")
             .drop(columns="_rule").reset_index(drop=True))
    for c in ("not_stopped", "stopped_at_0"):  # shares of the runs where the rule applies
        with np.errstate(divide="ignore", invalid="ignore"):
            table[c] = np.where(table["applicable"] > 0, table[c] / table["applicable"].where(table["applicable"] > 0),
                                np.nan)
    scores = (table.groupby(["dataset", "rule"], sort=False)["relative_error"].agg(_median)
              .unstack("rule").reindex(columns=list(rules)).sort_index())
    finite = scores.apply(lambda col: np.isfinite(col.to_numpy(float)))
    everywhere = [r for r in rules if bool(finite[r].all())]
    if len(everywhere) >= 2 or len(rules) < 2:
        ranked_rules, kept = everywhere, list(scores.index)
        for r in rules:
            if r not in everywhere:
                where: dict[str, list[str]] = {}
                for d in scores.index:
                    if not finite.loc[d, r]:
                        where.setdefault(_why(runs, d, r), []).append(str(d))
                notes.append(f"rule {r} left out of the rank test: "
                             + "; ".join(f"not applicable on {', '.join(ds)} ({why})" for why, ds in where.items()))
    else:  # fewer than two rules apply everywhere: rank every rule on the datasets where all apply
        ranked_rules, kept = list(rules), [d for d in scores.index if bool(finite.loc[d].all())]
        for d in scores.index:
            if d not in kept:
                bad = [r for r in rules if not finite.loc[d, r]]
                notes.append(f"dataset {d} left out of the rank test ("
                             + "; ".join(f"{r}: {_why(runs, d, r)}" for r in bad) + ")")
    ranked = scores.loc[kept, ranked_rules]
    ranks = rank_table(ranked) if len(kept) and len(ranked_rules) else pd.DataFrame()
    test = None
    pairwise = pd.DataFrame()
    if len(ranked_rules) >= 2 and len(kept) >= 2:
        test = friedman_test(ranked, alpha)
        pairwise = pairwise_wilcoxon(ranked, alpha)
    elif len(rules) >= 2:
        notes.append(f"no rank test: {len(ranked_rules)} rule(s) on {len(kept)} dataset(s) where they all apply "
                     "(needs 2 and 2)")
    summary = pd.DataFrame({
        "rule": list(rules),
        "relative_error": [_median(runs.loc[runs["rule"] == r, "relative_error"]) for r in rules],
        "passes_spent": [_median(runs.loc[runs["rule"] == r, "passes_spent"]) for r in rules],
        "not_stopped": [_share(g, r, "not_stopped") for r in rules],
        "stopped_at_0": [_share(g, r, "at0") for r in rules],
        "not_applicable": [float((~g.loc[g["rule"] == r, "applicable"]).mean()) for r in rules],
        "average_rank": [float(ranks[r].mean()) if r in getattr(ranks, "columns", []) and len(ranks) else math.nan
                         for r in rules],
    })
    return RuleComparison(rules, runs, table[list(COMPARISON_COLUMNS)], scores, ranks, test, summary, notes,
                          pairwise)


def _share(g: pd.DataFrame, rule: str, col: str) -> float:
    sub = g[(g["rule"] == rule) & g["applicable"]]
    return float(sub[col].mean()) if len(sub) else math.nan


def _why(runs: pd.DataFrame, dataset: Any, rule: str) -> str:
    sub = runs[(runs["dataset"] == dataset) & (runs["rule"] == rule)]
    na = sub[sub["outcome"] == "not applicable"]
    if len(na):
        return str(na["reason"].iloc[0])
    return "no finite relative error"


def compare_campaign(root: Any = "results", campaign: str | Sequence[str] = "", rules: Iterable[Any] | None = None,
                     method_by: Sequence[str] = ("solver",), params: Sequence[str] | None = None,
                     alpha: float = 0.05) -> RuleComparison:
    """:func:`compare_rules` on a stored campaign, or on the union of several campaigns' runs:
    ``rules`` default to the campaigns' own rules and every registered rule at its defaults
    (:func:`default_rules`).

    >>> c = compare_campaign("results", "demo")          # doctest: +SKIP
    >>> c.summary                                        # doctest: +SKIP
    """
    from stopwise.analysis.selection import find_campaigns, select
    from stopwise.results.store import Store

    if rules is None:
        listed = [r for m in find_campaigns(Store(root), campaign) for r in (m.get("stopping") or [])]
        rules = default_rules([{"rule": r.get("rule"), "params": r.get("params") or {}}
                               for r in listed if isinstance(r, Mapping)])
    specs = [{"rule": r["rule"], "params": r.get("params") or {}} if isinstance(r, Mapping) else r for r in rules]
    sel = select(root, campaign, rules=[*specs, "oracle"])
    return compare_rules(sel, method_by, params, alpha)


__all__ = ["COMPARISON_COLUMNS", "RuleComparison", "compare_campaign", "compare_rules", "default_rules", "per_run"]

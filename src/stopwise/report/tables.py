"""Render a Ranking as an aligned terminal table, CSV or Markdown.

The display tables are built once (:func:`display_tables`) and rendered in any of the
three formats, so the terminal, the CSV files and the HTML report always show the same
numbers. CSV keeps full precision; text and Markdown round to four significant digits.
"""
from __future__ import annotations

import io
import math
from typing import Any

import numpy as np
import pandas as pd

from stopwise.core.errors import SpecError
from stopwise.analysis.rank import Ranking

FORMATS = ("text", "csv", "markdown")


class FormatError(SpecError):
    """Unknown output format; one line."""


def num(x: Any, digits: int = 4) -> str:
    """Four significant digits; ``inf`` prints as ``never``, NaN as ``-``."""
    if x is None:
        return "-"
    try:
        v = float(x)
    except (TypeError, ValueError):
        return str(x)
    if math.isnan(v):
        return "-"
    if math.isinf(v):
        return "never" if v > 0 else "-inf"
    if v == int(v) and abs(v) < 1e6:
        return str(int(v))
    return f"{v:.{digits}g}"


def with_interval(mean: float, low: float, high: float) -> str:
    """``mean [low, high]``; the mean alone where there is no interval."""
    if mean is None or (isinstance(mean, float) and math.isnan(mean)):
        return "-"
    if low is None or high is None or not (np.isfinite(low) and np.isfinite(high)):
        return num(mean)
    return f"{num(mean)} [{num(low, 3)}, {num(high, 3)}]"


def _frac(k: Any, n: Any) -> str:
    if k is None or (isinstance(k, float) and math.isnan(k)):
        return "-"
    return f"{int(k)}/{int(n)}"


def results_frame(r: Ranking, raw: bool = False) -> pd.DataFrame:
    """One row per (dataset, method). ``raw`` keeps numbers (for CSV), else display strings."""
    t = r.table.copy()
    if "average_rank" not in t.columns:
        t["average_rank"] = np.nan
    if raw:
        return t
    pc = int(round(r.confidence * 100))
    best = winners(r)
    out = pd.DataFrame({
        "dataset": t["dataset"], "method": t["method"],
        "tuned config": t["config"].replace("", "-"),
        f"test error (mean [{pc}% bootstrap CI])": [with_interval(m, lo, hi) for m, lo, hi in
                                           zip(t["test_error"], t["test_error_low"], t["test_error_high"])],
        "val error": t["val_error"].map(num),
        "passes spent": [with_interval(m, lo, hi) for m, lo, hi in
                         zip(t["passes_spent"], t["passes_spent_low"], t["passes_spent_high"])],
        "passes to target": t["passes_to_target"].map(num),
        "reached": [_frac(k, n) for k, n in zip(t["reached"], t["seeds"])],
        "target": t["target"].map(num),
        "gap to reference": t["gap"].map(num),
        "avg rank": t["average_rank"].map(lambda v: num(v, 3)),
        "best": [("*" if m in best.get(d, ()) else "") for d, m in zip(t["dataset"], t["method"])],
    })
    return out


def winners(r: Ranking) -> dict[Any, tuple]:
    """Per ranked dataset, the methods of rank 1 there (ties all win)."""
    if r.ranks.empty:
        return {}
    low = r.ranks.min(axis=1)
    return {d: tuple(r.ranks.columns[r.ranks.loc[d] == low[d]]) for d in r.ranks.index}


def pairwise_frame(r: Ranking, raw: bool = False) -> pd.DataFrame:
    """The Holm-corrected pairwise Wilcoxon signed-rank tests of a ranking."""
    return _pairwise_display(r.pairwise, r.test.alpha if r.test is not None else None, "method", raw)


def _pairwise_display(f: pd.DataFrame, alpha: float | None, what: str, raw: bool = False) -> pd.DataFrame:
    """A :func:`~stopwise.analysis.rankstats.pairwise_wilcoxon` table for display; ``what``
    names the compared things (``method``, ``rule``)."""
    if raw or f.empty:
        return f
    f = f.copy()
    for c in ("r_plus", "r_minus", "T", "p", "p_holm"):
        f[c] = f[c].map(num)
    f["significant"] = f["significant"].map(lambda v: "yes" if v else "no")
    f["better"] = f["better"].replace("", "-")
    return f.rename(columns={"method_a": f"{what} a", "method_b": f"{what} b", "r_plus": "R+", "r_minus": "R-",
                             "p_holm": "p (Holm)", "significant": f"significant at {alpha:g}"
                             if alpha is not None else "significant"})


def rules_pairwise_frame(c: Any, raw: bool = False) -> pd.DataFrame:
    """Pairwise Wilcoxon signed-rank tests of the stopping rules over datasets, Holm-corrected."""
    f = getattr(c, "pairwise", None)
    if f is None or f.empty:
        return pd.DataFrame()
    if raw:
        return f.rename(columns={"method_a": "rule_a", "method_b": "rule_b"})
    return _pairwise_display(f, c.test.alpha if c.test is not None else None, "rule")


def ranks_frame(r: Ranking, raw: bool = False) -> pd.DataFrame:
    """Datasets x methods ranks with an ``average`` row, methods sorted by average rank."""
    if r.ranks.empty:
        return pd.DataFrame()
    order = list(r.average_ranks.index)
    ranks = r.ranks[order]
    full = pd.concat([ranks, ranks.mean(axis=0).to_frame("average").T])
    full.index.name = "dataset"
    full = full.reset_index()
    if raw:
        return full
    return full.apply(lambda c: c.map(lambda v: num(v, 3)) if c.name != "dataset" else c)


def tests_frame(r: Ranking, raw: bool = False) -> pd.DataFrame:
    if r.test is None:
        return pd.DataFrame(columns=["quantity", "value"])
    f = r.test.as_frame()
    if raw:
        return f
    f["value"] = f["value"].map(num)
    groups = r.test.groups()
    f.loc[len(f)] = ["not significantly different (Nemenyi)",
                     "; ".join("{" + ", ".join(g) + "}" for g in groups) if groups else "(no such group)"]
    return f


def rules_frame(c: Any, raw: bool = False) -> pd.DataFrame:
    """One row per stopping rule of a :class:`~stopwise.analysis.rule_comparison.RuleComparison`:
    median test error at the rule's choice relative to the oracle's, median passes spent,
    shares not stopped / stopped at iteration 0 / not applicable, average rank."""
    f = c.summary.rename(columns={"relative_error": "error / oracle (median)", "passes_spent": "passes (median)",
                                  "not_stopped": "not stopped", "stopped_at_0": "stopped at 0",
                                  "not_applicable": "not applicable", "average_rank": "average rank"})
    if raw:
        return f
    f = f.copy()
    for col in f.columns[1:]:
        pct = col in ("not stopped", "stopped at 0", "not applicable")
        f[col] = f[col].map(lambda v, pct=pct: (f"{100 * v:.0f}%" if pct and np.isfinite(v) else num(v)))
    return f


def rules_scores_frame(c: Any) -> pd.DataFrame:
    """Datasets x rules median relative test error (``-`` where the rule does not apply)."""
    if c.scores.empty:
        return pd.DataFrame()
    f = c.scores.reset_index()
    for col in f.columns[1:]:
        f[col] = f[col].map(num)
    return f


def render_rules(c: Any, fmt: str = "text") -> str:
    """The stopping-rule comparison in one format (CSV: the per-(dataset, method, config,
    rule) table at full precision)."""
    if fmt not in FORMATS:
        raise FormatError(f"format {fmt!r} is invalid; valid: {', '.join(FORMATS)}")
    if fmt == "csv":
        return to_csv(c.table)
    title = ("stopping rules compared: test error at each rule's choice relative to the oracle's "
             "(the best test error on the same path), over every run")
    test = (c.test.as_frame().assign(value=lambda f: f["value"].map(num)) if c.test is not None else None)
    if fmt == "text":
        out = [title, to_text(rules_frame(c))]
        sc = rules_scores_frame(c)
        if not sc.empty:
            out += ["", "per dataset: median over paths of error / oracle", to_text(sc)]
        if test is not None:
            out += ["", "rank tests of the rules (Friedman, Iman-Davenport, Nemenyi)", to_text(test)]
        pw = rules_pairwise_frame(c)
        if not pw.empty:
            out += ["", "pairwise Wilcoxon signed-rank tests of the rules over datasets, Holm-corrected", to_text(pw)]
        out += [f"note: {n}" for n in c.notes]
        return "\n".join(out) + "\n"
    out = [f"_{title}_", "", to_markdown(rules_frame(c))]
    sc = rules_scores_frame(c)
    if not sc.empty:
        out += ["", "#### Per dataset: median over paths of error / oracle", "", to_markdown(sc)]
    if test is not None:
        out += ["", "#### Rank tests of the rules", "", to_markdown(test)]
    pw = rules_pairwise_frame(c)
    if not pw.empty:
        out += ["", "#### Pairwise Wilcoxon signed-rank tests of the rules (Holm-corrected)", "", to_markdown(pw)]
    if c.notes:
        out += [""] + [f"- note: {n}" for n in c.notes]
    return "\n".join(out) + "\n"


def published_frame(r: Ranking, raw: bool = False) -> pd.DataFrame:
    """The published scores of the campaign's OpenML tasks beside each method's test error
    (:mod:`stopwise.analysis.published`); empty without such tasks."""
    f = getattr(r, "published", None)
    if f is None or f.empty:
        return pd.DataFrame()
    if raw:
        return f
    return pd.DataFrame({
        "dataset": f["dataset"], "task": f["task_id"], "measure": f["measure"], "method": f["method"],
        "test error": f["test_error"].map(num), "as error": f["error_metric"].fillna("-"),
        "published best": [num(e) if pd.notna(e) else num(b) for e, b in zip(f["error_best"], f["published_best"])],
        "published median": [num(e) if pd.notna(e) else num(b) for e, b in zip(f["error_median"], f["published_median"])],
        "gap to best": f["gap_best"].map(num), "gap to median": f["gap_median"].map(num),
        "runs": f["n_runs"].map(num), "best run (flow)": [
            "-" if pd.isna(i) else f"{int(i)} ({n})" for i, n in zip(f["best_run_id"], f["best_flow_name"])],
        "splits": f["splits"], "fetched": f["fetched"].fillna("-"), "note": f["note"].fillna("")})


def display_tables(r: Ranking, raw: bool = False) -> dict[str, pd.DataFrame]:
    """The named tables of a ranking: ``results``, ``ranks``, ``tests``, ``pairwise`` and
    ``published`` (OpenML tasks' published scores; empty without them)."""
    return {"results": results_frame(r, raw), "ranks": ranks_frame(r, raw), "tests": tests_frame(r, raw),
            "pairwise": pairwise_frame(r, raw), "published": published_frame(r, raw)}


PUBLISHED_TITLE = ("published scores of the OpenML tasks (runs uploaded to OpenML; accuracy shown as "
                   "1 - accuracy, RMSE as its square, to compare with the test error)")


def heading(r: Ranking) -> str:
    by = {"test_error": "selected test error", "passes_to_target": "passes to reach the target"}[r.by]
    return (f"rule: {r.rule}; tuning: {r.tuning.replace('_', ' ')} on validation error; ranked by {by}; "
            f"target: {r.target.describe()}")


# ---------------------------------------------------------------- renderers

def to_text(df: pd.DataFrame) -> str:
    """Aligned columns: text left, numbers right, two spaces between columns."""
    if df.empty:
        return "(empty)"
    cells = [[str(c) for c in df.columns]] + [[str(v) for v in row] for row in df.itertuples(index=False)]
    widths = [max(len(r[j]) for r in cells) for j in range(len(cells[0]))]
    numeric = [all(_looks_numeric(r[j]) for r in cells[1:]) for j in range(len(widths))]
    lines = []
    for i, row in enumerate(cells):
        parts = [(c.rjust(w) if numeric[j] else c.ljust(w)) for j, (c, w) in enumerate(zip(row, widths))]
        lines.append("  ".join(parts).rstrip())
        if i == 0:
            lines.append("  ".join("-" * w for w in widths))
    return "\n".join(lines)


def _looks_numeric(s: str) -> bool:
    if s in ("-", "never"):
        return True
    head = s.split(" ")[0].split("/")[0]
    try:
        float(head)
        return True
    except ValueError:
        return False


def _md_cell(v: Any) -> str:
    return str(v).replace("|", "\\|").replace("\n", " ")


def to_markdown(df: pd.DataFrame) -> str:
    """A pipe table (GitHub-flavoured Markdown); numeric columns right-aligned."""
    if df.empty:
        return "(empty)"
    cols = [str(c) for c in df.columns]
    rows = [[_md_cell(v) for v in row] for row in df.itertuples(index=False)]
    numeric = [all(_looks_numeric(r[j]) for r in rows) for j in range(len(cols))]
    lines = ["| " + " | ".join(_md_cell(c) for c in cols) + " |",
             "|" + "|".join("---:" if n else ":---" for n in numeric) + "|"]
    lines += ["| " + " | ".join(r) + " |" for r in rows]
    return "\n".join(lines)


def to_csv(df: pd.DataFrame) -> str:
    buf = io.StringIO()
    df.to_csv(buf, index=False, float_format="%.17g")
    return buf.getvalue()


def render(r: Ranking, fmt: str = "text") -> str:
    """The whole ranking in one format (CSV: the per-(dataset, method) table at full precision)."""
    if fmt not in FORMATS:
        raise FormatError(f"format {fmt!r} is invalid; valid: {', '.join(FORMATS)}")
    if fmt == "csv":
        return to_csv(results_frame(r, raw=True))
    tabs = display_tables(r)
    out = []
    if fmt == "text":
        out.append(heading(r))
        out += ["", "per dataset and method", to_text(tabs["results"])]
        if not tabs["ranks"].empty:
            out += ["", "ranks (1 = best, ties averaged)", to_text(tabs["ranks"])]
        if not tabs["tests"].empty:
            out += ["", "rank tests (Friedman, Iman-Davenport, Nemenyi)", to_text(tabs["tests"])]
        if not tabs["pairwise"].empty:
            out += ["", "pairwise Wilcoxon signed-rank tests over datasets, Holm-corrected", to_text(tabs["pairwise"])]
        if not tabs["published"].empty:
            out += ["", PUBLISHED_TITLE, to_text(tabs["published"])]
        out += ["* best = rank 1 on the dataset"] if any(tabs["results"]["best"] == "*") else []
        out += [f"note: {n}" for n in r.notes]
        return "\n".join(out) + "\n"
    out.append(f"_{heading(r)}_")
    out += ["", "### Per dataset and method", "", to_markdown(tabs["results"])]
    if not tabs["ranks"].empty:
        out += ["", "### Ranks (1 = best, ties averaged)", "", to_markdown(tabs["ranks"])]
    if not tabs["tests"].empty:
        out += ["", "### Rank tests", "", to_markdown(tabs["tests"])]
    if not tabs["pairwise"].empty:
        out += ["", "### Pairwise Wilcoxon signed-rank tests (Holm-corrected)", "", to_markdown(tabs["pairwise"])]
    if not tabs["published"].empty:
        out += ["", f"### {PUBLISHED_TITLE[0].upper()}{PUBLISHED_TITLE[1:]}", "", to_markdown(tabs["published"])]
    if r.notes:
        out += [""] + [f"- note: {n}" for n in r.notes]
    return "\n".join(out) + "\n"


__all__ = ["FORMATS", "FormatError", "display_tables", "published_frame", "render", "render_rules", "rules_frame",
           "rules_pairwise_frame", "pairwise_frame", "to_csv", "to_markdown", "to_text"]

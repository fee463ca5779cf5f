"""A campaign report: one static HTML page with PNG figures, plus the same tables as
Markdown and CSV, written into one folder that works offline.

Layout of the output folder::

    index.html          the page (no scripts, no external resources)
    tables.md           the page's tables in Markdown
    results.csv         per (dataset, method) numbers at full precision
    ranks.csv, tests.csv, pairwise.csv
    published.csv       OpenML tasks only: published scores beside each method
    rules.csv           stopping rules compared, per (dataset, method, configuration, rule)
    rules_per_run.csv   the same per (run, rule)
    rules_pairwise.csv  pairwise Wilcoxon signed-rank tests of the rules, Holm-corrected
    figures/<name>.png  every figure the page shows

Everything is computed before the first file is written; each file is written
atomically, so a failed report leaves no partial page behind.
"""
from __future__ import annotations

import html
import os
import time
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any, Sequence

import numpy as np
import pandas as pd

from stopwise.core.version import __version__
from stopwise.report.figures import Plot
from stopwise.analysis.rank import Ranking
from stopwise.results.store import write_folder
from stopwise.report.tables import (display_tables, heading, render_rules, rules_frame, rules_pairwise_frame,
                                    rules_scores_frame, to_csv, to_markdown)

FIGURE_DIR = "figures"

STYLE = """
body { font-family: Georgia, 'DejaVu Serif', serif; max-width: 76rem; margin: 1.5rem auto; padding: 0 1rem;
       color: #1d2327; line-height: 1.45; }
h1 { font-size: 1.6rem; border-bottom: 3px double #7a8b99; padding-bottom: .3rem; }
h2 { font-size: 1.25rem; margin-top: 2.2rem; color: #243b53; }
p.setting { background: #f3f6f9; border-left: 4px solid #7a8b99; padding: .5rem .8rem; }
table { border-collapse: collapse; font-family: 'DejaVu Sans Mono', monospace; font-size: .8rem; margin: .6rem 0; }
th, td { padding: .2rem .55rem; border-bottom: 1px solid #d9e2ec; }
th { background: #e4ebf1; text-align: left; }
td.n { text-align: right; }
figure { margin: 1.4rem 0; }
figure img { max-width: 100%; border: 1px solid #d9e2ec; }
figcaption { font-size: .9rem; color: #334e68; margin-top: .3rem; }
ul.notes { color: #8d2b0b; }
pre { background: #f3f6f9; padding: .5rem .8rem; font-size: .8rem; overflow-x: auto; }
"""


@dataclass
class ReportPage:
    """What goes on the page: a ranking, its figures and a few lines of context."""

    title: str
    ranking: Ranking
    plots: list[Plot]
    context: list[str] = field(default_factory=list)   # plain-text lines shown under the title
    notes: list[str] = field(default_factory=list)
    rules: Any = None  # a RuleComparison: the stopping rules compared against the oracle
    definition: str = ""  # the campaign's definition, shown as it was given


def _html_table(df: pd.DataFrame) -> str:
    if df.empty:
        return "<p>(empty)</p>"
    from stopwise.report.tables import _looks_numeric

    numeric = [all(_looks_numeric(str(v)) for v in df[c]) for c in df.columns]
    head = "".join(f"<th>{html.escape(str(c))}</th>" for c in df.columns)
    body = []
    for row in df.itertuples(index=False):
        cells = "".join(f'<td class="n">{html.escape(str(v))}</td>' if numeric[j] else f"<td>{html.escape(str(v))}</td>"
                        for j, v in enumerate(row))
        body.append(f"<tr>{cells}</tr>")
    return f"<table><thead><tr>{head}</tr></thead><tbody>{''.join(body)}</tbody></table>"


TABLE_TITLES = {"results": "Per dataset and method (* = rank 1 on the dataset)",
                "ranks": "Ranks (1 = best, ties averaged)",
                "tests": "Rank tests (Friedman, Iman-Davenport, Nemenyi)",
                "pairwise": "Pairwise Wilcoxon signed-rank tests over datasets, Holm-corrected (Demsar 2006; Holm 1979)",
                "published": "Published scores of the OpenML tasks (runs uploaded to OpenML, as errors where the "
                             "conversion is exact: 1 - accuracy, RMSE squared; gap = test error - published error)"}


def render_html(page: ReportPage) -> str:
    """The page as one HTML string (figures referenced as figures/<name>.png)."""
    r = page.ranking
    tabs = display_tables(r)
    esc = html.escape
    parts = ["<!DOCTYPE html>", '<html lang="en">', "<head>", '<meta charset="utf-8">',
             f"<title>{esc(page.title)}</title>", f"<style>{STYLE}</style>", "</head>", "<body>",
             f"<h1>{esc(page.title)}</h1>", f'<p class="setting">{esc(heading(r))}</p>']
    for line in page.context:
        parts.append(f"<p>{esc(line)}</p>")
    if page.definition:
        parts.append(f"<details open><summary>Campaign definition</summary><pre>{esc(page.definition)}</pre></details>")
    parts.append("<h2>Tables</h2>")
    for key, df in tabs.items():
        if df.empty:
            continue
        parts.append(f"<h3>{esc(TABLE_TITLES[key])}</h3>")
        parts.append(_html_table(df))
    notes = list(r.notes) + list(page.notes)
    if notes:
        parts.append('<ul class="notes">' + "".join(f"<li>{esc(n)}</li>" for n in notes) + "</ul>")
    if page.rules is not None:
        c = page.rules
        parts.append("<h2>Stopping rules compared</h2>")
        parts.append("<p>Test error of the iterate each rule returns relative to the oracle's (the smallest test "
                     "error recorded on the same path), data passes the rule spent before deciding, and how often "
                     "it did not stop or stopped at iteration 0; per run in rules_per_run.csv, per dataset, method "
                     "and configuration in rules.csv.</p>")
        parts.append(_html_table(rules_frame(c)))
        sc = rules_scores_frame(c)
        if not sc.empty:
            parts.append("<h3>Per dataset: median over paths of error / oracle</h3>")
            parts.append(_html_table(sc))
        if c.test is not None:
            parts.append("<h3>Rank tests of the rules (Friedman, Iman-Davenport, Nemenyi)</h3>")
            from stopwise.report.tables import num
            parts.append(_html_table(c.test.as_frame().assign(value=lambda f: f["value"].map(num))))
        pw = rules_pairwise_frame(c)
        if not pw.empty:
            parts.append("<h3>Pairwise Wilcoxon signed-rank tests of the rules over datasets, Holm-corrected</h3>")
            parts.append(_html_table(pw))
        if c.notes:
            parts.append('<ul class="notes">' + "".join(f"<li>{esc(n)}</li>" for n in c.notes) + "</ul>")
    parts.append("<h2>Figures</h2>")
    for i, p in enumerate(page.plots, 1):
        parts.append(f'<figure id="{esc(p.name)}"><img src="{FIGURE_DIR}/{esc(p.name)}.png" alt="{esc(p.alt, quote=True)}">'
                     f"<figcaption>Figure {i}. {esc(p.caption)}</figcaption></figure>")
    parts.append(f"<p><small>Written by stopwise {esc(__version__)} on "
                 f"{esc(time.strftime('%Y-%m-%d %H:%M'))}. Tables are also in tables.md and the CSV files "
                 "beside this page.</small></p>")
    parts += ["</body>", "</html>"]
    return "\n".join(parts) + "\n"


def render_markdown(page: ReportPage) -> str:
    r = page.ranking
    out = [f"# {page.title}", "", f"_{heading(r)}_", ""] + [f"{c}  " for c in page.context]
    if page.definition:
        out += ["", "Campaign definition:", "", "```", page.definition, "```"]
    for key, df in display_tables(r).items():
        if df.empty:
            continue
        out += ["", f"## {TABLE_TITLES[key]}", "", to_markdown(df)]
    notes = list(r.notes) + list(page.notes)
    if notes:
        out += [""] + [f"- note: {n}" for n in notes]
    if page.rules is not None:
        out += ["", "## Stopping rules compared", "", render_rules(page.rules, "markdown").rstrip("\n")]
    out += ["", "## Figures", ""]
    for i, p in enumerate(page.plots, 1):
        out += [f"![{p.alt}]({FIGURE_DIR}/{p.name}.png)", "", f"*Figure {i}. {p.caption}*", ""]
    return "\n".join(out) + "\n"


def write_report(page: ReportPage, out_dir: str | Path) -> Path:
    """Write the page, its tables and figures into ``out_dir``; returns the index.html path."""
    out = Path(out_dir)
    names = [p.name for p in page.plots]
    if len(set(names)) != len(names):
        raise ValueError(f"two figures share a name: {', '.join(names)}")
    raw = display_tables(page.ranking, raw=True)
    files: list[tuple[Path, bytes]] = [(out / FIGURE_DIR / f"{p.name}.png", p.png) for p in page.plots]
    files.append((out / "results.csv", to_csv(raw["results"]).encode()))
    if not raw["ranks"].empty:
        files.append((out / "ranks.csv", to_csv(raw["ranks"]).encode()))
    if not raw["tests"].empty:
        files.append((out / "tests.csv", to_csv(raw["tests"]).encode()))
    if not raw["pairwise"].empty:
        files.append((out / "pairwise.csv", to_csv(raw["pairwise"]).encode()))
    if not raw["published"].empty:
        files.append((out / "published.csv", to_csv(raw["published"]).encode()))
    if page.rules is not None:
        files.append((out / "rules.csv", to_csv(page.rules.table).encode()))
        files.append((out / "rules_per_run.csv", to_csv(page.rules.per_run).encode()))
        pw = rules_pairwise_frame(page.rules, raw=True)
        if not pw.empty:
            files.append((out / "rules_pairwise.csv", to_csv(pw).encode()))
    files.append((out / "tables.md", render_markdown(page).encode()))
    files.append((out / "index.html", render_html(page).encode()))  # last: the page appears when all is there
    # a page is for reading: not the 0600 of a temporary file; checksums.json lets verify name a changed byte
    write_folder(out, files, mode=0o666 & ~_umask())
    return out / "index.html"


def _umask() -> int:
    m = os.umask(0o022)
    os.umask(m)
    return m


def standard_plots(ranking: Ranking, *, traces: pd.DataFrame | None = None, selections: pd.DataFrame | None = None,
                   implicit_panels: Sequence[dict] = (), method_by: str = "solver",
                   tasks: dict[str, str] | None = None, margin_traces: pd.DataFrame | None = None,
                   hard_margins: dict[str, float] | None = None) -> tuple[list[Plot], list[str]]:
    """The report's figures from the ranking and its inputs; figures that cannot be drawn
    (no traces, fewer than two datasets, ...) are left out with a note saying why.

    ``traces`` hold the tuned runs of every seed (run_id, passes, test_error); ``tasks``
    maps each dataset to its task (it names the error metric on the axes);
    ``margin_traces`` (run_id, passes, margin, svm_dist) and ``hard_margins`` (per dataset
    1/||w*||) give the classification datasets their margin curves."""
    from stopwise.report import figures as F
    from stopwise.report.tables import winners

    plots: list[Plot] = []
    notes: list[str] = []
    r = ranking
    best = {str(d): tuple(map(str, ms)) for d, ms in winners(r).items()}
    rep = r.replicates
    tuned = rep[(rep["kind"] == "iterative") & rep["valid"].astype(bool)]
    if traces is not None and selections is not None and not tuned.empty:
        stops = selections[selections["run_id"].isin(tuned["run_id"])]
        plots.append(F.curves(traces, tuned, stops, r.rule, best, tasks))
    else:
        notes.append("error-versus-passes curves left out: no traces of the tuned runs")
    classify = sorted(d for d, t in (tasks or {}).items() if t in ("binary", "multiclass"))
    if classify:
        ct = tuned[tuned["dataset"].astype(str).isin(classify)]
        has = (margin_traces is not None and "margin" in margin_traces.columns
               and np.isfinite(margin_traces["margin"].to_numpy(dtype=float)).any())
        if has and not ct.empty:
            plots.append(F.margin_curves(margin_traces, ct, hard_margins, best))
        else:
            notes.append("margin curves left out: the tuned runs' traces of " + ", ".join(classify)
                         + " carry no normalized margin")
    if implicit_panels:
        plots.append(F.implicit_explicit(list(implicit_panels)))
    else:
        notes.append("implicit-versus-explicit figure left out: needs a gradient descent run and a ridge "
                     "path on the same dataset and seed")
    if not r.performance.empty:
        plots.append(F.profiles(r.performance, r.data, r.target.describe(), r.unit, best))
    else:
        notes.append("profiles left out: no target or no passes to target")
    if r.test is not None:
        plots.append(F.critical_difference_diagram(r.test, r.by))
    else:
        notes.append("critical-difference diagram left out: needs at least 2 datasets and 2 methods")
    if selections is not None:
        hm = F.heatmaps(selections, r.rule, r.params, method_by=method_by, winners=best, tasks=tasks)
        if hm is not None:
            plots.append(hm)
        else:
            notes.append("heat maps left out: no method has a parameter that varies")
    return plots, notes


def dataset_tasks(store, selections: pd.DataFrame) -> dict[str, str]:
    """Each dataset's task, from the metadata of its first readable stored run."""
    out: dict[str, str] = {}
    for d, g in selections.groupby("dataset", sort=True):
        for rid in g["run_id"].drop_duplicates():
            task = ((store.run_meta(str(rid)) or {}).get("problem") or {}).get("task")
            if task:
                out[str(d)] = str(task)
                break
    return out


def hard_margin_values(store, tuned: pd.DataFrame) -> dict[str, float]:
    """Per dataset, the median over its tuned runs' splits of the hard-margin value
    ``1/||w*||`` stored in each run's metadata (separable training rows only)."""
    out: dict[str, float] = {}
    for d, g in tuned.groupby("dataset", sort=True):
        vals = []
        for rid in g["run_id"].drop_duplicates():
            v = ((store.run_meta(str(rid)) or {}).get("problem") or {}).get("svm_margin")
            if isinstance(v, (int, float)) and np.isfinite(v):
                vals.append(float(v))
        if vals:
            out[str(d)] = float(np.median(vals))
    return out


# ---------------------------------------------------------------- a stored campaign

MARKED_RULES = ("budget", "holdout", "discrepancy", "monotone_error", "ncp", "oracle")


def implicit_panels(data, ranked_rule: str, max_panels: int = 4) -> list[dict]:
    """Inputs of the implicit-versus-explicit figure for up to ``max_panels`` datasets.

    Per dataset, on its first seed that has both: the gradient descent run with the largest
    step scale <= 1 (its filter factors ``1 - (1 - eta s_i^2)^t`` are then monotone; the
    smallest step scale when all exceed 1) and the stored ridge path. The ridge penalty
    ``alpha`` of ``||y - X w||^2 + alpha ||w||^2`` is put on the scale of the training
    objective gradient descent minimizes, ``lambda = alpha / n_train``.
    """
    from stopwise.analysis.rank import read_traces
    from stopwise.results.store import Store

    sel, bl = data.selections, data.baselines
    if bl is None or bl.empty or sel.empty or "step_scale" not in sel.columns:
        return []
    ridge = bl[bl["method"] == "ridge"]
    gd = sel[(sel["solver"] == "gd") & (sel["rule"] == ranked_rule) & sel["step_scale"].notna()]
    store = Store(data.root)
    panels = []
    for d in sorted(gd["dataset"].unique()):
        for seed in sorted(gd.loc[gd["dataset"] == d, "seed"].unique()):
            rd = ridge[(ridge["dataset"] == d) & (ridge["seed"] == seed)]
            cand = gd[(gd["dataset"] == d) & (gd["seed"] == seed) & (gd["status"] != "failed")]
            if rd.empty or cand.empty:
                continue
            small = cand[cand["step_scale"] <= 1.0]
            row = small.loc[small["step_scale"].idxmax()] if len(small) else cand.loc[cand["step_scale"].idxmin()]
            meta = store.run_meta(str(row["run_id"])) or {}
            prob = meta.get("problem") or {}
            L, n = prob.get("L"), prob.get("n_train")
            if not L or not n:
                continue
            tr = read_traces(data.root, [row["run_id"]], ("run_id", "iteration", "test_error"))
            stop = row["selected_iteration"]
            panels.append(dict(dataset=d, seed=int(seed), step_scale=float(row["step_scale"]),
                               eta=float(row["step_scale"]) / float(L), gd=tr,
                               ridge=rd.assign(lam=rd["penalty"].to_numpy(dtype=float) / float(n)),
                               gd_stop=None if pd.isna(stop) else int(stop), rule=ranked_rule))
            break
        if len(panels) >= max_panels:
            break
    return panels


def definition_text(manifest: dict) -> str:
    """The campaign as it was defined: its file (when it had one), the command-line
    overrides and the sweep that the expansion took."""
    d = manifest.get("definition") or {}
    out = [f"# campaign {manifest.get('name', '?')} ({str(manifest.get('campaign_id', ''))[:16]})"]
    if d.get("campaign_file"):
        out += [f"# campaign file of {d.get('campaign')}", str(d["campaign_file"]).rstrip()]
    if d.get("overrides"):
        out += ["# command-line overrides", " ".join(map(str, d["overrides"]))]
    if d.get("sweep_params"):
        out += ["# sweep"] + [f"{k}: {v}" for k, v in d["sweep_params"].items()]
    for i, sub in enumerate(d.get("sub_sweeps") or [], 1):
        out += [f"# sub-sweep {i}"] + [f"{k}: {v}" for k, v in (sub or {}).items()]
    out += [f"# {manifest.get('jobs', '?')} jobs, {len(manifest.get('run_ids', []))} distinct runs"]
    return "\n".join(out)


def environment_lines(store, manifest: dict) -> list[str]:
    """Where and with what the runs were computed, from each trace's metadata: package
    versions, machine and BLAS thread counts (each distinct value with its run count), and
    the machine and versions that wrote this report."""
    import collections
    import platform
    from importlib import metadata

    versions: collections.Counter = collections.Counter()
    machines: collections.Counter = collections.Counter()
    threads: collections.Counter = collections.Counter()
    for rid in manifest.get("run_ids", []):
        try:
            meta = store.run_meta(str(rid)) or {}
        except Exception:  # noqa: BLE001 - an unreadable trace is reported by verify, not here
            continue
        if not meta:
            continue
        versions[", ".join(f"{k} {v}" for k, v in sorted((meta.get("versions") or {}).items()))] += 1
        machines[str(meta.get("machine", "?"))] += 1
        threads[", ".join(f"{k} {v}" for k, v in sorted((meta.get("threads") or {}).items())) or "not recorded"] += 1

    def counted(c: collections.Counter) -> str:
        if len(c) == 1:
            return next(iter(c))
        return "; ".join(f"{k} ({n} runs)" for k, n in c.most_common())

    lines = []
    if versions:
        lines.append(f"Runs computed with {counted(versions)}.")
        lines.append(f"Machine architecture: {counted(machines)}; BLAS threads per run: {counted(threads)}.")
    mine = []
    for pkg in ("numpy", "scipy", "scikit-learn", "pandas", "pyarrow", "matplotlib", "hydra-core"):
        try:
            mine.append(f"{pkg} {metadata.version(pkg)}")
        except metadata.PackageNotFoundError:
            pass
    cpu = platform.processor() or platform.machine()
    try:
        with open("/proc/cpuinfo") as f:
            cpu = next((ln.split(":", 1)[1].strip() for ln in f if ln.startswith("model name")), cpu)
    except OSError:
        pass
    lines.append(f"This report: stopwise {__version__}, python {platform.python_version()}, {', '.join(mine)}; "
                 f"{cpu}, {os.cpu_count()} cores.")
    return lines


def report_campaign(root: str | Path = "results", campaign: str | Sequence[str] = "", out: str | Path | None = None,
                    rule: str = "holdout", marked_rules: Sequence[str] | None = None, baselines: str = "ensure",
                    **options) -> Path:
    """Rank a stored campaign and write its report folder; returns the path of index.html.

    ``campaign`` may name several campaigns: they are ranked as one campaign holding the
    union of their runs (a run two of them hold counts once), and the page states each.
    ``marked_rules`` are the rules whose stopping points the curves show (default: the
    rules the campaigns named, and the oracle as a reference). ``options`` go to
    :func:`stopwise.analysis.rank.rank` (target, eps, tau, by, alpha, confidence, tuning, unit, ...).
    """
    from stopwise.analysis.rank import gather, rank_campaign, read_traces, rule_spec
    from stopwise.analysis.selection import campaign_list, campaign_run_ids, find_campaigns
    from stopwise.results.store import Store

    main = rule_spec(rule)
    store = Store(root)
    refs = campaign_list(campaign) or []
    manifests = find_campaigns(store, refs)
    which = refs[0] if len(refs) == 1 else tuple(refs)
    if marked_rules is None:  # the rules the campaigns named, and the oracle as a reference
        named = [{"rule": r.get("rule"), "params": r.get("params") or {}}
                 for m in manifests for r in m.get("stopping") or [] if isinstance(r, dict) and r.get("rule")]
        marked_rules = [*named, "oracle"]
    extra = list({rule_spec(r)["label"]: r for r in marked_rules if rule_spec(r)["label"] != main["label"]}.values())
    data = gather(root, which, rule, extra_rules=extra, baselines=baselines)
    ranking = rank_campaign(root, which, rule, data=data, **options)
    rep = ranking.replicates
    tuned = rep[(rep["kind"] == "iterative") & rep["valid"].astype(bool)]
    traces = read_traces(data.root, tuned["run_id"], ("run_id", "iteration", "passes", "test_error"))
    tasks = dataset_tasks(store, data.selections)
    classify = [d for d, t in tasks.items() if t in ("binary", "multiclass")]
    ct = tuned[tuned["dataset"].astype(str).isin(classify)]
    margin_traces = read_traces(data.root, ct["run_id"], ("run_id", "passes", "margin", "svm_dist")) if len(ct) \
        else None
    plots, notes = standard_plots(ranking, traces=traces, selections=data.selections,
                                  implicit_panels=implicit_panels(data, data.rule), tasks=tasks,
                                  margin_traces=margin_traces, hard_margins=hard_margin_values(store, ct))
    union = campaign_run_ids(manifests)
    first = data.selections.drop_duplicates("run_id")
    status_of = dict(zip(first["run_id"].astype(str).str[:16], first["status"]))

    def by_status(ids) -> str:
        counts: dict[str, int] = {}
        for rid in ids:
            k = str(status_of.get(str(rid)[:16], "missing"))
            counts[k] = counts.get(k, 0) + 1
        return ", ".join(f"{v} {k}" for k, v in sorted(counts.items(), key=lambda kv: -kv[1]))

    names = [str(m.get("name", "?")) for m in manifests]
    context = [f"Campaign {m.get('name', '?')} ({str(m.get('campaign_id', ''))[:16]}) under {Path(root)}: "
               f"{len(m.get('run_ids', []))} runs ({by_status(m.get('run_ids', []))})." for m in manifests]
    if len(manifests) > 1:
        shared = sum(len(set(m.get("run_ids", []))) for m in manifests) - len(union)
        context.append(f"{len(manifests)} campaigns ranked as one: the union of their runs, {len(union)} distinct runs "
                       f"({by_status(union)}); {shared} run{'s' if shared != 1 else ''} listed by more than one "
                       f"campaign count{'s' if shared == 1 else ''} once, and a method is defined once across them.")
    context.append(
        f"Seeds are repeated random splits and initializations; intervals are percentile bootstrap intervals "
        f"of the mean over seeds at {ranking.confidence:g} (Efron and Tibshirani 1993; 9999 resamples), "
        f"shown only with at least 3 seeds. Curves show the median over seeds with the range over seeds shaded. "
        f"Stopping points are marked for rules: "
        + ", ".join(dict.fromkeys([data.rule] + [rule_spec(r)["label"] for r in extra])) + ".")
    from stopwise.analysis.rule_comparison import compare_campaign
    from stopwise.report import figures as F

    method_by = tuple(options.get("method_by") or ("solver",))
    rules = compare_campaign(root, which, method_by=method_by, params=options.get("params"),
                             alpha=options.get("alpha", 0.05))
    if len(rules.per_run):
        plots.append(F.rule_comparison(rules.per_run, rules.rules))
    if rules.test is not None:
        cd = F.critical_difference_diagram(rules.test, "test error relative to the oracle")
        plots.append(F.Plot("critical_difference_rules", cd.caption.replace("each method", "each stopping rule")
                            .replace("methods whose", "rules whose"), cd.alt, cd.png))
    context += environment_lines(store, {"run_ids": union})
    definition = "\n\n".join(definition_text(m) for m in manifests) if len(manifests) > 1 else definition_text(manifests[0])
    title = (f"stopwise report: campaign {names[0]}" if len(names) == 1
             else f"stopwise report: campaigns {' + '.join(names)}")
    page = ReportPage(title, ranking, plots, context, notes, rules, definition)
    target = Path(out) if out is not None else Path(root) / "reports" / "+".join(names)
    return write_report(page, target)


__all__ = ["MARKED_RULES", "ReportPage", "dataset_tasks", "hard_margin_values", "implicit_panels", "render_html",
           "render_markdown", "report_campaign", "standard_plots", "write_report"]

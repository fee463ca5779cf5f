"""PNG figures for the campaign report, drawn with matplotlib's Agg canvas.

Every function takes DataFrames (so tests can feed hand-built ones) and returns a
:class:`Plot`: PNG bytes with a caption and alt text. Nothing here touches pyplot's
global state, so importing stopwise never changes a user's matplotlib backend.
"""
from __future__ import annotations

import io
import math
from dataclasses import dataclass
from typing import Iterable, Mapping, Sequence

import numpy as np
import pandas as pd
from matplotlib.figure import Figure

from stopwise.analysis.rankstats import RankTest

DPI = 110
PALETTE = ("#1f77b4", "#d62728", "#2ca02c", "#9467bd", "#ff7f0e", "#8c564b", "#e377c2", "#17becf",
           "#7f7f7f", "#bcbd22")
RULE_MARKERS = ("o", "s", "^", "D", "v", "P", "X", "*", "<", ">")


@dataclass(frozen=True)
class Plot:
    name: str      # file stem
    caption: str
    alt: str
    png: bytes


def method_colors(methods: Sequence[str]) -> dict[str, str]:
    """One fixed color per method (sorted names), the same in every figure."""
    return {m: PALETTE[i % len(PALETTE)] for i, m in enumerate(sorted(map(str, set(methods))))}


def _png(fig: Figure) -> bytes:
    buf = io.BytesIO()
    fig.savefig(buf, format="png", dpi=DPI, bbox_inches="tight")
    return buf.getvalue()


def _grid(n: int, max_cols: int = 3) -> tuple[int, int]:
    """Rows and columns for ``n`` panels: near square, at most ``max_cols`` wide."""
    n = max(n, 1)
    cols = min(max_cols, math.ceil(math.sqrt(n)))
    return math.ceil(n / cols), cols


def _plain_log_ticks(ax, axis: str = "y") -> None:
    """Label a logarithmic axis with plain numbers (0.25, 3000) instead of powers of ten."""
    from matplotlib.ticker import FuncFormatter, NullFormatter

    fmt = FuncFormatter(lambda v, _: f"{v:.4g}")
    a = ax.yaxis if axis == "y" else ax.xaxis
    a.set_major_formatter(fmt)
    lo, hi = (ax.get_ylim() if axis == "y" else ax.get_xlim())
    # short ranges have no decade inside: label the minor ticks too
    a.set_minor_formatter(fmt if lo > 0 and hi / lo < 20 else NullFormatter())


def _hide_unused(axes, used: int) -> None:
    for ax in axes[used:]:
        ax.set_visible(False)


# ---------------------------------------------------------------- metrics and seeds

METRICS = {"regression": "mean squared error", "binary": "misclassification rate",
           "multiclass": "misclassification rate"}


def metric_name(task: str | None) -> str:
    """What a trace's ``*_error`` columns measure for a task (docs/schema.md): the mean squared
    error for regression, the misclassification rate for classification; ``error`` when the
    task is unknown.

    >>> metric_name("regression"), metric_name("binary"), metric_name(None)
    ('mean squared error', 'misclassification rate', 'error')
    """
    return METRICS.get(str(task), "error") if task is not None else "error"


def _dataset_metric(tasks: Mapping[str, str] | None, dataset) -> str:
    return metric_name((tasks or {}).get(str(dataset)))


def seed_band(runs: Sequence[tuple[np.ndarray, np.ndarray]]
              ) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    """Median and range over seeds of curves ``y(x)`` recorded at different ``x``.

    Each run ``(x, y)`` is interpolated linearly onto the union of every run's recorded
    ``x`` inside its own recorded range (never extrapolated; non-finite ``y`` are dropped).
    At each grid point, over the runs that reach it: the median, the smallest and the
    largest value, and their count. Only points that more than half of the runs reach are
    kept, so a curve never goes on with a minority of the seeds (with two seeds: where both
    ran). Returns ``(x, median, low, high, count)``.

    >>> x, med, lo, hi, n = seed_band([(np.array([0., 1, 2]), np.array([3., 2, 1])),
    ...                                (np.array([0., 2]), np.array([5., 1])),
    ...                                (np.array([0., 1, 2]), np.array([4., 4, 2]))])
    >>> x.tolist(), med.tolist(), lo.tolist(), hi.tolist(), n.tolist()
    ([0.0, 1.0, 2.0], [4.0, 3.0, 1.0], [3.0, 2.0, 1.0], [5.0, 4.0, 2.0], [3, 3, 3])
    """
    clean = []
    for x, y in runs:
        x = np.asarray(x, dtype=float)
        y = np.asarray(y, dtype=float)
        ok = np.isfinite(x) & np.isfinite(y)
        x, y = x[ok], y[ok]
        if x.size:
            order = np.argsort(x, kind="stable")
            clean.append((x[order], y[order]))
    if not clean:
        e = np.array([])
        return e, e, e, e, np.array([], dtype=int)
    grid = np.unique(np.concatenate([x for x, _ in clean]))
    Y = np.full((len(clean), grid.size), np.nan)
    for i, (x, y) in enumerate(clean):
        inside = (grid >= x[0]) & (grid <= x[-1])
        Y[i, inside] = np.interp(grid[inside], x, y)
    count = np.isfinite(Y).sum(axis=0)
    keep = count > len(runs) / 2
    Y, grid, count = Y[:, keep], grid[keep], count[keep]
    if not grid.size:
        e = np.array([])
        return e, e, e, e, np.array([], dtype=int)
    return grid, np.nanmedian(Y, axis=0), np.nanmin(Y, axis=0), np.nanmax(Y, axis=0), count


def winner_text(best: Iterable[str], most: int = 2) -> str:
    """``rank 1: gd`` for a panel; ties beyond ``most`` names are counted, not listed.

    >>> winner_text(["gd"]), winner_text(["a", "b", "c", "d"])
    ('rank 1: gd', 'rank 1 (4 tied): a, b, +2')
    """
    names = sorted(map(str, best))
    if len(names) <= most:
        return "rank 1: " + ", ".join(names)
    return f"rank 1 ({len(names)} tied): " + ", ".join(names[:most]) + f", +{len(names) - most}"


def _seed_runs(traces_by_run: Mapping[str, pd.DataFrame], run_ids: Iterable[str], column: str,
               positive: bool = False) -> list[tuple[np.ndarray, np.ndarray]]:
    out = []
    for rid in run_ids:
        g = traces_by_run.get(rid)
        if g is None or column not in g.columns:
            continue
        y = g[column].to_numpy(dtype=float)
        x = g["passes"].to_numpy(dtype=float)
        ok = x > 0
        if positive:
            ok &= y > 0
        out.append((x[ok], y[ok]))
    return out


def _draw_band(ax, runs, color, label, lw=1.6):
    """The median over seeds as a line and the range over seeds as a shaded band; returns
    the number of points drawn."""
    x, med, lo, hi, _ = seed_band(runs)
    if not x.size:
        return 0
    if len(runs) > 1:
        ax.fill_between(x, lo, hi, color=color, alpha=0.18, lw=0, gid=f"band:{label}")
    ax.plot(x, med, color=color, lw=lw, label=label, gid=f"median:{label}")
    return int(x.size)


# ---------------------------------------------------------------- error versus passes

CURVE_CAP = 3.0  # error axes end at this multiple of the largest first drawn test error of a run that did not diverge

def curves(traces: pd.DataFrame, tuned: pd.DataFrame, stops: pd.DataFrame, rule: str,
           winners: Mapping[str, Sequence[str]] | None = None, tasks: Mapping[str, str] | None = None) -> Plot:
    """Test error over data passes of each method's tuned runs, one panel per dataset: the
    median over seeds with the range over seeds shaded (see :func:`curves_figure`)."""
    fig, info = curves_figure(traces, tuned, stops, rule, winners, tasks)
    datasets, methods, rules, seeds = info["datasets"], info["methods"], info["rules"], info["seeds"]
    seeds_text = (f"{min(seeds)} seed" + ("s" if min(seeds) > 1 else "") if min(seeds) == max(seeds)
                  else f"{min(seeds)}-{max(seeds)} seeds") if seeds else "no seed"
    caption = (f"Test error against data passes for each method's configuration tuned on validation error "
               f"under the '{rule}' rule, on every seed ({seeds_text} per dataset and method; on each seed its own "
               "tuned run). Line: median over seeds; shaded band: smallest to largest value over seeds (not a "
               "confidence interval); drawn where more than half of the seeds' runs have recorded that many passes "
               "(each run interpolated linearly between its recorded iterates). Markers: median over seeds of "
               "where each stopping rule stops (passes) and of the test error there; hollow markers are the oracle "
               "(minimum test error), a reference that is never ranked. The thick line and the 'rank 1' label "
               "mark the best method on the dataset (rank 1 in the ranking). The y axis names the dataset's "
               "error metric; log-log axes, or a linear error axis on a dataset where some test errors are 0. "
               f"Errors above {CURVE_CAP:g} times the largest error at the first drawn pass of a run that did "
               "not diverge are left above the axis, and the panel names the method.")
    alt = (f"Line plots with shaded bands, one panel per dataset ({', '.join(map(str, datasets))}), of the median "
           f"test error over seeds versus data passes for methods {', '.join(methods)}, with markers at the "
           f"median stopping points of rules {', '.join(rules) or '(none)'}.")
    return Plot("curves", caption, alt, _png(fig))


def curves_figure(traces: pd.DataFrame, tuned: pd.DataFrame, stops: pd.DataFrame, rule: str,
                  winners: Mapping[str, Sequence[str]] | None = None, tasks: Mapping[str, str] | None = None
                  ) -> tuple[Figure, dict]:
    """The figure of :func:`curves` and what it shows.

    ``traces``: run_id, passes, test_error. ``tuned``: dataset, method, seed, run_id (one
    tuned run per dataset, method and seed, chosen on validation error). ``stops``: run_id,
    rule, selected_passes, test_error (each rule's stopping point on those runs).
    ``winners``: per dataset the methods of rank 1 (drawn thicker, named in the panel).
    ``tasks``: per dataset its task, which names the y axis's metric.
    """
    winners = winners or {}
    datasets = sorted(tuned["dataset"].unique())
    colors = method_colors(tuned["method"])
    rules = sorted(stops["rule"].unique(), key=lambda r: (r == "oracle", r)) if not stops.empty else []
    markers = {r: RULE_MARKERS[i % len(RULE_MARKERS)] for i, r in enumerate(rules)}
    nr, nc = _grid(len(datasets))
    fig = Figure(figsize=(4.6 * nc, 3.6 * nr + 0.6))
    axes = np.atleast_1d(fig.subplots(nr, nc, squeeze=False)).ravel()
    by_run = {str(rid): g.sort_values("passes", kind="stable") for rid, g in traces.groupby("run_id", sort=False)}
    seeds_per: list[int] = []
    for ax, d in zip(axes, datasets):
        td = tuned[tuned["dataset"] == d]
        drawn, lowest, highest, start = 0, math.inf, -math.inf, -math.inf
        best = set(map(str, winners.get(d, ())))
        for m, g in td.groupby("method", sort=True):
            ids = [str(r) for r in g["run_id"]]
            seeds_per.append(len(ids))
            runs = _seed_runs(by_run, ids, "test_error")
            calm = [str(r) for r, st in zip(g["run_id"], g["status"] if "status" in g.columns else [""] * len(g))
                    if st != "diverged"]
            for _, y in runs:
                if y.size:
                    lowest, highest = min(lowest, float(np.nanmin(y))), max(highest, float(np.nanmax(y)))
            for _, y in _seed_runs(by_run, calm, "test_error"):
                if y.size:
                    start = max(start, float(y[0]))
            drawn += _draw_band(ax, runs, colors[m], str(m), lw=2.8 if str(m) in best else 1.4)
            st = stops[stops["run_id"].astype(str).isin(ids)]
            for rule_, sr in st.groupby("rule", sort=False):
                p = sr["selected_passes"].to_numpy(dtype=float)
                e = sr["test_error"].to_numpy(dtype=float)
                ok = np.isfinite(p) & np.isfinite(e)
                if not ok.any():
                    continue
                p, e = float(np.median(p[ok])), float(np.median(e[ok]))
                if p <= 0:
                    continue
                ax.plot([p], [e], linestyle="none", marker=markers[rule_], ms=8 if rule_ != rule else 10,
                        mfc="white" if rule_ == "oracle" else colors[m], mec=colors[m], mew=1.6, zorder=5,
                        gid=f"stop:{m}:{rule_}")
        n_seeds = td.groupby("method")["run_id"].nunique()
        ax.set_title(f"{d} ({int(n_seeds.min())} seed{'s' if n_seeds.min() > 1 else ''})" if len(n_seeds) and
                     n_seeds.min() == n_seeds.max() else f"{d}", fontsize=11)
        ax.set_xlabel("data passes")
        ax.set_ylabel(f"test {_dataset_metric(tasks, d)}")
        ax.grid(True, which="major", alpha=0.3)
        if best:
            ax.text(0.98, 0.97, winner_text(best), transform=ax.transAxes, ha="right", va="top",
                    fontsize=9, fontweight="bold", gid="winner", bbox=dict(fc="white", ec="#999999", pad=2))
        if not drawn or highest <= 0:  # every test error is 0 (e.g. misclassification on separable data)
            for line in list(ax.lines):
                line.remove()
            for coll in list(ax.collections):
                coll.remove()
            ax.set_xticks([])
            ax.set_yticks([])
            ax.text(0.5, 0.5, "no positive test error to draw\n(every recorded test error is 0)", ha="center",
                    va="center", transform=ax.transAxes)
            continue
        ax.set_xscale("log")
        if lowest > 0:
            ax.set_yscale("log")
        else:  # some test errors are 0: a linear axis keeps them (a log axis would drop them from the median)
            ax.set_ylim(bottom=0)
        # a run that blew up (a diverged seed) would flatten every other curve: errors above
        # CURVE_CAP times the largest starting error are left above the axis, with a note
        top = CURVE_CAP * start
        if np.isfinite(top) and top > 0 and highest > top:
            ax.set_ylim(top=top)
            over = []
            for m, g in td.groupby("method", sort=True):
                runs = _seed_runs(by_run, [str(r) for r in g["run_id"]], "test_error")
                if any(y.size and np.nanmax(y) > top for _, y in runs):
                    st = g["status"].astype(str) if "status" in g.columns else pd.Series(dtype=str)
                    k = int((st == "diverged").sum())
                    over.append(f"{m}" + (f" (diverged on {k}/{len(g)} seeds)" if k else ""))
            ax.text(0.02, 0.97, "above the axis:\n" + "\n".join(over), transform=ax.transAxes, ha="left", va="top",
                    fontsize=8, color="#8d2b0b", gid="offscale")
        if lowest > 0:
            _plain_log_ticks(ax, "y")
            ax.tick_params(axis="y", which="minor", labelsize=8)
    _hide_unused(axes, len(datasets))
    handles = [axes[0].plot([], [], color=colors[m], lw=2)[0] for m in colors]
    labels = list(colors)
    from matplotlib.patches import Patch

    handles.append(Patch(color="#777777", alpha=0.3))
    labels.append("range over seeds")
    for r_ in rules:
        handles.append(axes[0].plot([], [], linestyle="none", marker=markers[r_], color="black",
                                    mfc="white" if r_ == "oracle" else "black", ms=8)[0])
        labels.append(f"{r_} (reference)" if r_ == "oracle" else (f"{r_} (ranked)" if r_ == rule else r_))
    fig.legend(handles, labels, loc="lower center", ncol=min(len(labels), 4 * nc), frameon=False,
               bbox_to_anchor=(0.5, -0.01))
    fig.tight_layout(rect=(0, 0.09 if nr == 1 else 0.05, 1, 1))
    return fig, {"datasets": datasets, "methods": list(colors), "rules": rules, "seeds": seeds_per, "axes": axes}


# ---------------------------------------------------------------- margins (classification)

MARGIN_PANELS = (("margin", "normalized margin on the training rows"),
                 ("svm_dist", "distance of w/||w|| to the hard-margin direction"))


def margin_curves(traces: pd.DataFrame, tuned: pd.DataFrame, hard_margins: Mapping[str, float] | None = None,
                  winners: Mapping[str, Sequence[str]] | None = None) -> Plot:
    """Normalized margin and distance to the max-margin direction over data passes (see
    :func:`margin_figure`)."""
    fig, info = margin_figure(traces, tuned, hard_margins, winners)
    caption = ("Classification: for each method's tuned runs, the normalized margin on the training rows "
               "(min_i y_i <w, x_i> / ||w||; for softmax the smallest gap between the true class's score and the "
               "next, over ||W||_F; a network divides by ||theta||^2) and the distance between w/||w|| and the "
               "hard-margin SVM direction w*/||w*|| (binary linear models on separable training rows; not defined "
               "otherwise), against data passes (log axis). Line: median over seeds; band: smallest to largest "
               "over seeds. Dotted line: the hard-margin value 1/||w*|| (median over the seeds' splits); on each split "
               "a linear model's normalized margin stays below that split's value. Thick line: the method of rank 1 "
               "on the dataset.")
    alt = ("Line plots with bands, two panels per classification dataset (" + ", ".join(info["datasets"])
           + "): normalized margin and distance to the hard-margin direction versus data passes.")
    return Plot("margins", caption, alt, _png(fig))


def margin_figure(traces: pd.DataFrame, tuned: pd.DataFrame, hard_margins: Mapping[str, float] | None = None,
                  winners: Mapping[str, Sequence[str]] | None = None) -> tuple[Figure, dict]:
    """One row per dataset: normalized margin (left) and distance to the hard-margin
    direction (right) of each method's tuned runs, median over seeds with the range shaded.

    ``traces``: run_id, passes, margin, svm_dist. ``tuned``: dataset, method, seed, run_id.
    ``hard_margins``: per dataset the hard-margin value ``1/||w*||`` (drawn dotted)."""
    winners = winners or {}
    datasets = sorted(map(str, tuned["dataset"].unique()))
    colors = method_colors(tuned["method"])
    fig = Figure(figsize=(10.5, 3.4 * max(len(datasets), 1) + 0.5))
    axes = np.atleast_2d(fig.subplots(max(len(datasets), 1), 2, squeeze=False))
    by_run = {str(rid): g.sort_values("passes", kind="stable") for rid, g in traces.groupby("run_id", sort=False)}
    for row, d in zip(axes, datasets):
        td = tuned[tuned["dataset"].astype(str) == d]
        best = set(map(str, winners.get(d, ())))
        for ax, (col, label) in zip(row, MARGIN_PANELS):
            drawn = 0
            for m, g in td.groupby("method", sort=True):
                runs = _seed_runs(by_run, [str(r) for r in g["run_id"]], col)
                drawn += _draw_band(ax, runs, colors[m], str(m), lw=2.8 if str(m) in best else 1.4)
            ax.set_xlabel("data passes")
            ax.set_ylabel(label)
            ax.set_title(f"{d}: {'normalized margin' if col == 'margin' else 'distance to max-margin direction'}",
                         fontsize=10)
            ax.grid(True, alpha=0.3)
            if col == "margin" and hard_margins and np.isfinite(hard_margins.get(d, np.nan)):
                ax.axhline(float(hard_margins[d]), color="black", ls=":", lw=1.2, gid="hard_margin")
            if not drawn:
                ax.set_xticks([])
                ax.set_yticks([])
                ax.text(0.5, 0.5, f"{label}\nnot recorded on these runs", ha="center", va="center",
                        transform=ax.transAxes, fontsize=9)
                continue
            ax.set_xscale("log")
    handles = [axes[0][0].plot([], [], color=colors[m], lw=2)[0] for m in colors]
    labels = list(colors)
    if hard_margins:
        handles.append(axes[0][0].plot([], [], color="black", ls=":", lw=1.2)[0])
        labels.append("hard-margin value 1/||w*||")
    fig.legend(handles, labels, loc="lower center", ncol=min(len(labels), 6) or 1, frameon=False,
               bbox_to_anchor=(0.5, -0.01))
    fig.tight_layout(rect=(0, 0.06, 1, 1))
    return fig, {"datasets": datasets, "methods": list(colors), "axes": axes}


# ---------------------------------------------------------------- implicit versus explicit

def implicit_explicit(panels: list[dict]) -> Plot:
    """Gradient descent's test error over ``lambda_t = 1 / (eta t)`` beside ridge's over ``lambda``.

    Each panel dict has: dataset, seed, eta (absolute step size), gd (DataFrame iteration,
    test_error), ridge (DataFrame lam, test_error, selected), gd_stop (iteration chosen by
    the rule or None). ``lam`` is the ridge penalty in the units of the training objective
    ``(1/(2n)) ||X w - y||^2 + (lam/2) ||w||^2`` that gradient descent minimizes.
    """
    n = len(panels)
    nr, nc = _grid(n, 2)
    fig = Figure(figsize=(5.2 * nc, 3.8 * nr))
    axes = np.atleast_1d(fig.subplots(nr, nc, squeeze=False)).ravel()
    for ax, p in zip(axes, panels):
        gd = p["gd"]
        gd = gd[gd["iteration"] > 0]
        lam_t = 1.0 / (p["eta"] * gd["iteration"].to_numpy(dtype=float))
        ax.plot(lam_t, gd["test_error"], color=PALETTE[0], lw=1.8, label=r"gradient descent at $\lambda = 1/(\eta t)$")
        rd = p["ridge"].sort_values("lam")
        rd = rd[rd["lam"] > 0]
        ax.plot(rd["lam"], rd["test_error"], color=PALETTE[1], lw=1.8, ls="--", label=r"ridge at penalty $\lambda$")
        sel = rd[rd["selected"].astype(bool)]
        if len(sel):
            ax.plot(sel["lam"], sel["test_error"], ls="none", marker="s", ms=9, mfc=PALETTE[1], mec="black",
                    label="ridge, penalty chosen on validation")
        stop = p.get("gd_stop")
        if stop is not None and stop > 0:
            row = gd[gd["iteration"] == stop]
            if len(row):
                ax.plot([1.0 / (p["eta"] * stop)], row["test_error"].iloc[:1], ls="none", marker="o", ms=9,
                        mfc=PALETTE[0], mec="black", label=f"gradient descent, {p.get('rule', 'rule')} stop")
        ax.set_xscale("log")
        ax.set_yscale("log")
        ax.invert_xaxis()
        ax.set_xlabel(r"regularization $\lambda$ (right: weaker, more iterations)")
        ax.set_ylabel("test error")
        scale = f"step_scale {p['step_scale']:g}, " if p.get("step_scale") is not None else ""
        ax.set_title(f"{p['dataset']} (seed {p['seed']}, {scale}eta {p['eta']:.3g})", fontsize=11)
        ax.grid(True, alpha=0.3)
        _plain_log_ticks(ax, "y")
        ax.tick_params(axis="y", which="minor", labelsize=8)
    _hide_unused(axes, n)
    if n:
        h, lab = axes[0].get_legend_handles_labels()
        fig.legend(h, lab, loc="lower center", ncol=2, frameon=False, bbox_to_anchor=(0.5, -0.02))
    fig.tight_layout(rect=(0, 0.12 if nr == 1 else 0.06, 1, 1))
    names = ", ".join(str(p["dataset"]) for p in panels)
    caption = ("Implicit against explicit regularization: test error of gradient descent after t iterations, "
               "placed at lambda = 1/(eta t), beside ridge regression's test error at penalty lambda, on one "
               "axis (the penalty of (1/(2n))||Xw - y||^2 + (lambda/2)||w||^2). The two are close but not equal; "
               "filled markers are the validation-selected ridge penalty and the stopping rule's iterate.")
    alt = f"Line plots for {names}: two test-error curves over a common reversed logarithmic lambda axis."
    return Plot("implicit_explicit", caption, alt, _png(fig))


# ---------------------------------------------------------------- profiles

def profiles(performance: pd.DataFrame, data: pd.DataFrame, target: str, unit: str,
             winners: Mapping[str, Sequence[str]] | None = None) -> Plot:
    """Dolan-More performance profile and More-Wild data profile side by side (step plots).
    ``winners`` (per dataset, the methods of rank 1 in the ranking) adds to each method's
    legend entry on how many ranked datasets it is best."""
    methods = sorted(set(performance["method"]) | set(data["method"]))
    colors = method_colors(methods)
    wins = {m: sum(1 for w in (winners or {}).values() if m in set(map(str, w))) for m in methods}
    label = {m: (f"{m} (rank 1 on {wins[m]}/{len(winners)} datasets)" if winners else m) for m in methods}
    fig = Figure(figsize=(10.5, 4.0))
    a1, a2 = fig.subplots(1, 2)
    for m in methods:
        p = performance[performance["method"] == m].sort_values("tau")
        if len(p):
            x = np.concatenate([p["tau"].to_numpy(), [p["tau"].max() * 1.5]])
            y = np.concatenate([p["share"].to_numpy(), [p["share"].iloc[-1]]])
            a1.plot(x, y, drawstyle="steps-post", color=colors[m], lw=2.6 if wins.get(m) else 1.6, label=label[m])
        d = data[data["method"] == m].sort_values("budget")
        if len(d):
            x = np.concatenate([d["budget"].to_numpy(), [max(d["budget"].max(), 1) * 1.5]])
            y = np.concatenate([d["share"].to_numpy(), [d["share"].iloc[-1]]])
            x = np.maximum(x, 0.5)  # log axis: the zero budget is drawn at half a pass
            a2.plot(x, y, drawstyle="steps-post", color=colors[m], lw=2.6 if wins.get(m) else 1.6, label=label[m])
    a1.set_xscale("log", base=2)
    a1.set_xlabel(r"performance ratio $\tau$ (passes / best method's passes)")
    a1.set_ylabel(r"share of problems with $r_{p,s} \leq \tau$")
    a1.set_title("performance profile (Dolan & Moré 2002)", fontsize=11)
    a2.set_xscale("log")
    a2.set_xlabel("budget (data passes)")
    a2.set_ylabel("share of problems solved")
    a2.set_title("data profile (Moré & Wild 2009)", fontsize=11)
    for ax in (a1, a2):
        ax.set_ylim(-0.02, 1.02)
        ax.grid(True, alpha=0.3)
    h, lab = a1.get_legend_handles_labels()
    fig.legend(h, lab, loc="lower center", ncol=min(len(lab), 6) or 1, frameon=False, bbox_to_anchor=(0.5, -0.02))
    fig.tight_layout(rect=(0, 0.08, 1, 1))
    per = "dataset" if unit == "dataset" else "dataset and seed"
    caption = (f"Profiles over the passes each tuned method needs to reach the target ({target}); one problem per "
               f"{per}. Left: share of problems a method solves within a factor tau of the fewest passes any method "
               "needed. Right: share of problems solved within a budget of data passes. A method that never "
               "reaches the target on a problem does not count at any tau or budget."
               + (" The legend counts the datasets on which each method ranks first (ranked by "
                  "the ranking's quantity); those methods are drawn thicker." if winners else ""))
    alt = f"Two step plots of shares between 0 and 1 for methods {', '.join(methods)}."
    return Plot("profiles", caption, alt, _png(fig))


# ---------------------------------------------------------------- critical difference

def critical_difference_diagram(test: RankTest, ranked_by: str) -> Plot:
    """Average ranks on an axis from 1 (best, left) to k, with the Nemenyi critical difference
    drawn to scale and a bar joining each group of methods not significantly different."""
    k = test.k
    order = np.argsort(test.average_ranks, kind="stable")
    names = [test.methods[i] for i in order]
    ranks = [test.average_ranks[i] for i in order]
    groups = test.groups()
    half = (k + 1) // 2
    top = 0.0
    bottom = top - 0.25 - 0.22 * len(groups) - 0.25 - 0.32 * (half - 1) - 0.3
    fig = Figure(figsize=(8.5, 0.75 * (1.5 - bottom)))
    ax = fig.add_axes((0.03, 0.02, 0.94, 0.96))
    ax.set_xlim(0.4, k + 0.6)
    ax.set_ylim(bottom, 1.5)
    ax.axis("off")
    ax.hlines(top, 1, k, color="black", lw=1.2)
    for t in range(1, k + 1):
        ax.vlines(t, top, top + 0.18, color="black", lw=1.0)
        ax.text(t, top + 0.28, str(t), ha="center", va="bottom", fontsize=10)
    # the critical difference to scale, above the axis
    ax.hlines(top + 1.0, 1, 1 + test.cd, color="#444444", lw=2.0)
    for x in (1, 1 + test.cd):
        ax.vlines(x, top + 0.9, top + 1.1, color="#444444", lw=1.2)
    ax.text(1 + test.cd / 2, top + 1.15, f"CD = {test.cd:.3g} (Nemenyi, alpha = {test.alpha:g})",
            ha="center", va="bottom", fontsize=9)
    # group bars just below the axis
    y = top - 0.25
    for g in groups:
        lo, hi = ranks[names.index(g[0])], ranks[names.index(g[-1])]
        ax.hlines(y, lo - 0.03, hi + 0.03, color="#c0392b", lw=4, alpha=0.85)
        y -= 0.22
    # labels: better half to the left, worse half to the right
    y0 = y - 0.25
    for i, (m, r) in enumerate(zip(names, ranks)):
        left = i < half
        row = i if left else k - 1 - i
        yl = y0 - 0.32 * row
        xl = 0.45 if left else k + 0.55
        ax.plot([r, r, xl + (0.05 if left else -0.05)], [top, yl, yl], color="#333333", lw=0.9)
        ax.plot([r], [top], marker="o", ms=5, color="#333333")
        ax.text(xl, yl, f"{m} ({r:.2f})" if left else f"({r:.2f}) {m}", ha="left" if left else "right",
                va="center", fontsize=10, bbox=dict(fc="white", ec="none", pad=0.5))
    by = {"test_error": "selected test error", "passes_to_target": "passes to reach the target"}.get(ranked_by, ranked_by)
    caption = (f"Critical-difference diagram (Demsar 2006): average rank of each method by {by} over "
               f"{test.n_datasets} datasets (1 = best, on the left). Red bars join methods whose average ranks "
               f"differ by less than the Nemenyi critical difference CD = {test.cd:.3g} at alpha = {test.alpha:g}; "
               f"Iman-Davenport F_F = {test.f_f:.3g}, p = {test.f_p:.3g}.")
    alt = "Rank axis from 1 to %d with methods %s at average ranks %s." % (
        k, ", ".join(names), ", ".join(f"{r:.2f}" for r in ranks))
    return Plot("critical_difference", caption, alt, _png(fig))


# ---------------------------------------------------------------- heat maps

def heatmap_axes(sub: pd.DataFrame, params: Sequence[str]) -> tuple[str, str | None]:
    """The two parameters a heat map shows: step_scale and batch when both vary, else
    the two that take the most distinct values (or one, drawn as a single row)."""
    varying = [p for p in params if p in sub.columns and sub[p].dropna().nunique() > 1]
    if "step_scale" in varying and "batch" in varying:
        return "step_scale", "batch"
    varying.sort(key=lambda p: (-sub[p].dropna().nunique(), p != "step_scale", p))
    if not varying:
        return "", None
    return varying[0], (varying[1] if len(varying) > 1 else None)


DIVERGED_HATCH, FAILED_HATCH = "////", "xxxx"
LOG_SPAN = 10.0  # a dataset whose cell values span at least this factor gets a logarithmic colour scale
MIN_SPAN = 0.01  # a linear colour scale spans at least this share of its largest value's size


@dataclass
class HeatCell:
    """One cell of a heat map: the selections of one parameter combination over seeds."""

    value: float       # mean test error over the completed runs with a selection (NaN: none)
    val: float         # mean validation error over the same runs
    runs: int          # runs of this combination (every seed)
    completed: int     # completed runs with a selection
    diverged: int
    failed: int        # failed or never stored


def heat_cells(sub: pd.DataFrame, x: str, y: str | None) -> tuple[list, list, dict[tuple[int, int], HeatCell]]:
    """The axes values and the cells of one (dataset, method) panel from its selection rows
    (one row per run under the heat map's rule). Only completed runs give a value: a run
    that diverged or failed is counted, never averaged in."""
    xs = sorted(sub[x].dropna().unique())
    ys = sorted(sub[y].dropna().unique()) if y else [None]
    cells: dict[tuple[int, int], HeatCell] = {}
    keys = [x] + ([y] if y else [])
    for key, g in sub.groupby(keys, dropna=True, sort=False):
        key = key if isinstance(key, tuple) else (key,)
        i = ys.index(key[1]) if y else 0
        j = xs.index(key[0])
        status = g["status"].astype(str) if "status" in g.columns else pd.Series(["completed"] * len(g), index=g.index)
        ok = g[(status == "completed").to_numpy() & np.isfinite(g["test_error"].to_numpy(dtype=float))]
        if "selected_iteration" in ok.columns:
            ok = ok[ok["selected_iteration"].notna().to_numpy()]
        cells[(i, j)] = HeatCell(value=float(ok["test_error"].mean()) if len(ok) else math.nan,
                                 val=float(ok["val_error"].mean()) if len(ok) else math.nan,
                                 runs=int(len(g)), completed=int(len(ok)),
                                 diverged=int((status == "diverged").sum()),
                                 failed=int(status.isin(["failed", "missing"]).sum()))
    return xs, ys, cells


def dataset_norm(values: Iterable[float]):
    """One colour scale for every panel of a dataset: logarithmic when the positive cell values
    span at least a factor ``LOG_SPAN``, linear otherwise (None when no cell has a value).

    A linear scale spans at least ``MIN_SPAN`` of the largest value's size, widened about the
    middle of the values, so that values equal to three or four digits (9.373 and 9.373) are
    not drawn at the two ends of the colour map.

    >>> n = dataset_norm([9.3731, 9.3734, float("nan")])
    >>> round(n.vmax - n.vmin, 4), type(dataset_norm([0.01, 0.5])).__name__
    (0.0937, 'LogNorm')
    """
    from matplotlib.colors import LogNorm, Normalize

    v = np.asarray([x for x in values if np.isfinite(x)], dtype=float)
    if not v.size:
        return None
    lo, hi = float(v.min()), float(v.max())
    if lo > 0 and hi / lo >= LOG_SPAN:
        return LogNorm(vmin=lo, vmax=hi)
    span = max(hi - lo, MIN_SPAN * max(abs(lo), abs(hi)), 1e-12)
    mid = (lo + hi) / 2
    return Normalize(vmin=mid - span / 2, vmax=mid + span / 2)


def heatmaps(selections: pd.DataFrame, rule: str, params: Sequence[str], method_by: str = "solver",
             max_panels: int = 12, winners: Mapping[str, Sequence[str]] | None = None,
             tasks: Mapping[str, str] | None = None) -> Plot | None:
    """Mean test error over seeds at the rule's selected iterate over two solver parameters
    (see :func:`heatmap_figure`); None when no method has a varying parameter."""
    made = heatmap_figure(selections, rule, params, method_by, max_panels, winners, tasks)
    if made is None:
        return None
    fig, info = made
    shown, total = info["panels"], info["total"]
    more = f" Showing {len(shown)} of {total} panels." if total > len(shown) else ""
    logs = [d for d, n in info["norms"].items() if n is not None and type(n).__name__ == "LogNorm"]
    caption = (f"Mean test error over the completed seeds at the iterate the '{rule}' rule selects, for every "
               "combination of two solver parameters (step scale and batch size when both vary, otherwise the two "
               "that vary most); one row of panels per dataset, all panels of a dataset on one colour scale (its "
               "colour bar), " + ("logarithmic for " + ", ".join(map(str, logs)) + " where values span a factor "
               f"{LOG_SPAN:g} or more, " if logs else "") + "so equal numbers get equal colours. Hatched '////' "
               "cells hold runs that diverged, 'xxxx' runs that failed (with how many of the seeds); such runs are "
               "never averaged in. Grey cells ran but the rule selected no iterate; white 'not run' cells are "
               "combinations the campaign did not sweep. The outlined cell has the lowest mean validation error, "
               "the configuration tuning picks; a star marks the method of rank 1 on the dataset." + more)
    alt = "Heat maps: " + "; ".join(f"{m} on {d} over {x}" + (f" and {y}" if y else "") for d, m, x, y in shown) + "."
    return Plot("heatmaps", caption, alt, _png(fig))


def heatmap_figure(selections: pd.DataFrame, rule: str, params: Sequence[str], method_by: str = "solver",
                   max_panels: int = 12, winners: Mapping[str, Sequence[str]] | None = None,
                   tasks: Mapping[str, str] | None = None) -> tuple[Figure, dict] | None:
    """The heat maps: one row of panels per dataset (one panel per method with a varying
    parameter), every panel of a dataset on the dataset's own colour scale
    (:func:`dataset_norm`). Cells of diverged and failed runs carry a hatched patch whose gid
    is ``diverged`` or ``failed``; a combination that ran without a selection is grey
    (gid ``no selection``), one that was never run is white with ``not run``. Returns the
    figure and ``{"panels", "total", "norms", "axes"}``; ``axes[(dataset, method)]``
    is the panel's axes."""
    from matplotlib.patches import Patch, Rectangle

    winners = winners or {}
    sel = selections[(selections["rule"] == rule)]
    panels = []
    for (d, m), sub in sel.groupby(["dataset", method_by], sort=True):
        x, y = heatmap_axes(sub, params)
        if not x:
            continue
        panels.append((d, m, x, y, heat_cells(sub, x, y)))
    if not panels:
        return None
    total = len(panels)
    shown = panels[:max_panels]
    datasets = list(dict.fromkeys(d for d, *_ in shown))
    ncols = max(sum(1 for p in shown if p[0] == d) for d in datasets)
    one_row = all(p[3] is None for p in shown)
    fig = Figure(figsize=(4.2 * ncols + 1.2, (1.9 if one_row else 3.4) * len(datasets) + 0.9), layout="constrained")
    grid = np.atleast_2d(fig.subplots(len(datasets), ncols, squeeze=False))
    norms = {d: dataset_norm(c.value for p in shown if p[0] == d for c in p[4][2].values()) for d in datasets}
    cmap = _cmap()
    where: dict[tuple, object] = {}
    for r, d in enumerate(datasets):
        row = [p for p in shown if p[0] == d]
        norm = norms[d]
        im = None
        for c, (_, m, x, y, (xs, ys, cells)) in enumerate(row):
            ax = grid[r][c]
            where[(d, m)] = ax
            ax.set_facecolor("white")
            values = np.full((len(ys), len(xs)), np.nan)
            for (i, j), cell in cells.items():
                values[i, j] = cell.value
            im = ax.imshow(np.ma.masked_invalid(values), origin="lower", aspect="auto", cmap=cmap, norm=norm)
            vals = {k: cell.val for k, cell in cells.items() if np.isfinite(cell.val)}
            tuned = min(vals, key=lambda k: (vals[k], k)) if vals else None
            for i in range(len(ys)):
                for j in range(len(xs)):
                    cell = cells.get((i, j))
                    lines = []
                    if cell is None:
                        ax.text(j, i, "not run", ha="center", va="center", fontsize=8, color="#888888",
                                gid="not run")
                        continue
                    if np.isfinite(cell.value):
                        lines.append(f"{cell.value:.4g}")
                    elif not (cell.diverged or cell.failed):
                        ax.add_patch(Rectangle((j - 0.5, i - 0.5), 1, 1, fc="#d0d0d0", ec="none", zorder=1,
                                               gid="no selection"))
                        lines.append("no stop")
                    if cell.diverged:
                        ax.add_patch(Rectangle((j - 0.5, i - 0.5), 1, 1, fill=False, hatch=DIVERGED_HATCH,
                                               ec="#b03a2e", lw=0, zorder=2, gid="diverged"))
                        lines.append(f"diverged {cell.diverged}/{cell.runs}")
                    if cell.failed:
                        ax.add_patch(Rectangle((j - 0.5, i - 0.5), 1, 1, fill=False, hatch=FAILED_HATCH,
                                               ec="#6c3483", lw=0, zorder=2, gid="failed"))
                        lines.append(f"failed {cell.failed}/{cell.runs}")
                    dark = bool(np.isfinite(cell.value) and norm is not None and float(norm(cell.value)) > 0.55)
                    ax.text(j, i, "\n".join(lines), ha="center", va="center", fontsize=8 if len(lines) > 1 else 9,
                            color="white" if dark else "black", zorder=3,
                            bbox=dict(fc="white", ec="none", alpha=0.7, pad=1) if (cell.diverged or cell.failed)
                            else None)
            if tuned is not None:
                ax.add_patch(_box(tuned[1], tuned[0]))
            ax.set_xticks(range(len(xs)), [_tick(v) for v in xs])
            ax.set_xlabel(x)
            if y:
                ax.set_yticks(range(len(ys)), [_tick(v) for v in ys])
                ax.set_ylabel(y)
            else:
                ax.set_yticks([])
            star = str(m) in set(map(str, winners.get(d, ())))
            ax.set_title(f"{m} on {d}" + ("  \u2605 rank 1" if star else ""), fontsize=10,
                         fontweight="bold" if star else "normal")
        for c in range(len(row), ncols):
            grid[r][c].set_visible(False)
        if im is not None and norm is not None:
            cb = fig.colorbar(im, ax=[grid[r][c] for c in range(ncols)], fraction=0.04, pad=0.02)
            cb.set_label(f"mean test {_dataset_metric(tasks, d)}\n({d}; completed seeds)", fontsize=8)
    handles = [Patch(fc="white", ec="#b03a2e", hatch=DIVERGED_HATCH), Patch(fc="white", ec="#6c3483", hatch=FAILED_HATCH),
               Patch(fc="#d0d0d0", ec="none"), Patch(fc="white", ec="#bbbbbb"), Patch(fill=False, ec="#e74c3c", lw=2.5)]
    labels = ["diverged (k/seeds)", "failed (k/seeds)", "no iterate selected", "not run", "tuned (lowest mean val error)"]
    fig.legend(handles, labels, loc="outside lower center", ncol=5, frameon=False, fontsize=8)
    return fig, {"panels": [(d, m, x, y) for d, m, x, y, _ in shown], "total": total, "norms": norms, "axes": where}


def _cmap():
    from matplotlib import colormaps

    # no value: the cell shows what is drawn under it
    return colormaps["viridis_r"].with_extremes(bad=(1, 1, 1, 0))


def _tick(v) -> str:
    if isinstance(v, (bool, np.bool_, str)):
        return str(v)
    try:
        return f"{float(v):g}"
    except (TypeError, ValueError):
        return str(v)


def _box(j: int, i: int):
    from matplotlib.patches import Rectangle

    return Rectangle((j - 0.5, i - 0.5), 1, 1, fill=False, ec="#e74c3c", lw=3)


__all__ = ["HeatCell", "Plot", "critical_difference_diagram", "curves", "curves_figure", "dataset_norm", "heat_cells",
           "heatmap_figure", "heatmaps", "implicit_explicit", "margin_curves", "margin_figure", "method_colors",
           "metric_name", "profiles", "seed_band"]


# ---------------------------------------------------------------- stopping rules compared

CLIP = 100.0  # relative errors above this are drawn at it


def rule_comparison(per_run: pd.DataFrame, rules: Sequence[str]) -> Plot:
    """Left: each rule's test error at its choice relative to the oracle's, one dot per run
    (datasets in colour), with the median as a bar. Right: median relative error against
    median passes spent per rule, both over every run where the rule applies."""
    runs = per_run[np.isfinite(per_run["relative_error"].to_numpy(float))]
    fig = Figure(figsize=(11.5, 4.2))
    ax, bx = fig.subplots(1, 2, gridspec_kw={"width_ratios": [1.6, 1]})
    datasets = sorted(map(str, runs["dataset"].unique()))
    colors = method_colors(datasets)
    rng = np.random.default_rng(0)  # horizontal jitter only, so dots of one rule don't hide each other
    finite_hi, clipped = 1.0, {}
    for i, r in enumerate(rules):
        sub = runs[runs["rule"] == r]
        for d in datasets:
            y = sub.loc[sub["dataset"].astype(str) == d, "relative_error"].to_numpy(float)
            if y.size:
                over = y > CLIP
                y = np.minimum(y, CLIP)
                finite_hi = max(finite_hi, float(y.max()))
                x = i + rng.uniform(-0.28, 0.28, y.size)
                ax.scatter(x[~over], y[~over], s=9, alpha=0.55, color=colors[d],
                           label=d if d not in ax.get_legend_handles_labels()[1] else None)
                if over.any():  # drawn at the clip, as triangles pointing up
                    ax.scatter(x[over], y[over], s=22, marker="^", alpha=0.8, color=colors[d])
                    clipped[i] = clipped.get(i, 0) + int(over.sum())
        if len(sub):
            med = float(np.median(sub["relative_error"]))
            ax.hlines(med, i - 0.38, i + 0.38, color="black", lw=2.2)
    ax.axhline(1.0, color="#555555", lw=0.8, ls="--")
    for i, k in clipped.items():
        ax.annotate(f"{k} > {CLIP:g}", (i, CLIP), textcoords="offset points", xytext=(0, 6), ha="center", fontsize=7)
    ax.set_xticks(range(len(rules)))
    ax.set_xticklabels(list(rules), rotation=25, ha="right")
    ax.set_yscale("log")
    ax.set_ylim(0.98, max(1.05, finite_hi * (1.6 if clipped else 1.15)))
    _plain_log_ticks(ax)
    ax.set_ylabel("test error at the rule's choice / oracle's (log)")
    handles, labels = ax.get_legend_handles_labels()
    uniq = dict(zip(labels, handles))
    if uniq:
        ax.legend(uniq.values(), uniq.keys(), fontsize=8, title="dataset", title_fontsize=8, loc="upper left")
    for i, r in enumerate(rules):
        sub = runs[runs["rule"] == r]
        if not len(sub):
            continue
        x = float(np.median(sub["passes_spent"].to_numpy(float)))
        y = float(np.median(sub["relative_error"].to_numpy(float)))
        bx.scatter([max(x, 1e-3)], [y], marker=RULE_MARKERS[i % len(RULE_MARKERS)], s=60, color=PALETTE[i % len(PALETTE)],
                   label=r)
    bx.set_xscale("log")
    bx.set_xlabel("data passes the rule spent before deciding (median, log)")
    bx.set_ylabel("test error / oracle's (median)")
    bx.axhline(1.0, color="#555555", lw=0.8, ls="--")
    bx.legend(fontsize=8, loc="best")
    caption = ("Stopping rules compared on the campaign's own paths: for each run, the test error of the iterate "
               "each rule returns divided by the smallest test error recorded on the same path (the oracle; "
               "1 = the rule found the best iterate; dashed line). A rule that never decides returns its choice "
               "after the whole trace, or the last iterate. Bars: medians. Right: median error ratio against the "
               "median data passes the rule needed before deciding (lower left is better). Runs where a rule "
               f"cannot be evaluated are left out; ratios above {CLIP:g} are drawn at {CLIP:g} as triangles.")
    alt = "Strip plot of error ratio per stopping rule (%s) and a scatter of ratio against passes." % ", ".join(rules)
    return Plot("stopping_rules", caption, alt, _png(fig))

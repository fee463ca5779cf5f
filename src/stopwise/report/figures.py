"""PNG figures for the campaign report, drawn with matplotlib's Agg canvas.

Every function takes DataFrames (so tests can feed hand-built ones) and returns a
:class:`Plot`: PNG bytes with a caption and alt text. Nothing here touches pyplot's
global state, so importing stopwise never changes a user's matplotlib backend.
"""
from __future__ import annotations

import io
import math
from dataclasses import dataclass
from typing import Sequence

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


# ---------------------------------------------------------------- error versus passes

def curves(traces: pd.DataFrame, tuned: pd.DataFrame, stops: pd.DataFrame, rule: str) -> Plot:
    """Test error over data passes of each method's tuned run, one panel per dataset.

    ``traces``: run_id, passes, test_error. ``tuned``: dataset, method, seed, run_id (one
    run per dataset and method, chosen on validation error). ``stops``: run_id, rule,
    selected_passes, test_error, reference (each rule's stopping point on those runs).
    """
    datasets = sorted(tuned["dataset"].unique())
    colors = method_colors(tuned["method"])
    rules = sorted(stops["rule"].unique(), key=lambda r: (r == "oracle", r)) if not stops.empty else []
    markers = {r: RULE_MARKERS[i % len(RULE_MARKERS)] for i, r in enumerate(rules)}
    nr, nc = _grid(len(datasets))
    fig = Figure(figsize=(4.6 * nc, 3.6 * nr + 0.6))
    axes = np.atleast_1d(fig.subplots(nr, nc, squeeze=False)).ravel()
    by_run = {rid: g for rid, g in traces.groupby("run_id", sort=False)}
    for ax, d in zip(axes, datasets):
        td = tuned[tuned["dataset"] == d]
        drawn = 0
        for m, rid in zip(td["method"], td["run_id"]):
            g = by_run.get(rid)
            if g is None:
                continue
            g = g[(g["passes"] > 0) & np.isfinite(g["test_error"]) & (g["test_error"] > 0)]
            drawn += len(g)
            ax.plot(g["passes"], g["test_error"], color=colors[m], lw=1.6, label=m)
            st = stops[stops["run_id"] == rid]
            for rule_, p, e in zip(st["rule"], st["selected_passes"], st["test_error"]):
                if not (np.isfinite(p) and np.isfinite(e)) or p <= 0 or e <= 0:
                    continue
                ax.plot([p], [e], linestyle="none", marker=markers[rule_], ms=8 if rule_ != rule else 10,
                        mfc="white" if rule_ == "oracle" else colors[m], mec=colors[m], mew=1.6, zorder=5)
        seeds = sorted(td["seed"].unique())
        ax.set_title(f"{d} (seed {seeds[0]})" if len(seeds) == 1 else f"{d}", fontsize=11)
        ax.set_xlabel("data passes")
        ax.set_ylabel("test error")
        ax.grid(True, which="major", alpha=0.3)
        if not drawn:  # every test error is 0 (e.g. misclassification on separable data): no log axis
            ax.set_xticks([])
            ax.set_yticks([])
            ax.text(0.5, 0.5, "no positive test error to draw\n(every recorded test error is 0)", ha="center",
                    va="center", transform=ax.transAxes)
            continue
        ax.set_xscale("log")
        ax.set_yscale("log")
        _plain_log_ticks(ax, "y")
        ax.tick_params(axis="y", which="minor", labelsize=8)
    _hide_unused(axes, len(datasets))
    handles = [axes[0].plot([], [], color=colors[m], lw=2)[0] for m in colors]
    labels = list(colors)
    for r_ in rules:
        handles.append(axes[0].plot([], [], linestyle="none", marker=markers[r_], color="black",
                                    mfc="white" if r_ == "oracle" else "black", ms=8)[0])
        labels.append(f"{r_} (reference)" if r_ == "oracle" else (f"{r_} (ranked)" if r_ == rule else r_))
    fig.legend(handles, labels, loc="lower center", ncol=min(len(labels), 4 * nc), frameon=False,
               bbox_to_anchor=(0.5, -0.01))
    fig.tight_layout(rect=(0, 0.09 if nr == 1 else 0.05, 1, 1))
    caption = (f"Test error against data passes for each method's configuration tuned on validation error "
               f"under the '{rule}' rule (first seed of each dataset; log-log axes). Markers show where each "
               "stopping rule stops that run; hollow markers are the oracle (minimum test error), "
               "a reference that is never ranked.")
    alt = (f"Line plots, one panel per dataset ({', '.join(map(str, datasets))}), of test error versus data passes "
           f"for methods {', '.join(colors)}, with markers at the stopping points of rules {', '.join(rules)}.")
    return Plot("curves", caption, alt, _png(fig))


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

def profiles(performance: pd.DataFrame, data: pd.DataFrame, target: str, unit: str) -> Plot:
    """Dolan-More performance profile and More-Wild data profile side by side (step plots)."""
    methods = sorted(set(performance["method"]) | set(data["method"]))
    colors = method_colors(methods)
    fig = Figure(figsize=(10.5, 4.0))
    a1, a2 = fig.subplots(1, 2)
    for m in methods:
        p = performance[performance["method"] == m].sort_values("tau")
        if len(p):
            x = np.concatenate([p["tau"].to_numpy(), [p["tau"].max() * 1.5]])
            y = np.concatenate([p["share"].to_numpy(), [p["share"].iloc[-1]]])
            a1.plot(x, y, drawstyle="steps-post", color=colors[m], lw=1.8, label=m)
        d = data[data["method"] == m].sort_values("budget")
        if len(d):
            x = np.concatenate([d["budget"].to_numpy(), [max(d["budget"].max(), 1) * 1.5]])
            y = np.concatenate([d["share"].to_numpy(), [d["share"].iloc[-1]]])
            x = np.maximum(x, 0.5)  # log axis: the zero budget is drawn at half a pass
            a2.plot(x, y, drawstyle="steps-post", color=colors[m], lw=1.8, label=m)
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
               "reaches the target on a problem does not count at any tau or budget.")
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


def heatmaps(selections: pd.DataFrame, rule: str, params: Sequence[str], method_by: str = "solver",
             max_panels: int = 12) -> Plot | None:
    """Mean test error (over seeds) at the rule's selected iterate over two solver parameters,
    one panel per (dataset, method) with a varying parameter; the configuration with the
    lowest mean validation error (the tuned one) is outlined. Returns None when no method
    has a varying parameter."""
    sel = selections[(selections["rule"] == rule)]
    panels = []
    for (d, m), sub in sel.groupby(["dataset", method_by], sort=True):
        x, y = heatmap_axes(sub, params)
        if not x:
            continue
        keys = [x] + ([y] if y else [])
        agg = sub.groupby(keys, dropna=False).agg(test=("test_error", "mean"), val=("val_error", "mean")).reset_index()
        panels.append((d, m, x, y, agg))
    if not panels:
        return None
    shown = panels[:max_panels]
    nr, nc = _grid(len(shown), 3)
    one_row = all(y is None for _, _, _, y, _ in shown)
    fig = Figure(figsize=(4.4 * nc, (1.9 if one_row else 3.5) * nr))
    axes = np.atleast_1d(fig.subplots(nr, nc, squeeze=False)).ravel()
    for ax, (d, m, x, y, agg) in zip(axes, shown):
        xs = sorted(agg[x].dropna().unique())
        ys = sorted(agg[y].dropna().unique()) if y else [None]
        grid = np.full((len(ys), len(xs)), np.nan)
        vgrid = np.full_like(grid, np.nan)
        for _, row in agg.iterrows():
            if pd.isna(row[x]) or (y and pd.isna(row[y])):
                continue
            i = ys.index(row[y]) if y else 0
            grid[i, xs.index(row[x])] = row["test"]
            vgrid[i, xs.index(row[x])] = row["val"]
        finite = grid[np.isfinite(grid)]
        im = ax.imshow(grid, origin="lower", aspect="auto", cmap="viridis_r",
                       vmin=finite.min() if finite.size else None, vmax=finite.max() if finite.size else None)
        cb = fig.colorbar(im, ax=ax, fraction=0.046, pad=0.04)
        cb.set_label("mean test error", fontsize=8)
        for i in range(len(ys)):
            for j in range(len(xs)):
                v = grid[i, j]
                txt = "n/a" if not np.isfinite(v) else f"{v:.4g}"
                # viridis_r: low errors are drawn light (black text), high errors dark (white text)
                dark = bool(np.isfinite(v) and finite.size and v > (finite.min() + finite.max()) / 2)
                ax.text(j, i, txt, ha="center", va="center", fontsize=9, color="white" if dark else "black")
        if np.isfinite(vgrid).any():
            bi, bj = np.unravel_index(np.nanargmin(vgrid), vgrid.shape)
            ax.add_patch(_box(bj, bi))
        ax.set_xticks(range(len(xs)), [_tick(v) for v in xs])
        ax.set_xlabel(x)
        if y:
            ax.set_yticks(range(len(ys)), [_tick(v) for v in ys])
            ax.set_ylabel(y)
        else:
            ax.set_yticks([])
        ax.set_title(f"{m} on {d}", fontsize=10)
    _hide_unused(axes, len(shown))
    fig.tight_layout()
    more = f" Showing {len(shown)} of {len(panels)} panels." if len(panels) > len(shown) else ""
    caption = (f"Mean test error over seeds at the iterate the '{rule}' rule selects, for every combination of two "
               "solver parameters (step scale and batch size when both vary, otherwise the two that vary most). "
               "The outlined cell has the lowest mean validation error, which is the configuration tuning picks; "
               "n/a marks combinations without a valid selection." + more)
    alt = "Heat maps: " + "; ".join(f"{m} on {d} over {x}" + (f" and {y}" if y else "") for d, m, x, y, _ in shown) + "."
    return Plot("heatmaps", caption, alt, _png(fig))


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


__all__ = ["Plot", "critical_difference_diagram", "curves", "heatmaps", "implicit_explicit", "method_colors",
           "profiles"]


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

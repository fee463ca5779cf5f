"""What the report's figures draw, read back from their matplotlib artists (not only that a
PNG was written): medians and ranges over seeds against numpy, one colour scale per dataset,
marks on diverged and failed cells, metric names on the axes, winners marked."""
import math

import numpy as np
import pandas as pd
import pytest
from matplotlib.colors import LogNorm
from matplotlib.patches import Rectangle

from helpers.handbuilt import selection_row, selections
from stopwise.report import figures as F


def by_gid(ax, prefix):
    return [a for a in ax.get_children() if str(a.get_gid() or "").startswith(prefix)]


# ---------------------------------------------------------------- curves over seeds

def three_seed_traces():
    """gd on A, three seeds recorded at the same passes; nesterov on A, two seeds recorded at
    different passes (so the median needs the runs interpolated onto one grid)."""
    passes = np.array([0, 1, 2, 4, 8], float)
    gd = {0: [1, .8, .5, .40, .30], 1: [1, .6, .4, .35, .32], 2: [1, .9, .7, .50, .20]}
    rows = [pd.DataFrame({"run_id": f"gd{s}", "passes": passes, "test_error": np.array(v, float)}) for s, v in gd.items()]
    rows.append(pd.DataFrame({"run_id": "ne0", "passes": [0., 1, 3, 8], "test_error": [1., .7, .4, .2]}))
    rows.append(pd.DataFrame({"run_id": "ne1", "passes": [0., 2, 4, 8], "test_error": [1., .5, .3, .25]}))
    tuned = pd.DataFrame({"dataset": "A", "method": ["gd"] * 3 + ["nesterov"] * 2, "seed": [0, 1, 2, 0, 1],
                          "run_id": ["gd0", "gd1", "gd2", "ne0", "ne1"]})
    stops = pd.DataFrame({"run_id": ["gd0", "gd1", "gd2"], "rule": "holdout", "selected_passes": [2., 4., 8.],
                          "test_error": [.5, .35, .2]})
    return pd.concat(rows, ignore_index=True), tuned, stops


def test_curves_draw_the_median_and_range_over_every_seed():
    traces, tuned, stops = three_seed_traces()
    fig, info = F.curves_figure(traces, tuned, stops, "holdout", winners={"A": ("gd",)}, tasks={"A": "regression"})
    ax = info["axes"][0]
    (med,) = by_gid(ax, "median:gd")
    # same recorded passes: the median and range of the three seeds at each pass (numpy)
    y = np.array([[.8, .5, .40, .30], [.6, .4, .35, .32], [.9, .7, .50, .20]])
    assert med.get_xdata().tolist() == [1, 2, 4, 8]
    assert med.get_ydata() == pytest.approx(np.median(y, axis=0), rel=1e-15)
    (band,) = by_gid(ax, "band:gd")
    verts = band.get_paths()[0].vertices
    assert set(np.round(verts[:, 1], 12)) >= set(np.round(np.r_[y.min(0), y.max(0)], 12))
    # different recorded passes: each seed interpolated linearly (numpy's interp) on the union
    # of recorded passes; at 1 pass only seed 0 has a value (seed 1 starts at 2 and is not
    # extrapolated back), one seed of two is no majority: the curve starts at 2 passes
    (ne,) = by_gid(ax, "median:nesterov")
    grid = np.array([2, 3, 4, 8], float)
    a = np.interp(grid, [1, 3, 8], [.7, .4, .2])
    b = np.interp(grid, [2, 4, 8], [.5, .3, .25])
    assert ne.get_xdata().tolist() == grid.tolist()
    assert ne.get_ydata() == pytest.approx(np.median([a, b], axis=0), rel=1e-15)
    # the rule's marker sits at the medians over seeds of its stopping passes and test errors
    (mark,) = by_gid(ax, "stop:gd:holdout")
    assert mark.get_xdata()[0] == 4.0 and mark.get_ydata()[0] == .35
    # the axis names the metric; the winner is named and drawn thicker
    assert ax.get_ylabel() == "test mean squared error" and ax.get_xlabel() == "data passes"
    assert [t.get_text() for t in by_gid(ax, "winner")] == ["rank 1: gd"]
    assert med.get_linewidth() > ne.get_linewidth()
    assert ax.get_title() == "A"  # 3 and 2 seeds: no single count in the title
    plot = F.curves(traces, tuned, stops, "holdout")
    assert "median over seeds" in plot.caption and "smallest to largest" in plot.caption


def test_a_seed_that_blew_up_is_left_above_the_axis_and_named():
    traces, tuned, stops = three_seed_traces()
    traces.loc[traces.run_id == "ne1", "test_error"] = [1., 50., 1e6, 1e9]
    tuned = tuned.assign(status=["completed"] * 4 + ["diverged"])
    fig, info = F.curves_figure(traces, tuned, stops, "holdout")
    ax = info["axes"][0]
    # the largest test error at the first drawn pass (1 pass) is gd seed 2's .9
    assert ax.get_ylim()[1] == pytest.approx(F.CURVE_CAP * .9)
    (note,) = by_gid(ax, "offscale")
    assert note.get_text() == "above the axis:\nnesterov (diverged on 1/2 seeds)"


def test_classification_curves_name_the_misclassification_rate_and_keep_zero_errors():
    traces, tuned, stops = three_seed_traces()
    traces.loc[traces.run_id == "gd1", "test_error"] = [.5, .2, 0, 0, 0]
    fig, info = F.curves_figure(traces, tuned, stops, "holdout", tasks={"A": "binary"})
    ax = info["axes"][0]
    assert ax.get_ylabel() == "test misclassification rate"
    assert ax.get_yscale() == "linear"  # a log axis would drop the zeros from the median
    (med,) = by_gid(ax, "median:gd")
    assert med.get_ydata()[1] == np.median([.5, 0, .7])


# ---------------------------------------------------------------- heat maps

def heat_selection():
    """Dataset A: gd over step scales 0.5 / 1 / 2 and heavy ball over 0.5 / 1, three seeds;
    gd at 2 diverges on every seed, heavy ball at 1 diverges on one seed and fails on another.
    Dataset B: gd only, errors a hundred times larger (its own colour scale)."""
    rows = []
    for seed in range(3):
        for s, t in ((0.5, .30), (1.0, .20)):
            rows.append(selection_row(f"A-gd-{s}-{seed}", "A", "gd", seed, t + .01, t + .01 * seed, step_scale=s))
        rows.append(selection_row(f"A-gd-2-{seed}", "A", "gd", seed, .9, 5.0, step_scale=2.0, status="diverged"))
        rows.append(selection_row(f"A-hb-0.5-{seed}", "A", "heavy_ball", seed, .5, .6 + .01 * seed, step_scale=0.5))
        status = {0: "completed", 1: "diverged", 2: "failed"}[seed]
        val = None if status == "failed" else .45
        rows.append(selection_row(f"A-hb-1-{seed}", "A", "heavy_ball", seed, val, None if val is None else .1 + seed,
                                  step_scale=1.0, status=status))
        for s, t in ((0.5, 30.0), (1.0, 20.0)):
            rows.append(selection_row(f"B-gd-{s}-{seed}", "B", "gd", seed, t, t + seed, step_scale=s))
    return selections(rows)


def cell_patches(ax, gid):
    return sorted((p.get_x() + 0.5, p.get_y() + 0.5) for p in ax.patches if isinstance(p, Rectangle)
                  and p.get_gid() == gid)


def test_heat_maps_share_one_scale_per_dataset_and_mark_diverged_and_failed_cells():
    sel = heat_selection()
    fig, info = F.heatmap_figure(sel, "holdout", ["step_scale"], winners={"A": ("gd",)}, tasks={"A": "regression"})
    axes = info["axes"]
    gd_a, hb_a, gd_b = axes[("A", "gd")], axes[("A", "heavy_ball")], axes[("B", "gd")]
    na, nb = gd_a.images[0].norm, hb_a.images[0].norm
    assert (na.vmin, na.vmax) == (nb.vmin, nb.vmax)  # one scale for every panel of A
    nbb = gd_b.images[0].norm
    assert (nbb.vmin, nbb.vmax) != (na.vmin, na.vmax)  # B has its own
    # A's scale covers the completed cells of both panels: gd 0.5 -> mean(.30,.31,.32) = .31,
    # gd 1 -> .21, heavy ball 0.5 -> .61, heavy ball 1 -> .1 (its only completed seed)
    assert (na.vmin, na.vmax) == pytest.approx((.1, .61))
    # diverged runs are marked, never averaged in: gd at step 2 has no value and a hatched patch
    assert cell_patches(gd_a, "diverged") == [(2.0, 0.0)]
    texts = {(t.get_position()): t.get_text() for t in gd_a.texts}
    assert texts[(2, 0)] == "diverged 3/3" and texts[(0, 0)] == "0.31"
    assert cell_patches(hb_a, "diverged") == [(1.0, 0.0)] and cell_patches(hb_a, "failed") == [(1.0, 0.0)]
    hb = {(t.get_position()): t.get_text() for t in hb_a.texts}
    assert hb[(1, 0)] == "0.1\ndiverged 1/3\nfailed 1/3"
    assert not np.isfinite(np.ma.filled(gd_a.images[0].get_array(), np.nan)[0, 2])
    # the winner's panel carries the star
    assert "rank 1" in gd_a.get_title() and "rank 1" not in hb_a.get_title()
    # the colour bar names the metric
    assert any("mean test mean squared error" in a.get_ylabel() for a in fig.axes)


def test_heat_maps_tell_cells_not_run_from_cells_without_a_selection():
    rows = [selection_row("a", "A", "sgd", 0, .2, .3, step_scale=0.5, batch=1.0),
            selection_row("b", "A", "sgd", 0, .25, .35, step_scale=1.0, batch=1.0),
            selection_row("c", "A", "sgd", 0, None, None, step_scale=0.5, batch=0.1)]
    fig, info = F.heatmap_figure(selections(rows), "holdout", ["step_scale", "batch"])
    ax = info["axes"][("A", "sgd")]
    texts = {(t.get_position()): t.get_text() for t in ax.texts}
    # rows: batch 0.1 (i=0), 1.0 (i=1); columns: step 0.5 (j=0), 1.0 (j=1)
    assert texts[(0, 0)] == "no stop" and cell_patches(ax, "no selection") == [(0.0, 0.0)]
    assert texts[(1, 0)] == "not run"
    assert texts[(0, 1)] == "0.3" and texts[(1, 1)] == "0.35"


def test_the_colour_scale_is_logarithmic_across_decades_and_never_narrower_than_the_digits():
    # 9.373 against 9.373: within 1% of each other, drawn near one colour (not at the two ends)
    n = F.dataset_norm([9.3731, 9.3734])
    assert abs(float(n(9.3734)) - float(n(9.3731))) < 0.01
    assert isinstance(F.dataset_norm([0.01, 0.02, 0.5]), LogNorm)
    lin = F.dataset_norm([0.2, 0.3])
    assert (lin.vmin, lin.vmax) == pytest.approx((0.2, 0.3))
    assert F.dataset_norm([math.nan]) is None


# ---------------------------------------------------------------- margins

def test_margin_curves_name_their_metrics_and_draw_the_median_over_seeds():
    passes = np.array([0., 10, 20, 40])
    tr = pd.concat([pd.DataFrame({"run_id": f"r{s}", "passes": passes, "margin": m, "svm_dist": dd})
                    for s, (m, dd) in enumerate([([-.1, .2, .5, .6], [1., .5, .3, .2]),
                                                 ([-.2, .1, .4, .7], [1., .6, .2, .1]),
                                                 ([-.3, .3, .6, .8], [1., .4, .1, .05])])], ignore_index=True)
    tuned = pd.DataFrame({"dataset": "D", "method": "gd", "seed": [0, 1, 2], "run_id": ["r0", "r1", "r2"]})
    fig, info = F.margin_figure(tr, tuned, hard_margins={"D": 0.9}, winners={"D": ("gd",)})
    left, right = info["axes"][0]
    assert left.get_ylabel() == "normalized margin on the training rows"
    assert right.get_ylabel() == "distance of w/||w|| to the hard-margin direction"
    (m,) = by_gid(left, "median:gd")
    assert m.get_ydata() == pytest.approx(np.median([[.2, .5, .6], [.1, .4, .7], [.3, .6, .8]], axis=0))
    (d,) = by_gid(right, "median:gd")
    assert d.get_ydata() == pytest.approx(np.median([[.5, .3, .2], [.6, .2, .1], [.4, .1, .05]], axis=0))
    (hm,) = by_gid(left, "hard_margin")
    assert hm.get_ydata()[0] == 0.9


def test_profiles_count_each_methods_wins_in_the_legend():
    perf = pd.DataFrame({"method": ["gd", "gd", "cgls"], "tau": [1.0, 2.0, 1.0], "share": [.5, 1.0, .5]})
    data = pd.DataFrame({"method": ["gd", "cgls"], "budget": [3.0, 5.0], "share": [1.0, 1.0]})
    p = F.profiles(perf, data, "t", "dataset", winners={"A": ("gd",), "B": ("gd", "cgls")})
    assert "ranks first" in p.caption

"""Tuning on validation error, targets, passes to target, aggregation and ranking tables.

All inputs are hand-built tables in the shapes of stopwise.select / load_baselines /
load_traces (tests/helpers/handbuilt.py); each expected value is computed by hand in a comment.
"""
import math

import numpy as np
import pandas as pd
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from scipy import stats

from helpers.handbuilt import baseline_rows, random_campaign, selection_row, selections, trace
from stopwise.analysis.rank import RankError, Target, passes_to_target, rank, tune
from stopwise.report.tables import FormatError, render, to_markdown, to_text


def small_campaign():
    """Two datasets, two seeds, gd at two step scales and cgls.

    validation / test errors at the holdout rule's selected iterate:
        A seed 0: gd 0.5 .30/.50   gd 1.0 .20/.60   cgls .25/.40
        A seed 1: gd 0.5 .10/.55   gd 1.0 .22/.45   cgls .30/.42
        B seed 0: gd 0.5 .40/.30   gd 1.0 .35/.32   cgls .50/.20
        B seed 1: gd 0.5 .41/.31   gd 1.0 .38/.36   cgls .45/.22
    """
    table = {("A", 0): [(.30, .50), (.20, .60), (.25, .40)], ("A", 1): [(.10, .55), (.22, .45), (.30, .42)],
             ("B", 0): [(.40, .30), (.35, .32), (.50, .20)], ("B", 1): [(.41, .31), (.38, .36), (.45, .22)]}
    rows = []
    for (d, seed), errs in table.items():
        for (v, t), (solver, params) in zip(errs, [("gd", {"step_scale": 0.5}), ("gd", {"step_scale": 1.0}),
                                                   ("cgls", {})]):
            rid = f"{d}{seed}-{solver}-{params.get('step_scale', '')}"
            rows.append(selection_row(rid, d, solver, seed, v, t, passes=6.0, spent=9.0, **params))
            # the oracle reference row of the same run (picks by test error; never ranks)
            rows.append(selection_row(rid, d, solver, seed, v + 0.05, t - 0.05, rule="oracle", passes=7.0, **params))
    return selections(rows)


def small_traces(sel, cgls_fail=("B", 1)):
    """gd: test error 1, .7, .5, .4, .3 at passes 0, 2, 4, 6, 8; cgls: 1, .6, .45, .41, .40 at passes 0..4,
    except cgls on B seed 1 which only gets down to .43."""
    parts = []
    for rid, solver, d, seed in sel[["run_id", "solver", "dataset", "seed"]].drop_duplicates().itertuples(index=False):
        if solver == "gd":
            parts.append(trace(rid, [1, .7, .5, .4, .3], passes=[0, 2, 4, 6, 8]))
        elif (d, seed) == cgls_fail:
            parts.append(trace(rid, [1, .6, .5, .45, .43]))
        else:
            parts.append(trace(rid, [1, .6, .45, .41, .40]))
    return pd.concat(parts, ignore_index=True)


def small_baselines():
    """ridge selects (on validation) a penalty with test error .40 on every dataset and seed;
    lasso selects one with test error .44."""
    rows = []
    for d in "AB":
        for seed in (0, 1):
            rows += baseline_rows(d, seed, "ridge", [0.1, 1.0, 10.0], [.3, .2, .25], [.35, .40, .30])
            rows += baseline_rows(d, seed, "lasso", [0.01, 0.1], [.5, .4], [.30, .44])
    return pd.DataFrame(rows)


# ---------------------------------------------------------------- tuning

def test_per_seed_tuning_by_hand():
    t = tune(small_campaign(), "holdout")
    gd = t[t.method == "gd"].set_index(["dataset", "seed"])["step_scale"].to_dict()
    # lowest validation error per dataset and seed: A0 1.0 (.20), A1 0.5 (.10), B0 1.0 (.35), B1 1.0 (.38)
    assert gd == {("A", 0): 1.0, ("A", 1): 0.5, ("B", 0): 1.0, ("B", 1): 1.0}
    assert t.valid.all() and len(t) == 8


def test_pooled_tuning_by_hand():
    t = tune(small_campaign(), "holdout", tuning="pooled")
    gd = t[t.method == "gd"].groupby("dataset")["step_scale"].unique().map(list).to_dict()
    # mean validation error: A 0.5 -> .20, 1.0 -> .21 ; B 0.5 -> .405, 1.0 -> .365
    assert gd == {"A": [0.5], "B": [1.0]}


def test_tuning_ties_go_to_fewer_passes_not_to_test_error():
    rows = [selection_row("r1", "A", "gd", 0, 0.2, 0.9, passes=5, step_scale=0.5),
            selection_row("r2", "A", "gd", 0, 0.2, 0.1, passes=8, step_scale=1.0)]
    assert tune(selections(rows), "holdout").run_id.tolist() == ["r1"]


def test_tuning_never_uses_test_error():
    """Changing test errors of non-selected configurations (even to 0) leaves the choice unchanged."""
    sel = random_campaign(np.random.default_rng(0))
    for tuning in ("per_seed", "pooled"):
        before = tune(sel, "holdout", tuning=tuning)
        chosen = set(before.run_id)
        other = sel[~sel.run_id.isin(chosen)].index
        changed = sel.copy()
        changed.loc[other, "test_error"] = 0.0
        after = tune(changed, "holdout", tuning=tuning)
        assert after.run_id.tolist() == before.run_id.tolist()
        assert after.test_error.tolist() == before.test_error.tolist()


@settings(max_examples=10, deadline=None)
@given(st.integers(0, 2**31 - 1))
def test_tuning_is_a_function_of_validation_error_only(seed):
    """Property: redrawing every test error (selected ones included) never changes the chosen runs."""
    rng = np.random.default_rng(seed)
    sel = random_campaign(rng, datasets=("A", "B"), seeds=(0, 1))
    redrawn = sel.assign(test_error=rng.random(len(sel)))
    for tuning in ("per_seed", "pooled"):
        assert tune(sel, "holdout", tuning=tuning).run_id.tolist() == \
            tune(redrawn, "holdout", tuning=tuning).run_id.tolist()


def test_oracle_never_ranks_and_bad_input_is_one_line():
    sel = small_campaign()
    cases = [(lambda: rank(sel, "oracle"), "reference"), (lambda: rank(sel, "discrepancy"), "holdout"),
             (lambda: rank(sel, "holdout", by="speed"), "passes_to_target"),
             (lambda: rank(sel, "holdout", tuning="best"), "pooled"),
             (lambda: rank(sel, "holdout", target="fast"), "baseline"),
             (lambda: rank(sel, "holdout", unit="run"), "replicate"),
             (lambda: rank(sel.drop(columns="val_error"), "holdout"), "val_error"),
             (lambda: rank(sel, "holdout", params=["batch_size"]), "batch_size")]
    for call, hint in cases:
        with pytest.raises(RankError) as e:
            call()
        msg = str(e.value)
        assert "\n" not in msg and hint in msg, msg


# ---------------------------------------------------------------- targets

def test_passes_to_target_first_crossing():
    tr = pd.concat([trace("a", [1.0, 0.6, 0.4, 0.35, 0.5], passes=[0, 0.5, 1.0, 1.5, 2.0]),
                    trace("b", [1.0, 0.9, 0.8])])
    out = passes_to_target(tr, pd.Series({"a": 0.4, "b": 0.4, "c": 0.4})).set_index("run_id")
    assert out.loc["a", "passes_to_target"] == 1.0  # first iterate with error <= .4 is at 1 pass
    assert out.loc["b", "passes_to_target"] == math.inf  # never gets there
    assert math.isnan(out.loc["c", "passes_to_target"])  # no trace at all
    assert out.loc["a", "f_0"] == 1.0


def test_target_forms():
    assert Target("baseline", eps=0.05).level(0.4, 1.0) == pytest.approx(0.42)
    # More and Wild (2009): f(x) <= f_L + tau (f(x0) - f_L)
    assert Target("baseline", tau=0.25).level(0.2, 1.0) == pytest.approx(0.4)
    assert Target.parse("0.33").level(0.9, 1.0) == pytest.approx(0.33)
    for bad in (dict(kind="best"), dict(eps=-1.0), dict(tau=2.0), dict(kind="value", value=None)):
        with pytest.raises(RankError):
            Target(**bad)


# ---------------------------------------------------------------- the whole ranking

def test_full_ranking_by_hand():
    sel = small_campaign()
    r = rank(sel, "holdout", traces=small_traces(sel), baselines=small_baselines())
    t = r.table.set_index(["dataset", "method"])
    # selected test errors (per-seed tuning): A gd .60,.55; A cgls .40,.42; B gd .32,.36; B cgls .20,.22
    assert t.loc[("A", "gd"), "test_error"] == pytest.approx(0.575)
    assert t.loc[("B", "cgls"), "test_error"] == pytest.approx(0.21)
    # two seeds give no usable interval: none is computed, and a note says so
    assert math.isnan(t.loc[("A", "gd"), "test_error_low"]) and math.isnan(t.loc[("A", "gd"), "test_error_high"])
    assert any("fewer than 3 seeds" in n for n in r.notes)
    # explicit baselines: ridge's selected penalty (val .2) has test .40, lasso's (val .4) .44
    assert t.loc[("A", "ridge"), "test_error"] == pytest.approx(0.40)
    assert t.loc[("A", "lasso"), "test_error"] == pytest.approx(0.44)
    assert t.loc[("A", "ridge"), "kind"] == "explicit" and math.isnan(t.loc[("A", "ridge"), "passes_to_target"])
    # target = 1.05 * best baseline (.40) = .42: gd reaches .4 at 6 passes; cgls .41 at 3 passes,
    # except on B seed 1 where cgls never gets below .43
    assert t.loc[("A", "gd"), "target"] == pytest.approx(0.42)
    assert t.loc[("A", "gd"), "passes_to_target"] == 6.0
    assert t.loc[("A", "cgls"), "passes_to_target"] == 3.0
    assert t.loc[("B", "cgls"), "passes_to_target"] == math.inf and t.loc[("B", "cgls"), "reached"] == 1
    assert t.loc[("A", "gd"), "passes_spent"] == 9.0 and t.loc[("A", "gd"), "selected_passes"] == 6.0
    # selected iterate meets the target: A cgls .40 and .42 (both), A gd none
    assert t.loc[("A", "cgls"), "reached_at_stop"] == 2 and t.loc[("A", "gd"), "reached_at_stop"] == 0
    # ranks by mean test error: A: ridge .40 < cgls .41 < lasso .44 < gd .575
    #                           B: cgls .21 < gd .34 < ridge .40 < lasso .44
    assert r.ranks.loc["A"].to_dict() == {"cgls": 2.0, "gd": 4.0, "lasso": 3.0, "ridge": 1.0}
    assert r.ranks.loc["B"].to_dict() == {"cgls": 1.0, "gd": 2.0, "lasso": 4.0, "ridge": 3.0}
    assert r.test is not None and r.test.n_datasets == 2 and r.test.k == 4
    assert r.test.average_ranks == (1.5, 3.0, 3.5, 2.0)  # cgls, gd, lasso, ridge
    # profiles over datasets: costs gd (6, 6), cgls (3, inf)
    assert r.costs.loc["A"].to_dict() == {"cgls": 3.0, "gd": 6.0}
    perf = r.performance.set_index(["method", "tau"])["share"]
    assert perf[("cgls", 1.0)] == 0.5 and perf[("gd", 1.0)] == 0.5 and perf[("gd", 2.0)] == 1.0
    data = r.data.set_index(["method", "budget"])["share"]
    assert data[("cgls", 3.0)] == 0.5 and data[("gd", 3.0)] == 0.0 and data[("gd", 6.0)] == 1.0


def test_rank_by_passes_and_replicate_profiles():
    sel = small_campaign()
    r = rank(sel, "holdout", traces=small_traces(sel), baselines=small_baselines(), by="passes_to_target",
             unit="replicate")
    # iterative methods only; A: cgls 3 < gd 6; B: gd 6 < cgls inf
    assert r.ranks.loc["A"].to_dict() == {"cgls": 1.0, "gd": 2.0}
    assert r.ranks.loc["B"].to_dict() == {"cgls": 2.0, "gd": 1.0}
    assert r.costs.shape == (4, 2)  # one problem per (dataset, seed)
    data = r.data.set_index(["method", "budget"])["share"]
    assert data[("cgls", 3.0)] == 0.75


def test_failure_on_a_seed_ranks_last():
    sel = small_campaign()
    # cgls has no valid selection on A seed 1 (e.g. its rule never fired)
    i = sel.index[(sel.dataset == "A") & (sel.seed == 1) & (sel.solver == "cgls") & (sel.rule == "holdout")]
    sel.loc[i, ["val_error", "selected_iteration"]] = [np.nan, pd.NA]
    r = rank(sel, "holdout", include_baselines=False)
    row = r.table.set_index(["dataset", "method"]).loc[("A", "cgls")]
    assert row["valid"] == 1 and row["seeds"] == 2 and row["test_error"] == pytest.approx(0.40)
    assert r.ranks.loc["A"].to_dict() == {"cgls": 2.0, "gd": 1.0}


def test_reference_gap_and_reference_target():
    sel = small_campaign()
    refs = pd.DataFrame([dict(dataset="A", protocol="p", metric="mse", value=0.35, method="ridge", source="s",
                              read_at_source=True, note=""),
                         dict(dataset="A", protocol="p", metric="r2", value=0.10, method="ols", source="s",
                              read_at_source=True, note="")])
    r = rank(sel, "holdout", traces=small_traces(sel), references=refs, target="reference", eps=0.0,
             include_baselines=False)
    t = r.table.set_index(["dataset", "method"])
    assert t.loc[("A", "gd"), "reference"] == 0.35  # the R^2 row is not a trace metric and is ignored
    assert t.loc[("A", "gd"), "gap"] == pytest.approx(0.575 - 0.35)
    assert t.loc[("A", "gd"), "passes_to_target"] == 8.0  # gd first at or below .35 at 8 passes
    assert t.loc[("A", "cgls"), "passes_to_target"] == math.inf
    assert math.isnan(t.loc[("B", "gd"), "gap"]) and math.isnan(t.loc[("B", "gd"), "passes_to_target"])


# ---------------------------------------------------------------- output formats

def test_text_markdown_and_csv():
    sel = small_campaign()
    r = rank(sel, "holdout", traces=small_traces(sel), baselines=small_baselines())
    text = render(r, "text")
    assert "Friedman chi2_F" in text and "never" in text
    md = render(r, "markdown")
    table_lines = [ln for ln in md.splitlines() if ln.startswith("|")]
    assert table_lines and all(ln.endswith("|") for ln in table_lines)
    csv = pd.read_csv(__import__("io").StringIO(render(r, "csv")))
    merged = csv.merge(r.table, on=["dataset", "method"], suffixes=("", "_r"))
    np.testing.assert_allclose(merged["test_error"], merged["test_error_r"], rtol=1e-15)
    with pytest.raises(FormatError):
        render(r, "html")


def test_to_text_aligns_columns():
    df = pd.DataFrame({"name": ["a", "longer"], "value": ["1.5", "12"]})
    lines = to_text(df).splitlines()
    assert lines[0] == "name    value" and lines[2] == "a         1.5" and lines[3] == "longer     12"
    assert to_markdown(df).splitlines()[1] == "|:---|---:|"


def test_target_without_traces():
    """The level (1.05 x best baseline = .42) needs no trace; passes to target does."""
    r = rank(small_campaign(), "holdout", baselines=small_baselines())
    t = r.table.set_index(["dataset", "method"])
    assert t.loc[("A", "cgls"), "target"] == pytest.approx(0.42) and t.loc[("A", "cgls"), "reached_at_stop"] == 2
    assert math.isnan(t.loc[("A", "cgls"), "passes_to_target"]) and r.performance.empty
    assert any("no traces" in n for n in r.notes)


def test_the_best_method_per_dataset_is_marked_and_pairwise_tests_are_attached():
    from stopwise.report.tables import render, results_frame

    sel = small_campaign()
    r = rank(sel, "holdout", traces=small_traces(sel), baselines=small_baselines())
    f = results_frame(r)
    for d in r.ranks.index:
        marked = set(f.loc[(f["dataset"] == d) & (f["best"] == "*"), "method"])
        assert marked == set(r.ranks.columns[r.ranks.loc[d] == r.ranks.loc[d].min()])
    assert set(r.pairwise.columns) >= {"method_a", "method_b", "T", "p", "p_holm"}
    assert len(r.pairwise) == len(r.ranks.columns) * (len(r.ranks.columns) - 1) // 2
    assert "pairwise Wilcoxon" in render(r, "text")


# ---------------------------------------------------------------- configuration labels

def test_tuned_config_lists_only_params_that_vary_or_differ_from_the_solvers_defaults():
    """The label of a tuned configuration names what distinguishes it: parameters that vary
    among the solver's runs, or that differ from the default declared in the solver's
    registered params dataclass (read here from the dataclass itself, not from stopwise's helper)."""
    import dataclasses

    from stopwise.analysis.rank import config_labels
    from stopwise.solvers import SOLVERS

    hb_default = {f.name: f.default for f in dataclasses.fields(SOLVERS["heavy_ball"].params)}["momentum"]
    sgd = {f.name: f.default for f in dataclasses.fields(SOLVERS["sgd"].params)}  # the wrapped, averaged params
    assert "average" in sgd and "batch" in sgd
    rows = [selection_row("h1", "A", "heavy_ball", 0, .2, .3, step_scale=0.5, momentum=hb_default),
            selection_row("h2", "A", "heavy_ball", 0, .2, .3, step_scale=1.0, momentum=hb_default),
            selection_row("g1", "A", "gd", 0, .2, .3, step_scale=1.0),
            selection_row("s1", "A", "sgd", 0, .2, .3, step_scale=0.5, batch=sgd["batch"], average=sgd["average"]),
            selection_row("s2", "A", "sgd", 1, .2, .3, step_scale=0.5, batch=sgd["batch"], average="tail")]
    df = selections(rows)
    labels = dict(zip(df.run_id, config_labels(df, ["step_scale", "momentum", "batch", "average"])))
    # heavy ball: step scale varies, momentum stays at its default -> left out
    assert labels["h1"] == "step_scale=0.5" and labels["h2"] == "step_scale=1"
    # gd alone at its default step scale: nothing to say
    assert labels["g1"] == "(default)"
    # sgd: step scale 0.5 is not the default (1.0) -> listed on both; batch at its default
    # and constant -> left out; averaging varies between the two runs -> listed on both
    assert labels["s1"] == "step_scale=0.5 average=none" and labels["s2"] == "step_scale=0.5 average=tail"
    # momentum away from its default, even when constant, is listed
    other = df.assign(momentum=np.where(df.solver == "heavy_ball", 0.9, np.nan))
    assert config_labels(other, ["step_scale", "momentum"])[0] == "step_scale=0.5 momentum=0.9"
    # the ranking's table shows the short label
    r = rank(df[df.solver != "sgd"], "holdout")
    assert set(r.table.loc[r.table.method == "gd", "config"]) == {"(default)"}

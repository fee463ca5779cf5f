"""Stopping rules compared against the oracle: by hand on stored traces, and ranked.

References:
- every relative error, pass count and outcome is recomputed here by hand from the stored
  Parquet traces (pyarrow, without the project's reader) with each rule's definition
  written out: the discrepancy principle (Morozov 1966: the first iterate with
  ||X w_t - y|| <= tau delta), the best validation error (hold-out), the last iterate
  (a budget without limits) and the oracle (the smallest recorded test error);
- the Friedman statistic of the rule ranking against scipy.stats.friedmanchisquare on the
  same datasets x rules score table (Friedman 1937; Demsar 2006, section 3.2.2), up to
  scipy's tie correction, and the average ranks against scipy.stats.rankdata.
"""
import json
import math

import numpy as np
import pandas as pd
import pyarrow.parquet as pq
import pytest
from scipy import stats

import stopwise
from stopwise.analysis.rule_comparison import compare_campaign, compare_rules, default_rules
from stopwise.cli import main

RULES = [{"rule": "discrepancy", "params": {"tau": 1.1}}, "holdout", "budget",
         {"rule": "holdout", "params": {"patience": 3}}]


@pytest.fixture(scope="module")
def root(tmp_path_factory):
    root = tmp_path_factory.mktemp("rules") / "results"
    rc = main(["sweep", "dataset=illposed,wellposed,diabetes", "solver=gd,cgls", "seed=0,1", "budget.iterations=60",
               "stopping=discrepancy,holdout", f"results_root={root}"])
    assert rc == 0
    return root


def by_hand(path, rule):
    """(returned test error, oracle test error, passes spent, outcome) from the raw file."""
    f = pq.ParquetFile(path)
    meta = json.loads(f.schema_arrow.metadata[b"stopwise"])
    t = f.read().to_pandas()
    test, it, passes = t["test_error"].to_numpy(), t["iteration"].to_numpy(), t["passes"].to_numpy()
    oracle = test.min()
    n = len(t)
    if rule == "budget":  # no limits: the last iterate, never decided early
        return test[-1], oracle, passes[-1], "not stopped"
    if rule == "holdout":  # no patience: the best validation error over the whole trace
        return test[int(np.argmin(t["val_error"].to_numpy()))], oracle, passes[-1], "not stopped"
    if rule == "holdout(patience=3)":
        val = t["val_error"].to_numpy()
        best, last_imp = np.inf, 0
        for i in range(n):
            if val[i] < best:
                best, last_imp = val[i], i
            if passes[i] - passes[last_imp] >= 3:
                return test[int(np.argmin(val[: i + 1]))], oracle, passes[i], "stopped"
        return test[int(np.argmin(val))], oracle, passes[-1], "not stopped"
    assert rule == "discrepancy"
    delta = (meta.get("problem") or {}).get("noise_norm")
    if delta is None:
        return math.nan, oracle, math.nan, "not applicable"
    hits = np.flatnonzero(t["residual_norm"].to_numpy() <= 1.1 * delta)
    if hits.size:
        return test[hits[0]], oracle, passes[hits[0]], "stopped"
    return test[-1], oracle, passes[-1], "not stopped"


def test_every_relative_error_equals_the_hand_computation_on_the_stored_trace(root):
    c = compare_campaign(root, "adhoc", RULES)
    runs = c.per_run
    assert set(runs["rule"]) == {"discrepancy", "holdout", "budget", "holdout(patience=3)"}
    assert len(runs) == 12 * 4  # 12 completed runs x 4 rules
    outcomes = set()
    for row in runs.itertuples():
        path = root / "runs" / f"{row.run_id}.parquet"
        got, oracle, spent, outcome = by_hand(path, row.rule)
        outcomes.add(outcome)
        assert row.outcome == outcome, (row.rule, row.reason)
        assert row.oracle_error == oracle  # the same float read back: exact
        if outcome == "not applicable":
            assert math.isnan(row.relative_error) and math.isnan(row.passes_spent)
            continue
        assert row.returned_error == got
        assert row.relative_error == pytest.approx(got / oracle, rel=1e-15)  # one division, rounded once
        assert row.relative_error >= 1.0  # the oracle is the smallest test error on the same path
        assert row.passes_spent == spent
    assert {"stopped", "not stopped", "not applicable"} <= outcomes  # each branch was exercised


def test_the_table_and_summary_aggregate_the_runs_as_stated(root):
    c = compare_campaign(root, "adhoc", RULES)
    runs = c.per_run
    for row in c.table.itertuples():
        sub = runs[(runs["dataset"] == row.dataset) & (runs["method"] == row.method) & (runs["config"] == row.config)
                   & (runs["rule"] == row.rule)]
        app = sub[sub["outcome"] != "not applicable"]
        assert row.runs == len(sub) and row.applicable == len(app)
        if len(app):
            assert row.relative_error == np.median(app["relative_error"])
            assert row.not_stopped == (app["outcome"] == "not stopped").mean()
            assert row.stopped_at_0 == ((app["outcome"] == "stopped") & (app["selected_iteration"] == 0)).mean()
        else:
            assert math.isnan(row.relative_error)
    s = c.summary.set_index("rule")
    assert s.loc["budget", "not_stopped"] == 1.0 and s.loc["holdout", "not_stopped"] == 1.0
    assert s.loc["discrepancy", "not_applicable"] == pytest.approx(4 / 12)  # diabetes states no noise level


def test_a_rule_that_does_not_apply_is_left_out_of_the_rank_test_with_its_reason(root):
    c = compare_campaign(root, "adhoc", RULES)
    assert "discrepancy" not in c.ranks.columns  # not counted as a tie on diabetes
    (note,) = [n for n in c.notes if n.startswith("rule discrepancy")]
    assert "diabetes" in note and "noise" in note
    assert list(c.ranks.index) == list(c.scores.index)  # every dataset stays for the other rules
    ranked = c.scores[list(c.ranks.columns)]
    chi2, p = stats.friedmanchisquare(*[ranked[col].to_numpy() for col in ranked.columns])
    assert c.test is not None
    # scipy divides by the tie correction C = 1 - sum(t^3 - t) / (N k (k^2 - 1)) over groups of
    # t tied scores in a row (Hollander & Wolfe 1973, sec. 7.1); the rank-based form of Demsar
    # 2006 (eq. 3) does not, so the two agree after that factor
    a = ranked.to_numpy()
    n, k = a.shape
    ties = sum(t**3 - t for row in a for t in np.unique(row, return_counts=True)[1])
    correction = 1 - ties / (n * k * (k * k - 1))
    assert c.test.chi2_f == pytest.approx(chi2 * correction, rel=1e-12)
    assert c.test.average_ranks == pytest.approx(tuple(stats.rankdata(a, axis=1).mean(axis=0)), rel=1e-15)


def test_hand_built_selection_zero_oracle_and_stop_at_zero():
    rows = []
    for rid, ds, rule, it, test, last, outcome, spent in [
        ("a", "d1", "oracle", 3, 0.0, 0.0, "not stopped", 10.0),
        ("a", "d1", "r1", 3, 0.0, 0.0, "stopped", 3.0),
        ("a", "d1", "r2", 0, 0.5, 0.0, "stopped", 0.0),
        ("b", "d2", "oracle", 5, 2.0, 3.0, "not stopped", 10.0),
        ("b", "d2", "r1", None, math.nan, 3.0, "not stopped", 10.0),
        ("b", "d2", "r2", 1, 4.0, 3.0, "stopped", 1.0),
    ]:
        rows.append(dict(run_id=rid, dataset=ds, solver="gd", seed=0, status="completed", rule=rule,
                         reference=rule == "oracle", selected_iteration=it, passes_spent=spent, test_error=test,
                         last_test_error=last, outcome=outcome, reason=""))
    sel = pd.DataFrame(rows)
    sel["selected_iteration"] = sel["selected_iteration"].astype("Int64")
    c = compare_rules(sel, params=[])
    r = c.per_run.set_index(["run_id", "rule"])["relative_error"]
    assert r[("a", "r1")] == 1.0          # 0 / 0 where both are exact: the rule found the best iterate
    assert r[("a", "r2")] == math.inf     # 0.5 / 0
    assert r[("b", "r1")] == 1.5          # chooses nothing: the last iterate's 3.0 over the oracle's 2.0
    assert r[("b", "r2")] == 2.0
    s = c.summary.set_index("rule")
    assert s.loc["r2", "stopped_at_0"] == 0.5 and s.loc["r1", "not_stopped"] == 0.5


def test_default_rules_are_the_campaigns_then_every_registered_non_reference_rule():
    labels = [r["label"] for r in default_rules([{"rule": "holdout", "params": {"patience": 5}}])]
    assert labels[0] == "holdout(patience=5)"
    assert "oracle" not in labels and {"holdout", "discrepancy", "budget"} <= set(labels)
    assert len(labels) == len(set(labels))


def test_rank_prints_the_comparison_and_refuses_the_oracle(root, capsys):
    assert main(["rank", "adhoc", "--root", str(root), "--baselines", "none", "--compare", "discrepancy",
                 "--compare", "holdout"]) == 0
    out = capsys.readouterr().out
    assert "stopping rules compared" in out and "discrepancy" in out.split("stopping rules compared")[1]
    assert "dataset diabetes left out of the rank test (discrepancy: noise norm delta unknown" in out  # 2 rules: datasets give way
    assert main(["rank", "adhoc", "--root", str(root), "--baselines", "none", "--compare", "none"]) == 0
    assert "stopping rules compared" not in capsys.readouterr().out
    assert main(["rank", "adhoc", "--root", str(root), "--baselines", "none", "--compare", "oracle"]) == 2
    err = capsys.readouterr().err.strip().splitlines()
    assert len(err) == 1 and "oracle" in err[0]
    assert main(["rank", "adhoc", "--root", str(root), "--baselines", "none", "--compare", "nosuchrule"]) == 2
    err = capsys.readouterr().err.strip().splitlines()
    assert len(err) == 1 and "nosuchrule" in err[0]


def test_api_exports(root):
    assert stopwise.compare_campaign is compare_campaign and stopwise.compare_rules is compare_rules


def test_rank_under_a_rule_that_does_not_apply_on_a_dataset_leaves_it_out_with_the_reason(root):
    """diabetes states no noise level: ranking under the discrepancy principle there would
    make every method a tie on it; it is left out of the ranks, and the note says why."""
    from stopwise.analysis.rank import rank_campaign

    r = rank_campaign(root, "adhoc", "discrepancy", baselines="none", target="none")
    assert "diabetes" not in r.ranks.index and {"illposed", "wellposed"} <= set(r.ranks.index)
    (note,) = [n for n in r.notes if "does not apply on dataset diabetes" in n]
    assert "noise" in note
    assert r.test is not None and r.test.n_datasets == 2


def test_rules_get_pairwise_wilcoxon_tests_with_holm_as_methods_do(root, capsys):
    """Every pair of ranked rules, over the ranked datasets: p from scipy.stats.wilcoxon on the
    score differences (zsplit, Demsar 2006 section 3.1.3), and Holm's step-down adjustment (Holm
    1979) written out here from its definition."""
    c = compare_campaign(root, "adhoc", RULES)
    ranked = c.scores.loc[list(c.ranks.index), list(c.ranks.columns)]
    k = ranked.shape[1]
    assert len(c.pairwise) == k * (k - 1) // 2
    ps = []
    for row in c.pairwise.itertuples():
        d = (ranked[row.method_b] - ranked[row.method_a]).to_numpy(float)
        p = 1.0 if np.all(d == 0) else stats.wilcoxon(d, zero_method="zsplit").pvalue
        assert row.p == pytest.approx(p, rel=1e-12)
        ps.append(row.p)
    order = np.argsort(ps, kind="stable")
    m, running, holm = len(ps), 0.0, np.empty(len(ps))
    for i, j in enumerate(order):
        running = max(running, min(1.0, (m - i) * ps[j]))
        holm[j] = running
    assert c.pairwise["p_holm"].to_numpy() == pytest.approx(holm, rel=1e-12)
    assert main(["rank", "adhoc", "--root", str(root), "--baselines", "none", "--compare", "holdout",
                 "--compare", "budget", "--compare", "holdout:patience=3"]) == 0
    out = capsys.readouterr().out
    assert "pairwise Wilcoxon signed-rank tests of the rules over datasets, Holm-corrected" in out
    assert "rule a" in out.split("of the rules over datasets")[1]

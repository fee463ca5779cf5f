"""campaigns/benchmark_suite.yaml end to end, offline, on the suite of the test-built OpenML cache
(conftest.py): `datasets fetch --suite`, `sweep`, `rank` and `report`, with the published scores of
each task (three scikit-learn estimators scored on the task's folds in conftest.published_runs) set
beside the methods, and the gaps checked against those scores recomputed here with numpy."""
from __future__ import annotations

import csv
import io
from contextlib import redirect_stderr, redirect_stdout

import numpy as np
import pytest
from conftest import OML_SUITE, OML_SUITE_ALIAS, OML_TASK_CANCER, OML_TASK_DIABETES, OML_TASK_IRIS, published_runs

import stopwise
from stopwise.cli import main
from stopwise.sweep.campaign import expand

NAMES = {OML_TASK_IRIS: f"iris-copy-t{OML_TASK_IRIS}", OML_TASK_DIABETES: f"diabetes-copy-t{OML_TASK_DIABETES}",
         OML_TASK_CANCER: f"breast-cancer-copy-t{OML_TASK_CANCER}"}
SMALL = [f"dataset.params.suite={OML_SUITE}", "budget.iterations=20"]


def cli(*args):
    out, err = io.StringIO(), io.StringIO()
    with redirect_stdout(out), redirect_stderr(err):
        code = main(list(args))
    return code, out.getvalue(), err.getvalue()


def test_the_campaign_expands_over_the_suite(openml_cache, tmp_path):
    exp = expand("benchmark_suite", [*SMALL, f"results_root={tmp_path}"])
    # 2 solvers x 2 step scales x (6 + 5 + 3) splits of the test suite
    assert len(exp.specs) == 2 * 2 * 14
    assert {s.dataset["name"] for s in exp.specs} == set(NAMES.values())
    assert exp.manifest["definition"]["sweep_params"]["dataset.params.suite"] == "OpenML-CC18"  # as the file says


def expected_errors(task_id):
    """Best and median published error of a task from the raw scores, in the trace's error:
    1 - accuracy (classification), RMSE squared (regression)."""
    runs = published_runs()[task_id]
    if task_id == OML_TASK_DIABETES:
        e = np.array([sc["root_mean_squared_error"] for *_, sc in runs]) ** 2
    else:
        e = 1.0 - np.array([sc["predictive_accuracy"] for *_, sc in runs])
    return float(e.min()), float(np.median(e))


def test_fetch_sweep_rank_report_offline(openml_cache, tmp_path, monkeypatch):
    monkeypatch.chdir(tmp_path)
    root = str(tmp_path / "res")
    code, out, err = cli("datasets", "fetch", "--suite", OML_SUITE_ALIAS)
    assert code == 0, err
    assert "server not reached" in out and out.count("fetched task ") == 3
    code, out, err = cli("sweep", "benchmark_suite", *SMALL, f"results_root={root}")
    assert code == 0, err
    assert "56 completed" in out and f"suite {OML_SUITE}" in out
    code, out, err = cli("rank", "benchmark_suite", "--root", root)
    assert code == 0, err
    assert "published scores of the OpenML tasks" in out
    r = stopwise.rank_campaign(root, "benchmark_suite", "holdout")
    pub = r.published
    assert set(pub["dataset"]) == set(NAMES.values())
    for tid, name in NAMES.items():
        rows = pub[(pub["dataset"] == name) & pub["gap_best"].notna()]
        best, median = expected_errors(tid)
        ours = r.table[r.table["dataset"] == name].set_index("method")["test_error"]
        assert set(rows["method"]) == set(ours.index) and len(rows) == len(ours)  # every method, baselines too
        for row in rows.itertuples():
            assert row.error_best == pytest.approx(best, rel=1e-12)
            assert row.error_median == pytest.approx(median, rel=1e-12)
            assert row.gap_best == pytest.approx(ours[row.method] - best, rel=1e-12, abs=1e-15)
            assert row.gap_median == pytest.approx(ours[row.method] - median, rel=1e-12, abs=1e-15)
        if tid != OML_TASK_DIABETES:  # the area under the ROC curve: shown alone, labelled
            auc = pub[(pub["dataset"] == name) & (pub["measure"] == "area_under_roc_curve")]
            assert len(auc) == 1 and auc["gap_best"].isna().all() and "published value only" in auc["note"].iloc[0]
            assert auc["published_best"].iloc[0] == max(sc["area_under_roc_curve"] for *_, sc in published_runs()[tid])
    code, out, err = cli("report", "benchmark_suite", "--root", root, "--out", str(tmp_path / "rep"))
    assert code == 0, err
    page = (tmp_path / "rep" / "index.html").read_text()
    assert "Published scores of the OpenML tasks" in page
    rows = list(csv.DictReader((tmp_path / "rep" / "published.csv").open()))
    assert len(rows) == len(pub) and {r_["dataset"] for r_ in rows} == set(NAMES.values())


def test_a_campaign_on_some_splits_shows_the_published_scores_alone(openml_cache, tmp_path):
    root = str(tmp_path / "res")
    code, out, err = cli("sweep", "benchmark_suite", *SMALL, "dataset.params.splits=2", "solver=gd",
                         "solver.step_scale=1.0", f"results_root={root}")
    assert code == 0, err
    r = stopwise.rank_campaign(root, "benchmark_suite", "holdout", baselines="none")
    pub = r.published
    assert pub["gap_best"].isna().all()
    iris = pub[(pub["dataset"] == NAMES[OML_TASK_IRIS]) & (pub["measure"] == "predictive_accuracy")]
    assert "ran 2 of the task's 6 splits" in iris["note"].iloc[0]
    assert iris["error_best"].iloc[0] == pytest.approx(expected_errors(OML_TASK_IRIS)[0], rel=1e-12)

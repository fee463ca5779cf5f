"""The published-scores table of a ranking (analysis.published) on hand-built ranking tables and the
summaries of the test-built OpenML cache (conftest.py: three scikit-learn estimators per task)."""
import numpy as np
import pandas as pd
import pytest
from conftest import OML_TASK_CANCER, OML_TASK_DIABETES, published_runs

from stopwise.analysis.published import published_table
from stopwise.data.openml_scores import scores_path

CANCER, DIAB = "breast-cancer-copy-t900013", "diabetes-copy-t900011"


def tasks(**over):
    row = {"dataset": CANCER, "task_id": OML_TASK_CANCER, "kind": "classification", "splits_run": 3,
           "splits_total": 3, "one_split_per_seed": True}
    row.update(over)
    return pd.DataFrame([row])


def table(rows):
    return pd.DataFrame(rows, columns=["dataset", "method", "seeds", "valid", "test_error"])


def test_gaps_are_test_error_minus_one_minus_accuracy(openml_cache):
    acc = np.array([sc["predictive_accuracy"] for *_, sc in published_runs()[OML_TASK_CANCER]])
    t = table([(CANCER, "gd", 3, 3, 0.05), (CANCER, "nesterov", 3, 2, 0.04), ("other", "gd", 3, 3, 0.5)])
    f = published_table(t, tasks())
    acc_rows = f[f["measure"] == "predictive_accuracy"].set_index("method")
    assert set(acc_rows.index) == {"gd", "nesterov"}
    assert acc_rows.loc["gd", "gap_best"] == pytest.approx(0.05 - (1 - acc.max()), abs=1e-15)
    assert acc_rows.loc["gd", "gap_median"] == pytest.approx(0.05 - (1 - np.median(acc)), abs=1e-15)
    # a method without a valid selection on every split gets no gap
    assert np.isnan(acc_rows.loc["nesterov", "gap_best"]) and "every split" in acc_rows.loc["nesterov", "note"]
    auc = f[f["measure"] == "area_under_roc_curve"]
    assert len(auc) == 1 and auc["method"].iloc[0] == "-" and "published value only" in auc["note"].iloc[0]


def test_regression_gaps_use_the_squared_rmse(openml_cache):
    rmse = np.array([sc["root_mean_squared_error"] for *_, sc in published_runs()[OML_TASK_DIABETES]])
    t = table([(DIAB, "gd", 5, 5, 3000.0)])
    f = published_table(t, tasks(dataset=DIAB, task_id=OML_TASK_DIABETES, kind="regression", splits_run=5,
                                 splits_total=5))
    (row,) = f.itertuples()
    assert row.measure == "root_mean_squared_error" and row.error_metric == "mean squared error"
    assert row.gap_best == pytest.approx(3000.0 - rmse.min() ** 2, rel=1e-12)
    assert row.gap_median == pytest.approx(3000.0 - np.median(rmse ** 2), rel=1e-12)
    assert row.published_best == rmse.min()  # the published value itself is kept as published


def test_no_gap_unless_the_campaign_ran_every_split_once_per_seed(openml_cache):
    t = table([(CANCER, "gd", 2, 2, 0.05)])
    f = published_table(t, tasks(splits_run=2))
    assert f["gap_best"].isna().all() and "ran 2 of the task's 3 splits" in f["note"].iloc[0]
    f = published_table(table([(CANCER, "gd", 1, 1, 0.05)]), tasks(one_split_per_seed=False))
    assert f["gap_best"].isna().all() and "some seed holds runs on two splits" in f["note"].iloc[0]


def test_a_task_without_stored_scores_gets_a_note(openml_cache):
    scores_path(OML_TASK_CANCER).unlink()
    f = published_table(table([(CANCER, "gd", 3, 3, 0.05)]), tasks())
    assert len(f) == 1 and f"stopwise datasets fetch --task {OML_TASK_CANCER}" in f["note"].iloc[0]
    assert published_table(table([]), None).empty


def test_a_hand_made_campaign_sweeping_folds_under_one_seed_gets_no_gap(openml_cache, tmp_path):
    """Three folds of the task under seed 0: the ranking's means are over seeds, not over the task's
    splits, so the published scores are shown alone with the reason."""
    from stopwise.analysis.published import task_datasets
    from stopwise.cli import main
    import stopwise

    root = str(tmp_path / "res")
    assert main(["sweep", "dataset=openml", f"dataset.params.task_id={OML_TASK_CANCER}", "dataset.name=cancer",
                 "split.kind=indices", "split.fold=0,1,2", "solver=gd", "budget.iterations=5",
                 f"results_root={root}"]) == 0
    sel = stopwise.select(root, "adhoc")
    (row,) = task_datasets(root, sel).itertuples()
    assert (row.dataset, row.task_id, row.splits_run, row.splits_total, row.one_split_per_seed) == (
        "cancer", OML_TASK_CANCER, 3, 3, False)
    r = stopwise.rank_campaign(root, "adhoc", "holdout", baselines="none")
    assert r.published["gap_best"].isna().all()
    assert "some seed holds runs on two splits" in r.published["note"].iloc[0]

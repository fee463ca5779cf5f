"""Published scores of OpenML tasks: the summary kept by `datasets fetch`, checked against numpy on the
openml package's own evaluation objects, and its offline behaviour (sockets refused)."""
import json

import numpy as np
import pytest
from conftest import OML_TASK_CANCER, OML_TASK_DIABETES, OML_TASK_IRIS, published_runs
from openml.evaluations import OpenMLEvaluation

from stopwise.cli import main
from stopwise.data.openml_scores import fetch_scores, read_scores, scores_path, summarize


def evaluation(run_id, value, flow_id=1, flow="f"):
    return OpenMLEvaluation(run_id=run_id, task_id=1, setup_id=1, flow_id=flow_id, flow_name=flow, data_id=1,
                            data_name="d", function="m", upload_time="2024-01-01 00:00:00", uploader=1,
                            uploader_name="u", value=value, values=None)


def rows(evals):
    return ((e.value, e.run_id, e.flow_id, e.flow_name) for e in evals)


def test_accuracy_summary_against_numpy():
    rng = np.random.default_rng(0)
    acc = rng.uniform(0.6, 0.95, size=40)
    evals = [evaluation(100 + i, float(a), flow_id=i % 4, flow=f"flow{i % 4}") for i, a in enumerate(acc)]
    evals.append(evaluation(999, None))  # a run without a value is not counted
    s = summarize(rows(evals), "predictive_accuracy")
    i = int(np.argmax(acc))
    assert s["n_runs"] == 40 and s["best"] == acc.max() and s["median"] == np.median(acc)
    assert (s["best_run_id"], s["best_flow_id"], s["best_flow_name"]) == (100 + i, i % 4, f"flow{i % 4}")
    assert s["error_metric"] == "misclassification rate"
    assert s["error_best"] == pytest.approx(1 - acc.max(), abs=1e-15)
    assert s["error_median"] == pytest.approx(np.median(1 - acc), abs=1e-15)


def test_rmse_summary_converts_to_mean_squared_error_over_all_runs():
    """With an even number of runs the median of the squares is not the square of the median: the
    summary squares every run's value before taking the median."""
    rmse = np.array([50.0, 52.0, 60.0, 70.0])
    s = summarize(rows([evaluation(i, float(v)) for i, v in enumerate(rmse)]), "root_mean_squared_error")
    assert s["best"] == 50.0 and s["best_run_id"] == 0 and s["higher_is_better"] is False
    assert s["median"] == 56.0
    assert s["error_metric"] == "mean squared error"
    assert s["error_best"] == 2500.0 and s["error_median"] == (52.0 ** 2 + 60.0 ** 2) / 2  # not 56 ** 2
    assert s["error_median"] != 56.0 ** 2


def test_ties_go_to_the_lowest_run_id_and_auc_has_no_conversion():
    s = summarize(rows([evaluation(9, 0.9), evaluation(3, 0.9), evaluation(5, 0.7)]), "area_under_roc_curve")
    assert s["best_run_id"] == 3 and "error_metric" not in s
    assert summarize([], "predictive_accuracy") == {"measure": "predictive_accuracy", "n_runs": 0,
                                                    "higher_is_better": True}


def test_the_test_cache_holds_the_summaries_of_the_scikit_learn_runs(openml_cache):
    for tid in (OML_TASK_IRIS, OML_TASK_DIABETES, OML_TASK_CANCER):
        rec = read_scores(tid)
        assert rec["task_id"] == tid and rec["source"] == "openml.evaluations.list_evaluations"
        runs = published_runs()[tid]
        for m in rec["measures"]:
            vals = np.array([sc[m["measure"]] for *_, sc in runs])
            assert m["n_runs"] == 3 and m["median"] == np.median(vals)


def test_fetch_scores_offline_keeps_a_stored_summary_and_fails_without_one(openml_cache):
    before = scores_path(OML_TASK_IRIS).read_bytes()
    line = fetch_scores(OML_TASK_IRIS)
    assert "published scores not refreshed" in line and "kept those fetched on" in line
    assert scores_path(OML_TASK_IRIS).read_bytes() == before
    scores_path(OML_TASK_IRIS).unlink()
    with pytest.raises(OSError):  # requests' ConnectionError: the server cannot be reached
        fetch_scores(OML_TASK_IRIS)


def test_fetch_task_offline_without_stored_scores_still_succeeds_with_a_line(openml_cache, capsys):
    scores_path(OML_TASK_DIABETES).unlink()
    assert main(["datasets", "fetch", "--task", str(OML_TASK_DIABETES)]) == 0
    out = capsys.readouterr().out
    assert f"task {OML_TASK_DIABETES}: published scores not fetched" in out and "show none for it" in out


def test_an_unreadable_summary_counts_as_missing(openml_cache):
    p = scores_path(OML_TASK_IRIS)
    p.write_text("{not json")
    assert read_scores(OML_TASK_IRIS) is None
    p.write_text(json.dumps({"task_id": OML_TASK_IRIS + 1, "measures": []}))
    assert read_scores(OML_TASK_IRIS) is None

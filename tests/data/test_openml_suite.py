"""OpenML benchmark suites as dataset lists, offline, from the cache the tests build (conftest.py):
the suite's task list as stored by `datasets fetch --suite`, openml's own task and dataset files."""
import json

import pytest
from conftest import (
    OML_CANCER,
    OML_DIABETES,
    OML_IRIS,
    OML_SUITE,
    OML_SUITE_ALIAS,
    OML_TASK_CANCER,
    OML_TASK_DIABETES,
    OML_TASK_IRIS,
    task_folds,
)

from stopwise.cli import main
from stopwise.config.compose import spec_from_overrides
from stopwise.config.spec import SpecError
from stopwise.data import build_problem
from stopwise.data.openml_source import OpenMLCacheError
from stopwise.data.openml_suite import SuiteParams, read_suite, suite_tasks
from stopwise.sweep.campaign import expand

SUITE = ["dataset=openml_suite", f"dataset.params.suite={OML_SUITE}"]
NAMES = {OML_TASK_IRIS: f"iris-copy-t{OML_TASK_IRIS}", OML_TASK_DIABETES: f"diabetes-copy-t{OML_TASK_DIABETES}",
         OML_TASK_CANCER: f"breast-cancer-copy-t{OML_TASK_CANCER}"}


def test_the_cached_suite_lists_its_tasks_with_their_splits(openml_cache):
    rec, tasks = suite_tasks(SuiteParams(suite=str(OML_SUITE)))
    assert rec["suite_id"] == OML_SUITE and rec["alias"] == OML_SUITE_ALIAS
    assert [t.task_id for t in tasks] == [OML_TASK_IRIS, OML_TASK_DIABETES, OML_TASK_CANCER]  # the suite's order
    assert [t.data_id for t in tasks] == [OML_IRIS, OML_DIABETES, OML_CANCER]
    assert [t.kind for t in tasks] == ["classification", "regression", "classification"]
    assert [t.name for t in tasks] == [NAMES[t.task_id] for t in tasks]
    # the (repeat, fold) pairs are those the split files hold (scikit-learn's splitters in conftest)
    for t in tasks:
        assert list(t.splits) == sorted(task_folds()[t.task_id])
    # by alias, exactly or ignoring case
    assert read_suite(OML_SUITE_ALIAS)["suite_id"] == OML_SUITE
    assert read_suite(OML_SUITE_ALIAS.upper())["suite_id"] == OML_SUITE


def test_a_sweep_expands_a_suite_into_the_single_task_runs(openml_cache):
    """One job per task and split; each is the single-task job written by hand (same run id), with the seed
    the split's index."""
    exp = expand(None, [*SUITE, "solver=gd", "budget.iterations=5", "split.val=0.25"])
    assert len(exp.specs) == 6 + 5 + 3 and len(exp.jobs) == 14
    by_task: dict[int, list] = {}
    for spec, job in zip(exp.specs, exp.jobs):
        tid = spec.dataset["params"]["task_id"]
        by_task.setdefault(tid, []).append(spec)
        assert spec.dataset["name"] == NAMES[tid] and spec.dataset["source"] == "openml"
        hand = spec_from_overrides(["dataset=openml", f"dataset.params.task_id={tid}", f"dataset.name={NAMES[tid]}",
                                    "split.kind=indices", f"split.repeat={spec.split['repeat']}",
                                    f"split.fold={spec.split['fold']}", f"seed={spec.seed}", "solver=gd",
                                    "budget.iterations=5", "split.val=0.25"])
        assert hand.run_id == spec.run_id
        assert spec_from_overrides(job).run_id == spec.run_id  # the job line the expansion lists
    for tid, specs in by_task.items():
        pairs = [(s.split["repeat"], s.split["fold"]) for s in specs]
        assert pairs == sorted(task_folds()[tid]) and [s.seed for s in specs] == list(range(len(pairs)))
    assert exp.manifest["suites"][str(OML_SUITE)]["tasks"] == [OML_TASK_IRIS, OML_TASK_DIABETES, OML_TASK_CANCER]
    assert any(f"suite {OML_SUITE}" in n and "3 task(s)" in n for n in exp.notes)


def test_an_expanded_job_builds_the_tasks_fold(openml_cache):
    exp = expand(None, [*SUITE, "solver=gd", "dataset.params.splits=2"])
    assert len(exp.specs) == 3 * 2
    spec = next(s for s in exp.specs if s.dataset["params"]["task_id"] == OML_TASK_IRIS and s.seed == 1)
    p = build_problem(spec.dataset, spec.split, spec.seed)
    assert p.info["rows"]["test"] == sorted(task_folds()[OML_TASK_IRIS][(0, 1)][1].tolist())
    assert p.task == "multiclass"


def test_existing_single_task_run_ids_are_unchanged(openml_cache):
    """The run id of a single-task job does not depend on suites existing: the identity hashes only the
    normalized config, which the suite expansion reproduces (checked against its canonical JSON)."""
    spec = spec_from_overrides(["dataset=openml", f"dataset.params.task_id={OML_TASK_DIABETES}", "split.kind=indices",
                                "split.fold=1", "solver=cgls", "budget.iterations=5"])
    assert spec.dataset == {"name": "openml", "source": "openml", "params": {
        "data_id": None, "name": None, "version": None, "task_id": OML_TASK_DIABETES, "target": None, "task": "auto"},
        "features": None, "standardize": True, "center_target": True}


def test_solvers_that_cannot_run_on_a_task_are_left_out_with_a_note(openml_cache):
    exp = expand(None, [*SUITE, "solver=gd,cgls", "dataset.params.splits=1"])
    assert sorted((s.solver, s.dataset["name"]) for s in exp.specs) == sorted(
        [("gd", n) for n in NAMES.values()] + [("cgls", NAMES[OML_TASK_DIABETES])])
    assert any("left out 2 solver x dataset pairs" in n and "cgls x iris-copy" in n for n in exp.notes)
    with pytest.raises(SpecError, match="does not handle classification"):
        expand(None, [*SUITE, "solver=cgls", "dataset.params.splits=1"], strict=True)


def test_seed_and_name_set_by_the_job_are_replaced_with_a_note(openml_cache):
    exp = expand(None, [*SUITE, "solver=gd", "seed=5,6", "dataset.params.splits=1"])
    assert len(exp.specs) == 3 and {s.seed for s in exp.specs} == {0}
    assert any("the suite sets seed itself" in n for n in exp.notes)


def test_a_suite_that_is_not_cached_is_one_line_naming_the_fetch_command(openml_cache, tmp_path, capsys):
    results = tmp_path / "results"
    rc = main(["sweep", "dataset=openml_suite", "dataset.params.suite=OpenML-CC18", "solver=gd",
               f"results_root={results}"])
    err = capsys.readouterr().err.strip()
    assert rc == 2 and len(err.splitlines()) == 1
    assert "OpenML suite OpenML-CC18 is not in the cache" in err and "stopwise datasets fetch --suite OpenML-CC18" in err
    assert not results.exists()


def test_a_task_of_the_suite_missing_from_the_cache_is_named(openml_cache, tmp_path, capsys):
    (openml_cache / "org/openml/www/tasks" / str(OML_TASK_CANCER) / "datasplits.arff").unlink()
    with pytest.raises(SpecError) as e:
        expand(None, [*SUITE, "solver=gd"])
    msg = str(e.value)
    assert f"task {OML_TASK_CANCER} is not in the OpenML cache" in msg
    assert f"stopwise datasets fetch --suite {OML_SUITE}" in msg and "\n" not in msg


def test_a_single_run_on_a_suite_is_refused_in_one_line(openml_cache, tmp_path, capsys):
    results = tmp_path / "results"
    rc = main(["run", *SUITE, f"results_root={results}"])
    err = capsys.readouterr().err.strip()
    assert rc == 2 and len(err.splitlines()) == 1 and "names a list of OpenML tasks" in err
    assert "stopwise sweep" in err and not results.exists()
    with pytest.raises(SpecError, match="needs dataset.params.suite"):
        spec_from_overrides(["dataset=openml_suite"])


def test_fetch_suite_offline_keeps_the_stored_task_list_and_warms_its_tasks(openml_cache, capsys):
    """openml.study.get_suite always asks the server; offline (sockets refused) the stored list is used,
    said so in the output, and every task is warmed from openml's cache as `fetch --task` does."""
    before = json.loads((openml_cache / "org/openml/www/stopwise/suites" / f"{OML_SUITE}.json").read_text())
    assert main(["datasets", "fetch", "--suite", OML_SUITE_ALIAS]) == 0
    out = capsys.readouterr().out
    assert f"suite {OML_SUITE} ({OML_SUITE_ALIAS}): 3 task(s), server not reached" in out
    assert f"kept the task list stored on {before['fetched']}" in out
    for tid in (OML_TASK_IRIS, OML_TASK_DIABETES, OML_TASK_CANCER):
        assert f"fetched task {tid} " in out
        assert f"task {tid}: published scores not refreshed" in out  # the stored summary stays
    assert "3 fold(s)" in out and "5 fold(s)" in out


def test_fetch_of_an_unknown_suite_offline_is_one_line_exit_1(openml_cache, capsys):
    assert main(["datasets", "fetch", "--suite", "271"]) == 1
    err = [ln for ln in capsys.readouterr().err.splitlines() if ln.startswith("stopwise:")]
    assert len(err) == 1 and "could not fetch OpenML suite 271" in err[0]
    assert main(["datasets", "fetch", "--suite", "no/such"]) == 2


def test_catalog_lists_the_cached_suite_and_the_template(openml_cache, capsys):
    assert main(["datasets"]) == 0
    out = capsys.readouterr().out
    line = next(ln for ln in out.splitlines() if ln.startswith(f"openml-suite-{OML_SUITE} "))
    assert f"dataset=openml_suite dataset.params.suite={OML_SUITE}" in line and "3 tasks (3 cached)" in line
    line = next(ln for ln in out.splitlines() if ln.startswith("openml_suite "))
    assert "template" in line
    assert f"openml-task-{OML_TASK_CANCER}" in out


def test_suite_record_errors_are_openml_cache_errors(openml_cache):
    with pytest.raises(OpenMLCacheError):
        suite_tasks(SuiteParams(suite="12345"))

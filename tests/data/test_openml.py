"""OpenML through the real openml package, offline, from a cache the tests build (conftest.py)."""
import os
import subprocess
import sys

import numpy as np
import pytest
from conftest import OML_DIABETES, OML_IRIS, OML_TASK_DIABETES, OML_TASK_IRIS, task_folds
from sklearn import datasets
from sklearn.preprocessing import LabelEncoder

import stopwise
from stopwise.cli import main
from stopwise.data import build_problem
from stopwise.config.spec import SpecError
from stopwise.config.compose import spec_from_overrides

ARRAYS = ("X_train", "y_train", "X_val", "y_val", "X_test", "y_test")


def problem(overrides):
    spec = spec_from_overrides(overrides)
    return build_problem(spec.dataset, spec.split, spec.seed)


def test_openml_copy_of_diabetes_gives_the_bundled_arrays_byte_for_byte(openml_cache):
    """The cache holds scikit-learn's diabetes table; loaded through openml.datasets.get_dataset it must
    give exactly the arrays of the bundled source (same split, seed and preprocessing)."""
    common = ["split.test=0.25", "split.val=0.2", "seed=7"]
    bundled = problem(["dataset=diabetes", *common])
    via_openml = problem(["dataset=openml", f"dataset.params.data_id={OML_DIABETES}", "dataset.name=diabetes", *common])
    for k in ARRAYS:
        assert getattr(bundled, k).tobytes() == getattr(via_openml, k).tobytes(), k
    assert bundled.feature_names == via_openml.feature_names
    assert bundled.preprocessing == via_openml.preprocessing
    assert via_openml.info["data_id"] == OML_DIABETES and via_openml.info["target"] == "target"
    # openml built its own derived cache file next to the Parquet file: the real code path ran
    assert (openml_cache / "org/openml/www/datasets" / str(OML_DIABETES) / f"dataset_{OML_DIABETES}.pkl.py3").exists()


def test_dataset_by_name_and_version_resolves_offline(openml_cache):
    a = problem(["dataset=openml", "dataset.params.name=diabetes-copy", "dataset.params.version=1"])
    b = problem(["dataset=openml", f"dataset.params.data_id={OML_DIABETES}"])
    assert a.X_train.tobytes() == b.X_train.tobytes()


@pytest.mark.parametrize("repeat,fold", [(0, 0), (0, 2), (1, 1)])
def test_classification_task_folds_are_honoured_exactly(openml_cache, repeat, fold):
    """Test rows are the fold's test rows (RepeatedKFold written into the split file); validation and
    training rows partition the fold's training rows; the arrays are iris' rows (scikit-learn's loader);
    labels follow LabelEncoder fitted on the training labels."""
    p = problem(["dataset=openml", f"dataset.params.task_id={OML_TASK_IRIS}", "split.kind=indices",
                 f"split.fold={fold}", f"split.repeat={repeat}", "split.val=0.25", "dataset.standardize=false"])
    tr_ref, te_ref = task_folds()[OML_TASK_IRIS][(repeat, fold)]
    rows = p.info["rows"]
    assert rows["test"] == sorted(te_ref.tolist())
    assert sorted(rows["train"] + rows["val"]) == sorted(tr_ref.tolist())
    assert len(rows["val"]) == round(0.25 * len(tr_ref))
    X, y = datasets.load_iris(return_X_y=True)
    names = datasets.load_iris().target_names
    assert np.array_equal(p.X_test, X[rows["test"]]) and np.array_equal(p.X_train, X[rows["train"]])
    enc = LabelEncoder().fit(names[y[rows["train"]]])
    assert p.info["classes"] == list(enc.classes_)
    assert np.array_equal(p.y_test, enc.transform(names[y[rows["test"]]]).astype(float))
    assert p.task == "multiclass" and p.y_train.dtype == np.float64


def test_validation_rows_are_carved_by_seed(openml_cache):
    over = ["dataset=openml", f"dataset.params.task_id={OML_TASK_DIABETES}", "split.kind=indices", "split.fold=3"]
    a, b = problem(over + ["seed=0"]), problem(over + ["seed=1"])
    assert a.info["rows"]["test"] == b.info["rows"]["test"] == sorted(task_folds()[OML_TASK_DIABETES][(0, 3)][1].tolist())
    assert a.info["rows"]["val"] != b.info["rows"]["val"]
    assert a.task == "regression"


def test_a_fold_outside_the_task_is_one_line(openml_cache):
    with pytest.raises(SpecError) as e:
        problem(["dataset=openml", f"dataset.params.task_id={OML_TASK_IRIS}", "split.kind=indices", "split.fold=7"])
    assert "not a fold of this task" in str(e.value) and "fold in 0..2" in str(e.value)


def test_cold_cache_offline_is_one_line_naming_the_id_and_fetch_command(openml_cache, problem_cache, tmp_path, capsys):
    """A dataset that is not cached: one line, exit 2, no results and no cache files, and openml's cache
    is left as it was (openml would delete a dataset folder on a failed call; we never make that call)."""
    before = sorted(str(p) for p in openml_cache.rglob("*"))
    results = tmp_path / "results"
    rc = main(["run", "dataset=openml", "dataset.params.data_id=31", f"results_root={results}"])
    err = capsys.readouterr().err.strip()
    assert rc == 2 and len(err.splitlines()) == 1
    assert "OpenML dataset 31" in err and "stopwise datasets fetch 31" in err
    assert not results.exists()
    assert not problem_cache.exists()
    assert sorted(str(p) for p in openml_cache.rglob("*")) == before
    rc = main(["run", "dataset=openml", "dataset.params.task_id=4242", f"results_root={results}"])
    err = capsys.readouterr().err.strip()
    assert rc == 2 and "OpenML task 4242" in err and "stopwise datasets fetch --task 4242" in err


def test_a_missing_parquet_file_counts_as_not_cached(openml_cache, capsys):
    (openml_cache / "org/openml/www/datasets" / str(OML_IRIS) / f"dataset_{OML_IRIS}.pq").unlink()
    with pytest.raises(SpecError) as e:
        problem(["dataset=openml", f"dataset.params.data_id={OML_IRIS}"])
    assert f"stopwise datasets fetch {OML_IRIS}" in str(e.value)
    assert (openml_cache / "org/openml/www/datasets" / str(OML_IRIS) / "description.xml").exists()


def test_fetch_on_a_warm_cache_works_offline_and_catalog_lists_it(openml_cache, capsys):
    assert main(["datasets", "fetch", str(OML_IRIS), "--task", str(OML_TASK_DIABETES)]) == 0
    out = capsys.readouterr().out
    assert f"dataset {OML_IRIS} (iris-copy" in out and f"task {OML_TASK_DIABETES}" in out and "5 fold(s)" in out
    assert main(["datasets"]) == 0
    out = capsys.readouterr().out
    line = next(ln for ln in out.splitlines() if ln.startswith(f"openml-{OML_IRIS} "))
    assert " 150 " in line and " 4 " in line and "classification" in line  # iris: 150 x 4 (Fisher 1936)
    line = next(ln for ln in out.splitlines() if ln.startswith(f"openml-{OML_DIABETES} "))
    assert " 442 " in line and " 10 " in line and "regression" in line  # diabetes: 442 x 10
    assert f"openml-task-{OML_TASK_IRIS}" in out


def test_fetch_bad_reference_is_one_line(capsys):
    assert main(["datasets", "fetch", "iris"]) == 2
    assert "not an OpenML dataset id or NAME@VERSION" in capsys.readouterr().err
    assert main(["datasets", "fetch", "--task", "x1"]) == 2


def test_openml_cache_dir_environment_variable_is_respected(openml_cache, tmp_path):
    """A separate process configured only through OPENML_CACHE_DIR reads the test cache (openml reads the
    variable when imported)."""
    env = dict(os.environ, OPENML_CACHE_DIR=str(openml_cache), STOPWISE_CACHE=str(tmp_path / "c"))
    code = ("import stopwise; p = stopwise.load_problem(['dataset=openml', 'dataset.params.data_id=%d']); "
            "print(p.n_train + p.X_val.shape[0] + p.X_test.shape[0])" % OML_DIABETES)
    out = subprocess.run([sys.executable, "-c", code], env=env, capture_output=True, text=True, timeout=120)
    assert out.returncode == 0, out.stderr
    assert out.stdout.strip() == "442"


def test_a_run_on_an_openml_task(openml_cache, root):
    out = stopwise.run(["dataset=openml", f"dataset.params.task_id={OML_TASK_DIABETES}", "dataset.name=diab-task",
                        "split.kind=indices", "split.fold=1", "solver=cgls", "budget.iterations=5"], root=root)
    assert out.status == "completed"


def test_fetch_without_network_fails_with_one_line_per_id_and_keeps_the_cache(openml_cache, capsys):
    """Offline, `fetch` of an uncached id reaches openml's download code, which fails at once (sockets are
    disabled): one line naming the id, exit 1, and the datasets already cached are untouched."""
    before = sorted(str(p) for p in openml_cache.rglob("*") if "datasets/31" not in str(p))
    assert main(["datasets", "fetch", "31"]) == 1
    err = [ln for ln in capsys.readouterr().err.splitlines() if ln.startswith("stopwise:")]
    assert len(err) == 1 and "could not fetch OpenML dataset 31" in err[0]
    after = sorted(str(p) for p in openml_cache.rglob("*") if "datasets/31" not in str(p) and "stopwise.lock" not in str(p))
    assert after == [b for b in before if "stopwise.lock" not in b]
    assert (openml_cache / "org/openml/www/datasets" / str(OML_IRIS) / "description.xml").exists()

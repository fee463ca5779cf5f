"""A file dataset is named after its file; two files never share a name in a ranking.

The tables are slices of scikit-learn's bundled diabetes data (Efron et al. 2004), written
as CSV by the test.
"""
import pandas as pd
import pytest
from sklearn.datasets import load_diabetes

import stopwise
from stopwise.analysis.selection import DatasetNameClash
from stopwise.cli import main

COMMON = ["solver=gd", "budget.iterations=5", "dataset.params.target=target"]


def table(path, rows):
    d = load_diabetes(as_frame=True).frame.iloc[rows]
    path.parent.mkdir(parents=True, exist_ok=True)
    d.to_csv(path, index=False)
    return path


def test_two_files_are_two_datasets_named_after_their_stems(tmp_path, capsys):
    a, b = table(tmp_path / "clinic_a.csv", slice(0, 200)), table(tmp_path / "clinic_b.csv", slice(200, 420))
    root = tmp_path / "results"
    assert main(["sweep", "dataset=file", f"dataset.params.path={a},{b}", *COMMON, f"results_root={root}"]) == 0
    out = capsys.readouterr().out
    assert "on clinic_a" in out and "on clinic_b" in out and " on file" not in out
    sel = stopwise.select(root, "adhoc", rules=["holdout"])
    assert sorted(sel["dataset"].unique()) == ["clinic_a", "clinic_b"]
    runs = stopwise.load_runs(root)
    assert sorted(runs["dataset"]) == ["clinic_a", "clinic_b"]


def test_dataset_name_says_otherwise(tmp_path, capsys):
    a = table(tmp_path / "t.csv", slice(0, 150))
    root = tmp_path / "results"
    assert main(["sweep", "dataset=file", f"dataset.params.path={a}", "dataset.name=ward7", *COMMON,
                 f"results_root={root}"]) == 0
    assert list(stopwise.load_runs(root)["dataset"]) == ["ward7"]


def test_two_files_with_one_stem_in_one_sweep_are_refused_naming_both(tmp_path, capsys):
    a, b = table(tmp_path / "x" / "data.csv", slice(0, 150)), table(tmp_path / "y" / "data.csv", slice(150, 300))
    root = tmp_path / "results"
    assert main(["sweep", "dataset=file", f"dataset.params.path={a},{b}", *COMMON, f"results_root={root}"]) == 2
    err = capsys.readouterr().err.strip().splitlines()
    assert len(err) == 1 and str(a) in err[0] and str(b) in err[0] and "dataset.name" in err[0]
    assert not root.exists()


def test_a_ranking_over_runs_on_two_files_of_one_name_is_refused(tmp_path, capsys):
    """Each sweep alone is fine; read together (the whole root, through the API) they would be
    one dataset."""
    a, b = table(tmp_path / "x" / "data.csv", slice(0, 150)), table(tmp_path / "y" / "data.csv", slice(150, 300))
    root = tmp_path / "results"
    for p in (a, b):
        assert main(["sweep", "dataset=file", f"dataset.params.path={p}", *COMMON, f"results_root={root}"]) == 0
    with pytest.raises(DatasetNameClash, match="two files"):
        stopwise.select(root)
    with pytest.raises(DatasetNameClash) as e:
        stopwise.select(root)
    assert str(a) in str(e.value) and str(b) in str(e.value) and "\n" not in str(e.value)
    from stopwise.results.store import StoreError

    with pytest.raises(StoreError, match="'adhoc' is given to 2 different sweeps"):  # named, not the latest taken
        stopwise.select(root, "adhoc", rules=["holdout"])
    (latest, *_) = sorted(stopwise.results.store.Store(root).campaigns(), key=lambda c: -c["created"])
    assert len(stopwise.select(root, latest["campaign_id"], rules=["holdout"])) == 1  # one sweep alone: one file

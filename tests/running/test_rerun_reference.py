"""Rerunning runs whose hard-margin reference was computed by an earlier method.

The runs in ``tests/fixtures/results_before_redesign`` recorded ``svm_angle`` / ``svm_dist``
against SVC's solution (``svm_method`` without "polished"); today's reference is that
solution polished to the exact one, so those two columns move by up to the angle between
the two directions (triangle inequality on the sphere) and every other column reproduces
bit for bit. A changed number beyond that bound, or any change in a run stored with
today's method, is still reported.
"""
from __future__ import annotations

import math
import shutil
from pathlib import Path

import numpy as np
import pyarrow as pa
import pyarrow.parquet as pq

import stopwise
from stopwise.results.store import Store
from stopwise.running.rerun import rerun_one

EARLIER = Path(__file__).resolve().parents[1] / "fixtures" / "results_before_redesign"
IRIS_LOGISTIC = "11b68fbf5141621a"  # logistic gd on iris setosa vs versicolor


def _copy(tmp_path) -> Store:
    shutil.copytree(EARLIER, tmp_path / "results")
    return Store(tmp_path / "results")


def _bump(path: Path, column: str, delta: float) -> None:
    table = pq.read_table(path)
    values = table.column(column).to_pylist()
    values[-1] = values[-1] + delta
    pq.write_table(table.set_column(table.schema.get_field_index(column), column, pa.array(values)), path)


def test_earlier_reference_columns_agree_within_the_move(tmp_path):
    store = _copy(tmp_path)
    stored = store.run_meta(IRIS_LOGISTIC)["problem"]
    assert "polished" not in stored["svm_method"]
    c = rerun_one(store, IRIS_LOGISTIC)
    assert c.ok and c.max_diff == 0.0, c.problems
    (note,) = c.notes
    # the move named in the note is the angle between the stored direction and today's
    # reference of the same training rows
    p = stopwise.load_problem(["dataset=iris_setosa_versicolor"])
    u = np.array(stored["svm_w"]) / np.linalg.norm(stored["svm_w"])
    v = p.hard_margin.w / np.linalg.norm(p.hard_margin.w)
    angle = 2 * math.asin(np.linalg.norm(u - v) / 2)
    assert 1e-9 < angle < 1e-6 and f"direction moved {angle:.3g} rad" in note
    assert "svm_angle within it" in note and "svm_dist within it" in note


def test_a_reference_column_beyond_the_move_differs(tmp_path):
    store = _copy(tmp_path)
    _bump(store.run_path(IRIS_LOGISTIC), "svm_angle", 1e-6)
    c = rerun_one(store, IRIS_LOGISTIC)
    assert not c.ok and any("svm_angle" in p and "exceeds the reference's move" in p for p in c.problems)


def test_a_run_with_todays_reference_reproduces_bit_for_bit(root):
    out = stopwise.run(["dataset=iris_setosa_versicolor", "solver=gd", "budget.iterations=20"], root=root)
    store = Store(root)
    c = rerun_one(store, out.run_id)
    assert c.ok and c.max_diff == 0.0 and not c.notes
    _bump(store.run_path(out.run_id), "svm_dist", 1e-13)
    c = rerun_one(store, out.run_id)
    assert not c.ok and any(p.startswith("svm_dist: largest difference") for p in c.problems)

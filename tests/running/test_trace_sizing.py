"""A trace is sized from what its budget can reach, grows when it must, and a budget whose
trace cannot fit in memory is bad input (one line, exit 2, nothing written).

The bound (stopwise.config.spec.trace_rows_bound) rests on one fact about every solver:
a step costs at least one per-sample gradient, 1 / n_train data passes. The generated
test below runs every registered solver under a pass budget and checks its rows against
the bound, so a solver that broke the fact would fail here, not overflow a machine.
"""
import subprocess
import sys

import numpy as np
import pandas as pd
import pytest

import stopwise
from stopwise.config.compose import spec_from_overrides
from stopwise.config.spec import ROW_BYTES, TraceTooLarge, check_trace_fits, memory_bytes, trace_rows_bound
from stopwise.running import runner
from stopwise.solvers import SOLVERS

HUGE = "budget.iterations=100000000000"  # 1e11 iterations: 745 GiB per column if preallocated


def cli(*args, cwd):
    return subprocess.run([sys.executable, "-m", "stopwise.cli", *args], capture_output=True, text=True, cwd=cwd)


def test_a_pass_budget_bounds_the_trace_of_a_huge_iteration_cap(tmp_path):
    # gd does one data pass per step: with budget.passes=1 it stops after one step,
    # whatever the iteration cap; nothing near 1e11 rows is allocated
    res = cli("run", "dataset=diabetes", "solver=gd", HUGE, "budget.passes=1", f"results_root={tmp_path / 'r'}",
              cwd=tmp_path)
    assert res.returncode == 0, res.stderr[-2000:]
    (path,) = (tmp_path / "r" / "runs").glob("*.parquet")
    df = pd.read_parquet(path)
    assert df["iteration"].tolist() == [0, 1] and df["passes"].tolist() == [0.0, 1.0]


@pytest.mark.parametrize("command", ["run", "sweep"])
def test_a_trace_that_cannot_fit_in_memory_is_one_line_exit_2_and_writes_nothing(tmp_path, command):
    extra = ["seed=0,1"] if command == "sweep" else []
    res = cli(command, "dataset=diabetes", "solver=gd", HUGE, *extra, f"results_root={tmp_path / 'r'}", cwd=tmp_path)
    lines = res.stderr.strip().splitlines()
    assert res.returncode == 2, res.stderr[-2000:]
    assert len(lines) == 1 and "can record 100000000002 rows" in lines[0] and "memory" in lines[0], lines
    assert "record.every" in lines[0] and "budget.passes" in lines[0]  # the ways out are named
    assert list(tmp_path.iterdir()) == []  # no results root, no Hydra output folder


def test_the_check_with_the_training_rows_known_refuses_only_what_cannot_fit():
    mem = memory_bytes()
    rows_that_fit = mem // 2 // ROW_BYTES - 2
    check_trace_fits({"iterations": rows_that_fit, "passes": None}, {"every": 1})
    with pytest.raises(TraceTooLarge):
        check_trace_fits({"iterations": rows_that_fit + 1, "passes": None}, {"every": 1})
    # a pass budget turns into a step bound once n_train is known
    check_trace_fits({"iterations": 10**15, "passes": 3.0}, {"every": 1}, n_train=1000)
    with pytest.raises(TraceTooLarge):
        check_trace_fits({"iterations": 10**15, "passes": float(mem)}, {"every": 1}, n_train=1000)


def test_the_recorder_grows_past_its_first_allocation_and_keeps_every_row(monkeypatch):
    spec = spec_from_overrides(["dataset=illposed", "solver=gd", "budget.iterations=300"])
    whole = runner.execute(spec).columns
    monkeypatch.setattr(runner, "INITIAL_ROWS", 7)  # force several doublings
    grown = runner.execute(spec).columns
    assert len(grown["iteration"]) == 301 == len(whole["iteration"])
    for c in whole:
        if c != "seconds":
            np.testing.assert_array_equal(grown[c], whole[c], err_msg=c)


DATASET_FOR = {"regression": "illposed", "binary": "breast_cancer", "multiclass": "wine"}


@pytest.mark.parametrize("name", sorted(SOLVERS))
def test_every_solver_records_within_the_bound_under_a_pass_budget(name):
    task = SOLVERS[name].tasks[0]
    # solvers that declare what they need of the training rows (a positive definite Hessian) get well-posed rows
    dataset = "wellposed" if SOLVERS[name].check is not None else DATASET_FOR[task]
    over = [f"dataset={dataset}", f"solver={name}", "budget.iterations=1000000", "budget.passes=3"]
    if "batch" in {f for f in SOLVERS[name].params.__dataclass_fields__}:
        over.append("solver.batch=1")  # the cheapest step a solver can take: 1 / n_train passes
    spec = spec_from_overrides(over)
    problem = stopwise.load_problem(over)
    cols = runner.execute(spec, problem).columns
    bound = trace_rows_bound(spec.budget, spec.record, problem.n_train)
    assert 2 <= len(cols["iteration"]) <= bound, (len(cols["iteration"]), bound)
    steps = np.diff(cols["passes"]) / np.maximum(np.diff(cols["iteration"]), 1)
    assert np.all(steps >= 1 / problem.n_train - 1e-12)  # the fact the bound rests on

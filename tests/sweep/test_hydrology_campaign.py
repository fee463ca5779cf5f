"""campaigns/hydrology.yaml: the new solvers in one campaign of our own scenario, and the
README's commands for it (sweep, then the kernel ridge baseline and the ranking)."""
from __future__ import annotations

import io
from contextlib import redirect_stderr, redirect_stdout
from pathlib import Path

import pytest

import stopwise
from stopwise.cli import main
from stopwise.sweep.campaign import expand

README = (Path(__file__).resolve().parents[2] / "README.md").read_text().splitlines()


def readme_args(needle: str) -> list[str]:
    (line,) = [x for x in README if needle in x]
    return line.split("#")[0].split()[1:]  # drop ".venv/bin/stopwise"


def cli(*args):
    out, err = io.StringIO(), io.StringIO()
    with redirect_stdout(out), redirect_stderr(err):
        code = main(list(args))
    return code, out.getvalue(), err.getvalue()


def test_the_campaign_expands_to_its_documented_runs(tmp_path):
    exp = expand("hydrology", [f"results_root={tmp_path}"])
    assert len(exp.specs) == 24  # the count its header states
    by = {}
    for s in exp.specs:
        by.setdefault(s.dataset["name"], set()).add(s.solver)
    assert by == {"wellposed": {"gd", "nesterov", "nesterov_strong", "heavy_ball_optimal", "kaczmarz"},
                  "integral_green": {"gd", "nu_method", "cgls", "kaczmarz"},
                  "diabetes": {"kernel_gd", "gd"}}
    assert all(s.budget["passes"] == 20 for s in exp.specs if s.solver == "kaczmarz")


@pytest.mark.slow
def test_the_readme_commands_run_the_campaign_and_rank_kernel_gd_against_kernel_ridge(tmp_path, monkeypatch):
    monkeypatch.chdir(tmp_path)
    root = str(tmp_path / "res")
    code, out, err = cli(*readme_args("sweep hydrology"), f"results_root={root}")
    assert code == 0, err
    assert "24 completed" in out
    code, out, err = cli(*readme_args("baselines hydrology --method kernel_ridge"), "--root", root)
    assert code == 0, err
    assert "kernel_ridge" in out and "6 baseline paths" in out
    r = stopwise.rank_campaign(root, "hydrology", "holdout", baselines="stored")
    explicit = set(r.table.loc[r.table.kind == "explicit", "method"])
    assert explicit == {"kernel_ridge"}
    assert {"nesterov_strong", "heavy_ball_optimal", "nu_method", "kaczmarz", "kernel_gd"} <= set(r.table["method"])
    runs = stopwise.load_runs(root, campaign="hydrology")
    assert set(runs["status"]) == {"completed"}

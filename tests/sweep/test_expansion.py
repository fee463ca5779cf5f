"""What a researcher's first sweeps need: solver-specific keys that collapse for the solvers
without them, solver x dataset pairs that cannot run left out (or refused with --strict),
campaign files from any path or ./campaigns, sub-sweeps, one name for the minibatch size,
chunked launch with exact progress, and resume that runs only what is missing."""
from __future__ import annotations

import json
import re
from pathlib import Path

import pytest

import stopwise
from stopwise.cli import main
from stopwise.config.compose import spec_from_overrides

from helpers.sweep import assert_same_traces

PROGRESS = re.compile(r"^\[\s*(\d+)/(\d+)\] (completed|diverged|failed)\s.*?([0-9a-f]{16})(  ~.*left)?$")
QUICK = ["budget.iterations=15"]


def files_under(path: Path) -> list[str]:
    return sorted(str(p.relative_to(path)) for p in path.rglob("*")) if path.exists() else []


def sweep(capsys, *args) -> tuple[int, str, str]:
    code = main(["sweep", *args])
    cap = capsys.readouterr()
    return code, cap.out, cap.err


def test_a_solver_specific_key_applies_where_it_exists_and_collapses_elsewhere(tmp_path, capsys):
    root = tmp_path / "res"
    code, out, err = sweep(capsys, "dataset=diabetes", "solver=gd,nesterov,sgd", "solver.batch=0.05,0.2",
                           *QUICK, f"results_root={root}")
    assert code == 0, err
    assert "6 jobs, 4 distinct runs" in out
    assert "note: solver.batch does not apply to gd, nesterov: collapsed for them" in out
    runs = stopwise.load_runs(root)
    assert sorted(runs["solver"]) == ["gd", "nesterov", "sgd", "sgd"]
    assert sorted(runs[runs["solver"] == "sgd"]["batch"]) == [0.05, 0.2]
    # a collapsed run is the run without the key: same id
    gd = spec_from_overrides(["dataset=diabetes", "solver=gd", *QUICK]).run_id
    assert gd in set(runs["run_id"])


@pytest.mark.parametrize("argv,needle", [
    (["solver=gd,nesterov", "solver.batch=0.2"], "solver.batch is not a parameter of any solver of this sweep "
                                                 "(gd, nesterov); valid:"),
    (["solver=gd", "solver.batch=0.2"], "solver.batch is not a parameter of solver (gd); valid:"),
    (["solver=relu_net", "dataset=iris_setosa_versicolor", "solver.batch_size=4"],
     "solver.batch_size is now solver.batch"),
    (["solver=gd,cgls", "dataset=diabetes,breast_cancer", "--strict"],
     "solver 'cgls' does not handle binary problems such as dataset 'breast_cancer'"),
    (["solver=cgls", "dataset=breast_cancer"], "no job of this sweep can run: cgls x breast_cancer (binary)"),
    (["--chunk", "0", "solver=gd"], "--chunk '0' is invalid"),
    (["my/none.yaml"], "campaign file 'my/none.yaml' does not exist"),
])
def test_keys_and_pairs_that_cannot_apply_are_one_line_exit_2_and_write_nothing(tmp_path, capsys, monkeypatch,
                                                                                argv, needle):
    monkeypatch.chdir(tmp_path)
    code, out, err = sweep(capsys, *argv, *QUICK, f"results_root={tmp_path / 'res'}")
    assert code == 2 and needle in err and err.count("\n") == 1, err
    assert files_under(tmp_path) == []


@pytest.mark.parametrize("text,needle", [
    ("# @package _global_\nfoo: 1\n", "bad.yaml: foo: Key 'foo' not in 'StopwiseConfig'"),
    ("solver:\n  step_scale: fast\n", "bad.yaml: solver.step_scale: Value 'fast' of type 'str' could not be converted"),
    ("budget:\n  iterations: [\n", "bad.yaml' is not valid YAML"),
    ("sweeps: 3\n", "sweeps must be a list of key: values mappings"),
])
def test_a_bad_campaign_file_is_one_line_naming_the_file(tmp_path, capsys, monkeypatch, text, needle):
    monkeypatch.chdir(tmp_path)
    (tmp_path / "bad.yaml").write_text(text)
    code, out, err = sweep(capsys, "bad.yaml", f"results_root={tmp_path / 'res'}")
    assert code == 2 and needle in err and err.count("\n") == 1, err
    assert files_under(tmp_path) == ["bad.yaml"]


def test_the_former_name_is_refused_by_stopwise_run_too(capsys):
    assert main(["run", "solver=relu_net", "dataset=iris_setosa_versicolor", "solver.batch_size=4"]) == 2
    err = capsys.readouterr().err
    assert "solver.batch_size is now solver.batch" in err and err.count("\n") == 1


def test_a_pair_that_cannot_run_is_left_out_with_one_line(tmp_path, capsys):
    root = tmp_path / "res"
    code, out, err = sweep(capsys, "solver=gd,cgls", "dataset=diabetes,breast_cancer", *QUICK, f"results_root={root}")
    assert code == 0, err
    notes = [line for line in out.splitlines() if line.startswith("note:")]
    assert notes == ["note: left out 1 solver x dataset pair that cannot run: cgls x breast_cancer (binary); "
                     "--strict makes this an error"]
    assert "3 jobs, 3 distinct runs" in out
    manifest = json.loads(next((root / "campaigns").glob("*.json")).read_text())
    assert manifest["notes"] == [n[len("note: "):] for n in notes]


def test_a_campaign_file_from_any_path_with_sub_sweeps(tmp_path, capsys, monkeypatch):
    """One grid per solver family (a union of sub-sweeps), common keys beside them; the
    manifest keeps the file's text."""
    monkeypatch.chdir(tmp_path)
    f = tmp_path / "my" / "trial.yaml"
    f.parent.mkdir()
    f.write_text("# @package _global_\n# two families, two grids\nbudget:\n  iterations: 15\n"
                 "hydra:\n  sweeper:\n    params:\n      dataset: diabetes\n      seed: 0,1\n"
                 "sweeps:\n  - solver: gd,nesterov\n    solver.step_scale: 0.5,1.0\n"
                 "  - solver: sgd\n    solver.batch: 0.1\n")
    root = tmp_path / "res"
    code, out, err = sweep(capsys, "my/trial.yaml", f"results_root={root}")
    assert code == 0, err
    assert "campaign trial (" in out and "10 jobs, 10 distinct runs" in out
    runs = stopwise.load_runs(root, campaign="trial")
    assert sorted(runs["solver"].value_counts().items()) == [("gd", 4), ("nesterov", 4), ("sgd", 2)]
    assert set(runs["iterations"]) == {15}
    manifest = json.loads(next((root / "campaigns").glob("*.json")).read_text())
    assert manifest["definition"]["campaign_file"] == f.read_text()
    assert len(manifest["definition"]["sub_sweeps"]) == 2


def test_a_campaigns_folder_in_the_working_directory_comes_first(tmp_path, capsys, monkeypatch):
    monkeypatch.chdir(tmp_path)
    (tmp_path / "campaigns").mkdir()
    (tmp_path / "campaigns" / "demo.yaml").write_text(
        "# @package _global_\nbudget:\n  iterations: 12\nhydra:\n  sweeper:\n    params:\n      solver: gd,cgls\n")
    root = tmp_path / "res"
    code, out, err = sweep(capsys, "demo", f"results_root={root}")
    assert code == 0, err
    assert "campaign demo (" in out and "2 jobs, 2 distinct runs" in out
    assert set(stopwise.load_runs(root)["iterations"]) == {12}


def test_chunks_give_the_same_runs_and_traces_and_progress_counts_each_run_once(tmp_path, capsys):
    """--chunk 2 cuts 5 pending runs into 3 launcher jobs; ids and traces equal one chunk's;
    each distinct run prints one progress line, the counts are exactly 1..5 of 5, and every
    line but the last carries a time-left estimate."""
    args = ["dataset=wellposed", "solver=gd,nesterov,cgls", "solver.step_scale=0.5,1.0", *QUICK]
    one, chunked = tmp_path / "one", tmp_path / "chunked"
    code, out1, err = sweep(capsys, *args, f"results_root={one}")
    assert code == 0, err
    code, out, err = sweep(capsys, *args, "--chunk", "2", f"results_root={chunked}")
    assert code == 0, err
    assert "6 jobs, 5 distinct runs" in out and "5 runs in 3 chunks" in out
    assert_same_traces(one, chunked)
    lines = [PROGRESS.match(line) for line in out.splitlines() if line.startswith("[")]
    assert all(lines) and sorted(int(m.group(1)) for m in lines) == [1, 2, 3, 4, 5]
    assert {m.group(2) for m in lines} == {"5"}
    assert sorted(m.group(4) for m in lines) == sorted(stopwise.load_runs(chunked)["run_id"])
    assert [bool(m.group(5)) for m in lines] == [True] * 4 + [False]
    cid = json.loads(next((chunked / "campaigns").glob("*.json")).read_text())["campaign_id"]
    assert sorted(p.name for p in (chunked / "jobs" / cid / "chunks").glob("*.json")) == ["0.json", "1.json", "2.json"]


def test_the_time_left_follows_the_runs_pace_not_the_workers_start_up(tmp_path, capsys):
    """A launch whose worker took an hour to start (the count's start set an hour back)
    still estimates the time left from the runs' own pace: from the moment the first
    finished run began. Measured from the launch's start, the first line would say about
    three hours for the three runs left."""
    import time

    from stopwise.results.store import Store
    from stopwise.sweep.campaign import expand
    from stopwise.sweep.chunks import jobs_dir, run_chunk, write_plan

    exp = expand(None, ["dataset=wellposed", "solver=gd", "seed=0,1,2,3", *QUICK, f"results_root={tmp_path}"])
    store = Store(tmp_path)
    cid = exp.manifest["campaign_id"]
    write_plan(store, cid, list(exp.specs), 1, total=4, done_before=0)
    count = jobs_dir(store, cid) / "progress.json"
    state = json.loads(count.read_text())
    state["start"] = time.time() - 3600
    count.write_text(json.dumps(state))
    t0 = time.time()
    assert run_chunk(str(tmp_path), cid, 0) == {"completed": 4}
    took = time.time() - t0
    lines = [PROGRESS.match(line) for line in capsys.readouterr().out.splitlines()]
    assert all(lines) and [int(m.group(1)) for m in lines] == [1, 2, 3, 4]
    left = re.match(r"  ~(?:(\d+)m)?(\d+)s left", lines[0].group(5))
    assert left, lines[0].group(5)
    assert int(left.group(1) or 0) * 60 + int(left.group(2)) <= 3 * took + 1
    assert json.loads(count.read_text())["origin"] >= t0


def test_resume_runs_only_what_is_missing_or_failed(tmp_path, capsys):
    root = tmp_path / "res"
    args = ["dataset=wellposed", "solver=gd", "seed=0,1,2", *QUICK, f"results_root={root}"]
    assert sweep(capsys, *args)[0] == 0
    runs = sorted((root / "runs").glob("*.parquet"))
    runs[0].unlink()  # a lost trace
    code, out, err = sweep(capsys, *args)
    assert code == 0, err
    lines = [line for line in out.splitlines() if line.startswith("[")]
    assert len(lines) == 1 and lines[0].startswith("[3/3]") and runs[0].stem in lines[0]
    assert "1 runs in 1 chunk" in out
    code, out, err = sweep(capsys, *args)
    assert "3 completed; every run already stored" in out
    assert not [line for line in out.splitlines() if line.startswith("[")]


def test_the_readme_sweep_with_collapse_and_pairs_runs_as_documented(tmp_path, capsys):
    """The README's line, as written there (budget aside, to keep the test short)."""
    readme = (Path(__file__).resolve().parents[2] / "README.md").read_text().splitlines()
    (line,) = [x for x in readme if "solver.batch=0.05,0.2 dataset=diabetes,breast_cancer" in x]
    args = line.split("#")[0].split()[2:]  # drop ".venv/bin/stopwise sweep"
    code, out, err = sweep(capsys, *args, "budget.iterations=20", f"results_root={tmp_path / 'res'}")
    assert code == 0, err
    assert "note: solver.batch does not apply to gd, nesterov: collapsed for them" in out
    assert "left out 1 solver x dataset pair that cannot run: " not in out  # gd, nesterov, sgd all take binary
    assert "12 jobs, 8 distinct runs" in out, out


def test_the_final_count_and_a_resume_open_no_trace_the_chunks_stored(tmp_path, capsys, monkeypatch):
    """Each chunk leaves the status of every trace it stored with the file's stamp (size,
    modification time, inode); the end-of-sweep count and the next sweep's "already stored?"
    check take them from the status index instead of opening the traces."""
    from stopwise.results.store import Store

    root = tmp_path / "res"
    args = ["dataset=wellposed", "solver=gd,nesterov", "seed=0,1,2", *QUICK, f"results_root={root}"]
    opened: list[str] = []
    real = Store.read_meta
    monkeypatch.setattr(Store, "read_meta", lambda self, path: opened.append(Path(path).name) or real(self, path))
    code, out, err = sweep(capsys, *args, "--chunk", "2")
    assert code == 0 and "6 completed" in out.splitlines()[-1], out + err
    assert opened == []  # counted from the chunks' stamps
    index = json.loads((root / "index" / "status.json").read_text())
    for p in (root / "runs").glob("*.parquet"):
        st = p.stat()
        assert index[p.stem] == [st.st_size, st.st_mtime_ns, st.st_ino, "completed"]
    code, out, err = sweep(capsys, *args)
    assert "every run already stored" in out and opened == []
    # a trace replaced since its stamp was taken is read again, not trusted
    victim = sorted((root / "runs").glob("*.parquet"))[0]
    victim.write_bytes(victim.read_bytes())  # same bytes, new modification time
    assert Store(root).statuses([victim.stem]) == {victim.stem: "completed"} and opened == [victim.name]

"""Sweeps on Hydra's real launchers: submitit's local executor and joblib (real processes).

The reference is the same campaign run sequentially by Hydra's basic launcher in this
process; every launcher must store the same run ids with bit-identical per-iterate columns
(``seconds`` aside, which is wall-clock time).
"""
from __future__ import annotations

import json
import re
import sys
from pathlib import Path

import pyarrow.parquet as pq
import pytest
from omegaconf import OmegaConf

import stopwise
from stopwise.cli import cores, main
from stopwise.config.spec import compose
from stopwise.config.compose import spec_from_overrides

from helpers.sweep import assert_same_traces, cli

SWEEP = ["sweep", "dataset=wellposed,illposed", "solver=gd,cgls", "budget.iterations=40"]
PROGRESS = re.compile(r"^\[\s*(\d+)/(\d+)\] (completed|diverged|failed|skipped \(done\))\s")


@pytest.fixture(scope="module")
def sequential(tmp_path_factory):
    root = tmp_path_factory.mktemp("sequential") / "res"
    assert main([*SWEEP, f"results_root={root}"]) == 0
    assert len(list((root / "runs").glob("*.parquet"))) == 4
    return root


def _campaign(root):
    (manifest,) = (Path(root) / "campaigns").glob("*.json")
    return json.loads(manifest.read_text())


def test_submitit_local_executor_matches_a_sequential_sweep(sequential, tmp_path, monkeypatch, capsys):
    monkeypatch.chdir(tmp_path)
    root = tmp_path / "res"
    code = main([*SWEEP, f"results_root={root}", "hydra/launcher=submitit_local", "hydra.launcher.timeout_min=10",
                 "--chunk", "1"])
    out = capsys.readouterr().out
    assert code == 0, out
    assert "4 completed" in out and "4 runs in 4 chunks" in out
    assert_same_traces(sequential, root)
    # each chunk of one run ran in its own process and wrote its progress line to submitit's log
    cid = _campaign(root)["campaign_id"]
    logs = sorted((root / "jobs" / cid / ".submitit").glob("*/*_log.out"))
    assert len(logs) == 4
    lines = [m for p in logs for m in map(PROGRESS.match, p.read_text().splitlines()) if m]
    assert len(lines) == 4
    assert all(m.group(2) == "4" and 1 <= int(m.group(1)) <= 4 for m in lines)
    assert max(int(m.group(1)) for m in lines) == 4  # the last one to finish saw all four stored


@pytest.mark.slow
def test_submitit_local_rerun_submits_nothing_when_every_run_is_stored(sequential, tmp_path, monkeypatch, capsys):
    monkeypatch.chdir(tmp_path)
    root = tmp_path / "res"
    args = [*SWEEP, f"results_root={root}", "hydra/launcher=submitit_local"]
    assert main(args) == 0
    cid = _campaign(root)["campaign_id"]
    logs = set((root / "jobs" / cid / ".submitit").glob("*/*_log.out"))
    assert main(args) == 0
    out = capsys.readouterr().out
    assert "4 completed" in out and "every run already stored" in out
    # nothing is submitted when every run is stored: resume costs one listing of the store
    assert set((root / "jobs" / cid / ".submitit").glob("*/*_log.out")) == logs
    assert_same_traces(sequential, root)


def test_jobs_flag_uses_joblib_with_workers_times_threads_within_cores(sequential, tmp_path):
    root = tmp_path / "res"
    res = cli(*SWEEP, "--jobs", "2", f"results_root={root}", cwd=tmp_path)
    assert res.returncode == 0, res.stderr
    threads = max(1, cores() // 2)
    assert f"2 workers x {threads} BLAS thread" in res.stdout
    printed = int(re.search(r"2 workers x (\d+) BLAS thread", res.stdout).group(1))
    assert 2 * printed <= cores() or printed == 1  # what the sweep chose, not the test's own number
    assert_same_traces(sequential, root)
    # progress lines: one per job, counted from the store, totals consistent
    lines = [m for m in map(PROGRESS.match, res.stdout.splitlines()) if m]
    assert len(lines) == 4 and {m.group(2) for m in lines} == {"4"}
    assert sorted(int(m.group(1)) for m in lines)[-1] == 4
    assert "4 completed" in res.stdout.splitlines()[-1]
    # the thread limit was in force while each run executed, and is recorded in its metadata
    for run in stopwise.load_runs(root)["run_id"]:
        meta = json.loads(pq.read_schema(root / "runs" / f"{run}.parquet").metadata[b"stopwise"])
        assert meta["threads"], meta["threads"]
        assert set(meta["threads"].values()) == {threads}


@pytest.mark.parametrize("launcher", [
    [], ["--jobs", "2"], pytest.param(["hydra/launcher=submitit_local"], marks=pytest.mark.slow)],
    ids=["basic", "joblib", "submitit_local"])
def test_a_failing_run_is_recorded_the_sweep_goes_on_and_exits_1(tmp_path, launcher):
    """A run that cannot get its memory (the address space is capped, a real fault) is stored
    as ``failed`` with the error; the other runs finish on every launcher; the exit code is 1
    with a count. Hydra would end a multirun at the first job that raised, so the task must
    catch it."""
    root = tmp_path / "res"
    script = (
        "import re, resource, sys\n"
        "import numpy, scipy.linalg, pyarrow.parquet, hydra\n"
        "from stopwise.cli import main\n"
        "vm = int(re.search(r'VmSize:\\s+(\\d+) kB', open('/proc/self/status').read()).group(1)) * 1024\n"
        "resource.setrlimit(resource.RLIMIT_AS, (vm + 2**30, vm + 2**30))\n"
        "sys.exit(main(sys.argv[1:]))\n"
    )
    import subprocess

    # a network of 10^8 hidden units needs 24 GB for its first weights: MemoryError at init
    args = ["sweep", "dataset=breast_cancer", "solver=relu_net", "seed=0,1", "solver.width=8,100000000",
            "budget.iterations=40", f"results_root={root}", *launcher]
    res = subprocess.run([sys.executable, "-c", script, *args], capture_output=True, text=True, cwd=tmp_path,
                         timeout=300)
    assert res.returncode == 1, res.stdout + res.stderr
    assert "2 completed, 2 failed" in res.stdout
    assert "2 runs did not finish" in res.stderr and res.stderr.count("\n") == 1, res.stderr
    runs = stopwise.load_runs(root)
    failed = runs[runs["status"] == "failed"]
    assert len(failed) == 2 and failed["message"].str.contains("allocate|MemoryError").all()
    assert set(runs[runs["status"] == "completed"]["iterations"]) == {40}


def test_a_run_whose_trace_cannot_be_stored_is_counted_and_the_sweep_goes_on(tmp_path, monkeypatch, capsys):
    monkeypatch.chdir(tmp_path)
    root = tmp_path / "res"
    blocked = spec_from_overrides(["dataset=wellposed", "solver=gd", "seed=1", "budget.iterations=20"]).run_id
    (root / "runs" / f"{blocked}.parquet").mkdir(parents=True)  # a folder where the file must go
    code = main(["sweep", "dataset=wellposed", "solver=gd", "seed=0,1,2", "budget.iterations=20",
                 f"results_root={root}"])
    captured = capsys.readouterr()
    assert code == 1
    assert "could not store the trace" in captured.err and blocked in captured.err
    assert "2 completed, 1 missing" in captured.out
    assert "1 runs did not finish" in captured.err
    with pytest.warns(UserWarning, match=f"skipping unreadable trace .*{blocked}"):
        assert len(stopwise.load_runs(root)) == 2


def test_slurm_launcher_config_renders_a_valid_sbatch_array(tmp_path):
    """conf/hydra/launcher/slurm.yaml composes onto submitit's SLURM launcher, every key is
    one submitit's SLURM executor accepts, and the array job it describes is throttled."""
    from hydra.utils import instantiate
    from hydra_plugins.hydra_submitit_launcher.config import BaseQueueConf
    from hydra_plugins.hydra_submitit_launcher.submitit_launcher import SlurmLauncher
    from submitit.slurm import slurm

    cfg = compose(["hydra/launcher=slurm", "campaign_id=0123456789abcdef", f"results_root={tmp_path}"],
                  return_hydra_config=True)
    launcher = instantiate(cfg.hydra.launcher)
    assert isinstance(launcher, SlurmLauncher)
    params = OmegaConf.to_container(OmegaConf.create(launcher.params), resolve=True)
    base = set(OmegaConf.structured(BaseQueueConf).keys())
    # the same split the launcher makes: generic keys are renamed, the rest are SLURM's own
    generic = {slurm.SlurmExecutor._equivalence_dict().get(k, k): v for k, v in params.items()
               if k in base and k != "submitit_folder"}
    own = {k: v for k, v in params.items() if k not in base and k != "max_num_timeout"}
    valid = set(slurm._get_default_parameters())
    assert set(generic) | set(own) <= valid, (set(generic) | set(own)) - valid
    generic["mem"] = slurm._convert_mem(generic["mem"])
    text = slurm._make_sbatch_string(command="python -m submitit.core._submit", folder=str(tmp_path),
                                     map_count=100, **{**generic, **own})
    assert "#SBATCH --array=0-99%64" in text
    assert "#SBATCH --time=60" in text
    assert "#SBATCH --cpus-per-task=1" in text
    assert "#SBATCH --job-name=stopwise-0123456789abcdef" in text
    assert params["max_num_timeout"] == 1
    assert str(tmp_path) in params["submitit_folder"]  # beside the campaign's job folder

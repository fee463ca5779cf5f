"""Campaigns on a real SLURM scheduler through `hydra/launcher=slurm` (the real `stopwise`
command in a subprocess; its jobs run under slurmd).

`.ci/run` starts a single-node SLURM on the CI machine with `scripts/start-slurm.sh`; where
no scheduler answers (`sinfo` missing or not answering, no usable node) every test here is
skipped with the reason. The results roots are under pytest's tmp_path, which slurmd sees
since it runs on the same machine. The checks are on what a user sees: the command's output
and exit code, `stopwise ls`, the stored run files and the campaign manifest.
"""
from __future__ import annotations

import json
import re
import signal
import subprocess
import time
from collections import Counter
from pathlib import Path

import pytest

from helpers.sweep import assert_same_traces, cli, popen, scheduler_missing

QUICK = ["sweep", "dataset=diabetes", "solver=gd,nesterov", "seed=0,1", "budget.iterations=50"]
SLURM = ["hydra/launcher=slurm", "hydra.launcher.timeout_min=10"]
HEADER = re.compile(r"^campaign (\S+) \(([0-9a-f]{16})\): ")
# the submitting process's own lines: a header, a summary; submitit's log format has a time stamp
STAMP = re.compile(r"\(\d{4}-\d\d-\d\d \d\d:\d\d:\d\d,\d+\)|Call #\d+ - ")


@pytest.fixture
def slurm():
    why = scheduler_missing()
    if why:
        pytest.skip(why)


def _campaign_id(stdout: str) -> str:
    m = next((m for m in map(HEADER.match, stdout.splitlines()) if m), None)
    assert m, stdout
    return m.group(2)


def _manifest(root: Path, cid: str) -> dict:
    return json.loads((root / "campaigns" / f"{cid}.json").read_text())


def _stored(root: Path) -> list[str]:
    return sorted(p.stem for p in (root / "runs").glob("*.parquet"))


def _controller_states(job_name: str) -> list[str]:
    res = subprocess.run(["squeue", "--noheader", "--all", "--array", "--states=all", f"--name={job_name}",
                          "--format=%T"], capture_output=True, text=True, timeout=60)
    assert res.returncode == 0, res.stderr
    return res.stdout.split()


def _wait_until_no_job_left(job_name: str, limit_s: float = 600) -> None:
    """Until the controller lists no pending or running job of that name (bounded)."""
    end = time.monotonic() + limit_s
    while set(_controller_states(job_name)) & {"PENDING", "RUNNING", "COMPLETING", "REQUEUED", "CONFIGURING"}:
        assert time.monotonic() < end, f"jobs {job_name} still queued after {limit_s} s"
        time.sleep(1)


def _ls(root: Path, cid: str) -> str:
    res = cli("ls", "--campaign", cid, "--root", str(root))
    assert res.returncode == 0, res.stderr
    return res.stdout


@pytest.fixture(scope="module")
def sequential(tmp_path_factory):
    """The reference: the same sweep run one after another by Hydra's basic launcher."""
    root = tmp_path_factory.mktemp("sequential") / "res"
    res = cli(*QUICK, f"results_root={root}", cwd=root.parent)
    assert res.returncode == 0, res.stdout + res.stderr
    return root


@pytest.fixture(scope="module")
def on_slurm(tmp_path_factory):
    """The same sweep through `hydra/launcher=slurm`, and the controller's view of its jobs
    once they have ended."""
    if scheduler_missing():
        pytest.skip(scheduler_missing())
    root = tmp_path_factory.mktemp("slurm") / "res"
    res = cli(*QUICK, *SLURM, f"results_root={root}", cwd=root.parent, timeout=900)
    states = []
    if res.stdout:
        # a task may still be exiting when its result is read: wait (bounded) until the
        # controller lists it as ended, then read how it ended
        name = f"stopwise-{_campaign_id(res.stdout)}"
        _wait_until_no_job_left(name, limit_s=120)
        states = _controller_states(name)
    return root, res, states


def test_a_slurm_campaign_stores_the_same_runs_and_traces_as_a_sequential_sweep(slurm, on_slurm, sequential):
    root, res, states = on_slurm
    assert res.returncode == 0, res.stdout + res.stderr
    cid = _campaign_id(res.stdout)
    assert f"campaign adhoc ({cid}): 4 completed" in res.stdout.splitlines()[-1]
    # the jobs were SLURM's: the controller still lists them, ended
    assert states and set(states) == {"COMPLETED"}, states
    # same run ids (files and manifest) and, `seconds` aside, the same traces bit for bit
    assert_same_traces(sequential, root)
    ref = _manifest(sequential, cid)
    assert _manifest(root, cid)["run_ids"] == ref["run_ids"]
    assert _stored(root) == sorted(ref["run_ids"])
    assert "4 runs: 4 completed" in _ls(root, cid)


def test_the_schedulers_repeated_messages_are_shown_once(slurm, on_slurm):
    root, res, _ = on_slurm
    assert res.returncode == 0, res.stdout + res.stderr
    lines = [STAMP.sub("", line).strip() for line in (res.stdout + "\n" + res.stderr).splitlines()]
    repeated = {line: n for line, n in Counter(filter(None, lines)).items() if n > 1}
    assert not repeated, repeated
    # on a scheduler without an accounting store, every queue poll (sacct) complains: the
    # complaint is shown, once
    probe = subprocess.run(["sacct", "--noheader", "-j", "1"], capture_output=True, text=True, timeout=60)
    if "accounting storage is disabled" in probe.stderr + probe.stdout:
        assert sum("accounting storage is disabled" in line for line in lines) == 1, res.stderr
        assert sum("Bypassing sacct error" in line for line in lines) == 1, res.stdout + res.stderr


def test_the_same_command_after_the_submitter_was_killed_completes_every_run_once(slurm, tmp_path):
    """The submitting process is killed (SIGKILL) once the first trace of its campaign is
    stored, with the rest still queued or running; the same command typed again completes
    the campaign: every run of the manifest stored once, no temporary file left, one manifest,
    the traces those of a sequential sweep. One run per array task (``--chunk 1``): a single
    task would store its eight runs of milliseconds each before the kill could land."""
    args = ["sweep", "dataset=diabetes", "solver=gd,nesterov", "seed=0,1,2,3", "budget.iterations=50",
            *SLURM, f"results_root={tmp_path / 'res'}", "--chunk", "1"]
    root = tmp_path / "res"
    first = popen(*args, cwd=tmp_path)
    try:
        end = time.monotonic() + 600
        while not _stored(root):
            assert first.poll() is None, "the sweep ended before any trace was observed"
            assert time.monotonic() < end, "no trace stored within 600 s"
            time.sleep(0.2)
        assert first.poll() is None, "the sweep ended before it could be killed"
        first.send_signal(signal.SIGKILL)
        out, _ = first.communicate(timeout=60)
    finally:
        if first.poll() is None:
            first.kill()
            first.communicate()
    cid = _campaign_id(out)
    manifest = _manifest(root, cid)
    assert len(manifest["run_ids"]) == 8
    assert len(_stored(root)) < 8, "the campaign was over before the kill"

    again = cli(*args, cwd=tmp_path, timeout=900)
    assert again.returncode == 0, again.stdout + again.stderr
    assert f"campaign adhoc ({cid}): 8 completed" in again.stdout.splitlines()[-1]
    _wait_until_no_job_left(f"stopwise-{cid}")  # the killed submitter's array tasks too
    assert _stored(root) == sorted(manifest["run_ids"])
    assert not [p.name for p in (root / "runs").iterdir() if p.name.startswith(".")]
    assert [p.stem for p in (root / "campaigns").glob("*.json")] == [cid]
    assert _manifest(root, cid)["run_ids"] == manifest["run_ids"]
    assert "8 runs: 8 completed" in _ls(root, cid)
    seq8 = tmp_path / "seq"
    ref = cli(*args[:5], f"results_root={seq8}", cwd=tmp_path)
    assert ref.returncode == 0, ref.stderr
    assert_same_traces(seq8, root)


@pytest.mark.slow
def test_a_run_past_its_time_limit_is_reported_unfinished_and_a_longer_limit_finishes_it(slurm, tmp_path):
    """Three runs, the last of about two minutes (5 million gradient steps) under a one-minute
    time limit: SLURM stops it (submitit requeues it once, and it is stopped again); the two
    quick runs are stored, the slow one is not completed, in the sweep's summary, its exit code
    and `stopwise ls`. The same command with a ten-minute limit finishes it and skips the
    others."""
    root = tmp_path / "res"
    base = ["sweep", "dataset=diabetes", "solver=gd", "budget.iterations=50,100,5000000", "record.every=1000000",
            "hydra/launcher=slurm", f"results_root={root}"]
    first = cli(*base, "hydra.launcher.timeout_min=1", cwd=tmp_path, timeout=1200)
    assert first.returncode == 1, first.stdout + first.stderr
    cid = _campaign_id(first.stdout)
    ids = _manifest(root, cid)["run_ids"]
    assert len(ids) == 3
    summary = first.stdout.splitlines()[-1]
    assert summary.startswith(f"campaign adhoc ({cid}): 2 completed"), summary
    assert "did not finish" in first.stderr
    listed = _ls(root, cid)
    assert "2 completed" in listed and "3 completed" not in listed, listed
    rows = {line.split()[0]: line for line in listed.splitlines() if line.split() and line.split()[0] in ids}
    assert " completed " in rows[ids[0]] and " completed " in rows[ids[1]], listed
    assert ids[2] not in rows or " completed " not in rows[ids[2]], listed
    _wait_until_no_job_left(f"stopwise-{cid}")

    second = cli(*base, "hydra.launcher.timeout_min=10", cwd=tmp_path, timeout=1200)
    assert second.returncode == 0, second.stdout + second.stderr
    assert f"campaign adhoc ({cid}): 3 completed" in second.stdout.splitlines()[-1]
    assert _stored(root) == sorted(ids)
    listed = _ls(root, cid)
    assert "3 runs: 3 completed" in listed
    slow = next(line for line in listed.splitlines() if line.startswith(ids[2]))
    assert " 5000000 " in slow, slow

"""Faults with real processes: a sweep killed with SIGKILL and resumed, two sweeps of the same
campaign at once, and a writer killed in the middle of writing a file."""
from __future__ import annotations

import json
import os
import signal
import subprocess
import sys
import time
from pathlib import Path

import pyarrow.parquet as pq
import pytest

import stopwise
from stopwise.cli import main
from stopwise.results.store import Store
from stopwise.results.verify import TEMP_GRACE_SECONDS, check_trace, verify_root

from helpers.sweep import assert_same_traces, cli, popen

# 6 runs; how long each takes does not matter (the kill test holds the sweep at its last run)
SWEEP = ["sweep", "dataset=illposed", "solver=gd,nesterov", "seed=0,1,2", "budget.iterations=300"]


@pytest.fixture(scope="module")
def uninterrupted(tmp_path_factory):
    root = tmp_path_factory.mktemp("uninterrupted") / "res"
    assert main([*SWEEP, f"results_root={root}"]) == 0
    assert len(list((root / "runs").glob("*.parquet"))) == 6
    return root


def visible_traces(root: Path) -> list[Path]:
    d = root / "runs"
    return sorted(p for p in d.glob("*.parquet") if p.is_file()) if d.is_dir() else []


def hold_last_run(root: Path) -> tuple[Path, int]:
    """A FIFO under the final name of the sweep's last run (in the order the sweep expands
    its jobs): the sweep's "is this run done?" check opens it for reading, and opening a
    FIFO for reading blocks until a writer opens it, which nobody does. So the sweep can
    store every other run but never finish: "fewer than all" holds at any moment, however
    fast the runs are. Returns the FIFO and the number of distinct runs."""
    from stopwise.sweep.campaign import expand

    exp = expand(None, [*SWEEP[1:], f"results_root={root}"])
    fifo = Store(root).run_path(exp.run_ids[-1])
    fifo.parent.mkdir(parents=True)
    os.mkfifo(fifo)
    return fifo, len(exp.run_ids)


def test_sigkill_mid_sweep_then_the_same_command_finishes_it(uninterrupted, tmp_path):
    """The sweep is killed once the test has seen at least 2 of its 6 traces stored (whole);
    it cannot have stored all 6, because its last run is held (`hold_last_run`)."""
    root = tmp_path / "res"
    fifo, n_runs = hold_last_run(root)
    assert n_runs == 6
    proc = popen(*SWEEP, f"results_root={root}", cwd=tmp_path)
    seen_whole = set()
    deadline = time.monotonic() + 240
    try:
        while proc.poll() is None and len(seen_whole) < 2 and time.monotonic() < deadline:
            for p in visible_traces(root):
                if p not in seen_whole:
                    pq.read_table(p)  # every visible file reads back whole, at any moment
                    seen_whole.add(p)
            time.sleep(0.01)
    finally:
        ended = proc.poll()
        proc.kill()
        out, err = proc.communicate(timeout=60)
    assert ended is None, f"the sweep ended (exit {ended}) before storing 2 runs: {err[-2000:]}"
    assert len(seen_whole) >= 2, f"the sweep stored {len(seen_whole)} runs in 240 s (expected 2 of 6)"
    assert proc.returncode == -signal.SIGKILL
    fifo.unlink()  # the test's own hold, not a run
    survivors = visible_traces(root)
    assert 2 <= len(survivors) < 6 and fifo.name not in {p.name for p in survivors}
    store = Store(root)
    for p in survivors:
        assert check_trace(p, store) == "", p
    kept = {p.name: (p.stat().st_ino, p.stat().st_mtime_ns) for p in survivors}
    # the campaign's manifest was written before the first run, so resume knows every run id
    (manifest,) = (root / "campaigns").glob("*.json")
    assert len(json.loads(manifest.read_text())["run_ids"]) == 6

    res = cli(*SWEEP, f"results_root={root}", cwd=tmp_path)
    assert res.returncode == 0, res.stderr
    # only the runs the kill left unfinished ran again, each printed once
    ran = [l for l in res.stdout.splitlines() if l.startswith("[")]
    assert len(ran) == 6 - len(survivors) and f"{6 - len(survivors)} runs in 1 chunk" in res.stdout, res.stdout
    assert "6 completed" in res.stdout.splitlines()[-1]
    # finished runs were kept as they were (same file, never rewritten)
    assert {p.name: (p.stat().st_ino, p.stat().st_mtime_ns) for p in survivors} == kept
    assert_same_traces(uninterrupted, root)
    # a write cut by the kill can only have left a hidden temporary file, which no reader lists
    for t in store.temporary_files():
        assert t.name.startswith(".") and t.name.endswith(".tmp")
    assert len(stopwise.load_runs(root)) == 6


def test_two_sweeps_of_one_campaign_at_once(uninterrupted, tmp_path):
    root = tmp_path / "res"
    a = popen(*SWEEP, f"results_root={root}", cwd=tmp_path)
    b = popen(*SWEEP, f"results_root={root}", cwd=tmp_path)
    out_a, err_a = a.communicate(timeout=300)
    out_b, err_b = b.communicate(timeout=300)
    assert a.returncode == 0, err_a
    assert b.returncode == 0, err_b
    assert "6 completed" in out_a and "6 completed" in out_b
    names = os.listdir(root / "runs")
    assert len(names) == 6 and all(n.endswith(".parquet") and not n.startswith(".") for n in names)
    assert len(os.listdir(root / "campaigns")) == 1
    rep = verify_root(root)
    assert rep.ok and rep.traces == 6 and rep.manifests == 1, rep
    runs = stopwise.load_runs(root)
    assert len(runs) == 6 and runs["run_id"].is_unique
    assert_same_traces(uninterrupted, root)


WRITER = """
import sys, time
from pathlib import Path
from stopwise.results.store import _atomic_write

def write(fh):
    fh.write(b"PAR1" + b"\\0" * 4096)   # the first bytes of a Parquet file, never finished
    fh.flush()
    print("writing", flush=True)
    time.sleep(120)

_atomic_write(Path(sys.argv[1]), write)
"""


def test_a_writer_killed_mid_write_leaves_only_a_hidden_temporary_file(tmp_path, capsys):
    root = tmp_path / "res"
    stopwise.run(["dataset=wellposed", "solver=gd", "budget.iterations=5"], root=root)
    target = root / "runs" / ("ab" * 8 + ".parquet")
    proc = subprocess.Popen([sys.executable, "-c", WRITER, str(target)], stdout=subprocess.PIPE, text=True)
    assert proc.stdout.readline().strip() == "writing"
    proc.send_signal(signal.SIGKILL)
    proc.wait(timeout=30)
    store = Store(root)
    (tmp,) = store.temporary_files()
    assert tmp.parent == target.parent and tmp.name.startswith("." + target.name) and not target.exists()
    # readers never see it
    assert [p.name for p in store.run_files()] == [p.name for p in visible_traces(root)]
    assert len(stopwise.load_traces(root)) == 6 and len(stopwise.load_runs(root)) == 1
    # verify: fresh temporary files may belong to a write in progress and are left alone ...
    assert main(["verify", str(root), "--quarantine"]) == 0
    out = capsys.readouterr().out
    assert "write may be in progress" in out and tmp.exists()
    # ... stale ones are reported and quarantined
    old = time.time() - TEMP_GRACE_SECONDS - 60
    os.utime(tmp, (old, old))
    assert main(["verify", str(root)]) == 1
    assert f"temp  {tmp}" in capsys.readouterr().out
    assert main(["verify", str(root), "--quarantine"]) == 1
    out = capsys.readouterr().out
    assert not tmp.exists() and (root / "quarantine" / "runs" / tmp.name.lstrip(".")).exists()
    assert f"moved runs/{tmp.name} -> quarantine/runs/{tmp.name.lstrip('.')}" in out
    assert main(["verify", str(root)]) == 0
    assert "all good" in capsys.readouterr().out


@pytest.mark.slow
def test_workers_of_a_killed_sweep_stop_at_their_next_run_and_exit(tmp_path):
    """SIGKILL to the sweep alone (not its workers): each joblib worker finishes the run it
    holds, sees that the sweep which launched it is gone, leaves the rest of its chunk to the
    next sweep and exits; the same command then completes the campaign, every run once."""
    root = tmp_path / "res"
    # 24 runs in 4 chunks of 6 (two per worker), each run long enough to be caught mid-chunk
    sweep = ["sweep", "dataset=illposed", "solver=gd,nesterov", "seed=range(0,12)", "budget.iterations=1500",
             "--jobs", "2", f"results_root={root}"]
    log = (tmp_path / "stderr.txt").open("w")
    proc = subprocess.Popen([sys.executable, "-m", "stopwise.cli", *sweep], cwd=tmp_path,
                            stdout=subprocess.DEVNULL, stderr=log, start_new_session=True)
    try:
        deadline = time.monotonic() + 240
        while len(visible_traces(root)) < 2 and proc.poll() is None and time.monotonic() < deadline:
            time.sleep(0.01)
        assert proc.poll() is None, "the sweep ended before the test could kill it"
        workers = [int(c) for t in Path(f"/proc/{proc.pid}/task").glob("*")
                   for c in (t / "children").read_text().split()]
        os.kill(proc.pid, signal.SIGKILL)
        proc.wait()
        at_kill = len(visible_traces(root))
        deadline = time.monotonic() + 60
        alive = lambda pid: Path(f"/proc/{pid}").exists() and "zombie" not in Path(f"/proc/{pid}/status").read_text()  # noqa: E731
        workers = [w for w in workers if "resource_tracker" not in Path(f"/proc/{w}/cmdline").read_text()
                   ] if workers else []
        while any(alive(w) for w in workers) and time.monotonic() < deadline:
            time.sleep(0.05)
        assert not any(alive(w) for w in workers), "a worker of the killed sweep is still running"
    finally:
        os.killpg(proc.pid, signal.SIGKILL) if proc.poll() is None else None
        log.close()
    after = len(visible_traces(root))
    assert after - at_kill <= 2, (at_kill, after)  # at most the run each worker held
    assert after < 24
    assert "runs left for the next sweep" in (tmp_path / "stderr.txt").read_text()
    res = cli(*sweep, cwd=tmp_path)
    assert res.returncode == 0, res.stderr
    assert len(visible_traces(root)) == 24 and len(stopwise.load_runs(root)) == 24
    assert verify_root(root, cache=False).ok

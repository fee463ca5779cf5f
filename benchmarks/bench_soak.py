"""Soak: a campaign of short runs with `--jobs 2`, killed with SIGKILL again and again until
it completes; nothing may be lost, duplicated or seen half written.

The same campaign is first swept once without interruption (the peer). Then the same
`stopwise sweep ... --jobs 2` command is started in a fresh process; every few seconds
(uniform between --every-min and --every-max, counted from the moment the start has its
workers, or from its start for one kill in five, which then hits the campaign's expansion)
either the parent (the process the user started) or one of its joblib workers, chosen at
random, is killed with SIGKILL, and the
command is started again, until one start exits 0. A killed parent's workers are left
alone, as they would be on a real machine: each finishes the run it is in, stops before its
next one (docs/reliability.md section 4) and exits; at the end, any still alive (found by the
session each start was given) are counted and killed. While this goes on, a watcher reads every trace that appears under its final name
in full (a partial file visible to a reader would fail to decode).

At the end, against the campaign's manifest:
- runs lost: manifest ids with no stored trace; runs duplicated: stored traces beyond one
  per id, and files under `runs/` that are no run id;
- partial files seen by the watcher, and `stopwise verify`'s exit status;
- traces equal to the uninterrupted sweep's, bit for bit with NaN equal to NaN (the
  `seconds` column aside); both sweeps use `--jobs 2`, so one BLAS thread per run.

    .venv/bin/python benchmarks/bench_soak.py               # 2,000 runs (~3-6 min on 2 cores)
    .venv/bin/python benchmarks/bench_soak.py --runs 400    # a quick look
"""
from __future__ import annotations

import argparse
import json
import os
import random
import signal
import subprocess
import sys
import tempfile
import threading
import time
from pathlib import Path

sys.path.insert(0, str(Path(__file__).parent))
from _common import machine  # noqa: E402


def campaign(runs: int) -> list[str]:
    seeds = max(1, runs // 4)
    return ["dataset=diabetes", "solver=gd,nesterov", "solver.step_scale=0.5,1.0", f"seed=range(0,{seeds})",
            "budget.iterations=100", "--jobs", "2"]


def command(root: Path, runs: int) -> list[str]:
    return [sys.executable, "-m", "stopwise.cli", "sweep", *campaign(runs), f"results_root={root}"]


def children(pid: int) -> list[int]:
    """Processes whose parent is ``pid`` (from /proc), the joblib workers among them."""
    out = []
    for task in Path(f"/proc/{pid}/task").glob("*"):
        try:
            out += [int(c) for c in (task / "children").read_text().split()]
        except OSError:
            pass
    return out


def workers(pid: int) -> list[int]:
    found = []
    for c in children(pid):
        try:
            cmd = Path(f"/proc/{c}/cmdline").read_bytes().replace(b"\0", b" ")
        except OSError:
            continue
        if b"resource_tracker" not in cmd and b"semaphore_tracker" not in cmd:
            found.append(c)
    return found


class Watcher(threading.Thread):
    """Reads every trace that appears under its final name, in full, as soon as it is seen."""

    def __init__(self, runs_dir: Path):
        super().__init__(daemon=True)
        self.runs_dir, self.seen, self.partial, self.stop = runs_dir, {}, [], threading.Event()

    def run(self) -> None:
        import pyarrow.parquet as pq

        while not self.stop.is_set():
            try:
                names = [p for p in self.runs_dir.glob("*.parquet")]
            except OSError:
                names = []
            for p in names:
                try:
                    key = (p.name, p.stat().st_ino)
                except OSError:
                    continue
                if key in self.seen:
                    continue
                try:
                    self.seen[key] = pq.read_table(p).num_rows
                except Exception as exc:  # noqa: BLE001 - any failure to decode is a partial file
                    self.partial.append(f"{p.name}: {type(exc).__name__}: {exc}")
                    self.seen[key] = -1
            time.sleep(0.1)


def in_sessions(sessions: set[int]) -> set[int]:
    """Pids of the processes now alive in one of ``sessions`` (from /proc). Every start of
    the command gets a session of its own, so this finds the joblib workers and resource
    trackers of killed parents, and no process this script did not start."""
    out = set()
    for d in Path("/proc").glob("[0-9]*"):
        try:
            stat = (d / "stat").read_text()
        except OSError:
            continue
        fields = stat[stat.rindex(")") + 2:].split()
        if len(fields) > 3 and int(fields[3]) in sessions:  # field 6 of proc(5): the session id
            out.add(int(d.name))
    return out


def same_traces(a: Path, b: Path) -> tuple[int, list[str]]:
    import pyarrow.parquet as pq

    fa = {p.name: p for p in (a / "runs").glob("*.parquet")}
    fb = {p.name: p for p in (b / "runs").glob("*.parquet")}
    differ = sorted(set(fa) ^ set(fb))
    equal = 0
    for name in sorted(set(fa) & set(fb)):
        ta, tb = pq.read_table(fa[name]).drop(["seconds"]), pq.read_table(fb[name]).drop(["seconds"])
        if ta.to_pandas().equals(tb.to_pandas()):
            equal += 1
        else:
            differ.append(name)
    return equal, differ


def main() -> None:
    ap = argparse.ArgumentParser()
    ap.add_argument("--runs", type=int, default=2000, help="runs of the campaign (default 2000)")
    ap.add_argument("--every-min", type=float, default=3.0, help="shortest time between kills, s (default 3)")
    ap.add_argument("--every-max", type=float, default=8.0, help="longest time between kills, s (default 8)")
    ap.add_argument("--max-kills", type=int, default=40, help="after this many kills, let the command finish")
    ap.add_argument("--seed", type=int, default=0, help="seed of the kill schedule")
    a = ap.parse_args()
    rng = random.Random(a.seed)
    print(machine())
    tmp = Path(tempfile.mkdtemp(prefix="stopwise-bench-soak-"))
    ref, soak = tmp / "uninterrupted", tmp / "soak"
    env = {**os.environ, "PYTHONWARNINGS": "ignore"}

    t0 = time.perf_counter()
    res = subprocess.run(command(ref, a.runs), capture_output=True, text=True, cwd=tmp, env=env)
    if res.returncode != 0:
        raise SystemExit(f"the uninterrupted sweep failed:\n{res.stderr[-3000:]}")
    ref_wall = time.perf_counter() - t0
    print(f"\npeer: the uninterrupted sweep of {a.runs} runs with --jobs 2: {ref_wall:.1f} s")

    sessions: set[int] = set()
    (soak / "runs").mkdir(parents=True)
    watcher = Watcher(soak / "runs")
    watcher.start()
    kills = {"parent": 0, "worker": 0}
    starts, t0 = 0, time.perf_counter()
    while True:
        starts += 1
        proc = subprocess.Popen(command(soak, a.runs), cwd=tmp, env=env, stdout=subprocess.DEVNULL,
                                stderr=subprocess.PIPE, text=True, start_new_session=True)
        sessions.add(proc.pid)
        if sum(kills.values()) >= a.max_kills:
            _, err = proc.communicate()
            if proc.returncode != 0:
                raise SystemExit(f"the last start failed (exit {proc.returncode}):\n{err[-3000:]}")
            break
        # the clock of a kill starts once the start has workers (its expansion of the campaign
        # can outlast the kill interval on a busy machine); one kill in five hits the expansion
        if rng.random() >= 0.2:
            while proc.poll() is None and not workers(proc.pid):
                time.sleep(0.05)
        try:
            proc.wait(timeout=rng.uniform(a.every_min, a.every_max))
        except subprocess.TimeoutExpired:
            pass
        if proc.returncode == 0:
            break
        if proc.returncode is not None:  # a start that failed on its own (after an earlier kill)
            err = proc.stderr.read()
            print(f"   start {starts} exited {proc.returncode} on its own: {err.strip().splitlines()[-1:]}")
            continue
        pool = workers(proc.pid)
        if pool and rng.random() < 0.5:
            os.kill(rng.choice(pool), signal.SIGKILL)
            kills["worker"] += 1
            killed = "a worker"
            try:  # the parent notices its worker's death and exits; give it time, then make sure
                proc.wait(timeout=20)
            except subprocess.TimeoutExpired:
                proc.kill()
                proc.wait()
        else:
            proc.kill()
            proc.wait()
            kills["parent"] += 1
            killed = "the parent"
        proc.stderr.close()
        stored = len(list((soak / "runs").glob("*.parquet")))
        print(f"   start {starts}: killed {killed}; "
              f"{stored} traces stored so far", flush=True)
    soak_wall = time.perf_counter() - t0
    time.sleep(1.0)  # let workers orphaned by the last parent kill finish or exit
    watcher.stop.set()
    watcher.join()
    orphans = in_sessions(sessions)  # workers of killed parents that never exited
    for pid in orphans:
        try:
            os.kill(pid, signal.SIGKILL)
        except OSError:
            pass

    (manifest,) = (soak / "campaigns").glob("*.json")
    ids = set(json.loads(manifest.read_text())["run_ids"])
    files = [p for p in (soak / "runs").iterdir() if not p.name.startswith(".")]
    names = [p.name.removesuffix(".parquet") for p in files]
    lost = sorted(ids - set(names))
    duplicated = len(names) - len(set(names)) + len([n for n in names if n not in ids])
    ver = subprocess.run([sys.executable, "-m", "stopwise.cli", "verify", str(soak)],
                         capture_output=True, text=True, cwd=tmp, env=env)
    equal, differ = same_traces(ref, soak)
    leftovers = len([p for p in (soak / "runs").iterdir() if p.name.startswith(".")])
    print(f"\nsoak of {len(ids)} runs with --jobs 2: {starts} starts, {kills['parent']} parents and "
          f"{kills['worker']} workers killed with SIGKILL, {soak_wall:.1f} s until a start completed "
          f"({soak_wall / ref_wall:.1f}x the uninterrupted sweep)")
    print(f"   runs lost: {len(lost)}; runs duplicated: {duplicated}; partial files seen by a reader: "
          f"{len(watcher.partial)} (of {len(watcher.seen)} traces read as they appeared)")
    print(f"   stopwise verify: exit {ver.returncode} ({((ver.stdout + ver.stderr).strip().splitlines() or [''])[-1]}); "
          f"hidden temporary files left by killed writers: {leftovers}")
    print(f"   traces equal to the uninterrupted sweep's: {equal} of {len(ids)}")
    print(f"   joblib processes of killed parents still alive at the end (then killed): {len(orphans)}")
    for line in watcher.partial[:5]:
        print(f"   partial: {line}")
    bad = lost or duplicated or watcher.partial or ver.returncode != 0 or equal != len(ids) or differ
    if bad:
        raise SystemExit(f"soak FAILED: lost {lost[:5]}, differ {differ[:5]}, verify:\n"
                         f"{(ver.stdout + ver.stderr)[-2000:]}")


if __name__ == "__main__":
    main()

"""Helpers shared by the launcher and fault tests (not a test module)."""
from __future__ import annotations

import functools
import json
import os
import shutil
import subprocess
import sys
from pathlib import Path

import pandas as pd
import pyarrow.parquet as pq

REPO = Path(__file__).resolve().parents[2]


def traces(root) -> dict[str, pd.DataFrame]:
    """Every stored trace under ``root`` by run id, without the wall-clock column."""
    out = {}
    for p in sorted((Path(root) / "runs").glob("*.parquet")):
        out[p.stem] = pq.read_table(p).to_pandas().drop(columns=["seconds"])
    return out


def identities(root) -> dict[str, tuple]:
    out = {}
    for p in sorted((Path(root) / "runs").glob("*.parquet")):
        meta = json.loads(pq.read_schema(p).metadata[b"stopwise"])
        out[p.stem] = (meta["digest"], json.dumps(meta["identity"], sort_keys=True), meta["status"])
    return out


def assert_same_traces(a, b) -> None:
    """Same run ids, same per-iterate values (bit for bit, `seconds` aside), same identities."""
    ta, tb = traces(a), traces(b)
    assert sorted(ta) == sorted(tb), (sorted(ta), sorted(tb))
    for rid in ta:
        pd.testing.assert_frame_equal(ta[rid], tb[rid], check_exact=True, obj=rid)
    assert identities(a) == identities(b)


def cli(*args: str, **kw) -> subprocess.CompletedProcess:
    """The real command in a fresh interpreter."""
    env = dict(os.environ, PYTHONUNBUFFERED="1")
    return subprocess.run([sys.executable, "-m", "stopwise.cli", *args], capture_output=True, text=True,
                          env=env, timeout=kw.pop("timeout", 300), **kw)


def popen(*args: str, **kw) -> subprocess.Popen:
    env = dict(os.environ, PYTHONUNBUFFERED="1")
    return subprocess.Popen([sys.executable, "-m", "stopwise.cli", *args], stdout=subprocess.PIPE,
                            stderr=subprocess.PIPE, text=True, env=env, **kw)


@functools.lru_cache(maxsize=None)
def scheduler_missing() -> str:
    """Why no SLURM scheduler can run jobs here ('' when one can)."""
    if shutil.which("sinfo") is None or shutil.which("sbatch") is None:
        return ("no SLURM scheduler here: sinfo/sbatch are not on PATH "
                "(scripts/start-slurm.sh starts a single-node one, as root)")
    try:
        res = subprocess.run(["sinfo", "--noheader", "--format=%T"], capture_output=True, text=True, timeout=20)
    except subprocess.TimeoutExpired:
        return "no SLURM scheduler answers: sinfo did not answer within 20 s"
    if res.returncode != 0:
        why = (res.stderr.strip().splitlines() or [f"exit {res.returncode}"])[0]
        return f"no SLURM scheduler answers: sinfo: {why}"
    states = set(res.stdout.split())
    if not states & {"idle", "mixed", "allocated", "completing"}:
        return f"SLURM answers but no node can run jobs (node states: {', '.join(sorted(states)) or 'none'})"
    return ""

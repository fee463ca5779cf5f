"""Run identity, bad input through the real command, sweeps, reruns and tampering."""
import json
import os
import signal
import subprocess
import sys

import numpy as np
import pandas as pd
import pyarrow as pa
import pyarrow.parquet as pq
import pytest

import stopwise
from stopwise.cli import main
from stopwise.config.spec import spec_from_config
from stopwise.config.compose import spec_from_overrides
from stopwise.results.store import Store
from stopwise.running.runner import run_spec


def files_under(path):
    return sorted(str(p.relative_to(path)) for p in path.rglob("*")) if path.exists() else []


def test_run_id_is_stable_under_key_order_and_number_spelling():
    a = spec_from_overrides(["solver=heavy_ball", "solver.momentum=0.5", "solver.step_scale=1"])
    b = spec_from_overrides(["solver.step_scale=1.0", "solver=heavy_ball", "solver.momentum=5e-1"])
    assert a.run_id == b.run_id
    cfg = a.to_dict()
    shuffled = {k: cfg[k] for k in reversed(list(cfg))}
    shuffled["solver"] = dict(reversed(list({**a.identity()["solver"]["params"], "name": a.solver}.items())))
    assert spec_from_config(shuffled).digest == a.digest


@pytest.mark.parametrize("change", [
    "seed=1", "solver.step_scale=0.9", "solver.momentum=0.6", "budget.iterations=501", "record.every=2",
    "split.test=0.3", "split.kind=tail", "dataset=wellposed", "dataset.params.loader=diabetes solver=gd",
    "dataset.standardize=false", "budget.passes=100", "stopping=discrepancy stopping.halt=true",
])
def test_run_id_changes_with_every_identity_field(change):
    base = ["solver=heavy_ball"]
    a = spec_from_overrides(base)
    b = spec_from_overrides(base + change.split())
    if change == "dataset.params.loader=diabetes solver=gd":
        b = spec_from_overrides(["solver=gd"])
    assert a.run_id != b.run_id


def test_run_id_ignores_names_roots_and_post_hoc_rules():
    a = spec_from_overrides(["solver=gd"])
    assert spec_from_overrides(["solver=gd", "results_root=elsewhere", "campaign_id=abc"]).run_id == a.run_id
    assert spec_from_overrides(["solver=gd", "stopping=holdout", "stopping.params.patience=3"]).run_id == a.run_id
    # CGLS has no step size: the common key is accepted and ignored
    assert (spec_from_overrides(["solver=cgls", "solver.step_scale=0.5"]).run_id
            == spec_from_overrides(["solver=cgls"]).run_id)


@pytest.mark.parametrize("argv,needle", [
    (["run", "solver=newton"], "unknown solver 'newton'; valid: " + ", ".join(sorted(stopwise.SOLVERS))),
    (["run", "dataset=mnist9"], "unknown dataset 'mnist9'; valid:"),
    (["run", "solver.step_scale=0"], "solver.step_scale=0.0 is invalid"),
    (["run", "solver.step_scale=-2"], "must be a number in (0, inf)"),
    (["run", "solver.step_scale=fast"], "solver.step_scale=fast is invalid"),
    (["run", "budget.iterations=0"], "budget.iterations=0 is invalid"),
    (["run", "budget.passes=-1"], "budget.passes=-1.0 is invalid"),
    (["run", "split.test=0.7", "split.val=0.3"], "leaves no training rows"),
    (["run", "dataset.features=[height]"], "no feature 'height'"),
    (["sweep", "solver=gd,newton"], "unknown solver 'newton'"),
    (["sweep", "solver.step_scale=0.5,-1"], "is invalid"),
    (["sweep", "no_such_campaign"], "unknown campaign 'no_such_campaign'; valid: benchmark_suite, classical, demo, hydrology, margins, stochastic"),
    (["sweep", "../etc/passwd"], "campaign name '../etc/passwd' is invalid"),
    (["rerun", "0123456789abcdef"], "no run or campaign"),
    (["frobnicate"], "unknown command 'frobnicate'"),
])
def test_bad_input_is_one_line_exit_2_and_writes_nothing(tmp_path, capsys, monkeypatch, argv, needle):
    monkeypatch.chdir(tmp_path)
    root = tmp_path / "res"
    extra = [f"results_root={root}"] if argv[0] in ("run", "sweep") else []
    extra = ["--root", str(root)] if argv[0] == "rerun" else extra
    code = main(argv + extra)
    err = capsys.readouterr().err
    assert code == 2
    assert needle in err and err.count("\n") == 1, err
    assert files_under(tmp_path) == []


def test_sweep_resume_ls_and_campaign_rerun(tmp_path, capsys, monkeypatch):
    monkeypatch.chdir(tmp_path)
    root = tmp_path / "res"
    args = ["sweep", "dataset=wellposed,illposed", "solver=gd,cgls", "solver.step_scale=0.5,1.0",
            "budget.iterations=30", f"results_root={root}"]
    assert main(args) == 0
    out = capsys.readouterr().out
    # 2 datasets x (2 gd step scales + 1 cgls) = 6 distinct runs from 8 jobs
    assert "8 jobs, 6 distinct runs" in out and "6 completed" in out
    assert len(list((root / "runs").glob("*.parquet"))) == 6
    manifests = list((root / "campaigns").glob("*.json"))
    assert len(manifests) == 1
    man = json.loads(manifests[0].read_text())
    assert len(man["run_ids"]) == 6 and man["name"] == "adhoc"
    mtimes = {p: p.stat().st_mtime_ns for p in (root / "runs").glob("*.parquet")}
    assert main(args) == 0
    assert "6 completed; every run already stored" in capsys.readouterr().out
    assert {p: p.stat().st_mtime_ns for p in (root / "runs").glob("*.parquet")} == mtimes
    assert main(["ls", "--root", str(root), "--campaign", man["campaign_id"]]) == 0
    listing = capsys.readouterr().out
    assert "6 runs: 6 completed" in listing and "cgls" in listing
    assert main(["rerun", man["campaign_id"][:8], "--root", str(root)]) == 0
    assert "reproduced 6 runs" in capsys.readouterr().out
    runs = stopwise.load_runs(root, campaign=man["campaign_id"])
    assert len(runs) == 6 and set(runs["status"]) == {"completed"}
    gd = stopwise.load_traces(root, solver="gd", dataset="illposed", columns=["iteration", "step_scale"])
    assert set(gd["step_scale"]) == {0.5, 1.0} and len(gd) == 2 * 31


def test_rerun_is_bit_for_bit_and_detects_tampering(tmp_path, capsys):
    root = tmp_path / "res"
    out = stopwise.run(["dataset=diabetes", "solver=nesterov", "budget.iterations=50"], root=root)
    assert main(["rerun", out.run_id, "--root", str(root)]) == 0
    assert "largest difference 0" in capsys.readouterr().out
    table = pq.read_table(out.path)
    col = table.column("test_error").to_numpy().copy()
    col[17] *= 1 + 1e-12
    tampered = table.set_column(table.schema.get_field_index("test_error"), "test_error", pa.array(col))
    pq.write_table(tampered.replace_schema_metadata(table.schema.metadata), out.path)
    assert main(["rerun", out.run_id, "--root", str(root)]) == 1
    text = capsys.readouterr()
    assert "DIFFERS" in text.out and "test_error" in text.out


def test_rerun_refuses_a_config_that_does_not_hash_to_its_id(tmp_path, capsys):
    root = tmp_path / "res"
    out = stopwise.run(["dataset=diabetes", "solver=gd", "budget.iterations=10"], root=root)
    table = pq.read_table(out.path)
    meta = json.loads(table.schema.metadata[b"stopwise"])
    meta["identity"]["solver"]["params"]["step_scale"] = 0.5
    pq.write_table(table.replace_schema_metadata({b"stopwise": json.dumps(meta).encode()}), out.path)
    assert main(["rerun", out.run_id, "--root", str(root)]) == 1
    assert "does not hash to its run id" in capsys.readouterr().out


# A child process computes a run, then limits the size of any file it writes
# (RLIMIT_FSIZE, a real kernel limit) to fewer bytes than the trace has, and stores the
# trace through the store's real write path (runner.save -> Store.write_run ->
# core.files.atomic_write). With SIGXFSZ at its default action the kernel kills the
# process the moment the file reaches the limit, mid-write; with SIGXFSZ ignored (Python's
# default) the write fails with EFBIG and the exception unwinds through atomic_write.
CUT_WRITER = """
import resource, signal, sys
from stopwise.config.compose import spec_from_overrides
from stopwise.results.store import Store
from stopwise.running.runner import execute, save

root, limit, mode = sys.argv[1], int(sys.argv[2]), sys.argv[3]
spec = spec_from_overrides(sys.argv[4:])
trace = execute(spec)                      # nothing is written before the limit is set
resource.setrlimit(resource.RLIMIT_CORE, (0, 0))
resource.setrlimit(resource.RLIMIT_FSIZE, (limit, resource.RLIM_INFINITY))
signal.signal(signal.SIGXFSZ, signal.SIG_DFL if mode == "kill" else signal.SIG_IGN)
save(spec, trace, Store(root))
"""

ATOMIC_RUN = ["dataset=wellposed", "solver=gd", "budget.iterations=50"]


def cut_write(tmp_path, root, limit, mode):
    env = dict(os.environ, STOPWISE_CACHE="off", PYTHONDONTWRITEBYTECODE="1")
    return subprocess.run([sys.executable, "-c", CUT_WRITER, str(root), str(limit), mode, *ATOMIC_RUN],
                          capture_output=True, text=True, env=env, cwd=tmp_path, timeout=120)


def trace_frame(path):
    return pq.read_table(path).to_pandas().drop(columns=["seconds"])


def test_writes_are_atomic_a_write_cut_mid_file_leaves_no_partial_trace(tmp_path):
    spec = spec_from_overrides(ATOMIC_RUN)
    whole = run_spec(spec, tmp_path / "reference")          # an uncut write, for its size and content
    size = whole.path.stat().st_size
    assert os.listdir(whole.path.parent) == [whole.path.name]  # a finished write leaves one visible file
    limit = size // 2
    root = tmp_path / "res"
    store = Store(root)
    final = store.run_path(spec.run_id)

    # killed by the kernel when the file reaches `limit` bytes
    res = cut_write(tmp_path, root, limit, "kill")
    assert res.returncode == -signal.SIGXFSZ, res.stderr
    assert not final.exists()                                # nothing under the run's final name
    (tmp,) = store.temporary_files()                         # only the hidden temporary file remains ...
    assert tmp.name.startswith(f".{final.name}.") and 0 < tmp.stat().st_size <= limit < size
    with pytest.raises(pa.ArrowException):                  # ... and it really is a cut-off Parquet file
        pq.read_table(tmp)
    assert store.run_files() == [] and not store.is_done(spec.run_id) and len(stopwise.load_runs(root)) == 0

    # the write fails (EFBIG) and atomic_write removes its own temporary file
    res = cut_write(tmp_path, root, limit, "error")
    assert res.returncode == 1 and "File too large" in res.stderr, res.stderr
    assert store.temporary_files() == [tmp] and not final.exists()

    # a later run is not taken for done, and writes the trace whole
    out = run_spec(spec, root)
    assert not out.skipped and out.status == "completed" and out.path == final
    pd.testing.assert_frame_equal(trace_frame(final), trace_frame(whole.path), check_exact=True)
    assert [p.name for p in store.run_files()] == [final.name] and store.is_done(spec.run_id)

    # a replacement cut mid-write leaves the old file as it was, byte for byte
    before = final.read_bytes()
    res = cut_write(tmp_path, root, limit, "kill")
    assert res.returncode == -signal.SIGXFSZ, res.stderr
    assert final.read_bytes() == before and len(store.temporary_files()) == 2


def test_trace_columns_and_metadata(tmp_path):
    root = tmp_path / "res"
    out = stopwise.run(["dataset=diabetes", "solver=heavy_ball", "budget.iterations=5"], root=root)
    t = pq.read_table(out.path)
    for c in ("run_id", "dataset", "solver", "seed", "status", "step_scale", "momentum", "iteration", "passes",
              "seconds", "train_loss", "train_error", "val_error", "test_error", "w_norm", "residual_norm",
              "dist_truth"):
        assert c in t.column_names, c
    assert t.column("dist_truth").null_count == t.num_rows  # diabetes has no known truth
    meta = json.loads(t.schema.metadata[b"stopwise"])
    assert meta["status"] == "completed" and meta["digest"].startswith(out.run_id)
    assert {"numpy", "scipy", "pyarrow"} <= set(meta["versions"]) and "threads" in meta
    df = t.to_pandas()
    # exact: train_loss = s / (2n) and train_error = s / n of one sum of squares s, and
    # halving is exact in binary floating point
    assert np.array_equal(df["train_loss"], df["train_error"] / 2)
    # sqrt(s)^2 against (s / n) n: four correctly rounded operations (relative error <= eps/2
    # each, the sqrt's counted twice by the square), so at most 2.5 eps apart; 4 eps allowed
    np.testing.assert_allclose(df["residual_norm"] ** 2, df["train_error"] * meta["problem"]["n_train"],
                               rtol=4 * np.finfo(float).eps, atol=0)

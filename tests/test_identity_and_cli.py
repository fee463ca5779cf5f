"""Run identity, bad input through the real command, sweeps, reruns and tampering."""
import json
import os

import numpy as np
import pyarrow as pa
import pyarrow.parquet as pq
import pytest

import stopwise
from stopwise.cli import main
from stopwise.config.spec import spec_from_config, spec_from_overrides


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
    (["sweep", "no_such_campaign"], "unknown campaign 'no_such_campaign'; valid: demo"),
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
    assert "skipped (done)" in capsys.readouterr().out
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


def test_writes_are_atomic_and_leave_no_temporary_files(tmp_path):
    root = tmp_path / "res"
    stopwise.run(["dataset=wellposed", "solver=gd", "budget.iterations=5"], root=root)
    names = os.listdir(root / "runs")
    assert len(names) == 1 and names[0].endswith(".parquet") and not names[0].startswith(".")


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
    assert np.allclose(df["train_loss"], df["train_error"] / 2)
    assert np.allclose(df["residual_norm"] ** 2, df["train_error"] * meta["problem"]["n_train"])

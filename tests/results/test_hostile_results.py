"""Results folders are data. A results root whose files name importable code (Hydra
``_target_`` entries, module paths as sources, solvers and rules, a pickled object in a
column's metadata) is read by ``ls``, ``rerun``, ``verify``, every other command that reads
a campaign (``select``, ``baselines``, ``rank``, ``report``), ``load_traces`` and ``load_runs``
in a fresh interpreter where that code IS importable and
would leave a marker file if it were imported, called or unpickled. A control test shows
the trap goes off when something does instantiate or unpickle it."""
from __future__ import annotations

import hashlib
import json
import os
import pickle
import subprocess
import sys
import textwrap
import warnings

import pyarrow as pa
import pyarrow.parquet as pq
import pytest

import stopwise
from stopwise.results.store import campaign_digest
from stopwise.cli import main
from stopwise.config.spec import canonical_json

TRAP_MODULE = textwrap.dedent("""
    import os
    from pathlib import Path

    Path(os.environ["TRAP_DIR"], "imported").write_text("the trap module was imported")


    def boom(*args, **kwargs):
        Path(os.environ["TRAP_DIR"], "called").write_text("a function named in a results folder ran")


    class Boom:
        def __init__(self, *args, **kwargs):
            boom()
""")


class _Unpickled:
    """Unpickling this opens (creates) a marker file; pickling it runs nothing."""

    def __init__(self, path):
        self.path = path

    def __reduce__(self):
        return (open, (self.path, "w"))


@pytest.fixture
def hostile(tmp_path):
    trap_dir = tmp_path / "trap"
    (trap_dir / "stopwise_trap").mkdir(parents=True)
    (trap_dir / "stopwise_trap" / "__init__.py").write_text(TRAP_MODULE)
    root = tmp_path / "res"
    good = stopwise.run(["dataset=wellposed", "solver=gd", "budget.iterations=5"], root=root)
    table = pq.read_table(good.path)
    meta = json.loads(table.schema.metadata[b"stopwise"])

    target = "stopwise_trap.boom"
    ident = json.loads(json.dumps(meta["identity"]))
    ident["solver"]["params"]["_target_"] = target
    ident["dataset"]["source"] = "stopwise_trap"
    ident["dataset"]["params"]["_target_"] = "stopwise_trap.Boom"
    ident["halt"] = {"rule": target, "params": {"_target_": target, "_recursive_": True}}
    digest = hashlib.sha256(canonical_json(ident).encode()).hexdigest()
    rid = digest[:16]
    evil_meta = dict(meta, run_id=rid, digest=digest, identity=ident,
                     config={"_target_": "stopwise_trap.Boom", "solver": target, "params": {"_target_": target},
                             "dataset": {"name": "stopwise_trap", "_target_": target}},
                     versions={"_target_": target}, threads={"_target_": target},
                     pickled=pickle.dumps(_Unpickled(str(trap_dir / "unpickled-meta"))).hex())
    payload = pickle.dumps(_Unpickled(str(trap_dir / "unpickled-column")))
    field = pa.field("extra", pa.binary(), metadata={b"ARROW:extension:name": b"arrow.py_extension_type",
                                                     b"ARROW:extension:metadata": payload})
    evil = table.set_column(table.schema.get_field_index("run_id"), "run_id", pa.array([rid] * table.num_rows))
    evil = evil.append_column(field, pa.array([payload] * table.num_rows, pa.binary()))
    evil = evil.replace_schema_metadata({b"stopwise": json.dumps(evil_meta).encode()})
    pq.write_table(evil, root / "runs" / f"{rid}.parquet")

    stopping = [{"rule": target, "_target_": target}]
    run_ids = [rid, good.run_id]
    cdigest = campaign_digest("trap", run_ids, stopping)
    manifest = {"campaign_id": cdigest[:16], "digest": cdigest, "name": "trap", "run_ids": run_ids,
                "stopping": stopping, "jobs": 2, "created": 0,
                "definition": {"campaign": "trap", "overrides": [f"+x._target_={target}", "hydra/launcher=stopwise_trap"],
                               "sweep_params": {"solver._target_": target},
                               "campaign_file": f"# @package _global_\nx:\n  _target_: {target}\n"}}
    (root / "campaigns").mkdir(exist_ok=True)
    (root / "campaigns" / f"{cdigest[:16]}.json").write_text(json.dumps(manifest))
    return {"root": root, "trap_dir": trap_dir, "rid": rid, "good": good.run_id, "cid": cdigest[:16],
            "payload": payload}


READER = textwrap.dedent("""
    import json, sys, traceback, warnings
    warnings.simplefilter("ignore")
    import stopwise
    from stopwise.core.errors import SpecError
    from stopwise.cli import COMMANDS, main
    root, cid, rid = sys.argv[1:4]
    codes = {
        "ls": main(["ls", "--root", root]),
        "ls campaign": main(["ls", "--root", root, "--campaign", cid]),
        "rerun run": main(["rerun", rid, "--root", root]),
        "rerun campaign": main(["rerun", cid, "--root", root]),
        "verify": main(["verify", root]),
    }
    traces = stopwise.load_traces(root)
    runs = stopwise.load_runs(root)
    # every other command that reads a campaign's folders (select, baselines, rank, report, ...)
    for name in sorted(set(COMMANDS) - {"sweep", "run", "ls", "rerun", "verify", "datasets"}):
        try:
            codes[name] = main([name, cid, "--root", root])
        except SystemExit as e:
            codes[name] = e.code
        except SpecError as e:  # a refusal: allowed on this hostile folder, checked to be one line
            codes[name] = {"refused": f"{type(e).__name__}: {e}"}
        except Exception:  # anything else is a crash, and the test fails on it
            codes[name] = {"crash": traceback.format_exc()}
    print(json.dumps({"codes": codes, "rows": len(traces), "runs": len(runs),
                      "imported": sorted(m for m in sys.modules if m.startswith("stopwise_trap"))}))
""")


def run_in_trap_env(hostile, code: str, *args: str) -> subprocess.CompletedProcess:
    env = dict(os.environ, TRAP_DIR=str(hostile["trap_dir"]),
               PYTHONPATH=os.pathsep.join([str(hostile["trap_dir"]), os.environ.get("PYTHONPATH", "")]))
    return subprocess.run([sys.executable, "-c", code, *args], capture_output=True, text=True, env=env,
                          cwd=hostile["root"].parent, timeout=300)


def test_readers_never_import_call_or_unpickle_what_a_results_folder_names(hostile):
    res = run_in_trap_env(hostile, READER, str(hostile["root"]), hostile["cid"], hostile["rid"])
    assert res.returncode == 0, res.stderr
    report = json.loads(res.stdout.strip().splitlines()[-1])
    assert sorted(os.listdir(hostile["trap_dir"])) == ["stopwise_trap"], "the trap went off"
    assert report["imported"] == []
    codes = report["codes"]
    assert codes["ls"] == 0 and codes["ls campaign"] == 0
    assert codes["rerun run"] == 1 and codes["rerun campaign"] == 1 and codes["verify"] == 1
    assert "stored config is invalid" in res.stdout and "reproduced " in res.stdout  # the good run still reruns
    assert report["runs"] == 2 and report["rows"] == 12
    assert {"select", "rank", "report"} <= set(codes), codes  # the readers built on the store ran too
    # every reader ended with an exit code or a one-line SpecError refusal, never a crash
    crashes = {k: v["crash"] for k, v in codes.items() if isinstance(v, dict) and "crash" in v}
    assert not crashes, crashes
    for name, v in codes.items():
        if isinstance(v, dict):
            assert "\n" not in v["refused"], (name, v)
        else:
            assert v in (0, 1, 2), (name, v)


def test_control_the_trap_goes_off_when_something_does_instantiate_or_unpickle(hostile):
    """Proof that the test above can fail: the same environment, a reader that trusts the folder."""
    code = textwrap.dedent("""
        import json, pickle, sys
        import pyarrow.parquet as pq
        from hydra.utils import instantiate
        path = sys.argv[1]
        meta = json.loads(pq.read_schema(path).metadata[b"stopwise"])
        instantiate(meta["config"]["params"])
        pickle.loads(pq.read_schema(path).field("extra").metadata[b"ARROW:extension:metadata"])
    """)
    res = run_in_trap_env(hostile, code, str(hostile["root"] / "runs" / f"{hostile['rid']}.parquet"))
    assert res.returncode == 0, res.stderr
    assert {"imported", "called", "unpickled-column"} <= set(os.listdir(hostile["trap_dir"]))


@pytest.mark.parametrize("argv,needle", [
    (["sweep", "../campaigns/demo"], "campaign name '../campaigns/demo' is invalid"),
    (["sweep", "/etc/passwd"], "is invalid"),
    (["sweep", ".hidden"], "campaign name '.hidden' is invalid"),
    (["sweep", "demo", "++campaign_id=../../outside"], "campaign_id is set by stopwise sweep"),
    (["sweep", "campaign_id=../x", "seed=0,1"], "campaign_id is set by stopwise sweep"),
    (["run", "++campaign_id=../../outside"], "campaign_id='../../outside' is invalid"),
    (["run", "results_root="], "results_root='' is invalid"),
    (["rerun", "../../etc/passwd"], "no run or campaign"),
    (["ls", "--campaign", "../../etc"], "no campaign '../../etc'"),
])
def test_names_and_paths_that_would_escape_the_results_root_are_rejected(tmp_path, monkeypatch, capsys,
                                                                         argv, needle):
    monkeypatch.chdir(tmp_path)
    root = tmp_path / "res"
    root.mkdir()
    extra = ["--root", str(root)] if argv[0] in ("rerun", "ls") else []
    if argv[0] in ("run", "sweep") and not any(a.startswith("results_root=") for a in argv):
        extra = [f"results_root={root}"]
    assert main(argv + extra) == 2
    err = capsys.readouterr().err
    assert needle in err and err.count("\n") == 1, err
    assert list(root.rglob("*")) == [] and sorted(os.listdir(tmp_path)) == ["res"]


def test_a_trace_linking_outside_the_root_is_not_read(tmp_path):
    root = tmp_path / "res"
    out = stopwise.run(["dataset=wellposed", "solver=gd", "budget.iterations=5"], root=root)
    outside = tmp_path / "outside.parquet"
    os.replace(out.path, outside)
    out.path.symlink_to(outside)
    with pytest.warns(UserWarning, match="links outside the results root"):
        assert stopwise.load_runs(root).empty
    # a sweep does not count it as done either: the run is computed again into the root
    again = stopwise.run(["dataset=wellposed", "solver=gd", "budget.iterations=5"], root=root)
    assert not again.skipped and not out.path.is_symlink() and outside.exists()


def test_a_results_root_or_runs_folder_that_is_itself_a_link_still_works(tmp_path):
    """Links the user made for the layout (root or runs/ on another disk) are not hostile."""
    disk = tmp_path / "disk"
    out = stopwise.run(["dataset=wellposed", "solver=gd", "budget.iterations=5"], root=disk)
    (tmp_path / "linked_root").symlink_to(disk)
    assert len(stopwise.load_runs(tmp_path / "linked_root")) == 1
    root = tmp_path / "res"
    root.mkdir()
    (root / "runs").symlink_to(disk / "runs")
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        assert list(stopwise.load_runs(root)["run_id"]) == [out.run_id]
    assert stopwise.run(["dataset=wellposed", "solver=gd", "budget.iterations=5"], root=root).skipped


def test_a_manifest_name_that_climbs_out_of_the_root_is_never_used_as_a_path(tmp_path, capsys):
    """The report writes to <root>/reports/<campaign name>/: a stored name such as
    '../../escaped' must not become a path (the manifest is skipped as malformed)."""
    root = tmp_path / "a" / "b" / "res"
    assert main(["sweep", "dataset=wellposed", "solver=gd,cgls", "budget.iterations=5",
                 f"results_root={root}"]) == 0
    (path,) = (root / "campaigns").glob("*.json")
    doc = json.loads(path.read_text())
    doc["name"] = "../../../escaped"
    digest = campaign_digest(doc["name"], doc["run_ids"], doc["stopping"])
    doc.update(campaign_id=digest[:16], digest=digest)
    path.unlink()
    (root / "campaigns" / f"{digest[:16]}.json").write_text(json.dumps(doc))
    capsys.readouterr()
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        for argv in (["report", digest[:16], "--root", str(root)], ["ls", "--campaign", digest[:16], "--root", str(root)],
                     ["rerun", digest[:16], "--root", str(root)]):
            assert main(argv) == 2, argv
            err = capsys.readouterr().err
            assert err.count("\n") == 1, err
    assert not (tmp_path / "escaped").exists() and not (tmp_path / "a" / "escaped").exists()
    assert sorted(p.name for p in tmp_path.rglob("escaped")) == []
    assert "not a campaign name" in " ".join(f.problem for f in stopwise.verify_root(root).bad)

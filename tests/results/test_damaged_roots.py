"""Results folders damaged by hand: a valid trace copied under another run's name, and
symbolic-link loops in runs/ and campaigns/."""
import io
import os
import shutil
import warnings
from contextlib import redirect_stderr, redirect_stdout

import pytest

import stopwise
from stopwise.cli import main
from stopwise.results.store import Store


def cli(*args):
    out, err = io.StringIO(), io.StringIO()
    with redirect_stdout(out), redirect_stderr(err):
        code = main(list(args))
    return code, out.getvalue(), err.getvalue()


SWEEP = ["solver=gd", "solver.step_scale=0.5,1.0", "dataset=illposed", "budget.iterations=10"]


@pytest.fixture
def root(tmp_path):
    root = tmp_path / "results"
    code, _, err = cli("sweep", *SWEEP, f"results_root={root}")
    assert code == 0, err
    return root


def test_a_trace_under_another_runs_name_is_not_taken_for_that_run(root):
    a, b = sorted(p for p in (root / "runs").glob("*.parquet"))
    shutil.copyfile(a, b)  # run a's valid trace now also sits under b's name
    with warnings.catch_warnings(record=True) as w:
        warnings.simplefilter("always")
        runs = stopwise.load_runs(root)
    assert list(runs["run_id"]) == [a.stem]  # b's file is left out, a is not listed twice
    assert any(b.name in str(x.message) and "another run's name" in str(x.message) for x in w)
    assert Store(root).statuses([a.stem, b.stem]) == {a.stem: "completed", b.stem: "unreadable"}
    code, _, err = cli("verify", str(root))
    assert code == 1 and b.name in err + _  # verify names it
    # a resumed sweep runs b again and writes its own trace over the copy
    code, out, err = cli("sweep", *SWEEP, f"results_root={root}")
    assert code == 0, err
    assert "1 runs in 1 chunk" in out or "2 completed" in out
    assert Store(root).read_meta(b)["digest"][:16] == b.stem
    assert sorted(stopwise.load_runs(root)["run_id"]) == sorted([a.stem, b.stem])
    assert cli("verify", str(root))[0] == 0


@pytest.mark.parametrize("where", ["runs", "campaigns"])
@pytest.mark.parametrize("shape", ["self", "pair"])
def test_a_link_loop_is_named_and_the_rest_still_reads(root, where, shape):
    folder = root / where
    ext = ".parquet" if where == "runs" else ".json"
    x, y = folder / f"{'ab' * 8}{ext}", folder / f"{'cd' * 8}{ext}"
    if shape == "self":
        os.symlink(x.name, x)
    else:
        os.symlink(y.name, x)
        os.symlink(x.name, y)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        assert len(stopwise.load_runs(root)) == 2
        assert len(stopwise.load_traces(root)["run_id"].unique()) == 2
        assert len(stopwise.select(root, "adhoc", rules=["holdout"])) == 2
    code, out, err = cli("ls", "--root", str(root))
    assert code == 0 and "2 runs" in out, err
    code, out, err = cli("verify", str(root))
    assert code == 1 and x.name in out + err and "Traceback" not in err
    rid = sorted(p.stem for p in (root / "runs").glob("*.parquet") if not p.is_symlink())[0]
    code, out, err = cli("rerun", rid, "--root", str(root))
    assert code == 0, err

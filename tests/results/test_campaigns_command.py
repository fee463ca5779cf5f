"""`stopwise campaigns` lists every stored campaign; the name `adhoc` given to several
different sweeps is refused with their ids instead of silently taking the latest."""
import io
from contextlib import redirect_stderr, redirect_stdout

import pytest

from stopwise.cli import main
from stopwise.results.store import Store, StoreError


def cli(*args):
    out, err = io.StringIO(), io.StringIO()
    with redirect_stdout(out), redirect_stderr(err):
        code = main(list(args))
    return code, out.getvalue(), err.getvalue()


@pytest.fixture(scope="module")
def root(tmp_path_factory):
    root = tmp_path_factory.mktemp("camps") / "results"
    for over in (["solver=gd,cgls", "dataset=illposed"], ["solver=nesterov", "dataset=wellposed", "seed=0,1"]):
        code, _, err = cli("sweep", *over, "budget.iterations=10", f"results_root={root}")
        assert code == 0, err
    return root


def test_campaigns_lists_every_campaign_with_runs_by_status(root):
    (root / "runs" / f"{Store(root).campaigns()[0]['run_ids'][0]}.parquet").unlink()  # one run missing
    code, out, err = cli("campaigns", "--root", str(root))
    assert code == 0, err
    lines = out.strip().splitlines()
    ids = [c["campaign_id"] for c in Store(root).campaigns()]
    assert all(any(i in ln for ln in lines) for i in ids) and lines[-1].startswith("2 campaigns")
    by_id = {c["campaign_id"]: c for c in Store(root).campaigns()}
    for i in ids:
        (row,) = [ln for ln in lines if i in ln]
        n = len(by_id[i]["run_ids"])
        stored = len([r for r in by_id[i]["run_ids"] if (root / "runs" / f"{r}.parquet").exists()])
        assert f" {n} " in row and (f"{stored} completed" in row)
        assert ("1 missing" in row) == (stored < n)


def test_adhoc_names_several_sweeps_instead_of_taking_the_latest(root):
    code, out, err = cli("rank", "adhoc", "--root", str(root), "--baselines", "none")
    assert code == 2 and out == ""
    line = err.strip()
    assert "\n" not in line and "2 different sweeps" in line
    for c in Store(root).campaigns():
        assert c["campaign_id"] in line
    with pytest.raises(StoreError):
        Store(root).find_campaign("adhoc")
    one = Store(root).campaigns()[0]["campaign_id"]
    assert Store(root).find_campaign(one)["campaign_id"] == one


def test_no_campaign(tmp_path):
    code, out, _ = cli("campaigns", "--root", str(tmp_path))
    assert code == 0 and "no campaign" in out

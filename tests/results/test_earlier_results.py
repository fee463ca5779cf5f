"""Results written before the stage-package layout still mean what they meant.

``tests/fixtures/results_before_redesign/`` was written by stopwise at commit 19aeb02 (the last
commit with the flat module layout): an 8-run sweep (gd, nesterov, heavy_ball, cgls on diabetes
and illposed) and single runs of sgd with tail averaging, mirror descent and Chambolle-Pock on
sparse data, logistic gd on iris, the hinge diagonal method on digits, a ReLU network on breast
cancer and gd halted by the discrepancy principle on integral_green. ``demo_run_ids.json`` holds
the 80 run ids of the demo campaign as that commit expanded it.
"""
from __future__ import annotations

import json
import shutil
from pathlib import Path

import pyarrow.parquet as pq

from helpers.sweep import cli

FIXTURES = Path(__file__).resolve().parents[1] / "fixtures"
EARLIER = FIXTURES / "results_before_redesign"


def _copy(tmp_path) -> Path:
    root = tmp_path / "results"
    shutil.copytree(EARLIER, root)
    return root


def test_demo_campaign_keeps_every_run_id():
    from stopwise.sweep.campaign import expand

    pinned = json.loads((FIXTURES / "demo_run_ids.json").read_text())
    exp = expand("demo", [])
    assert len(pinned) == 80
    assert sorted({s.run_id for s in exp.specs}) == pinned
    assert sorted(exp.run_ids) == pinned


def test_every_earlier_run_reruns_bit_for_bit(tmp_path):
    root = _copy(tmp_path)
    runs = sorted(p.stem for p in (root / "runs").glob("*.parquet"))
    (manifest,) = (root / "campaigns").glob("*.json")
    in_campaign = set(json.loads(manifest.read_text())["run_ids"])
    assert len(runs) == 15 and len(in_campaign) == 8
    done = cli("rerun", manifest.stem, "--root", str(root))
    assert done.returncode == 0, done.stdout + done.stderr
    assert "reproduced 8 runs" in done.stdout and "largest difference 0" in done.stdout.splitlines()[-1]
    for rid in runs:
        if any(full.startswith(rid) for full in in_campaign):
            continue
        one = cli("rerun", rid, "--root", str(root))
        assert one.returncode == 0, one.stdout + one.stderr
        assert one.stdout.splitlines()[-1].endswith("largest difference 0"), one.stdout


def test_rerun_of_an_earlier_run_notices_a_changed_number(tmp_path):
    """The comparison is not vacuous: one stored number changed is reported as a difference."""
    root = _copy(tmp_path)
    path = root / "runs" / "6e5b46205144ce42.parquet"
    table = pq.read_table(path)
    col = table.column("train_error").to_pylist()
    col[-1] = col[-1] * (1 + 1e-6)
    import pyarrow as pa

    table = table.set_column(table.schema.get_field_index("train_error"), "train_error", pa.array(col))
    pq.write_table(table, path)
    out = cli("rerun", "6e5b46205144ce42", "--root", str(root))
    assert out.returncode == 1, out.stdout + out.stderr
    assert "DIFFERS" in out.stdout + out.stderr

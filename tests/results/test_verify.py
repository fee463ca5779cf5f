"""``stopwise verify``: every kind of bad file is reported by path and can be quarantined;
readers skip unreadable files with a warning naming them and keep every good row."""
from __future__ import annotations

import json
import os
import re
import shutil
import warnings
from pathlib import Path

import pyarrow as pa
import pyarrow.parquet as pq
import pytest

import stopwise
from stopwise.cli import main
from stopwise.results.verify import verify_root


@pytest.fixture(scope="module")
def clean(tmp_path_factory):
    """A results root with one finished campaign of three runs."""
    root = tmp_path_factory.mktemp("clean") / "res"
    assert main(["sweep", "dataset=wellposed", "solver=gd,cgls,nesterov", "budget.iterations=10",
                 f"results_root={root}"]) == 0
    return root


@pytest.fixture
def root(clean, tmp_path):
    dst = tmp_path / "res"
    shutil.copytree(clean, dst, symlinks=True)
    return dst


def run_files(root):
    """The campaign's own traces (the corruptions below add files named by one repeated digit)."""
    return sorted(p for p in (root / "runs").glob("*.parquet") if len(set(p.stem)) > 1 and p.stem != "notes")


def meta_of(path):
    return json.loads(pq.read_schema(path).metadata[b"stopwise"])


def rewrite(path, table, meta):
    pq.write_table(table.replace_schema_metadata({b"stopwise": json.dumps(meta).encode()} if meta else None), path)


def new_name(root, k):
    return root / "runs" / (f"{k:x}" * 16 + ".parquet")


# each corruption returns the path it broke; all are applied to copies of a good trace
def truncated(root):
    src = run_files(root)[0]
    dst = new_name(root, 1)
    dst.write_bytes(src.read_bytes()[: src.stat().st_size // 2])
    return dst, "unreadable"


def garbage(root):
    dst = new_name(root, 2)
    dst.write_bytes(os.urandom(3000))
    return dst, "unreadable"


def no_metadata(root):
    src = run_files(root)[0]
    dst = new_name(root, 3)
    rewrite(dst, pq.read_table(src), None)
    return dst, "no stopwise metadata"


def tampered_config(root):
    src = run_files(root)[0]
    meta = meta_of(src)
    meta["identity"]["seed"] = 7
    rewrite(src, pq.read_table(src), meta)
    return src, "does not hash to its run id"


def renamed(root):
    src = run_files(root)[1]
    dst = new_name(root, 4)
    shutil.copy(src, dst)
    return dst, "do not match the file name"


def dropped_column(root):
    src = run_files(root)[2]
    t = pq.read_table(src)
    rewrite(src, t.drop_columns(["val_error"]), meta_of(src))
    return src, "missing columns: val_error"


def not_json_metadata(root):
    src = run_files(root)[0]
    dst = new_name(root, 5)
    pq.write_table(pq.read_table(src).replace_schema_metadata({b"stopwise": b"{not json"}), dst)
    return dst, "metadata is not JSON"


def stray_name(root):
    dst = root / "runs" / "notes.parquet"
    shutil.copy(run_files(root)[0], dst)
    return dst, "file name is not a 16-digit run id"


def outside_link(root):
    outside = root.parent / "elsewhere.parquet"
    shutil.copy(run_files(root)[0], outside)
    dst = new_name(root, 6)
    dst.symlink_to(outside)
    return dst, "links outside the results root"


def manifest_garbage(root):
    dst = root / "campaigns" / ("c" * 16 + ".json")
    dst.write_text("{ truncated")
    return dst, "unreadable"


def manifest_altered(root):
    (m,) = [p for p in (root / "campaigns").glob("*.json") if len(set(p.stem)) > 1]
    doc = json.loads(m.read_text())
    doc["run_ids"] = doc["run_ids"][:-1]
    m.write_text(json.dumps(doc))
    return m, "do not hash to its campaign id"


def manifest_escaping_ids(root):
    (m,) = [p for p in (root / "campaigns").glob("*.json") if len(set(p.stem)) > 1]
    doc = json.loads(m.read_text())
    doc["run_ids"] = ["../../../etc/passwd"]
    dst = root / "campaigns" / ("d" * 16 + ".json")
    dst.write_text(json.dumps(dict(doc, campaign_id="d" * 16)))
    return dst, "not a list of hex run ids"


CORRUPTIONS = [truncated, garbage, no_metadata, tampered_config, renamed, dropped_column, not_json_metadata,
               stray_name, outside_link, manifest_garbage, manifest_altered, manifest_escaping_ids]


def test_a_clean_root_verifies(clean, capsys):
    assert main(["verify", str(clean)]) == 0
    out = capsys.readouterr().out.strip()
    assert re.fullmatch(rf"checked 3 traces, 1 manifest, 0 baselines, 0 report files under {re.escape(str(clean))} "
                        r"and \d+ cached problems?: all good", out), out


@pytest.mark.parametrize("corrupt", CORRUPTIONS, ids=[c.__name__ for c in CORRUPTIONS])
def test_each_bad_file_is_reported_by_path(root, capsys, corrupt):
    path, reason = corrupt(root)
    assert main(["verify", str(root)]) == 1
    out, err = capsys.readouterr()
    bad = [line for line in out.splitlines() if line.startswith("bad ")]
    assert bad == [f"bad   {path}: " + bad[0].split(": ", 1)[1]], out
    assert reason in bad[0]
    assert "1 bad" in err and "--quarantine" in err


def test_all_at_once_then_quarantine_leaves_a_clean_root(root, capsys):
    broken = {corrupt(root)[0] for corrupt in CORRUPTIONS}
    rep = verify_root(root)
    assert {f.path for f in rep.bad} == broken
    assert main(["verify", str(root), "--quarantine"]) == 1
    out = capsys.readouterr().out
    for p in broken:
        assert not os.path.lexists(p)
        assert f"moved {p.relative_to(root)} -> quarantine/{p.parent.name}/" in out
    moved = sorted(p.name for p in (root / "quarantine").rglob("*"))
    assert len([m for m in moved if m not in ("runs", "campaigns")]) == len(broken)
    # what is left verifies: the good runs, no manifest (the only one was altered)
    assert main(["verify", str(root)]) == 0
    assert "all good" in capsys.readouterr().out


def test_readers_skip_unreadable_files_with_a_warning_naming_each(root):
    good_rows = len(stopwise.load_traces(root))
    bad = [truncated(root)[0], garbage(root)[0], not_json_metadata(root)[0]]
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        traces = stopwise.load_traces(root)
        runs = stopwise.load_runs(root)
    text = "\n".join(str(w.message) for w in caught)
    for p in bad[:2]:
        assert text.count(str(p)) == 2, text  # once per reader
    assert str(bad[2]) in text  # its metadata is unreadable (load_runs); its table still is (load_traces)
    assert len(runs) == 3
    assert len(traces) == good_rows + len(pq.read_table(bad[2]))


def test_a_column_of_the_wrong_type_skips_that_file_not_the_query(root):
    src = run_files(root)[0]
    t = pq.read_table(src)
    i = t.schema.get_field_index("iteration")
    t = t.set_column(i, "iteration", pa.array([f"it{k}" for k in range(t.num_rows)]))
    rewrite(src, t, meta_of(src))
    with pytest.warns(UserWarning, match=f"skipping unreadable trace {src}"):
        traces = stopwise.load_traces(root)
    assert set(traces["run_id"]) == {p.stem for p in run_files(root)} - {src.stem}


def test_a_manifest_of_the_wrong_shape_is_skipped_by_readers(root, capsys):
    manifest_escaping_ids(root)
    with pytest.warns(UserWarning, match="skipping unreadable campaign manifest"):
        assert main(["ls", "--root", str(root), "--campaign", "d" * 16]) == 2
    assert "no campaign" in capsys.readouterr().err


def test_verify_of_a_missing_root_is_bad_input(tmp_path, capsys):
    assert main(["verify", str(tmp_path / "nope")]) == 2
    err = capsys.readouterr().err
    assert err.count("\n") == 1 and "is not a folder" in err


def test_an_incomplete_campaign_is_a_note_not_a_bad_file(root, capsys):
    victim = run_files(root)[0]
    victim.unlink()
    assert main(["verify", str(root)]) == 0
    out = capsys.readouterr().out
    assert "1 of 3 runs not stored" in out and "all good" in out

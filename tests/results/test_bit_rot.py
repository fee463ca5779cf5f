"""Bit rot in a shared results folder: a changed byte anywhere in a trace, a baseline, a
report or a cached problem is named by ``stopwise verify``; readers never return a changed
number as if it were stored.

Parquet's page checksums (a CRC-32 per page, written with ``write_page_checksum=True`` and
checked with ``page_checksum_verification=True``; Apache Parquet format specification,
"Checksumming") catch a changed byte in a page; the SHA-256 of the decoded data and of the
metadata, stored in the file, catch the rest; a file written by this pyarrow version must
also be byte for byte the encoding of its content.
"""
from __future__ import annotations

import io
import json
import os
import warnings
from contextlib import redirect_stderr, redirect_stdout
from pathlib import Path

import numpy as np
import pyarrow.parquet as pq
import pytest

import stopwise
from stopwise.cli import main
from stopwise.results.store import Store
from stopwise.results.verify import check_baseline, check_trace, verify_root


def cli(*args):
    out, err = io.StringIO(), io.StringIO()
    with redirect_stdout(out), redirect_stderr(err):
        code = main(list(args))
    return code, out.getvalue(), err.getvalue()


@pytest.fixture(scope="module")
def clean(tmp_path_factory):
    """A campaign of three runs, its baselines and its report."""
    root = tmp_path_factory.mktemp("rot") / "res"
    code, _, err = cli("sweep", "dataset=diabetes", "solver=gd", "solver.step_scale=0.5,1.0,1.5",
                       "budget.iterations=60", f"results_root={root}")
    assert code == 0, err
    assert cli("baselines", "adhoc", "--root", str(root), "--method", "ridge")[0] == 0
    assert cli("report", "adhoc", "--root", str(root))[0] == 0
    return root


@pytest.fixture
def root(clean, tmp_path):
    import shutil

    dst = tmp_path / "res"
    shutil.copytree(clean, dst)
    return dst


def column_pages(path: Path, column: str) -> tuple[int, int]:
    """Byte range of one column's pages in a Parquet file (from its footer)."""
    rg = pq.ParquetFile(path).metadata.row_group(0)
    for i in range(rg.num_columns):
        c = rg.column(i)
        if c.path_in_schema == column:
            start = c.dictionary_page_offset or c.data_page_offset
            return start, start + c.total_compressed_size
    raise KeyError(column)


def flip(path: Path, at: int, n: int = 1) -> None:
    b = bytearray(path.read_bytes())
    for k in range(at, at + n):
        b[k] ^= 0xFF
    path.write_bytes(bytes(b))


def test_64_bytes_flipped_in_a_columns_pages_are_named_and_never_read_back(root):
    victim = sorted((root / "runs").glob("*.parquet"))[1]
    stored = pq.read_table(victim)["w_norm"].to_numpy()
    lo, hi = column_pages(victim, "w_norm")
    assert hi - lo > 64
    flip(victim, (lo + hi) // 2 - 32, 64)  # the footer is untouched
    # without the page checks the file still decodes, to other numbers: the failure reported
    decoded = pq.read_table(victim)["w_norm"].to_numpy()
    assert not np.array_equal(decoded, stored)

    code, out, err = cli("verify", str(root))
    assert code == 1 and f"{victim}: unreadable data" in out and "CRC" in out, out + err
    with warnings.catch_warnings(record=True) as w:
        warnings.simplefilter("always")
        traces = stopwise.load_traces(root)
    assert victim.stem not in set(traces["run_id"])  # left out, not returned changed
    assert any(victim.name in str(x.message) and "CRC" in str(x.message) for x in w)
    assert len(set(traces["run_id"])) == 2


def single_byte_positions(size: int, step: int) -> list[int]:
    """Every ``step``-th byte, and every byte of the last 600 (the footer)."""
    return sorted(set(range(0, size, step)) | set(range(max(0, size - 600), size)))


def every_flip_is_named(path: Path, store: Store, positions, check) -> list[int]:
    raw = path.read_bytes()
    missed = []
    try:
        for i in positions:
            b = bytearray(raw)
            b[i] ^= 0xFF
            path.write_bytes(bytes(b))
            if check(path, store) == "":
                missed.append(i)
    finally:
        path.write_bytes(raw)
    return missed


def test_a_single_changed_byte_anywhere_in_a_trace_is_named(root):
    victim = sorted((root / "runs").glob("*.parquet"))[0]
    positions = single_byte_positions(victim.stat().st_size, 23)
    assert every_flip_is_named(victim, Store(root), positions, check_trace) == []
    assert check_trace(victim, Store(root)) == ""  # restored: good again


@pytest.mark.slow
def test_every_single_changed_byte_of_a_trace_is_named(root):
    out = stopwise.run(["dataset=diabetes", "solver=gd", "budget.iterations=3"], root=root)  # a small trace
    trace = out.path
    assert every_flip_is_named(trace, Store(root), range(trace.stat().st_size), check_trace) == []


def test_a_single_changed_byte_anywhere_in_a_baseline_is_named(root):
    base = sorted((root / "baselines").glob("*.parquet"))[0]
    positions = single_byte_positions(base.stat().st_size, 23)
    assert every_flip_is_named(base, Store(root), positions, check_baseline) == []
    assert check_baseline(base, Store(root)) == ""


def test_changed_metadata_that_is_still_valid_json_is_named_and_left_out(root):
    # the metadata a reader sees, one digit changed, the stored checksums kept: what a
    # changed byte in the metadata's text would give (a raw flip there is covered above)
    victim = sorted((root / "runs").glob("*.parquet"))[2]
    table = pq.read_table(victim)
    md = dict(table.schema.metadata)
    text = md[b"stopwise"]
    old = json.dumps(json.loads(text)["summary"]["final_test_error"]).encode()
    assert text.count(old) == 1
    md[b"stopwise"] = text.replace(old, old[:-1] + (b"1" if old[-1:] != b"1" else b"2"))
    pq.write_table(table.replace_schema_metadata(md), victim, compression="zstd", write_page_checksum=True)
    assert json.loads(pq.read_schema(victim).metadata[b"stopwise"])["summary"]["final_test_error"] != float(old)
    code, out, _ = cli("verify", str(root))
    assert code == 1 and f"{victim}: its metadata differ from what was written" in out
    with warnings.catch_warnings(record=True) as w:
        warnings.simplefilter("always")
        runs = stopwise.load_runs(root)
    assert victim.stem not in set(runs["run_id"]) and len(runs) == 2
    assert any(victim.name in str(x.message) for x in w)


def test_a_changed_baseline_is_named(root):
    (base,) = sorted((root / "baselines").glob("*.parquet"))[:1]
    lo, hi = column_pages(base, "test_error")
    flip(base, (lo + hi) // 2)
    code, out, _ = cli("verify", str(root))
    assert code == 1 and str(base) in out
    assert cli("verify", str(root), "--quarantine")[0] == 1
    assert cli("verify", str(root))[0] == 0


def test_a_changed_added_or_missing_report_file_is_named(root):
    report = root / "reports" / "adhoc"
    sums = json.loads((report / "checksums.json").read_text())["files"]
    assert "index.html" in sums and any(k.endswith(".png") for k in sums)  # every file listed
    png = report / next(k for k in sorted(sums) if k.endswith(".png"))
    flip(png, png.stat().st_size // 2)
    (report / "extra.csv").write_text("a,b\n")
    (report / "results.csv").unlink()
    rep = verify_root(root, cache=False)
    named = {f.path.name: f.problem for f in rep.bad}
    assert "checksum mismatch" in named[png.name]
    assert "not listed" in named["extra.csv"]
    assert "unreadable" in named["results.csv"]
    assert rep.report_files == len(sums)


def test_a_changed_cached_problem_is_named_quarantined_and_rebuilt(root, tmp_path, monkeypatch):
    cache = tmp_path / "cache"
    monkeypatch.setenv("STOPWISE_CACHE", str(cache))
    monkeypatch.setenv("STOPWISE_CACHE_MIN_SECONDS", "0")  # every problem goes to the disk cache
    from stopwise import data as data_pkg

    data_pkg._CACHE.clear()  # this process's memo: build from source, write the entry
    spec_args = ["dataset=illposed", "solver=gd", "budget.iterations=5", "seed=11"]
    stopwise.run(spec_args, root=tmp_path / "r1")
    (npz,) = (cache / "problems").glob("*.npz")
    assert verify_root(root).cached == 1 and verify_root(root).ok  # the entry (its kept norm not counted)
    assert len(list((cache / "problems").glob("*.norm.json"))) == 1
    flip(npz, npz.stat().st_size // 2)
    rep = verify_root(root)
    assert [f.path.stem for f in rep.bad] == [npz.stem] and "cached problem" in rep.bad[0].problem
    verify_root(root, quarantine=True)
    assert not npz.exists() and (cache / "quarantine" / npz.name).exists()
    data_pkg._CACHE.clear()
    again = stopwise.run(spec_args, root=tmp_path / "r2")  # built again from the source
    assert again.status == "completed" and npz.exists()
    first = pq.read_table(next((tmp_path / "r1" / "runs").glob("*.parquet"))).drop(["seconds"])
    second = pq.read_table(again.path).drop(["seconds"])
    assert first.to_pandas().equals(second.to_pandas())  # bit for bit, NaN equal to NaN


def test_files_written_before_checksums_are_checked_as_before_and_counted(root):
    victim = sorted((root / "runs").glob("*.parquet"))[0]
    t = pq.read_table(victim)
    md = {b"stopwise": t.schema.metadata[b"stopwise"]}  # as written before checksums were stored
    pq.write_table(t.replace_schema_metadata(md), victim, compression="zstd")
    rep = verify_root(root, cache=False)
    assert rep.ok and rep.unsealed == 1
    assert any("1 files written before checksums" in f.problem for f in rep.notes)


@pytest.mark.parametrize("n", [0, 1, 7])
def test_the_writers_digest_is_the_digest_of_what_it_wrote(tmp_path, n):
    """Store.write_run computes the data checksum from the values it writes (ColumnDigest);
    it must equal data_digest of the file read back, for every kind of column a trace holds."""
    from stopwise.results.schema import data_digest, read_table

    rng = np.random.default_rng(n)
    run_level = {"run_id": "ab" * 8, "dataset": "plants", "task": "regression", "loss": None, "solver": "sgd",
                 "seed": 3, "status": "completed", "step_scale": 0.5, "tail": 1, "nonneg": True,
                 "groups": [1, 2], "schedule": {"kind": "constant"}, "name_with_é": "é"}
    columns = {"iteration": np.arange(n, dtype=np.int64), "passes": rng.random(n),
               "val_error": np.where(np.arange(n) % 2, np.nan, 1.0), "dist_truth": np.full(n, np.nan),
               "count32": np.arange(n, dtype=np.int32), "grid": np.arange(2 * n, dtype=np.float64)[::2]}
    store = Store(tmp_path / "r")
    path = store.write_run("ab" * 8, columns, run_level, {"run_id": "ab" * 8})
    table = read_table(path)
    stored = json.loads(table.schema.metadata[b"stopwise.checksums"])["data"]
    assert stored == data_digest(table)


def test_a_changed_kept_norm_is_named_quarantined_and_computed_again(root, tmp_path, monkeypatch):
    cache = tmp_path / "cache"
    monkeypatch.setenv("STOPWISE_CACHE", str(cache))
    monkeypatch.setenv("STOPWISE_CACHE_MIN_SECONDS", "0")
    from stopwise import data as data_pkg

    data_pkg._CACHE.clear()
    spec_args = ["dataset=illposed", "solver=gd", "budget.iterations=5", "seed=12"]
    first = stopwise.run(spec_args, root=tmp_path / "r1")
    (norm,) = (cache / "problems").glob("*.norm.json")
    good = norm.read_bytes()
    flip(norm, good.index(b'"train_norm2_sq"') + 19)  # a digit of the value
    rep = verify_root(root)
    assert [f.path.name for f in rep.bad] == [norm.name] and "kept norm of a cached problem" in rep.bad[0].problem
    verify_root(root, quarantine=True)
    assert not norm.exists() and (cache / "quarantine" / norm.name).exists()
    assert (cache / "problems" / norm.name.replace(".norm.json", ".npz")).exists()  # its problem stays
    data_pkg._CACHE.clear()
    again = stopwise.run(spec_args, root=tmp_path / "r2")
    assert again.status == "completed" and norm.read_bytes() == good  # computed again, same bits
    a = pq.read_table(first.path).drop(["seconds"])
    b = pq.read_table(again.path).drop(["seconds"])
    assert a.to_pandas().equals(b.to_pandas())
    data_pkg._CACHE.clear()

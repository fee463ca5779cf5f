"""The processed-problem cache: content addressed, byte-identical hits, safe under concurrent processes."""
import json
import os
import subprocess
import sys

from pathlib import Path

import numpy as np
import pandas as pd

from stopwise import data
from stopwise.cli import main
from stopwise.data import build_problem, cached_problem, problem_key
from stopwise.config.compose import spec_from_overrides

FIELDS = ("X_train", "y_train", "X_val", "y_val", "X_test", "y_test", "w_true")


def same(a, b):
    for k in FIELDS:
        x, y = getattr(a, k), getattr(b, k)
        assert (x is None) == (y is None), k
        if x is not None:
            assert x.dtype == y.dtype and x.shape == y.shape and x.tobytes() == y.tobytes(), k
    assert (a.name, a.task, a.noise_level, a.noise_kind, a.feature_names) == \
        (b.name, b.task, b.noise_level, b.noise_kind, b.feature_names)
    assert a.preprocessing == b.preprocessing and a.info == b.info


def entries(d):
    return sorted(p.name for p in (d / "problems").glob("*")) if (d / "problems").is_dir() else []


def test_a_cache_hit_is_byte_identical_to_a_fresh_load(problem_cache):
    for over in (["dataset=illposed", "seed=2"], ["dataset=diabetes"], ["dataset=separable"]):
        spec = spec_from_overrides(over)
        first = cached_problem(spec.dataset, spec.split, spec.seed)
        data._CACHE.clear()  # drop the in-process memo: the next call reads the files
        hit = cached_problem(spec.dataset, spec.split, spec.seed)
        assert hit is not first
        fresh = build_problem(spec.dataset, spec.split, spec.seed)
        same(hit, fresh)
        same(first, fresh)
    names = entries(problem_cache)
    assert len(names) == 6 and {n.rsplit(".", 1)[1] for n in names} == {"npz", "json"}


def test_cache_files_are_plain_npz_and_json(problem_cache):
    spec = spec_from_overrides(["dataset=sparse"])
    cached_problem(spec.dataset, spec.split, spec.seed)
    key = problem_key(spec.dataset, spec.split, spec.seed)
    base = problem_cache / "problems" / key[:32]
    with np.load(f"{base}.npz", allow_pickle=False) as z:  # no object arrays, nothing unpickled
        assert sorted(z.files) == sorted(FIELDS) and all(z[k].dtype == np.float64 for k in z.files)
    meta = json.loads(open(f"{base}.json").read())
    assert meta["key"] == key and meta["info"]["support"]


def test_a_changed_spec_or_changed_data_reads_another_entry(problem_cache, tmp_path):
    df = pd.DataFrame({"a": np.arange(30.0), "b": np.arange(30.0) ** 2, "y": np.sin(np.arange(30.0))})
    path = tmp_path / "t.csv"
    df.to_csv(path, index=False)
    over = ["dataset=file", f"dataset.params.path={path}", "dataset.params.target=y"]
    s1 = spec_from_overrides(over)
    p1 = cached_problem(s1.dataset, s1.split, s1.seed)
    s2 = spec_from_overrides(over + ["dataset.standardize=false"])
    assert problem_key(s2.dataset, s2.split, s2.seed) != problem_key(s1.dataset, s1.split, s1.seed)
    df.loc[0, "a"] = 100.0  # same config, new file contents
    df.to_csv(path, index=False)
    data._CACHE.clear()
    p3 = cached_problem(s1.dataset, s1.split, s1.seed)
    same(p3, build_problem(s1.dataset, s1.split, s1.seed))
    assert not np.array_equal(p1.X_train, p3.X_train) or not np.array_equal(p1.X_test, p3.X_test)
    assert len(entries(problem_cache)) == 4


def test_a_damaged_entry_is_rebuilt(problem_cache):
    spec = spec_from_overrides(["dataset=wellposed"])
    good = cached_problem(spec.dataset, spec.split, spec.seed)
    npz = next((problem_cache / "problems").glob("*.npz"))
    npz.write_bytes(npz.read_bytes()[:100])
    data._CACHE.clear()
    again = cached_problem(spec.dataset, spec.split, spec.seed)
    same(again, good)
    with np.load(npz, allow_pickle=False) as z:
        assert z["X_train"].tobytes() == good.X_train.tobytes()


def test_cache_off_writes_nothing(tmp_path, monkeypatch):
    # the folder the cache would use (tests/conftest.py's temporary one), the working folder
    # and HOME are watched: none gains a file
    watched = [Path(data.cache.cache_dir()), tmp_path]
    monkeypatch.chdir(tmp_path)
    monkeypatch.setenv("HOME", str(tmp_path))
    before = {p for w in watched if w.exists() for p in w.rglob("*")}
    monkeypatch.setenv("STOPWISE_CACHE", "off")
    data._CACHE.clear()
    spec = spec_from_overrides(["dataset=wellposed"])
    p = cached_problem(spec.dataset, spec.split, spec.seed)
    assert p.X_train.size > 0
    assert data.cache.cache_dir() is None
    after = {p for w in watched if w.exists() for p in w.rglob("*")}
    assert after == before, after - before
    data._CACHE.clear()


CHILD = """
import hashlib, sys
from stopwise.data import cached_problem
from stopwise.config.compose import spec_from_overrides
s = spec_from_overrides(["dataset=integral_gauss", "dataset.params.n=2000", "dataset.params.d=300"])
p = cached_problem(s.dataset, s.split, s.seed)
h = hashlib.sha256()
for k in ("X_train", "y_train", "X_val", "y_val", "X_test", "y_test", "w_true"):
    h.update(getattr(p, k).tobytes())
print(h.hexdigest())
"""


def test_concurrent_processes_share_one_entry(problem_cache):
    """Two processes build the same spec at the same time: both get the same bytes, the entry is whole."""
    env = dict(os.environ, STOPWISE_CACHE=str(problem_cache))
    procs = [subprocess.Popen([sys.executable, "-c", CHILD], env=env, stdout=subprocess.PIPE, stderr=subprocess.PIPE,
                              text=True) for _ in range(2)]
    outs = [p.communicate(timeout=180) for p in procs]
    assert all(p.returncode == 0 for p in procs), outs
    digests = {o[0].strip() for o in outs}
    assert len(digests) == 1
    names = entries(problem_cache)
    assert len(names) == 2 and not any(n.startswith(".") for n in names)  # no temporary files left behind
    again = subprocess.run([sys.executable, "-c", CHILD], env=env, capture_output=True, text=True, timeout=180)
    assert again.stdout.strip() in digests


def test_a_sweep_builds_each_data_spec_once(problem_cache, root, capsys):
    """2 solvers x 2 seeds on one dataset: 2 distinct data specs, 2 entries (and their 2 kept
    norms, the threshold being 0 here); a second identical sweep rewrites none of them."""
    args = ["sweep", "dataset=wellposed", "solver=gd,cgls", "seed=0,1", "budget.iterations=3", f"results_root={root}"]
    assert main(args) == 0
    names = entries(problem_cache)
    assert len(names) == 6 and sum(n.endswith(".norm.json") for n in names) == 2
    stamps = {n: (problem_cache / "problems" / n).stat().st_mtime_ns for n in names}
    data._CACHE.clear()
    assert main(args) == 0
    assert {n: (problem_cache / "problems" / n).stat().st_mtime_ns for n in entries(problem_cache)} == stamps
    capsys.readouterr()


def test_by_default_only_problems_that_take_time_to_build_are_written(problem_cache, monkeypatch):
    """The default threshold: diabetes (442 x 10, about a millisecond) is rebuilt by each run
    rather than written; a problem that takes longer than the threshold is written."""
    monkeypatch.delenv("STOPWISE_CACHE_MIN_SECONDS")
    assert data.cache_min_seconds() == data.CACHE_MIN_SECONDS
    quick = spec_from_overrides(["dataset=diabetes", "seed=4"])
    cached_problem(quick.dataset, quick.split, quick.seed)
    assert entries(problem_cache) == []
    monkeypatch.setenv("STOPWISE_CACHE_MIN_SECONDS", "0")
    data._CACHE.clear()
    cached_problem(quick.dataset, quick.split, quick.seed)
    assert len(entries(problem_cache)) == 2
    monkeypatch.setenv("STOPWISE_CACHE_MIN_SECONDS", "bogus")
    assert data.cache_min_seconds() == data.CACHE_MIN_SECONDS


def test_raw_data_kept_in_memory_is_read_only(problem_cache):
    """A sweep over seeds splits the same raw arrays many times: they are kept, and kept
    read-only, so a problem built from them cannot change them for the next one."""
    import pytest

    a = spec_from_overrides(["dataset=diabetes", "seed=0"])
    b = spec_from_overrides(["dataset=diabetes", "seed=1"])
    pa_, pb = build_problem(a.dataset, a.split, a.seed), build_problem(b.dataset, b.split, b.seed)
    (raw,) = [r for k, r in data._RAW.items() if k[0] == "sklearn" and '"diabetes"' in k[1]]
    with pytest.raises(ValueError):
        raw.X[0, 0] = 1.0
    assert not np.shares_memory(pa_.X_train, raw.X) and not np.shares_memory(pb.X_test, raw.X)  # own copies
    from sklearn.datasets import load_diabetes

    assert np.array_equal(raw.X, load_diabetes(scaled=False).data)


RUN_IN_FRESH_PROCESS = """
import sys
import stopwise
out = stopwise.run(["dataset=diabetes", "solver=gd", "budget.iterations=30"], root=sys.argv[1])
print(out.path)
print("sklearn imported" if "sklearn" in sys.modules else "sklearn not imported")
print("pandas imported" if "pandas" in sys.modules else "pandas not imported")
"""


def test_scikit_learn_tables_are_kept_so_another_process_need_not_import_scikit_learn(tmp_path, monkeypatch):
    """The first process loads diabetes through scikit-learn and keeps the raw arrays; a
    second process reads them from the cache without importing scikit-learn, and its run
    is bit for bit the first one's (the arrays are the loader's own float64 values).
    Nor does it import pandas: storing a trace lays its Arrow columns out from their buffers
    (``pa.array`` would import pandas on its first call, about 0.6 s per process)."""
    import pyarrow.parquet as pq

    from stopwise.data import cache
    from stopwise.results.verify import verify_root

    env = {**os.environ, "STOPWISE_CACHE": str(tmp_path / "cache")}
    outs = []
    for k in (1, 2):
        res = subprocess.run([sys.executable, "-c", RUN_IN_FRESH_PROCESS, str(tmp_path / f"r{k}")],
                             capture_output=True, text=True, env=env)
        assert res.returncode == 0, res.stderr[-2000:]
        outs.append(res.stdout.split("\n"))
    assert outs[0][1] == "sklearn imported" and outs[1][1] == "sklearn not imported"
    assert outs[1][2] == "pandas not imported"
    first, second = (pq.read_table(o[0]).drop(["seconds"]).to_pandas() for o in outs)
    assert first.equals(second)
    (kept,) = [e for e in cache.entries(tmp_path / "cache") if e.parent.name == "raw"]
    # the kept arrays are scikit-learn's own
    from sklearn.datasets import load_diabetes

    raw = cache.read_raw(json.loads(kept.read_text())["key"], tmp_path / "cache")
    ref = load_diabetes(scaled=False)  # the project reads the original measurements
    assert np.array_equal(raw.X, ref.data) and np.array_equal(raw.y, ref.target)
    # a changed byte in the kept arrays: verify names it, the next load reads the source again
    npz = kept.with_suffix(".npz")
    b = bytearray(npz.read_bytes()); b[len(b) // 2] ^= 0xFF; npz.write_bytes(bytes(b))
    monkeypatch.setenv("STOPWISE_CACHE", str(tmp_path / "cache"))
    rep = verify_root(tmp_path / "r1")
    assert [f.path for f in rep.bad] == [kept] and "arrays differ" in rep.bad[0].problem
    assert rep.cached == len(cache.entries(tmp_path / "cache"))  # processed problems and raw data
    assert cache.read_raw(json.loads(kept.read_text())["key"], tmp_path / "cache") is None


# ---------------------------------------------------------------- the kept ||X_train||_2^2

def thin_svmlight(path):
    """40 rows, 50 features, two stored entries per row: a CSR design (density 0.04)."""
    lines = []
    for i in range(40):
        a, b = (7 * i) % 50 + 1, (11 * i + 3) % 50 + 1
        ent = sorted({a: f"{i + 1}.5", b: "-1"}.items())
        lines.append(f"{1 if i % 2 else -1} " + " ".join(f"{k}:{v}" for k, v in ent))
    path.write_text("\n".join(lines) + "\n")
    return ["dataset=file", f"dataset.params.path={path}", "dataset.params.design=sparse"]


def norm_files(d):
    return sorted((d / "problems").glob("*.norm.json"))


def test_the_norm_is_kept_and_another_process_reads_the_same_bits(problem_cache, tmp_path, monkeypatch):
    """The ARPACK path (forced on a small CSR design): the first process computes
    ||X_train||_2^2 and keeps it; after the in-process memo is dropped, the problem comes back
    with the kept value (the computation is made to fail, so it cannot have run) and that
    value equals the computed one bit for bit. Reference: LAPACK's SVD of the dense copy
    (numpy.linalg.norm(X, 2))."""
    import stopwise.problem.design as design
    import stopwise.problem.problem as problem_mod

    monkeypatch.setattr(problem_mod, "SPECTRUM_GRAM_MAX", 10)
    s = spec_from_overrides(thin_svmlight(tmp_path / "thin.svm"))
    first = cached_problem(s.dataset, s.split, s.seed)
    assert first.sparse and min(first.X_train.shape) > 10
    value = first.train_norm2_sq
    ref = np.linalg.norm(first.X_train.toarray(), 2) ** 2
    assert abs(value - ref) <= 1e-12 * ref
    (kept,) = norm_files(problem_cache)
    assert kept.name == problem_key(s.dataset, s.split, s.seed)[:32] + ".norm.json"
    data._CACHE.clear()

    def refuse(X):
        raise AssertionError("computed again instead of read")

    monkeypatch.setattr(design, "sparse_norm2", refuse)
    again = cached_problem(s.dataset, s.split, s.seed)
    assert again is not first and again.train_norm2_sq.hex() == value.hex()
    import pickle

    assert pickle.loads(pickle.dumps(first)).train_norm2_sq == value  # the hook does not stop pickling
    assert again.training.L == first.training.L
    assert data.cache.check_entry(kept) == ""


def test_a_kept_norm_is_used_only_when_unchanged_and_under_the_same_versions(problem_cache, tmp_path, monkeypatch):
    s = spec_from_overrides(thin_svmlight(tmp_path / "thin.svm"))
    key = problem_key(s.dataset, s.split, s.seed)
    value = cached_problem(s.dataset, s.split, s.seed).train_norm2_sq
    (kept,) = norm_files(problem_cache)
    assert data.cache.read_norm(key) == value
    good = kept.read_bytes()
    # another SciPy: not used (it might give other bits), and not a damaged file either
    meta = json.loads(good)
    meta["versions"]["scipy"] = "0.0.1"
    meta["meta_sha256"] = data.cache._meta_sha(meta)
    kept.write_text(json.dumps(meta, sort_keys=True))
    assert data.cache.read_norm(key) is None and data.cache.check_entry(kept) == ""
    data._CACHE.clear()
    assert cached_problem(s.dataset, s.split, s.seed).train_norm2_sq == value  # computed again, kept again
    assert kept.read_bytes() == good
    # a changed digit of the value: not used, and verify names the file
    text = good.decode()
    digit = text.index('"train_norm2_sq": ') + len('"train_norm2_sq": ')
    changed = text[:digit] + ("7" if text[digit] != "7" else "8") + text[digit + 1:]
    kept.write_text(changed)
    assert data.cache.read_norm(key) is None
    assert "checksum mismatch" in data.cache.check_entry(kept)
    assert kept in data.cache.entries()


def test_runs_that_read_a_kept_norm_store_the_traces_of_runs_that_compute_it(problem_cache, tmp_path):
    import pyarrow.parquet as pq

    import stopwise
    from stopwise.running.rerun import compare_tables

    over = thin_svmlight(tmp_path / "thin.svm") + ["solver=gd", "budget.iterations=20"]
    a = stopwise.run(over, root=tmp_path / "a")
    assert len(norm_files(problem_cache)) == 1
    data._CACHE.clear()
    b = stopwise.run(over, root=tmp_path / "b")
    assert a.status == b.status == "completed" and a.run_id == b.run_id
    ta = pq.read_table(tmp_path / "a" / "runs" / f"{a.run_id[:16]}.parquet")
    tb = pq.read_table(tmp_path / "b" / "runs" / f"{b.run_id[:16]}.parquet")
    assert compare_tables(ta, tb) == (0.0, [])


def test_a_norm_computed_quickly_is_not_kept(problem_cache, monkeypatch):
    """The default threshold: diabetes's 10 x 10 Gram matrix gives its norm in microseconds."""
    monkeypatch.delenv("STOPWISE_CACHE_MIN_SECONDS")
    s = spec_from_overrides(["dataset=diabetes", "seed=5"])
    assert cached_problem(s.dataset, s.split, s.seed).train_norm2_sq > 0
    assert norm_files(problem_cache) == []

"""dataset.params.design for svmlight files: the auto rule, run ids of dense runs kept,
scaling without centering checked against scikit-learn's StandardScaler(with_mean=False),
the problem cache's CSR entries and `stopwise verify`, the bad-input lines, and runs and a
sweep through the CLI on a sparse design."""
import json

import numpy as np
import pytest
import scipy.sparse as sp
from sklearn.datasets import dump_svmlight_file
from sklearn.preprocessing import StandardScaler

from stopwise.cli import main
from stopwise.config.compose import spec_from_overrides
from stopwise.config.spec import SpecError
from stopwise.data import build_problem, cache, cached_problem
from stopwise.data.tabular import SPARSE_DENSITY

# The file of tests/data/test_svmlight.py (11 of 24 entries stored: auto keeps it dense).
HAND = """\
+1 1:0.5 3:2
-1 2:1.5
+1 1:-1 2:0.25 4:3   # a comment
-1
+1 4:-2.5
-1 1:1 3:1 4:1
"""


def thin_text():
    """40 rows, 50 features, two entries per row (density 0.04: auto makes it sparse)."""
    out = []
    for i in range(40):
        a, b = (7 * i) % 50 + 1, (11 * i + 3) % 50 + 1
        ent = sorted({a: f"{i + 1}.5", b: "-1"}.items())
        out.append(f"{1 if i % 2 else -1} " + " ".join(f"{k}:{v}" for k, v in ent))
    return "\n".join(out) + "\n"


def problem(overrides):
    s = spec_from_overrides(overrides)
    return build_problem(s.dataset, s.split, s.seed)


# Run ids computed on main (commit c2192e0, before dataset.params.design existed) for these
# two files at the relative paths below, with dataset=file, solver=gd / sgd and
# budget.iterations=5: the runs then meant a dense, centred design, and they keep their ids.
TODAY = {("hand.libsvm", "gd"): "dfc7eb2fdf3e9de9da382ce6c51df1dda49b8d825cca5304ec2c9e6aecc6fe67",
         ("hand.libsvm", "sgd"): "6ce54773d6bc80c70be5eb4f3f24f58ecdd06759c6496a92c1a845a7f77e0109",
         ("thin.svm", "gd"): "9313ab54366246508493c47c4f72ec0513bf560317b75f08f02f0550f813549a",
         ("thin.svm", "sgd"): "a640da44e77f17c6d60c7da9ae13af58446f04eaaa53096f1443825a3d0e7d7e"}


def test_dense_svmlight_runs_keep_the_run_ids_they_had_on_main(tmp_path, monkeypatch):
    monkeypatch.chdir(tmp_path)
    (tmp_path / "hand.libsvm").write_text(HAND)
    (tmp_path / "thin.svm").write_text(thin_text())
    for (name, solver), digest in TODAY.items():
        base = ["dataset=file", f"dataset.params.path={name}", f"solver={solver}", "budget.iterations=5"]
        assert spec_from_overrides(base + ["dataset.params.design=dense"]).digest == digest
        auto = spec_from_overrides(base)
        if name == "hand.libsvm":  # density 11/24 > 0.1: auto is dense, the id of today
            assert auto.digest == digest and "design" not in auto.dataset["params"]
        else:  # density 0.04 <= 0.1: auto is sparse, a new id carrying the choice
            assert auto.dataset["params"]["design"] == "sparse" and auto.digest != digest
            assert spec_from_overrides(base + ["dataset.params.design=sparse"]).digest == auto.digest


def test_auto_is_sparse_up_to_the_stated_density(tmp_path):
    assert SPARSE_DENSITY == 0.1
    n, d = 20, 10
    for stored, want in ((20, "sparse"), (21, None)):  # 20 of 200 entries is exactly 0.1
        X = np.zeros((n, d))
        X.flat[np.linspace(0, n * d - 1, stored).astype(int)] = 1.5
        path = tmp_path / f"f{stored}.svm"
        dump_svmlight_file(X, np.arange(n) % 2, str(path), zero_based=False)
        s = spec_from_overrides(["dataset=file", f"dataset.params.path={path}", f"dataset.params.n_features={d}"])
        assert s.dataset["params"].get("design") == want
    csv = tmp_path / "t.csv"
    csv.write_text("a,y\n1,2\n3,4\n5,6\n")
    s = spec_from_overrides(["dataset=file", f"dataset.params.path={csv}", "dataset.params.target=y"])
    assert "design" not in s.dataset["params"]


def test_sparse_and_dense_designs_hold_the_same_matrix_unscaled(tmp_path):
    path = tmp_path / "thin.svm"
    path.write_text(thin_text())
    base = ["dataset=file", f"dataset.params.path={path}", "dataset.standardize=false"]
    ps, pd = problem(base + ["dataset.params.design=sparse"]), problem(base + ["dataset.params.design=dense"])
    assert ps.sparse and not pd.sparse and ps.feature_names == pd.feature_names
    for s in ("train", "val", "test"):
        assert getattr(ps, "X_" + s).format == "csr"
        assert np.array_equal(getattr(ps, "X_" + s).toarray(), getattr(pd, "X_" + s))
        assert np.array_equal(getattr(ps, "y_" + s), getattr(pd, "y_" + s))
    assert ps.info["design"]["used"] == "csr" and pd.info["design"]["used"] == "dense"
    assert ps.preprocessing.get("constant_removed") == pd.preprocessing.get("constant_removed")


def test_sparse_scaling_equals_sklearns_standard_scaler_without_mean(tmp_path):
    """Reference: sklearn.preprocessing.StandardScaler(with_mean=False) fitted on the training
    rows (dense and CSR input), applied to every split."""
    rng = np.random.default_rng(3)
    X = sp.random(300, 60, density=0.05, format="csr", random_state=rng, data_rvs=lambda k: rng.normal(2, 3, k))
    y = rng.standard_normal(300)
    path = tmp_path / "reg.svm"
    dump_svmlight_file(X, y, str(path), zero_based=False)
    p = problem(["dataset=file", f"dataset.params.path={path}", "dataset.params.task=regression",
                 "dataset.params.n_features=60", "dataset.drop_constant=false"])
    assert p.sparse
    rows = p.info["rows"]
    Xf = X.toarray()
    scaler = StandardScaler(with_mean=False).fit(Xf[rows["train"]])
    scaler_csr = StandardScaler(with_mean=False).fit(X[rows["train"]])
    np.testing.assert_allclose(p.preprocessing["scale"]["scale"], scaler.scale_, rtol=1e-12)
    np.testing.assert_allclose(p.preprocessing["scale"]["scale"], scaler_csr.scale_, rtol=1e-12)
    for s in ("train", "val", "test"):
        np.testing.assert_allclose(getattr(p, "X_" + s).toarray(), scaler.transform(Xf[rows[s]]), rtol=1e-12)
    assert p.preprocessing["scale"]["centered"] is False and "standardize" not in p.preprocessing
    assert p.preprocessing["center_target"]["mean"] == pytest.approx(float(np.mean(y[rows["train"]])), rel=1e-12)


def test_drop_constant_on_a_sparse_design_drops_what_the_dense_design_drops(tmp_path):
    path = tmp_path / "thin.svm"
    path.write_text(thin_text())
    base = ["dataset=file", f"dataset.params.path={path}"]
    ps, pd = problem(base + ["dataset.params.design=sparse"]), problem(base + ["dataset.params.design=dense"])
    assert ps.preprocessing["constant_removed"] == pd.preprocessing["constant_removed"]
    assert ps.feature_names == pd.feature_names and ps.d == pd.d


def test_the_problem_cache_keeps_csr_arrays_and_verify_checks_them(tmp_path, problem_cache, capsys):
    path = tmp_path / "thin.svm"
    path.write_text(thin_text())
    s = spec_from_overrides(["dataset=file", f"dataset.params.path={path}", "dataset.params.design=sparse"])
    built = cached_problem(s.dataset, s.split, s.seed)
    from stopwise import data

    data._CACHE.clear()
    (entry,) = cache.entries()
    meta = json.loads(entry.read_text())
    assert sorted(meta["csr"]) == ["X_test", "X_train", "X_val"]
    with np.load(entry.with_suffix(".npz")) as z:
        assert {"X_train__data", "X_train__indices", "X_train__indptr"} <= set(z.files) and "X_train" not in z.files
    again = cached_problem(s.dataset, s.split, s.seed)
    assert again is not built and again.sparse
    for k in ("X_train", "X_val", "X_test"):
        a, b = getattr(again, k), getattr(built, k)
        assert a.shape == b.shape and (a != b).nnz == 0
    root = tmp_path / "results"
    assert main(["run", "dataset=file", f"dataset.params.path={path}", "dataset.params.design=sparse",
                 "budget.iterations=3", f"results_root={root}"]) == 0
    assert main(["verify", str(root)]) == 0
    # one changed byte among the CSR arrays: the entry is named, and rebuilt on the next read
    npz = entry.with_suffix(".npz")
    raw = bytearray(npz.read_bytes())
    raw[len(raw) // 2] ^= 0xFF
    npz.write_bytes(bytes(raw))
    capsys.readouterr()
    assert main(["verify", str(root)]) == 1
    out = capsys.readouterr().out
    assert f"bad   {entry}: cached problem: its arrays differ" in out, out
    data._CACHE.clear()
    with pytest.warns(UserWarning, match="checksum mismatch"):
        rebuilt = cached_problem(s.dataset, s.split, s.seed)
    assert rebuilt.sparse and (rebuilt.X_train != built.X_train).nnz == 0


@pytest.mark.parametrize("extra,needle", [
    (["dataset.params.design=sideways"], "one of auto, sparse, dense"),
    (["dataset.center_features=true", "dataset.standardize=false", "dataset.params.design=sparse"],
     "center_features=true would fill every implicit zero"),
])
def test_bad_sparse_input_is_one_line_exit_2_and_writes_nothing(tmp_path, problem_cache, capsys, extra, needle):
    path = tmp_path / "thin.svm"
    path.write_text(thin_text())
    root = tmp_path / "results"
    rc = main(["run", "dataset=file", f"dataset.params.path={path}", *extra, f"results_root={root}"])
    err = capsys.readouterr().err.strip()
    assert rc == 2 and len(err.splitlines()) == 1 and needle in err, err
    assert not root.exists()


def test_design_sparse_on_a_csv_file_is_refused(tmp_path):
    csv = tmp_path / "t.csv"
    csv.write_text("a,y\n1,2\n3,4\n5,6\n")
    with pytest.raises(SpecError, match="design=sparse applies to svmlight files only"):
        spec_from_overrides(["dataset=file", f"dataset.params.path={csv}", "dataset.params.target=y",
                             "dataset.params.design=sparse"])


def test_a_solver_needing_a_dense_design_is_refused_before_a_sweep(tmp_path, problem_cache, capsys, monkeypatch):
    from stopwise.problem import design

    path = tmp_path / "thin.svm"
    path.write_text(thin_text())
    root = tmp_path / "results"
    monkeypatch.setattr(design, "_LIMIT_OVERRIDE", [1000])
    rc = main(["sweep", "dataset=file", f"dataset.params.path={path}", "dataset.params.design=sparse",
               "dataset.params.task=regression", "solver=gd,kaczmarz", "budget.iterations=3", f"results_root={root}"])
    err = capsys.readouterr().err.strip()
    assert rc == 2 and len(err.splitlines()) == 1, err
    assert "solver 'kaczmarz' needs a dense design" in err and "x 38 sparse design" in err and "design=dense" in err
    assert not root.exists()


def test_run_and_sweep_through_the_cli_on_a_sparse_design(tmp_path, problem_cache, capsys):
    from stopwise.results.query import load_runs, load_traces

    path = tmp_path / "thin.svm"
    path.write_text(thin_text())
    root = tmp_path / "results"
    common = ["dataset=file", f"dataset.params.path={path}", "dataset.params.design=sparse",
              "dataset.params.task=regression", "budget.iterations=8", f"results_root={root}"]
    assert main(["run", "solver=gd", *common]) == 0
    assert main(["sweep", "solver=gd,sgd,cgls,nesterov,heavy_ball,kaczmarz", *common]) == 0
    runs = load_runs(root)
    assert sorted(runs["solver"]) == ["cgls", "gd", "heavy_ball", "kaczmarz", "nesterov", "sgd"]
    assert set(runs["status"]) == {"completed"}
    traces = load_traces(root)
    assert np.isfinite(traces["val_error"]).all() and len(traces) > 6
    from stopwise.results.store import Store

    store = Store(root)
    meta = [store.run_meta(rid) for rid in runs["run_id"]]
    kinds = {m["identity"]["solver"]["name"]: m["problem"]["design"]["kind"] for m in meta}
    assert kinds == {"gd": "csr", "sgd": "csr", "cgls": "csr", "nesterov": "csr", "heavy_ball": "csr",
                     "kaczmarz": "dense copy of a csr design"}
    for m in meta:
        assert m["identity"]["dataset"]["params"]["design"] == "sparse"
        assert m["problem"]["design"]["centered"] is False
        assert "std" in m["problem"]["design"]["scaled"]

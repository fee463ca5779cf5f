"""svmlight / LIBSVM files through dataset=file, checked against scikit-learn's own loader
(sklearn.datasets.load_svmlight_file / dump_svmlight_file) and against a file written by hand."""
import numpy as np
import pytest
from sklearn.datasets import dump_svmlight_file, load_svmlight_file
from sklearn.preprocessing import LabelEncoder

from stopwise.cli import main
from stopwise.config.catalog import describe_config
from stopwise.config.compose import spec_from_overrides
from stopwise.config.spec import SpecError
from stopwise.data import build_problem
from stopwise.data.tabular import FileParams, read_svmlight

# A LIBSVM-style file written by hand: one-based indices, labels +1 / -1, a line without features,
# a comment, indices out of order on no line (the format's rule). Dense form below, column j is
# feature j + 1.
HAND = """\
+1 1:0.5 3:2
-1 2:1.5
+1 1:-1 2:0.25 4:3   # a comment
-1
+1 4:-2.5
-1 1:1 3:1 4:1
"""
HAND_X = np.array([[0.5, 0, 2, 0],
                   [0, 1.5, 0, 0],
                   [-1, 0.25, 0, 3],
                   [0, 0, 0, 0],
                   [0, 0, 0, -2.5],
                   [1, 0, 1, 1]])
HAND_Y = np.array([1, -1, 1, -1, 1, -1])
ALL = ["split.kind=indices", "split.train_rows=[0,1,2,3]", "split.val_rows=[4]", "split.test_rows=[5]",
       "dataset.standardize=false", "dataset.drop_constant=false"]


def problem(overrides):
    spec = spec_from_overrides(overrides)
    return build_problem(spec.dataset, spec.split, spec.seed)


def write(tmp_path, text, name="hand.libsvm"):
    path = tmp_path / name
    path.write_text(text)
    return path


def test_a_hand_written_one_based_file_gives_its_matrix_and_labels(tmp_path):
    path = write(tmp_path, HAND)
    X, y, base = read_svmlight(FileParams(path=str(path)))
    assert base == 1 and X.format == "csr" and X.shape == (6, 4)
    assert np.array_equal(X.toarray(), HAND_X) and np.array_equal(y, HAND_Y)
    # and equal to scikit-learn's own loader with its automatic index base
    Xs, ys = load_svmlight_file(str(path), zero_based="auto")
    assert np.array_equal(X.toarray(), Xs.toarray()) and np.array_equal(y, ys)


def test_the_problem_holds_the_files_rows_with_labels_encoded_minus_one_plus_one(tmp_path):
    path = write(tmp_path, HAND)
    p = problem(["dataset=file", f"dataset.params.path={path}", *ALL])
    assert p.task == "binary" and p.feature_names == ("x1", "x2", "x3", "x4")
    assert np.array_equal(p.X_train, HAND_X[:4]) and np.array_equal(p.X_val, HAND_X[4:5])
    assert np.array_equal(p.X_test, HAND_X[5:])
    # LabelEncoder order on the training labels: -1 first (-> -1.0), +1 second (-> +1.0)
    enc = LabelEncoder().fit(HAND_Y[:4])
    assert np.array_equal(p.y_train, 2.0 * enc.transform(HAND_Y[:4]) - 1.0)
    assert p.info["classes"] == [-1, 1]
    assert p.info["design"] == {"stored": "csr", "used": "dense", "nnz": 10, "density": 10 / 24}
    assert p.info["index_base"] == 1
    assert p.name == "hand"  # named after the file, as CSV files are


def test_zero_one_labels_also_become_minus_one_plus_one(tmp_path):
    path = write(tmp_path, HAND.replace("-1 ", "0 ").replace("-1\n", "0\n").replace("+1 ", "1 "), "zo.svm")
    p = problem(["dataset=file", f"dataset.params.path={path}", *ALL])
    assert p.info["classes"] == [0, 1]
    assert np.array_equal(p.y_train, np.where(HAND_Y[:4] > 0, 1.0, -1.0))


def test_zero_based_files_and_explicit_index_bases_match_scikit_learn(tmp_path):
    rng = np.random.default_rng(3)
    X = rng.normal(size=(30, 5)) * (rng.random((30, 5)) < 0.5)
    X[:, 0] = rng.normal(size=30)  # column 0 is used: a zero-based file
    y = rng.normal(size=30)
    path = tmp_path / "zero.svmlight"
    dump_svmlight_file(X, y, str(path), zero_based=True)
    Xa, ya, base = read_svmlight(FileParams(path=str(path)))
    Xs, ys = load_svmlight_file(str(path), zero_based="auto")
    assert base == 0 and np.array_equal(Xa.toarray(), Xs.toarray())
    np.testing.assert_allclose(Xa.toarray(), X, rtol=1e-15)  # dump writes 16 significant digits
    assert np.array_equal(ya, ys)
    # one-based file without column 0 read as zero-based on request: one leading empty column
    one = tmp_path / "one.svm"
    dump_svmlight_file(X[:, 1:], y, str(one), zero_based=False)
    Xz, _, bz = read_svmlight(FileParams(path=str(one), index_base="zero"))
    Xzs, _ = load_svmlight_file(str(one), zero_based=True)
    assert bz == 0 and np.array_equal(Xz.toarray(), Xzs.toarray()) and Xz.shape == (30, 5)
    Xo, _, bo = read_svmlight(FileParams(path=str(one), index_base="one"))
    Xos, _ = load_svmlight_file(str(one), zero_based=False)
    assert bo == 1 and np.array_equal(Xo.toarray(), Xos.toarray()) and Xo.shape == (30, 4)
    # n_features pads as scikit-learn's n_features does
    Xp, _, _ = read_svmlight(FileParams(path=str(one), n_features=7))
    Xps, _ = load_svmlight_file(str(one), zero_based="auto", n_features=7)
    assert Xp.shape == (30, 7) and np.array_equal(Xp.toarray(), Xps.toarray())


def test_a_regression_file_through_build_problem_equals_scikit_learns_arrays(tmp_path):
    """Real-valued labels: regression, target centered on the training mean, features standardized as
    scikit-learn's StandardScaler would on the same training rows."""
    from sklearn.preprocessing import StandardScaler

    rng = np.random.default_rng(0)
    X = rng.normal(size=(40, 6)) * (rng.random((40, 6)) < 0.6)
    X[:, 2] += 1.0  # no column constant
    y = X @ rng.normal(size=6) + 0.1 * rng.normal(size=40)
    path = tmp_path / "reg.svm"
    dump_svmlight_file(X, y, str(path), zero_based=False)
    Xs, ys = load_svmlight_file(str(path))
    Xs = Xs.toarray()
    tr, va, te = list(range(0, 24)), list(range(24, 32)), list(range(32, 40))
    p = problem(["dataset=file", f"dataset.params.path={path}", "split.kind=indices",
                 f"split.train_rows=[{','.join(map(str, tr))}]", f"split.val_rows=[{','.join(map(str, va))}]",
                 f"split.test_rows=[{','.join(map(str, te))}]"])
    sc = StandardScaler().fit(Xs[tr])
    assert p.task == "regression"
    np.testing.assert_allclose(p.X_train, sc.transform(Xs[tr]), rtol=1e-12, atol=1e-12)
    np.testing.assert_allclose(p.X_test, sc.transform(Xs[te]), rtol=1e-12, atol=1e-12)
    np.testing.assert_array_equal(p.y_test, ys[te] - ys[tr].mean())


def test_multiclass_codes_are_encoded_zero_to_k_minus_one(tmp_path):
    lines = [f"{c} 1:{i} 2:{(i * 7) % 5}" for i, c in enumerate([3, 1, 2, 3, 1, 2, 3, 1, 2, 2])]
    path = write(tmp_path, "\n".join(lines) + "\n", "mc.libsvm")
    p = problem(["dataset=file", f"dataset.params.path={path}", "dataset.params.task=multiclass",
                 "split.kind=indices", "split.train_rows=[0,1,2,3,4,5]", "split.val_rows=[6,7]",
                 "split.test_rows=[8,9]"])
    labels = np.array([3, 1, 2, 3, 1, 2, 3, 1, 2, 2])
    enc = LabelEncoder().fit(labels[:6])
    assert p.task == "multiclass" and p.info["classes"] == [1, 2, 3]
    assert np.array_equal(p.y_train, enc.transform(labels[:6]).astype(float))
    assert np.array_equal(p.y_test, enc.transform(labels[8:]).astype(float))
    # without task=multiclass, whole-number labels are ambiguous: one line naming both choices
    with pytest.raises(SpecError) as e:
        problem(["dataset=file", f"dataset.params.path={path}"])
    assert "task=multiclass" in str(e.value) and "regression" in str(e.value)


def test_format_param_reads_a_file_without_the_suffix(tmp_path):
    path = write(tmp_path, HAND, "hand.txt")
    p = problem(["dataset=file", f"dataset.params.path={path}", "dataset.params.format=svmlight", *ALL])
    assert np.array_equal(p.X_train, HAND_X[:4])


@pytest.mark.parametrize("extra,text,needle", [
    (["dataset.params.index_base=one"], "1 0:1 2:2\n-1 1:1\n", "uses feature index 0"),
    (["dataset.params.n_features=2"], HAND, "beyond dataset.params.n_features=2"),
    (["dataset.params.target=y"], HAND, "does not apply to the svmlight file"),
    ([], "1 a:b\n", "cannot read dataset file"),
    (["dataset.params.task=binary"], "1 1:1\n2 1:2\n3 1:0\n", "task=binary needs exactly 2"),
])
def test_bad_svmlight_input_is_one_line_exit_2_and_writes_nothing(tmp_path, problem_cache, capsys, extra, text, needle):
    path = write(tmp_path, text)
    root = tmp_path / "results"
    rc = main(["run", "dataset=file", f"dataset.params.path={path}", *extra, f"results_root={root}"])
    err = capsys.readouterr().err.strip()
    assert rc == 2 and len(err.splitlines()) == 1 and needle in err, err
    assert not root.exists()


def test_svmlight_options_on_a_csv_file_are_refused(tmp_path):
    path = write(tmp_path, "a,y\n1,2\n3,4\n5,6\n", "t.csv")
    with pytest.raises(SpecError, match="apply to svmlight files only"):
        spec_from_overrides(["dataset=file", f"dataset.params.path={path}", "dataset.params.target=y",
                             "dataset.params.index_base=one"])


def test_new_params_at_their_defaults_leave_file_run_ids_unchanged(tmp_path):
    """index_base and n_features are left out of the normalized config at their defaults, so runs
    on CSV files stored before they existed keep their ids."""
    path = write(tmp_path, "a,y\n1,2\n3,4\n5,6\n", "t.csv")
    spec = spec_from_overrides(["dataset=file", f"dataset.params.path={path}", "dataset.params.target=y"])
    assert "index_base" not in spec.dataset["params"] and "n_features" not in spec.dataset["params"]
    svm = write(tmp_path, HAND)
    spec = spec_from_overrides(["dataset=file", f"dataset.params.path={svm}", "dataset.params.index_base=one"])
    assert spec.dataset["params"]["index_base"] == "one"


def test_catalog_describes_an_svmlight_config(tmp_path):
    path = write(tmp_path, HAND)
    e = describe_config("hand", {"source": "file", "params": {"path": str(path)}})
    assert (e.rows, e.columns, e.source) == (6, 4, "file")


def test_a_run_on_an_svmlight_file(tmp_path, root):
    import stopwise

    path = write(tmp_path, HAND)
    out = stopwise.run(["dataset=file", f"dataset.params.path={path}", *ALL, "solver=gd", "budget.iterations=5"],
                       root=root)
    assert out.status == "completed"

"""The user's own files and preprocessing fitted on training rows, checked against scikit-learn's
transformers (SimpleImputer, OneHotEncoder, VarianceThreshold, StandardScaler, LabelEncoder, RBFSampler,
Nystroem) fitted on the same training rows."""
import numpy as np
import pandas as pd
import pytest
from sklearn.feature_selection import VarianceThreshold
from sklearn.impute import SimpleImputer
from sklearn.kernel_approximation import Nystroem, RBFSampler
from sklearn.preprocessing import LabelEncoder, OneHotEncoder, StandardScaler

from stopwise.cli import main
from stopwise.data import build_problem
from stopwise.config.spec import SpecError
from stopwise.config.compose import spec_from_overrides

TRAIN, VAL, TEST = list(range(0, 40)), list(range(40, 50)), list(range(50, 60))
SPLIT = ["split.kind=indices", f"split.train_rows=[{','.join(map(str, TRAIN))}]",
         f"split.val_rows=[{','.join(map(str, VAL))}]", f"split.test_rows=[{','.join(map(str, TEST))}]"]


def make_table(seed=0, n=60):
    """Test input: two numeric columns with gaps, a categorical column with gaps, a constant column,
    an integer code column, a numeric target and a label target."""
    rng = np.random.default_rng(seed)
    df = pd.DataFrame({
        "age": rng.normal(50, 10, n).round(1),
        "dose": rng.uniform(0, 5, n),
        "color": rng.choice(["red", "green", "blue"], n),
        "site": np.full(n, 3.0),
        "batch": rng.integers(1, 4, n),
    })
    df.loc[[1, 5, 44, 55], "age"] = np.nan
    df.loc[[2, 7, 9, 52], "color"] = None
    df.loc[[3], "dose"] = np.nan
    df["y"] = 2 * df["dose"].fillna(1) - 0.1 * df["age"].fillna(50) + (df["color"] == "red") + rng.normal(0, .1, n)
    df["label"] = np.where(df["y"] > df["y"].median(), "high", "low")
    return df


def write(tmp_path, df, name="table.csv"):
    path = tmp_path / name
    if name.endswith(".parquet"):
        df.to_parquet(path)
    else:
        df.to_csv(path, index=False)
    return path


def problem(overrides):
    spec = spec_from_overrides(overrides)
    return build_problem(spec.dataset, spec.split, spec.seed)


def reference(df, features, categorical, train, parts):
    """scikit-learn on the training rows: impute (mean / most frequent), one-hot (handle_unknown=ignore),
    drop zero-variance columns, standardize; columns in the file's order, a category block in place."""
    blocks = {k: [] for k in parts}
    for c in features:
        if c in categorical:
            col = lambda rows: df.loc[rows, [c]].astype(object).where(df.loc[rows, [c]].notna(), np.nan)  # noqa: E731
            imp = SimpleImputer(strategy="most_frequent").fit(col(train))
            enc = OneHotEncoder(handle_unknown="ignore", sparse_output=False).fit(imp.transform(col(train)))
            for k, rows in parts.items():
                blocks[k].append(enc.transform(imp.transform(col(rows))))
        else:
            imp = SimpleImputer(strategy="mean").fit(df.loc[train, [c]])
            for k, rows in parts.items():
                blocks[k].append(imp.transform(df.loc[rows, [c]]))
    X = {k: np.hstack(v) for k, v in blocks.items()}
    vt = VarianceThreshold(0.0).fit(X["train"])
    X = {k: vt.transform(v) for k, v in X.items()}
    sc = StandardScaler().fit(X["train"])
    return {k: sc.transform(v) for k, v in X.items()}, vt


def test_csv_encoding_and_imputation_match_scikit_learn(tmp_path):
    df = make_table()
    path = write(tmp_path, df)
    p = problem(["dataset=file", f"dataset.params.path={path}", "dataset.params.target=y",
                 "dataset.drop_features=[label]", *SPLIT])
    feats = ["age", "dose", "color", "site", "batch"]
    ref, vt = reference(df, feats, {"color"}, TRAIN, {"train": TRAIN, "val": VAL, "test": TEST})
    assert np.allclose(p.X_train, ref["train"], atol=1e-12)
    assert np.allclose(p.X_val, ref["val"], atol=1e-12) and np.allclose(p.X_test, ref["test"], atol=1e-12)
    assert p.feature_names == ("age", "dose", "color=blue", "color=green", "color=red", "batch")
    assert p.preprocessing["constant_removed"] == ["site"]
    assert p.preprocessing["one_hot"] == {"color": ["blue", "green", "red"]}
    assert p.preprocessing["impute"]["numeric_mean"]["age"] == pytest.approx(df.loc[TRAIN, "age"].mean(), rel=1e-15)
    # the target: centered on the training mean, regression
    y = df["y"].to_numpy()
    assert p.task == "regression"
    assert np.allclose(p.y_test, y[TEST] - y[TRAIN].mean(), atol=1e-12)


def test_parquet_file_gives_the_csv_problem(tmp_path):
    df = make_table()
    a = problem(["dataset=file", f"dataset.params.path={write(tmp_path, df)}", "dataset.params.target=y", *SPLIT])
    b = problem(["dataset=file", f"dataset.params.path={write(tmp_path, df, 't.parquet')}", "dataset.params.target=y",
                 *SPLIT])
    assert np.allclose(a.X_train, b.X_train, atol=1e-12) and a.feature_names == b.feature_names


def test_preprocessing_never_looks_at_validation_or_test_rows(tmp_path):
    """Rewrite every validation and test row (new values, new categories, new gaps): the fitted imputation,
    encoding, constant removal and scaling, and the training arrays, stay the same."""
    df = make_table()
    other = df.copy()
    rng = np.random.default_rng(99)
    rows = VAL + TEST
    other.loc[rows, "age"] = rng.normal(0, 100, len(rows))
    other.loc[rows, "dose"] = np.nan
    other.loc[rows, "color"] = "purple"
    other.loc[rows, "site"] = rng.normal(size=len(rows))
    other.loc[rows, "y"] = 1e6
    base = ["dataset.params.target=y", "dataset.drop_features=[label]", *SPLIT]
    a = problem(["dataset=file", f"dataset.params.path={write(tmp_path, df, 'a.csv')}", *base])
    b = problem(["dataset=file", f"dataset.params.path={write(tmp_path, other, 'b.csv')}", *base])
    assert a.X_train.tobytes() == b.X_train.tobytes() and a.y_train.tobytes() == b.y_train.tobytes()
    assert a.preprocessing == b.preprocessing
    assert not np.array_equal(a.X_test, b.X_test)
    # a category never seen in training encodes as all zeros before scaling
    j = [a.feature_names.index(f"color={c}") for c in ("blue", "green", "red")]
    mean = np.array(a.preprocessing["standardize"]["mean"])[j]
    scale = np.array(a.preprocessing["standardize"]["scale"])[j]
    assert np.allclose(b.X_test[:, j] * scale + mean, 0.0, atol=1e-12)


def test_row_dropping_instead_of_imputation(tmp_path):
    df = make_table()
    p = problem(["dataset=file", f"dataset.params.path={write(tmp_path, df)}", "dataset.params.target=y",
                 "dataset.missing=drop", "dataset.standardize=false", "dataset.drop_constant=false",
                 "dataset.drop_features=[label,color]", *SPLIT])
    keep = {k: [r for r in rows if not df.loc[r, ["age", "dose", "site", "batch"]].isna().any()]
            for k, rows in (("train", TRAIN), ("val", VAL), ("test", TEST))}
    assert p.info["rows"] == keep
    assert np.array_equal(p.X_test, df.loc[keep["test"], ["age", "dose", "site", "batch"]].to_numpy(float))
    assert p.preprocessing["dropped_rows"]["train"]["missing_features"] == len(TRAIN) - len(keep["train"])
    assert "impute" not in p.preprocessing


def test_rows_without_a_target_are_dropped(tmp_path):
    df = make_table()
    df.loc[[0, 45], "y"] = np.nan
    p = problem(["dataset=file", f"dataset.params.path={write(tmp_path, df)}", "dataset.params.target=y",
                 "dataset.drop_features=[label]", *SPLIT])
    assert 0 not in p.info["rows"]["train"] and 45 not in p.info["rows"]["val"]
    assert p.preprocessing["dropped_rows"]["train"] == {"missing_target": 1, "missing_features": 0}


def test_binary_and_multiclass_label_encoding(tmp_path):
    """Binary: -1.0/+1.0 with the second sorted class as +1; multiclass: 0..K-1 in sorted order, as
    scikit-learn's LabelEncoder fitted on the training labels; classes in encoded order in info."""
    df = make_table()
    path = write(tmp_path, df)
    p = problem(["dataset=file", f"dataset.params.path={path}", "dataset.params.target=label",
                 "dataset.drop_features=[y]", *SPLIT])
    enc = LabelEncoder().fit(df.loc[TRAIN, "label"])
    assert p.task == "binary" and p.info["classes"] == list(enc.classes_) == ["high", "low"]
    assert np.array_equal(p.y_test, 2.0 * enc.transform(df.loc[TEST, "label"]) - 1.0)
    assert "center_target" not in p.preprocessing
    m = problem(["dataset=file", f"dataset.params.path={path}", "dataset.params.target=color",
                 "dataset.params.task=multiclass", "dataset.drop_features=[y,label]", "split.kind=indices",
                 "split.train_rows=[0,1,3,4,6,8,10,11,12,13,14,15,16,17,18,19,20]", "split.test_rows=[21,22,23,24,25]"])
    enc = LabelEncoder().fit(df.loc[[0, 1, 3, 4, 6, 8, 10] + list(range(11, 21)), "color"])
    assert m.task == "multiclass" and m.info["classes"] == list(enc.classes_)
    assert np.array_equal(m.y_test, enc.transform(df.loc[21:25, "color"]).astype(float))


def test_integer_codes_can_be_declared_categorical(tmp_path):
    df = make_table()
    p = problem(["dataset=file", f"dataset.params.path={write(tmp_path, df)}", "dataset.params.target=y",
                 "dataset.categorical=[batch]", "dataset.drop_features=[label]", *SPLIT])
    assert [n for n in p.feature_names if n.startswith("batch=")] == ["batch=1", "batch=2", "batch=3"]


@pytest.mark.parametrize("kind", ["rbf_sampler", "nystroem"])
def test_random_features_are_scikit_learns_fitted_on_training_rows(tmp_path, kind):
    df = make_table()
    base = ["dataset=file", f"dataset.params.path={write(tmp_path, df)}", "dataset.params.target=y",
            "dataset.drop_features=[label]", *SPLIT]
    plain = problem(base)
    p = problem(base + [f"dataset.random_features.kind={kind}", "dataset.random_features.n_components=30",
                          "dataset.random_features.gamma=0.2", "dataset.random_features.seed=3"])
    if kind == "rbf_sampler":
        ref = RBFSampler(gamma=0.2, n_components=30, random_state=3).fit(plain.X_train)
    else:
        ref = Nystroem(gamma=0.2, n_components=30, random_state=3).fit(plain.X_train)
    assert np.allclose(p.X_train, ref.transform(plain.X_train), atol=1e-12)
    assert np.allclose(p.X_test, ref.transform(plain.X_test), atol=1e-12)
    assert p.d == 30 and p.w_true is None
    assert p.preprocessing["random_features"]["kind"] == kind


def test_random_features_bad_option_is_one_line():
    with pytest.raises(SpecError) as e:
        spec_from_overrides(["dataset.random_features.kind=fourier"])
    assert "one of rbf_sampler, nystroem" in str(e.value) and "\n" not in str(e.value)


# ---------------------------------------------------------------- bad input: one line, exit 2, nothing written

def _bad_cases(tmp_path):
    df = make_table()
    good = write(tmp_path, df, "good.csv")
    gap = df.copy()
    gap["empty"] = np.nan
    allgap = df.copy()
    allgap["extra"] = np.nan
    allgap.loc[0, "extra"] = 1.0  # one value: dropping rows with gaps leaves none
    tiny = df.head(4)
    return [
        (["dataset=file", f"dataset.params.path={tmp_path / 'nope.csv'}", "dataset.params.target=y"],
         "not found"),
        (["dataset=file", f"dataset.params.path={good}", "dataset.params.target=yy"],
         "no column 'yy' for the target; valid: age, dose"),
        (["dataset=file", f"dataset.params.path={good}", "dataset.params.target=label",
          "dataset.params.task=regression"], "is not numeric"),
        (["dataset=file", f"dataset.params.path={write(tmp_path, gap, 'gap.csv')}", "dataset.params.target=y"],
         "column 'empty'"),
        (["dataset=file", f"dataset.params.path={write(tmp_path, allgap, 'allgap.csv')}", "dataset.params.target=y",
          "dataset.missing=drop"], "rows left after dropping rows with missing values"),
        (["dataset=file", f"dataset.params.path={write(tmp_path, tiny, 'tiny.csv')}", "dataset.params.target=y",
          "split.test=0.25", "split.val=0.1"], "no validation rows"),
        (["dataset=file", "dataset.params.target=y"], "needs dataset.params.path"),
        (["dataset=file", f"dataset.params.path={good}", "dataset.missing=guess", "dataset.params.target=y"],
         "one of impute, drop"),
    ]


def test_bad_file_input_is_one_line_exit_2_and_writes_nothing(tmp_path, problem_cache, capsys):
    results = tmp_path / "results"
    for overrides, needle in _bad_cases(tmp_path):
        rc = main(["run", *overrides, f"results_root={results}"])
        err = capsys.readouterr().err.strip()
        assert rc == 2, (overrides, err)
        assert len(err.splitlines()) == 1 and err.startswith("stopwise: error: ") and needle in err, (needle, err)
        assert not results.exists() and not problem_cache.exists()


def test_bad_file_input_in_a_sweep_writes_nothing(tmp_path, problem_cache, capsys):
    """Two datasets in one sweep, the second bad: nothing of the first is cached either."""
    results = tmp_path / "results"
    good = write(tmp_path, make_table(), "good.csv")
    rc = main(["sweep", "dataset=file", f"dataset.params.path={good}", "dataset.params.target=y,nope",
               "solver=cgls", "budget.iterations=3", f"results_root={results}"])
    err = capsys.readouterr().err
    assert rc == 2 and "no column 'nope'" in err
    assert not results.exists() and not problem_cache.exists()

"""Bundled classification datasets: facts from the loaders' own descriptions (Fisher 1936;
Street, Wolberg, Mangasarian 1993; UCI wine and optdigits descriptions; see docs/references.md), label encodings, class subsets, the constant column, and one-line bad input."""
import numpy as np
import pytest
from sklearn import datasets

import stopwise
from stopwise.data import build_problem, normalize_dataset
from stopwise.data.sources import SKLEARN_CLASSES, SklearnParams, load_sklearn
from stopwise.config.spec import SpecError
from stopwise.config.compose import spec_from_overrides


@pytest.mark.parametrize("loader,shape,counts", [
    ("breast_cancer", (569, 30), {"malignant": 212, "benign": 357}),
    ("wine", (178, 13), {"class_0": 59, "class_1": 71, "class_2": 48}),
    # UCI optdigits description, class distribution of the 1797-row test file (from memory)
    ("digits", (1797, 64), dict(zip(map(str, range(10)), (178, 182, 177, 183, 181, 182, 181, 179, 174, 180)))),
    ("iris", (150, 4), {"setosa": 50, "versicolor": 50, "virginica": 50}),
])
def test_dataset_facts(loader, shape, counts):
    # sizes and class counts published with each data set (docs/references.md, "Datasets")
    raw = load_sklearn(SklearnParams(loader=loader))
    assert raw.X.shape == shape and raw.X.dtype == np.float64
    assert raw.info["class_counts"] == counts
    # the counts the loader reports are those of its labels (not only of its class table)
    encoded = np.unique(raw.y, return_counts=True)[1]
    assert sorted(encoded.tolist()) == sorted(counts.values())
    if loader == "digits":
        assert raw.X.min() == 0 and raw.X.max() == 16


def test_class_table_matches_sklearn_target_names():
    for loader, names in SKLEARN_CLASSES.items():
        bunch = getattr(datasets, f"load_{loader}")()
        assert tuple(str(n) for n in bunch.target_names) == names


def test_encodings():
    raw = load_sklearn(SklearnParams(loader="breast_cancer"))
    target = datasets.load_breast_cancer().target
    assert raw.task == "binary" and raw.info["classes"] == ["malignant", "benign"]
    assert np.array_equal(raw.y, np.where(target == 1, 1.0, -1.0))
    raw = load_sklearn(SklearnParams(loader="wine"))
    assert raw.task == "multiclass" and np.array_equal(raw.y, datasets.load_wine().target.astype(float))
    # a subset keeps its rows in file order and encodes in the listed order
    X, t = datasets.load_iris(return_X_y=True)
    raw = load_sklearn(SklearnParams(loader="iris", classes=["virginica", "versicolor"]))
    keep = t > 0
    assert np.array_equal(raw.X, X[keep]) and np.array_equal(raw.y, np.where(t[keep] == 1, 1.0, -1.0))
    assert raw.info["classes"] == ["virginica", "versicolor"]
    by_code = load_sklearn(SklearnParams(loader="iris", classes=[2, 1]))
    assert np.array_equal(by_code.y, raw.y)
    raw = load_sklearn(SklearnParams(loader="iris", classes=[2, 0, 1]))
    assert raw.task == "multiclass" and np.array_equal(raw.y, np.array([1.0, 2.0, 0.0])[t])
    raw = load_sklearn(SklearnParams(loader="iris", positive="setosa"))
    assert raw.task == "binary" and np.array_equal(raw.y, np.where(t == 0, 1.0, -1.0))
    assert raw.info["classes"] == ["not setosa", "setosa"] and raw.info["class_counts"] == {"not setosa": 100,
                                                                                            "setosa": 50}
    raw = load_sklearn(SklearnParams(loader="digits", classes=[3, 5, 8], positive=5))
    # digits 3, 5, 8: 183, 182 and 174 rows (UCI optdigits class distribution, as above)
    assert raw.X.shape[0] == 183 + 182 + 174 and (raw.y == 1).sum() == 182


def test_problem_from_config():
    p = stopwise.load_problem(["dataset=iris_setosa_versicolor"])
    assert p.task == "binary" and p.objective == "logistic" and p.n_classes == 2
    assert p.feature_names[-1] == "const" and p.d == 5
    for X in (p.X_train, p.X_val, p.X_test):
        assert np.all(X[:, -1] == 1.0)
    # standardization is fitted on the training rows only
    assert np.allclose(p.X_train[:, :4].mean(axis=0), 0, atol=1e-12)
    # the standard deviation of n standardized values: sums of n terms, so float64 round-off
    # of at most about n eps (Higham, Accuracy and Stability of Numerical Algorithms, 2002,
    # Section 4.2, from memory)
    eps = np.finfo(float).eps
    np.testing.assert_allclose(p.X_train[:, :4].std(axis=0), 1, rtol=0, atol=p.n_train * eps)
    assert set(np.unique(np.concatenate([p.y_train, p.y_val, p.y_test]))) == {-1.0, 1.0}
    assert p.n_train + p.X_val.shape[0] + p.X_test.shape[0] == 100
    m = stopwise.load_problem(["dataset=digits"])
    assert m.task == "multiclass" and m.n_classes == 10 and m.training.k == 10
    # pixels constant on the training rows are dropped (drop_constant), the rest kept
    raw = datasets.load_digits().data[m.info["rows"]["train"]]
    assert m.d == int(np.count_nonzero(raw.std(axis=0) > 0)) and m.training.dim == 10 * m.d
    # L from LAPACK syevd on X^T X against numpy's SVD of X: the Gram entries are n-term sums
    # (round-off <= n eps relative to |X|^T |X|, Higham 2002, Section 3.5, from memory) and
    # both eigensolvers are backward stable with error a small multiple of d eps, so they
    # agree to (n + d) eps
    def svd_agrees(P, curvature):
        ref = np.linalg.norm(P.X_train, 2) ** 2 * curvature / P.n_train
        return P.training.L == pytest.approx(ref, rel=(P.n_train + P.d) * eps, abs=0)

    assert svd_agrees(m, 1 / 2)
    b = stopwise.load_problem(["dataset=digits_0v1"])
    assert svd_agrees(b, 1 / 4)
    # exact: both are c ||X||^2 / n of one ||X||^2 with c = 1 and 1/4 (scaling by 4 is exact)
    assert b.training_set("hinge").L == 4 * b.training.L
    sm = b.training_set("softmax")
    assert sm.k == 2 and sm.dim == 2 * b.d


def test_loss_option_and_identity():
    base = spec_from_overrides(["dataset=iris_setosa_versicolor"])
    same = spec_from_overrides(["dataset=iris_setosa_versicolor", "dataset.loss=logistic"])
    hinge = spec_from_overrides(["dataset=iris_setosa_versicolor", "dataset.loss=hinge"])
    assert base.run_id == same.run_id      # the task's default loss is implied
    assert hinge.run_id != base.run_id     # another loss changes the numbers and the identity
    assert build_problem(hinge.dataset, hinge.split, 0).objective == "hinge"
    # options left at their defaults stay out of regression identities
    base_cfg = {"name": "diabetes", "source": "sklearn", "params": {"loader": "diabetes"}}
    d = normalize_dataset(dict(base_cfg, loss=None, add_constant=False))
    assert d == normalize_dataset(base_cfg)
    assert not {"loss", "add_constant"} & set(d) and not {"classes", "positive"} & set(d["params"])


@pytest.mark.parametrize("overrides,fragment", [
    (["dataset=iris", "+dataset.params.classes=[0]"], "at least 2 classes"),
    (["dataset=iris", "+dataset.params.classes=[0,7]"], "not a class of iris"),
    (["dataset=iris", "+dataset.params.classes=[setosa,setosa]"], "twice"),
    (["dataset=iris_setosa_versicolor", "+dataset.params.positive=virginica"], "not among"),
    (["dataset=diabetes", "+dataset.params.classes=[0,1]"], "classification loaders"),
    (["dataset=iris", "dataset.loss=hinge"], "valid: softmax"),
    (["dataset=diabetes", "dataset.loss=logistic"], "valid: squares"),
    (["dataset=wine", "dataset.loss=cubic"], "must be one of"),
    (["dataset=diabetes", "solver=hinge_diagonal"], "does not handle regression"),
    (["dataset=iris", "solver=relu_net"], "does not handle multiclass"),
    (["dataset=breast_cancer", "solver=hinge_diagonal", "dataset.loss=logistic"], "conflicts"),
])
def test_bad_input_is_one_line(overrides, fragment):
    with pytest.raises(SpecError) as e:
        spec_from_overrides(overrides)
    msg = str(e.value)
    assert fragment in msg and "\n" not in msg

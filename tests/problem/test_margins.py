"""Separability, the hard-margin reference, and the classification columns of the recorder."""
import math

import numpy as np
import pandas as pd
import pytest
from scipy.special import softmax
from sklearn import datasets
from sklearn.metrics import accuracy_score, hinge_loss, log_loss, zero_one_loss

import stopwise
from stopwise.cli import main as cli_main
from stopwise.problem.margins import hard_margin, is_separable, normalized_margin, reference
from stopwise.problem.problem import Problem
from stopwise.running.record import make_recorder

from helpers.classif_refs import iris_setosa_versicolor, separable_gaussian, slsqp_hard_margin, svc_hard_margin


def with_constant(X):
    return np.hstack([X, np.ones((X.shape[0], 1))])


def test_separability_matches_references():
    # UCI iris description (from memory) and LP feasibility (scipy.optimize.linprog): iris setosa vs rest and digits 0 vs 1 are
    # separable, iris versicolor vs virginica is not (affinely: a constant column is added)
    X, t = datasets.load_iris(return_X_y=True)
    assert is_separable(with_constant(X), np.where(t == 0, 1.0, -1.0))
    keep = t > 0
    assert not is_separable(with_constant(X[keep]), np.where(t[keep] == 2, 1.0, -1.0))
    D, td = datasets.load_digits(return_X_y=True)
    keep = td < 2
    assert is_separable(with_constant(D[keep]), np.where(td[keep] == 1, 1.0, -1.0))
    # an independent witness for the separable cases: SVC's hard-margin solution classifies
    # every row correctly (scikit-learn), and perfectly duplicated opposite labels never separate
    Z, y = iris_setosa_versicolor()
    assert np.all(y * (Z @ svc_hard_margin(Z, y)) > 0)
    assert not is_separable(np.vstack([Z, Z[:1]]), np.concatenate([y, -y[:1]]))


@pytest.mark.parametrize("make", [iris_setosa_versicolor, separable_gaussian])
def test_hard_margin_reference_matches_slsqp(make):
    # stopwise's reference (SVC on mirrored rows) against SciPy SLSQP on the QP itself
    X, y = make()
    ref = hard_margin(X, y)
    w_qp = slsqp_hard_margin(X, y)
    assert ref.separable
    assert np.allclose(ref.w, w_qp, atol=1e-5 * np.linalg.norm(w_qp))
    assert ref.min_functional_margin == pytest.approx(1.0, abs=1e-5)
    # the reported margin of the reference solution is 1 / ||w_svm||
    assert normalized_margin(X, y, ref.w) == pytest.approx(1 / np.linalg.norm(w_qp), rel=1e-5)
    assert ref.margin == pytest.approx(1 / np.linalg.norm(w_qp), rel=1e-5)
    # no other direction has a larger margin: random perturbations only lower it
    rng = np.random.default_rng(0)
    for _ in range(20):
        v = ref.w + 0.05 * np.linalg.norm(ref.w) * rng.standard_normal(ref.w.size)
        assert normalized_margin(X, y, v) < ref.margin


def _problem(X, y, task="binary", **kw):
    n = X.shape[0]
    tr, va, te = np.arange(0, n, 2), np.arange(1, n, 4), np.arange(3, n, 4)
    return Problem(name="t", task=task, X_train=X[tr], y_train=y[tr], X_val=X[va], y_val=y[va],
                   X_test=X[te], y_test=y[te], **kw)


def test_recorder_binary_columns_against_references():
    X, y = iris_setosa_versicolor()
    p = _problem(X, y)
    w_svm = slsqp_hard_margin(p.X_train, p.y_train)
    rec = make_recorder(p)
    rng = np.random.default_rng(1)
    w = rng.standard_normal(5)
    for v in (w, w_svm, 3.0 * w_svm):
        rec.record(0, 0.0, 0.0, v)
    cols = rec.result()
    s = p.X_val @ w
    # sklearn.metrics references for row 0
    assert cols["train_error"][0] == pytest.approx(zero_one_loss(p.y_train, np.sign(p.X_train @ w)))
    assert cols["val_error"][0] == pytest.approx(zero_one_loss(p.y_val, np.sign(s)))
    assert cols["val_loss"][0] == pytest.approx(log_loss(p.y_val > 0, 1 / (1 + np.exp(-s))), rel=1e-10)
    assert cols["train_loss"][0] == pytest.approx(log_loss(p.y_train > 0, 1 / (1 + np.exp(-(p.X_train @ w)))),
                                                  rel=1e-10)
    assert math.isnan(cols["residual_norm"][0])
    # the hard-margin solution (SLSQP): margin 1/||w_svm||, zero angle and distance, for any scale
    for i in (1, 2):
        assert cols["margin"][i] == pytest.approx(1 / np.linalg.norm(w_svm), rel=1e-6)
        assert cols["svm_dist"][i] == pytest.approx(0.0, abs=1e-5)
        assert cols["svm_angle"][i] == pytest.approx(0.0, abs=1e-5)
    u = w_svm / np.linalg.norm(w_svm)  # SLSQP's direction; the recorder's comes from SVC (agree to ~1e-7)
    cos = w @ u / np.linalg.norm(w)
    assert cols["svm_angle"][0] == pytest.approx(np.arccos(cos), rel=1e-6)
    assert cols["svm_dist"][0] == pytest.approx(np.linalg.norm(w / np.linalg.norm(w) - u), rel=1e-6)
    assert rec.info["separable"] and rec.info["svm_margin"] == pytest.approx(1 / np.linalg.norm(w_svm), rel=1e-5)
    # hinge loss per split follows the run's loss (sklearn.metrics.hinge_loss)
    rh = make_recorder(p, loss="hinge")
    rh.record(0, 0.0, 0.0, w)
    assert rh.result()["test_loss"][0] == pytest.approx(hinge_loss(p.y_test, p.X_test @ w))


def test_recorder_multiclass_columns():
    X, t = datasets.load_wine(return_X_y=True)
    X = (X - X.mean(0)) / X.std(0)
    p = _problem(X, t.astype(float), task="multiclass")
    W = np.random.default_rng(2).standard_normal(13 * 3)
    rec = make_recorder(p)
    rec.record(0, 0.0, 0.0, W)
    cols = rec.result()
    S = p.X_test @ W.reshape(13, 3)
    assert cols["test_error"][0] == pytest.approx(1 - accuracy_score(p.y_test, S.argmax(1)))
    assert cols["test_loss"][0] == pytest.approx(log_loss(p.y_test, softmax(S, axis=1), labels=[0, 1, 2]))
    St = p.X_train @ W.reshape(13, 3)
    c = p.y_train.astype(int)
    own = St[np.arange(len(c)), c]
    St[np.arange(len(c)), c] = -np.inf
    assert cols["margin"][0] == pytest.approx(np.min(own - St.max(1)) / np.linalg.norm(W))
    assert math.isnan(cols["svm_dist"][0]) and "separable" not in rec.info


def test_reference_is_computed_once_and_stored():
    p = stopwise.load_problem(["dataset=digits_0v1"])
    r1 = reference(p)
    assert reference(p) is r1 and r1.separable
    assert reference(stopwise.load_problem(["dataset=digits"])) is None


def test_run_stores_reference_and_columns(root):
    out = stopwise.run(["dataset=iris_setosa_versicolor", "solver=gd", "budget.iterations=50"], root=root)
    df = pd.read_parquet(out.path)
    for c in ("val_loss", "test_loss", "margin", "svm_angle", "svm_dist"):
        assert c in df.columns
    assert (df["loss"] == "logistic").all() and (df["task"] == "binary").all()
    meta = stopwise.results.store.Store(root).run_meta(out.run_id)
    p = stopwise.load_problem(["dataset=iris_setosa_versicolor"])
    w_qp = slsqp_hard_margin(p.X_train, p.y_train)
    info = meta["problem"]
    assert info["separable"] and info["loss"] == "logistic"
    assert np.allclose(info["svm_w"], w_qp, atol=1e-5)
    assert info["svm_margin"] == pytest.approx(1 / np.linalg.norm(w_qp), rel=1e-5)


def test_cli_bad_input_writes_nothing(tmp_path, capsys):
    rc = cli_main(["run", "dataset=iris", "dataset.loss=hinge", f"results_root={tmp_path / 'r'}"])
    err = capsys.readouterr().err.strip()
    assert rc == 2 and err.startswith("stopwise: error: ") and "\n" not in err
    assert not (tmp_path / "r").exists()


def test_reference_skipped_above_the_row_limit(monkeypatch):
    from stopwise.problem import margins

    X, y = separable_gaussian(n=60)
    monkeypatch.setattr(margins, "REFERENCE_MAX_ROWS", 20)
    p = _problem(X, y)
    rec = make_recorder(p)
    rec.record(0, 0.0, 0.0, np.ones(X.shape[1]))
    assert rec.info["separable"] is None and "skipped" in rec.info["svm_method"]
    assert math.isnan(rec.result()["svm_dist"][0]) and not math.isnan(rec.result()["margin"][0])


def test_reference_on_the_separable_generator(root):
    # the generator's unit separator u has normalized margin exactly `margin` (0.5) on all
    # rows by construction, so the hard-margin value of the training rows is >= 0.5 and the
    # SVM direction is at least as good as u; with 10% flipped labels no separator exists
    p = stopwise.load_problem(["dataset=separable"])
    ref = reference(p)
    u = np.array(p.info["separator"])
    assert ref.separable and normalized_margin(p.X_train, p.y_train, u) >= 0.5 - 1e-12
    assert ref.margin >= normalized_margin(p.X_train, p.y_train, u) - 1e-6
    assert not reference(stopwise.load_problem(["dataset=separable_noisy"])).separable
    out = stopwise.run(["dataset=separable", "solver=nesterov_normalized", "budget.iterations=300"], root=root)
    df = pd.read_parquet(out.path)
    # regression guard (project's own measurement, not an outside fact): the distance and margin levels after 300 steps
    assert df["svm_dist"].iloc[-1] < min(0.05, df["svm_dist"].iloc[1] / 10)
    assert 0.5 * ref.margin < df["margin"].iloc[-1] <= ref.margin + 1e-9

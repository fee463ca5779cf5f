"""The recorder factory: one ``record()`` interface, the recorder chosen by the problem's task."""
import math

import numpy as np
import pytest
from sklearn.metrics import log_loss, mean_squared_error, zero_one_loss

from stopwise.problem.problem import Problem
from stopwise.results.schema import BASE_COLUMNS
from stopwise.running.record import ClassificationRecorder, Recorder, RegressionRecorder, make_recorder
from stopwise.stopping.residual import COLUMNS as RESIDUAL_COLUMNS


def _problem(task, y_of):
    rng = np.random.default_rng(3)
    X = rng.standard_normal((60, 4))
    y = y_of(X @ np.array([1.0, -2.0, 0.5, 0.0]), rng)
    tr, va, te = np.arange(0, 60, 2), np.arange(1, 60, 4), np.arange(3, 60, 4)
    return Problem(name="t", task=task, X_train=X[tr], y_train=y[tr], X_val=X[va], y_val=y[va],
                   X_test=X[te], y_test=y[te])


REGRESSION = (lambda: _problem("regression", lambda s, rng: s + 0.1 * rng.standard_normal(s.size)))
BINARY = (lambda: _problem("binary", lambda s, rng: np.where(s + 0.5 * rng.standard_normal(s.size) > 0, 1.0, -1.0)))
MULTICLASS = (lambda: _problem("multiclass", lambda s, rng: np.digitize(s, [-1.0, 1.0]).astype(float)))


@pytest.mark.parametrize("make,cls", [(REGRESSION, RegressionRecorder), (BINARY, ClassificationRecorder),
                                      (MULTICLASS, ClassificationRecorder)])
def test_factory_picks_the_recorder_of_the_task(make, cls):
    p = make()
    rec = make_recorder(p, statistics="gram", loss=None)  # arguments a task does not read are ignored
    assert type(rec) is cls and isinstance(rec, Recorder)
    assert rec.columns[: len(BASE_COLUMNS)] == BASE_COLUMNS
    assert (RESIDUAL_COLUMNS[0] in rec.columns) is (cls is RegressionRecorder)
    assert ("margin" in rec.columns) is (cls is ClassificationRecorder)
    assert rec.fallbacks == 0 and rec.size == 0


def test_regression_rows_match_numpy_across_growth():
    """Capacity 1 grows on every row; each row's errors are sklearn's mean squared errors
    (sklearn.metrics.mean_squared_error) of the same iterate, and earlier rows survive."""
    p = REGRESSION()
    rng = np.random.default_rng(4)
    ws = [rng.standard_normal(p.d) for _ in range(5)]
    for path in ("gram", "direct"):
        rec = make_recorder(p, capacity=1, statistics=path)
        losses = [rec.record(k, float(k), 0.0, w) for k, w in enumerate(ws)]
        cols = rec.result()
        assert rec.size == 5 and cols["iteration"].tolist() == [0, 1, 2, 3, 4]
        for k, w in enumerate(ws):
            mse = mean_squared_error(p.y_train, p.X_train @ w)
            assert cols["train_error"][k] == pytest.approx(mse, rel=1e-12)
            assert losses[k] == cols["train_loss"][k] == pytest.approx(mse / 2, rel=1e-12)
            assert cols["test_error"][k] == pytest.approx(mean_squared_error(p.y_test, p.X_test @ w), rel=1e-12)
            assert cols["residual_norm"][k] == pytest.approx(np.linalg.norm(p.X_train @ w - p.y_train), rel=1e-12)
        r = [p.X_train @ w - p.y_train for w in ws]
        assert math.isnan(cols["residual_dot_prev"][0])
        np.testing.assert_allclose(cols["residual_dot_prev"][1:], [r[k - 1] @ r[k] for k in range(1, 5)],
                                   rtol=1e-10)


def test_classification_rows_match_sklearn_across_growth():
    """Binary logistic rows (sklearn.metrics.zero_one_loss and log_loss) through the same
    ``record()``, with the recorder growing from capacity 1."""
    p = BINARY()
    rng = np.random.default_rng(5)
    ws = [rng.standard_normal(p.d) for _ in range(3)]
    rec = make_recorder(p, capacity=1)
    losses = [rec.record(k, 0.0, 0.0, w) for k, w in enumerate(ws)]
    cols = rec.result()
    for k, w in enumerate(ws):
        s = p.X_train @ w
        assert cols["train_error"][k] == pytest.approx(zero_one_loss(p.y_train, np.sign(s)))
        assert losses[k] == pytest.approx(log_loss(p.y_train > 0, 1 / (1 + np.exp(-s))), rel=1e-10)
    assert rec.info["loss"] == "logistic"

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


_FRESH = r"""
import json, sys
assert not any(m.startswith("stopwise") for m in sys.modules)  # a fresh interpreter
import numpy as np
import stopwise.running
from stopwise.config.compose import spec_from_overrides
from stopwise.problem.problem import Problem
from stopwise.running.record import METRIC_SETS, make_recorder
from stopwise.running.runner import execute

out = {"sets": list(METRIC_SETS)}
spec = spec_from_overrides(["dataset=overparam", "solver=gd", "budget.iterations=20"])
run = execute(spec).columns
out["run_columns"] = list(run)
out["run_nnz"] = run["nnz"].tolist()
rng = np.random.default_rng(6)
X = rng.standard_normal((12, 6))
w_true = np.array([1.0, 0.0, -2.0, 0.0, 0.0, 0.5])
p = Problem(name="t", task="regression", X_train=X[:8], y_train=X[:8] @ w_true, X_val=X[8:10],
            y_val=X[8:10] @ w_true, X_test=X[10:], y_test=X[10:] @ w_true, w_true=w_true)
ws = [np.array([0.3, 0.0, -1.0, 1e-9, 0.2, 0.0]), np.array([0.0, 0.1, 0.0, 0.0, 0.0, 0.0]), np.zeros(6)]
rec = make_recorder(p)
for k, w in enumerate(ws):
    rec.record(k, 0.0, 0.0, w)
cols = rec.result()
out["ws"] = [w.tolist() for w in ws]
out["w_true"] = w_true.tolist()
out["rows"] = {c: cols[c].tolist() for c in ("nnz", "support_precision", "support_recall")}
METRIC_SETS.unregister("sparsity")  # without the set, a run has none of its columns
out["run_columns_without"] = list(execute(spec).columns)
print(json.dumps(out))
"""


def test_importing_the_running_package_registers_the_sparsity_columns():
    """In a fresh interpreter, ``import stopwise.running`` alone registers the ``sparsity``
    metric set, and then a run records ``nnz`` / ``support_precision`` / ``support_recall``:
    through the runner on a problem with a known truth, and through the recorder with values
    equal to scikit-learn's precision_score / recall_score of the support masks (|w_j| >
    1e-6 max |w|, stopwise.running.sparsity). Unregistering the set removes the columns."""
    import json
    import subprocess
    import sys

    from sklearn.metrics import precision_score, recall_score

    proc = subprocess.run([sys.executable, "-c", _FRESH], capture_output=True, text=True)  # inherits STOPWISE_CACHE
    assert proc.returncode == 0, proc.stderr
    out = json.loads(proc.stdout.strip().splitlines()[-1])
    assert out["sets"] == ["sparsity"]
    sparsity = ["nnz", "support_precision", "support_recall"]
    assert set(sparsity) <= set(out["run_columns"])
    assert not set(sparsity) & set(out["run_columns_without"])
    assert set(out["run_columns"]) - set(out["run_columns_without"]) == set(sparsity)
    assert out["run_nnz"][0] == 0 and out["run_nnz"][-1] > 0  # w_0 = 0, then gradient descent fills it in
    truth = np.array(out["w_true"]) != 0
    rows = out["rows"]
    for k, w in enumerate(np.array(v) for v in out["ws"]):
        mask = np.abs(w) > 1e-6 * np.abs(w).max() if w.any() else np.zeros(w.size, bool)
        assert rows["nnz"][k] == mask.sum()
        assert rows["support_recall"][k] == pytest.approx(recall_score(truth, mask))
        if mask.any():
            assert rows["support_precision"][k] == pytest.approx(precision_score(truth, mask))
        else:  # an empty support has no precision (NaN; scikit-learn warns and says 0)
            assert math.isnan(rows["support_precision"][k])
    assert rows["nnz"] == [3, 1, 0]  # 1e-9 is below the threshold; the second iterate misses the truth

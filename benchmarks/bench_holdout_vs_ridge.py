"""Benchmark 4: early stopping with hold-out selection against tuned ridge regression.

One 20000 x 300 least-squares problem (column scales j^-1, so the spectrum decays over
five orders of magnitude and regularization matters; Gaussian noise), split once into
12000 training, 4000 validation and 4000 test rows. Every method sees the same split:

* stopwise: gradient descent, Nesterov and CGLS run with every iterate recorded (every
  metric, the residual statistics included); the iterate with the smallest validation
  error is selected (hold-out early stopping) and its test error reported. Time: the
  whole ``execute`` of a fresh problem (its smoothness constant and one-time Gram
  matrices included) plus the selection. First with budgets fixed in advance, then the
  same runs ended by the hold-out rule once its patience has run out
  (``stopping.halt=true``), which select the same iterate.
* scikit-learn ``RidgeCV`` on the training rows (efficient leave-one-out over the alpha
  grid), and ``GridSearchCV(Ridge)`` with the validation rows as its single fold
  (``PredefinedSplit``), then ``Ridge`` refitted on the training rows at the chosen alpha.
  Same alpha grid for both: 60 values in [1e-6, 1e4] (alpha on the scale of
  ``||X w - y||^2 + alpha ||w||^2``).

Printed: test error ratio (method / best ridge) and wall-time ratio (ridge / method).

    .venv/bin/python benchmarks/bench_holdout_vs_ridge.py
"""
from __future__ import annotations

import sys
import time
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).parent))
from _common import blas_threads, machine, spectral_problem  # noqa: E402

from sklearn.linear_model import Ridge, RidgeCV  # noqa: E402
from sklearn.model_selection import GridSearchCV, PredefinedSplit  # noqa: E402

from stopwise.running.runner import execute  # noqa: E402
from stopwise.config.compose import spec_from_overrides  # noqa: E402

ALPHAS = np.logspace(-6, 4, 60)
REPEAT = 3


def timed(fn):
    best, out = float("inf"), None
    for _ in range(REPEAT):
        t = time.perf_counter()
        out = fn()
        best = min(best, time.perf_counter() - t)
    return best, out


def holdout(problem, overrides):
    spec = spec_from_overrides(overrides)

    def go():
        # a fresh Problem object each time, so the one-time Gram matrices are paid every repeat
        fresh = type(problem)(**{k: getattr(problem, k) for k in problem.__dataclass_fields__})
        tr = execute(spec, fresh)
        i = int(np.argmin(tr.columns["val_error"]))
        return tr.columns["test_error"][i], tr.columns["iteration"][i], tr.columns["iteration"][-1]
    return timed(go)


def main() -> None:
    blas_threads()
    print("machine:\n" + machine())
    p = spectral_problem(20_000, 300, decay=1.0, sigma=3.0)
    Xtr, ytr, Xva, yva, Xte, yte = p.X_train, p.y_train, p.X_val, p.y_val, p.X_test, p.y_test
    print(f"\nproblem: {p.n_train} train / {Xva.shape[0]} validation / {Xte.shape[0]} test rows x {p.d} features")

    def mse(model):
        return float(np.mean((model.predict(Xte) - yte) ** 2))

    def ridgecv():
        m = RidgeCV(alphas=ALPHAS, fit_intercept=False).fit(Xtr, ytr)
        return mse(m), m.alpha_

    def gridsearch():
        X = np.vstack([Xtr, Xva])
        y = np.concatenate([ytr, yva])
        fold = np.r_[np.full(Xtr.shape[0], -1), np.zeros(Xva.shape[0], dtype=int)]
        gs = GridSearchCV(Ridge(fit_intercept=False), {"alpha": ALPHAS}, cv=PredefinedSplit(fold),
                          scoring="neg_mean_squared_error", refit=False).fit(X, y)
        alpha = gs.best_params_["alpha"]
        return mse(Ridge(alpha=alpha, fit_intercept=False).fit(Xtr, ytr)), alpha

    results = {}
    t, (err, alpha) = timed(ridgecv)
    results["RidgeCV (leave-one-out on train)"] = (err, t, f"alpha={alpha:.3g}")
    t, (err, alpha) = timed(gridsearch)
    results["GridSearchCV(Ridge), hold-out fold"] = (err, t, f"alpha={alpha:.3g}")
    runs = (("gd", ["solver=gd", "budget.iterations=3000"], 500),
            ("nesterov", ["solver=nesterov", "budget.iterations=400"], 100),
            ("cgls", ["solver=cgls", "budget.iterations=60"], 20))
    for name, ov, _ in runs:  # a budget fixed in advance, every iterate recorded with every metric
        t, (err, it, last) = holdout(p, ov)
        results[f"stopwise {name}, hold-out early stopping"] = (err, t, f"stopped at {it} of {last}")
    for name, ov, patience in runs:  # the same runs, ended once patience has run out
        t, (err, it, last) = holdout(p, ov + ["stopping=holdout", "stopping.halt=true",
                                              f"stopping.params.patience={patience}"])
        results[f"  same, {name}, halted (patience {patience} passes)"] = (err, t, f"stopped at {it} of {last}")
    best_ridge = min(results["RidgeCV (leave-one-out on train)"][0], results["GridSearchCV(Ridge), hold-out fold"][0])
    t_rcv = results["RidgeCV (leave-one-out on train)"][1]
    t_gs = results["GridSearchCV(Ridge), hold-out fold"][1]
    print(f"\n{'method':42s} {'test MSE':>10s} {'/ best ridge':>12s} {'seconds':>9s} "
          f"{'RidgeCV t /':>11s} {'GridSearch t /':>14s}")
    for name, (err, t, note) in results.items():
        print(f"{name:42s} {err:10.4f} {err / best_ridge:12.4f} {t:9.3f} {t_rcv / t:11.1f} {t_gs / t:14.1f}   {note}")
    print("(target: >= 10x less time than the ridge searches at <= 1% worse test error)")


if __name__ == "__main__":
    main()

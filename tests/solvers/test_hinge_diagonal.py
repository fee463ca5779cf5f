"""The hinge diagonal method: its iterates themselves converge to the hard-margin SVM."""
import numpy as np
import pandas as pd
import pytest

import stopwise
from stopwise.problem.margins import normalized_margin
from stopwise.problem.problem import TrainingSet
from stopwise.solvers import get_solver
from stopwise.core.params import ParamError, make_params
from stopwise.solvers.margin import HingeDiagonalParams

from helpers.classif_refs import iris_setosa_versicolor, separable_gaussian, slsqp_hard_margin, svc_hard_margin


def hinge_set(X, y):
    return TrainingSet(X, y, L=np.linalg.norm(X, 2) ** 2 / X.shape[0], task="binary", loss="hinge")


def iterate(train, steps, **params):
    sd = get_solver("hinge_diagonal")
    p = sd.params(**params)
    st = sd.init(train, p, None)
    for _ in range(steps):
        st = sd.step(train, p, st)
    return st


@pytest.mark.parametrize("make", [iris_setosa_versicolor, separable_gaussian])
@pytest.mark.parametrize("params,steps,tol", [
    (dict(update="dual"), 20000, 2e-3),
    (dict(update="dual_accelerated"), 5000, 1e-4),
    (dict(update="primal_dual", step_scale=0.99), 5000, 1e-6),
])
def test_iterates_converge_to_the_svm(make, params, steps, tol):
    """The limit is the outside check: SciPy SLSQP on min ||w||^2 s.t. y_i <x_i, w> >= 1
    and scikit-learn's SVC(kernel="linear", C=1e6) (on mirrored rows, so without
    intercept), two independent computations that agree to 1e-5.

    `tol` (relative weight error after `steps` steps) is a regression guard on the speed:
    the project's own measurement, not an outside fact (largest of the two data sets:
    dual 8.0e-4 after 20000 steps, dual_accelerated 6.0e-5 and primal_dual 1.1e-9 after
    5000). The margins' bounds are derived from the weight error actually reached."""
    X, y = make()
    w_qp = slsqp_hard_margin(X, y)
    w_svc = svc_hard_margin(X, y)
    assert np.linalg.norm(w_qp - w_svc) < 1e-5 * np.linalg.norm(w_qp)
    st = iterate(hinge_set(X, y), steps, **params)
    # the weights themselves, not only their direction
    err = np.linalg.norm(st.w - w_qp) / np.linalg.norm(w_qp)
    # regression guard (project's own measurement, not an outside fact)
    assert err < tol
    # and the margin: min_i y_i <x_i, w_t> -> 1, normalized margin -> 1 / ||w_svm||. Bounds by
    # Cauchy-Schwarz: |min_i y_i <x_i, w> - min_i y_i <x_i, w_qp>| <= max_i ||x_i|| ||w - w_qp||
    # = R err with R = max_i ||x_i|| ||w_qp||; ||w|| / ||w_qp|| lies in [1 - err, 1 + err]; and
    # w_qp's own margin is 1 up to SLSQP's tolerance (m_qp - 1, included).
    R = np.max(np.linalg.norm(X, axis=1)) * np.linalg.norm(w_qp)
    m_qp = np.min(y * (X @ w_qp))
    assert abs(np.min(y * (X @ st.w)) - 1.0) <= abs(m_qp - 1) + R * err
    rel = (abs(m_qp - 1) + R * err + err) / (1 - err)
    assert abs(normalized_margin(X, y, st.w) * np.linalg.norm(w_qp) - 1.0) <= rel


def test_fixed_lambda_gives_the_soft_margin_svm():
    # lambda_power = 0 keeps lambda = lambda0: the iterates converge to the soft-margin SVM
    # min (1/n) sum hinge + lambda0/2 ||w||^2, i.e. C = 1/(n lambda0); scikit-learn's SVC on
    # the mirrored rows (which doubles every hinge term) with C/2 is that problem (no intercept)
    from sklearn.svm import SVC

    X, y = iris_setosa_versicolor()
    n = X.shape[0]
    for lam0 in (1.0, 0.05):
        C = 1.0 / (n * lam0)
        svc = SVC(kernel="linear", C=C / 2, tol=1e-10).fit(np.vstack([X, -X]), np.concatenate([y, -y]))
        w_soft = svc.coef_.ravel()
        for update in ("dual_accelerated", "primal_dual"):
            st = iterate(hinge_set(X, y), 5000, update=update, lambda0=lam0, lambda_power=0.0, step_scale=0.99)
            assert np.linalg.norm(st.w - w_soft) < 1e-5 * np.linalg.norm(w_soft)
    # lambda0 = 1 is a strongly regularized problem whose solution is not the hard margin
    assert np.linalg.norm(w_soft - slsqp_hard_margin(X, y)) > 0.1


def test_lambda_schedule_is_validated():
    with pytest.raises(ParamError, match=r"lambda_power=2.0 is invalid: must be a number in \[0, 1\]"):
        make_params(HingeDiagonalParams, {"lambda_power": 2.0}, "solver")
    with pytest.raises(ParamError, match="lambda0=0.0 is invalid"):
        make_params(HingeDiagonalParams, {"lambda0": 0.0}, "solver")
    with pytest.raises(ParamError, match="primal_dual") as e:
        make_params(HingeDiagonalParams, {"update": "primal_dual"}, "solver")
    assert "\n" not in str(e.value)


def test_through_the_runner(root):
    out = stopwise.run(["dataset=iris_setosa_versicolor", "solver=hinge_diagonal", "solver.update=primal_dual",
                        "solver.step_scale=0.9", "budget.iterations=3000", "record.every=500"], root=root)
    df = pd.read_parquet(out.path)
    info = stopwise.results.store.Store(root).run_meta(out.run_id)["problem"]
    assert info["loss"] == "hinge" and (df["loss"] == "hinge").all()
    assert df["svm_dist"].iloc[-1] < 1e-6
    assert df["margin"].iloc[-1] == pytest.approx(info["svm_margin"], rel=1e-5)
    assert df["train_loss"].iloc[-1] == pytest.approx(0.0, abs=1e-6)  # every hinge term vanishes at w_svm
    assert df["w_norm"].iloc[-1] == pytest.approx(info["svm_norm"], rel=1e-5)

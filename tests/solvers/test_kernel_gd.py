"""kernel_gd: early-stopped kernel regression against gradient descent on the features
(linear kernel), the spectral-filter closed form on numpy.linalg.eigh of the kernel
matrix, scikit-learn's kernels for the recorded errors, and sklearn.kernel_ridge.KernelRidge
as the explicit baseline it is ranked against."""
from __future__ import annotations

import math
from pathlib import Path

import numpy as np
import pytest
from sklearn.kernel_ridge import KernelRidge
from sklearn.metrics import pairwise

import stopwise
from stopwise.analysis.baselines import ensure_baselines, fit_path, load_baselines
from stopwise.analysis.rank import rank_campaign
from stopwise.cli import main
from stopwise.config.compose import spec_from_overrides
from stopwise.core.params import make_params
from stopwise.results.store import Store
from stopwise.running.runner import execute, run_spec
from stopwise.solvers import get_solver
from stopwise.sweep.campaign import expand

SKLEARN = {"linear": lambda A, B, p: pairwise.linear_kernel(A, B),
           "rbf": lambda A, B, p: pairwise.rbf_kernel(A, B, gamma=p.get("gamma")),
           "polynomial": lambda A, B, p: pairwise.polynomial_kernel(A, B, degree=p.get("degree", 3),
                                                                   gamma=p.get("gamma"), coef0=p.get("coef0", 1.0)),
           "laplacian": lambda A, B, p: pairwise.laplacian_kernel(A, B, gamma=p.get("gamma"))}


def iterates(name: str, train, steps: int, **params):
    sd = get_solver(name)
    p = make_params(sd.params, params, "solver")
    st = sd.init(train, p, np.random.default_rng(0))
    out = [st]
    for _ in range(steps):
        st = sd.step(train, p, st)
        out.append(st)
    return out


def test_linear_kernel_gives_gradient_descents_predictions():
    """With K = X X^T, L_K = lambda_max(K) / n = ||X||^2 / n = L, so c_{t+1} = c_t - (s / (n L))(K c_t - y)
    maps to w_t = X^T c_t, gradient descent's iterate with the same step_scale: the recorded errors
    of both runs agree (to rounding: lambda_max(K) and L come from different LAPACK eigenvalue
    routines, and X^T c_t sums in another order than w_t)."""
    for step in (1.0, 1.7):
        common = ["dataset=diabetes", "budget.iterations=150", "record.every=5", f"solver.step_scale={step}"]
        kg = execute(spec_from_overrides(["solver=kernel_gd", "solver.kernel=linear", *common])).columns
        gd = execute(spec_from_overrides(["solver=gd", *common])).columns
        for col in ("train_error", "val_error", "test_error", "residual_norm", "residual_dot_prev"):
            assert np.allclose(kg[col], gd[col], rtol=1e-9, equal_nan=True), col
    p = stopwise.load_problem(["dataset=diabetes"])
    c = iterates("kernel_gd", p.training, 40, kernel="linear")
    w = iterates("gd", p.training, 40)
    for a, b in zip(c, w):
        assert np.allclose(p.X_train.T @ a.w, b.w, rtol=1e-10, atol=1e-10 * np.abs(b.w).max(initial=1.0))


@pytest.mark.parametrize("kernel,params", [("rbf", {}), ("rbf", {"gamma": 0.5}), ("laplacian", {"gamma": 0.2}),
                                           ("polynomial", {"degree": 2, "coef0": 0.5}), ("linear", {})])
def test_iterates_equal_the_spectral_filter_on_the_kernel_matrix(kernel, params):
    """Yao, Rosasco and Caponnetto (Constr. Approx. 26, 2007): with K = Q diag(s) Q^T (numpy.linalg.eigh
    of scikit-learn's kernel matrix), c_t = Q diag((1 - (1 - r s)^t) / s) Q^T y, r = step_scale / lambda_max(K)."""
    p = stopwise.load_problem(["dataset=wellposed"])
    tr = p.training
    K = SKLEARN[kernel](p.X_train, p.X_train, params)
    s, Q = np.linalg.eigh(K)
    rate = 1.3 / s[-1]
    qy = Q.T @ p.y_train
    states = iterates("kernel_gd", tr, 60, kernel=kernel, step_scale=1.3, **params)
    assert np.array_equal(states[0].K, states[0].K.T) and np.allclose(states[0].K, K, rtol=1e-12, atol=1e-12)
    for t in (1, 2, 7, 20, 60):
        # (1 - (1 - r s)^t) / s, through expm1 / log1p where r s is small (no cancellation)
        with np.errstate(divide="ignore", invalid="ignore"):
            small = np.abs(rate * s) < 0.5
            phi = np.where(small, -np.expm1(t * np.log1p(-rate * np.where(small, s, 0.0))) / s,
                           (1 - (1 - rate * s) ** t) / s)
            phi = np.where(s == 0, t * rate, phi)
        want = Q @ (phi * qy)
        assert np.allclose(states[t].w, want, rtol=1e-9, atol=1e-9 * np.abs(want).max()), t
        assert states[t].passes == t


def test_recorded_errors_come_from_the_kernel_between_eval_rows_and_training_rows():
    """val / test errors from scikit-learn's rbf_kernel(X_s, X_train) @ c; dist_truth and the truth's
    support columns are not defined for coefficients; rkhs_norm = sqrt(c^T K c)."""
    spec = spec_from_overrides(["dataset=wellposed", "solver=kernel_gd", "solver.gamma=0.05", "budget.iterations=30",
                                "record.every=10"])
    tr = execute(spec)
    cols = tr.columns
    p = stopwise.load_problem(["dataset=wellposed"])
    states = iterates("kernel_gd", p.training, 30, gamma=0.05)
    for row, t in enumerate(cols["iteration"]):
        c = states[int(t)].w
        for split in ("train", "val", "test"):
            X, y = getattr(p, "X_" + split), getattr(p, "y_" + split)
            want = float(np.mean((pairwise.rbf_kernel(X, p.X_train, gamma=0.05) @ c - y) ** 2))
            assert cols[f"{split}_error"][row] == pytest.approx(want, rel=1e-10), (t, split)
        K = pairwise.rbf_kernel(p.X_train, p.X_train, gamma=0.05)
        assert cols["rkhs_norm"][row] == pytest.approx(math.sqrt(c @ K @ c), rel=1e-10, abs=1e-300)
        assert cols["w_norm"][row] == pytest.approx(np.linalg.norm(c), rel=1e-12, abs=1e-300)
    assert np.isnan(cols["dist_truth"]).all()
    assert "support_recall" not in cols and "nnz" in cols
    assert tr.problem_info["evaluation"]["statistics"] == []


def test_kernel_ridge_baseline_equals_scikit_learns_kernel_ridge_refitted():
    """Every penalty of the path against sklearn.kernel_ridge.KernelRidge(alpha, kernel, ...) fitted
    alone on the same training rows; with the linear kernel the path is the ridge baseline's."""
    p = stopwise.load_problem(["dataset=diabetes"])
    for kernel, params in (("rbf", {"gamma": 0.1}), ("polynomial", {"degree": 2}), ("laplacian", {})):
        r = fit_path(p, "kernel_ridge", {"kernel": kernel, "n_penalties": 6, **params})
        for a, v, t in zip(r.penalties, r.val_error, r.test_error):
            m = KernelRidge(alpha=a, kernel=kernel, **params).fit(p.X_train, p.y_train)
            assert v == pytest.approx(np.mean((m.predict(p.X_val) - p.y_val) ** 2), rel=1e-7), (kernel, a)
            assert t == pytest.approx(np.mean((m.predict(p.X_test) - p.y_test) ** 2), rel=1e-7), (kernel, a)
    alphas = [0.1, 1.0, 10.0, 100.0]
    lin = fit_path(p, "kernel_ridge", {"kernel": "linear", "penalties": alphas})
    ridge = fit_path(p, "ridge", {"penalties": alphas})
    assert np.allclose(lin.val_error, ridge.val_error, rtol=1e-9)
    assert np.allclose(lin.test_error, ridge.test_error, rtol=1e-9)


def test_kernel_ridge_is_computed_only_when_named():
    from stopwise.analysis.baselines import default_methods

    assert "kernel_ridge" not in default_methods("regression")
    assert default_methods("regression") == ["ridge", "lasso", "elastic_net"]


def test_a_campaign_of_kernel_gd_is_ranked_against_kernel_ridge_on_the_same_splits(tmp_path):
    root = tmp_path / "res"
    exp = expand(None, ["dataset=wellposed,diabetes", "solver=kernel_gd,gd", "seed=0,1", "budget.iterations=120",
                        f"results_root={root}"])
    store = Store(root)
    store.write_campaign(exp.manifest)
    for spec in exp.specs:
        run_spec(spec, root, store=store)
    cid = exp.manifest["campaign_id"]
    ensure_baselines(root, cid, methods=["kernel_ridge", "ridge"])
    bl = load_baselines(root, cid)
    assert set(bl["method"]) == {"kernel_ridge", "ridge"} and bl["seed"].nunique() == 2
    # the baseline is fitted on the runs' own splits: its Problem is the runs' Problem
    for (d, s), g in bl[bl.method == "kernel_ridge"].groupby(["dataset", "seed"]):
        prob = stopwise.load_problem([f"dataset={d}", f"seed={s}"])
        sel = g[g.selected].iloc[0]
        m = KernelRidge(alpha=sel.penalty, kernel="rbf").fit(prob.X_train, prob.y_train)
        assert sel.test_error == pytest.approx(np.mean((m.predict(prob.X_test) - prob.y_test) ** 2), rel=1e-7)
    r = rank_campaign(root, cid, "holdout", baselines="stored")
    explicit = set(r.table.loc[r.table.kind == "explicit", "method"])
    assert {"kernel_ridge", "ridge"} <= explicit and {"kernel_gd", "gd"} <= set(r.table["method"])


def test_too_many_rows_for_a_kernel_matrix_is_one_line_exit_2(tmp_path, monkeypatch, capsys):
    monkeypatch.chdir(tmp_path)
    code = main(["run", "solver=kernel_gd", "dataset=wellposed", "dataset.params.n=17000",
                 f"results_root={tmp_path / 'res'}"])
    err = capsys.readouterr().err
    assert code == 2 and err.count("\n") == 1 and "n_train=10200 is above 10000" in err, err
    assert list(Path(tmp_path).rglob("*")) == []

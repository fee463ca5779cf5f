"""Biased solvers through the runner and recorder: trace columns, early stopping on noisy
sparse recovery, bad input."""
import math

import numpy as np
import pytest

import stopwise
from helpers.biased import as_problem, final, piecewise_constant, slsqp_elastic_limit, training, underdetermined
from stopwise.running.record import make_recorder
from stopwise.running.runner import execute
from stopwise.config.compose import spec_from_overrides


def trace(problem, overrides):
    spec = spec_from_overrides(["dataset=overparam"] + overrides)
    tr = execute(spec, problem=problem)
    assert tr.status == "completed", tr.message
    return tr.columns


# ---------------------------------------------------------------- columns

def test_mirror_trace_records_bias_value_and_support():
    """bias_value at the last iterate equals SciPy SLSQP's optimal value of
    lam||w||_1 + (1/2)||w||^2 s.t. Xw = y; nnz / support precision / recall equal
    scikit-learn's precision_score / recall_score on the support masks."""
    from sklearn.metrics import precision_score, recall_score

    X, y, w_true = underdetermined()
    cols = trace(as_problem(X, y, w_true), ["solver=mirror_descent", "solver.lam=1.0", "budget.iterations=3000"])
    ref = slsqp_elastic_limit(X, y, 1.0)
    assert cols["bias_value"][-1] == pytest.approx(np.abs(ref).sum() + 0.5 * ref @ ref, abs=1e-6)
    assert cols["residual_norm"][-1] < 1e-6  # the constraint residual ||Xw - y||
    for it in (1, 7, 40, 3000):
        w = final("mirror_descent", training(X, y), {"lam": 1.0}, it).w
        row = list(cols["iteration"]).index(it)
        assert cols["bias_value"][row] == pytest.approx(np.abs(w).sum() + 0.5 * w @ w, rel=1e-12)
        mask, truth = np.abs(w) > 1e-6 * np.abs(w).max(), w_true != 0
        assert cols["nnz"][row] == mask.sum()
        if mask.any():
            assert cols["support_precision"][row] == pytest.approx(precision_score(truth, mask))
        else:  # precision of an empty support is undefined: NaN here (scikit-learn warns and says 0)
            assert math.isnan(cols["support_precision"][row])
        assert cols["support_recall"][row] == pytest.approx(recall_score(truth, mask))
    assert cols["nnz"][0] == 0 and math.isnan(cols["support_precision"][0])  # w_0 = 0 has no support


def test_primal_dual_trace_records_norm_estimate_gap_and_feasibility():
    """op_norm against numpy.linalg.norm(K, 2); gap and dual infeasibility end near 0."""
    X, y, w_true = piecewise_constant()
    cols = trace(as_problem(X, y, w_true), ["solver=chambolle_pock", "solver.bias=tv", "budget.iterations=6000"])
    K = np.vstack([X / np.linalg.norm(X, 2), np.diff(np.eye(X.shape[1]), axis=0)])
    assert np.all(cols["op_norm"] == cols["op_norm"][0])
    assert cols["op_norm"][0] == pytest.approx(np.linalg.norm(K, 2), rel=1e-6)
    assert cols["op_norm_iterations"][0] >= 1
    assert abs(cols["pd_gap"][-1]) < 1e-6 and cols["dual_infeasibility"][-1] < 1e-6
    assert cols["residual_norm"][-1] < 1e-6
    assert cols["passes"][-1] == 6000 and cols["passes"][0] == 0


def test_mixed_solvers_load_together_with_nulls(root):
    outs = [stopwise.run(["dataset=overparam", f"solver={s}", "budget.iterations=20"], root=root)
            for s in ("gd", "mirror_descent", "chambolle_pock")]
    assert all(o.status == "completed" for o in outs)
    df = stopwise.load_traces(root)
    by = df.groupby("solver")
    assert by["bias_value"].apply(lambda s: s.isna().all())["gd"]
    assert by["pd_gap"].apply(lambda s: s.notna().all())["chambolle_pock"]
    assert by["pd_gap"].apply(lambda s: s.isna().all())["mirror_descent"]
    assert df["nnz"].notna().all() and df["support_recall"].notna().all()
    # the dense-truth problem: gradient descent's iterates are dense, mirror descent's sparse
    last = df[df["iteration"] == 20].set_index("solver")
    assert last.loc["gd", "nnz"] == 400 and last.loc["mirror_descent", "nnz"] < 100


def test_no_support_columns_without_a_truth(root):
    out = stopwise.run(["dataset=diabetes", "solver=mirror_descent", "budget.iterations=5"], root=root)
    df = stopwise.load_traces(root)
    assert out.status == "completed"
    assert "nnz" in df and "support_precision" not in df and "bias_value" in df


def test_state_metric_columns_may_not_shadow_recorder_columns():
    X, y, w = underdetermined()
    with pytest.raises(ValueError, match="clashes"):
        make_recorder(as_problem(X, y, w), state_metrics={"w_norm": lambda s: 0.0})


# ---------------------------------------------------------------- early stopping

def noisy_sparse(seed, n=80, d=200, s=5, rel_noise=0.1):
    """Gaussian design, s-sparse truth with entries of size 1..2 and random signs, noise of
    exact norm rel_noise ||X w_true|| on the training targets."""
    rng = np.random.default_rng(seed)
    X = rng.standard_normal((n, d))
    w = np.zeros(d)
    idx = rng.choice(d, s, replace=False)
    w[idx] = rng.choice([-1.0, 1.0], s) * rng.uniform(1.0, 2.0, s)
    e = rng.standard_normal(n)
    delta = rel_noise * np.linalg.norm(X @ w)
    e *= delta / np.linalg.norm(e)
    return as_problem(X, X @ w + e, w, noise_norm=delta, seed=seed)


def discrepancy_vs_limit(problem, limit_solver, limit_budget, every, tol=1e-7):
    stop = trace(problem, ["solver=mirror_descent", "solver.lam=3.0", "budget.iterations=400"])
    k = int(np.argmax(stop["residual_norm"] <= problem.noise_norm))
    assert stop["residual_norm"][k] <= problem.noise_norm and k > 0
    conv = trace(problem, [f"solver={limit_solver}", "solver.lam=3.0", f"budget.iterations={limit_budget}",
                           f"record.every={every}"]
                 + (["solver.restart=gradient"] if limit_solver == "mirror_nesterov" else []))
    assert conv["residual_norm"][-1] < tol * np.linalg.norm(problem.y_train)  # interpolates the noisy data
    return stop["dist_truth"][k], conv["dist_truth"][-1]


@pytest.mark.parametrize("seed", [0, 1, 2, 3])
def test_stopping_at_the_noise_level_beats_running_to_convergence(seed):
    """Linearized Bregman (lam = 3) on noisy sparse recovery, 80 x 200, 5-sparse truth, noise
    norm 10% of ||X w_true||: stopping at the first iterate with ||Xw - y|| <= ||noise||
    (discrepancy principle, tau = 1, as recommended by Yin et al. 2008 / Osher et al. 2010)
    has a smaller error ||w - w_true|| than the limit, which interpolates the noise. The limit
    is reached with the restarted accelerated iteration (same limit, tested in test_mirror).
    Observed ratio limit error / stopped error on seeds 0-7: 2.27 4.04 3.18 2.04 2.67 4.25
    1.53 2.52. The factor 1.5 is a regression guard (the project's own measurement, not an
    outside fact); the outside part is the direction of the comparison (Yin et al. 2008)."""
    stopped, limit = discrepancy_vs_limit(noisy_sparse(seed), "mirror_nesterov", 8000, 100)
    # regression guard (project's own measurement, not an outside fact)
    assert limit > 1.5 * stopped


@pytest.mark.slow
@pytest.mark.parametrize("seed", range(8))
def test_stopping_beats_the_plain_iteration_run_to_convergence(seed):
    """Same comparison with the plain linearized Bregman iteration run for 300000 steps (its
    slow final phase leaves a relative residual up to about 1e-6 on seed 3)."""
    stopped, limit = discrepancy_vs_limit(noisy_sparse(seed), "mirror_descent", 300000, 1000, tol=1e-5)
    # regression guard (project's own measurement, not an outside fact)
    assert limit > 1.5 * stopped


# ---------------------------------------------------------------- bad input

@pytest.mark.parametrize("args,needle", [
    (["solver=mirror_descent", "solver.bias=nope"],
     "solver.bias='nope' is invalid: must be one of l1, group_l1, nonneg_l1"),
    (["solver=mirror_descent", "solver.bias=tv"], "solver.bias='tv' is invalid"),
    (["solver=mirror_nesterov", "solver.lam=-1"], "solver.lam=-1.0 is invalid: must be a number in [0, inf)"),
    (["solver=mirror_nesterov", "solver.restart=often"], "must be one of none, gradient"),
    (["solver=chambolle_pock", "solver.step_scale=1.2"], "must be a number in (0, 1)"),
    (["solver=chambolle_pock", "solver.bias=l2"], "must be one of l1, group_l1, nonneg_l1, tv"),
    (["solver=chambolle_pock", "solver.group_size=0"], "solver.group_size=0 is invalid"),
])
def test_bad_params_are_one_line_errors_and_write_nothing(tmp_path, capsys, args, needle):
    from stopwise.cli import main

    code = main(["run", "dataset=overparam", f"results_root={tmp_path / 'r'}"] + args)
    err = capsys.readouterr().err
    assert code == 2
    assert err.startswith("stopwise: error: ") and err.count("\n") == 1 and needle in err
    assert not (tmp_path / "r").exists()


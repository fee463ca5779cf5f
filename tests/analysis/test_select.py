"""Post-hoc selection over a campaign's stored traces, the `select` command, and halting.

References: every selected row is checked against the stored trace itself (the errors
at the selected iteration) and against each rule applied directly; halting is checked
against the same run without halting (its trace must be a prefix, cut where the rule's
choice became final).
"""
import math

import numpy as np
import pandas as pd
import pytest

import stopwise
from stopwise.cli import main
from stopwise.running.runner import Trace, execute, run_spec, save
from stopwise.analysis.selection import SELECT_COLUMNS
from stopwise.config.compose import spec_from_overrides
from stopwise.stopping.rules import RuleContext, apply_rule
from stopwise.results.store import Store


@pytest.fixture(scope="module")
def campaign_root(tmp_path_factory):
    root = tmp_path_factory.mktemp("sel") / "results"
    rc = main(["sweep", "dataset=illposed,diabetes", "solver=gd,cgls", "budget.iterations=40",
               "stopping=discrepancy,holdout", f"results_root={root}"])
    assert rc == 0
    return root


def test_select_one_row_per_run_and_rule(campaign_root):
    df = stopwise.select(campaign_root, "adhoc")
    assert list(df.columns[:4]) == ["run_id", "dataset", "solver", "seed"]
    assert list(df.columns[-len(SELECT_COLUMNS[4:]):]) == list(SELECT_COLUMNS[4:])
    assert "step_scale" in df.columns  # solver params between seed and status
    # the campaign swept two post-hoc rules over 4 runs: they share traces; oracle added
    assert df["run_id"].nunique() == 4 and len(df) == 12
    assert sorted(df["rule"].unique()) == ["discrepancy", "holdout", "oracle"]
    assert (df["reference"] == (df["rule"] == "oracle")).all()
    assert str(df["selected_iteration"].dtype) == "Int64"
    # diabetes states no noise: discrepancy selects nothing, says why
    nod = df[(df["dataset"] == "diabetes") & (df["rule"] == "discrepancy")]
    assert nod["selected_iteration"].isna().all() and nod["reason"].str.contains("unknown").all()
    assert nod["val_error"].isna().all()


def test_selected_errors_are_the_trace_rows(campaign_root):
    df = stopwise.select(campaign_root, "adhoc", rules=["discrepancy", {"rule": "holdout", "params": {"patience": 3}},
                                                        "oracle"])
    assert sorted(df["rule"].unique()) == ["discrepancy", "holdout(patience=3)", "oracle"]
    traces = stopwise.load_traces(campaign_root, "adhoc")
    store = Store(campaign_root)
    for _, row in df.iterrows():
        t = traces[traces["run_id"] == row["run_id"]].reset_index(drop=True)
        meta = store.run_meta(row["run_id"])
        ctx = RuleContext.from_problem_info(meta["problem"])
        name = row["rule"].split("(")[0]
        params = {"patience": 3} if name == "holdout" else {}
        s = apply_rule(name, t, ctx, params)
        if pd.isna(row["selected_iteration"]):
            assert s.iteration is None
            continue
        assert row["selected_iteration"] == s.iteration
        hit = t[t["iteration"] == s.iteration].iloc[0]
        for c in ("val_error", "test_error", "train_error"):
            assert row[c] == hit[c]
        assert row["selected_passes"] == hit["passes"] and row["passes_spent"] >= row["selected_passes"]
    # the oracle's test error is the smallest test error of each trace
    orc = df[df["rule"] == "oracle"].set_index("run_id")["test_error"]
    assert (orc == traces.groupby("run_id")["test_error"].min().loc[orc.index]).all()


def test_select_command_prints_an_aligned_table(campaign_root, capsys):
    assert main(["select", "adhoc", "--root", str(campaign_root), "--rule", "discrepancy:tau=1.5",
                 "--rule", "oracle"]) == 0
    out = capsys.readouterr().out.splitlines()
    assert out[0].split()[:4] == ["run_id", "dataset", "solver", "seed"]
    assert "discrepancy(tau=1.5)" in "\n".join(out) and out[-1].startswith("4 runs x 2 rules")
    assert len({len(line) for line in out[:-1]}) == 1  # every table line has the same width


@pytest.mark.parametrize("args,needle", [
    (["--rule", "bogus"], "unknown stopping rule 'bogus'"),
    (["--rule", "holdout:patience=-1"], "patience=-1"),
    (["--rule", "holdout:patience"], "key=value"),
])
def test_select_command_bad_input_is_one_line(campaign_root, capsys, args, needle):
    assert main(["select", "adhoc", "--root", str(campaign_root), *args]) == 2
    err = capsys.readouterr().err.strip()
    assert err.startswith("stopwise: error: ") and needle in err and "\n" not in err


def test_select_unknown_campaign(tmp_path, capsys):
    assert main(["select", "nope", "--root", str(tmp_path)]) == 2
    assert "no campaign 'nope'" in capsys.readouterr().err


def test_failed_runs_get_rows_with_the_failure(tmp_path):
    spec = spec_from_overrides(["dataset=wellposed", "solver=gd", "budget.iterations=5"])
    save(spec, Trace(columns={}, status="failed", message="ValueError: boom"), Store(tmp_path))
    df = stopwise.select(tmp_path, None, rules=["budget", "oracle"])
    assert len(df) == 2 and (df["status"] == "failed").all()
    assert df["selected_iteration"].isna().all() and df["reason"].str.contains("boom").all()


# ---------------------------------------------------------------- halting

@pytest.mark.parametrize("rule,params", [
    ("discrepancy", []),
    ("monotone_error", []),
    ("holdout", ["stopping.params.patience=4"]),
    ("ncp", ["stopping.params.criterion=first"]),
    ("budget", ["stopping.params.iterations=7"]),
    ("a_priori", ["stopping.params.c=1.5", "stopping.params.a=0.5"]),
])
def test_halting_cuts_the_trace_where_the_rule_becomes_final(tmp_path, rule, params):
    base = ["dataset=illposed", "solver=gd", "budget.iterations=150", f"stopping={rule}", *params]
    full_spec = spec_from_overrides(base)
    halt_spec = spec_from_overrides(base + ["stopping.halt=true"])
    assert full_spec.run_id != halt_spec.run_id and halt_spec.identity()["halt"]["rule"] == rule
    full = execute(full_spec)
    out = run_spec(halt_spec, tmp_path)
    assert out.status == "completed" and out.message.startswith(f"halted by {rule}")
    halted = pd.read_parquet(out.path)
    n = len(halted)
    assert n < len(full.columns["iteration"])
    for c in ("iteration", "passes", "train_error", "val_error", "test_error", "residual_norm", "ncp_distance"):
        np.testing.assert_array_equal(halted[c].to_numpy(), full.columns[c][:n])
    ctx = RuleContext.from_problem_info(full.problem_info)
    p = dict(kv.split("=", 1) for kv in (x.replace("stopping.params.", "") for x in params))
    p = {k: (float(v) if k not in ("criterion",) else v) for k, v in p.items()}
    if rule == "budget":
        p = {"iterations": 7}
    s_full = apply_rule(rule, full.columns, ctx, p)
    s_halt = apply_rule(rule, halted, ctx, p)
    assert s_full.final and s_halt == s_full
    # the loop ended exactly where the rule needed it: the row it spent up to
    assert halted["passes"].iloc[-1] == s_full.passes_spent
    # a rerun of the halted run reproduces it
    assert stopwise.run(base + ["stopping.halt=true", f"results_root={tmp_path}"], root=tmp_path).skipped


def test_halting_rule_without_noise_information_runs_to_the_budget(tmp_path):
    out = run_spec(spec_from_overrides(["dataset=diabetes", "solver=gd", "budget.iterations=15",
                                        "stopping=discrepancy", "stopping.halt=true"]), tmp_path)
    assert out.status == "completed" and out.iterations == 15 and not out.message
    assert math.isnan(stopwise.select(tmp_path, None, rules=["discrepancy"])["selected_passes"].iloc[0])


def _landweber_closed_form(problem, step_scale, iterations):
    """Gradient descent from 0 on (1/2n)||X w - y||^2 with step s/L, L = ||X||_2^2 / n, by
    its closed form through the SVD X = U diag(sv) V^T (no solver code): each singular
    component of the iterate is w_t,i = (1 - q_i^t) (u_i^T y) / sv_i with
    q_i = 1 - (s/L) sv_i^2 / n (Engl, Hanke, Neubauer, *Regularization of Inverse
    Problems*, 1996, Section 6.1, the Landweber filter factors; from memory). Returns the
    training objective and the validation mean squared error for t = 0..iterations."""
    X, y = problem.X_train, problem.y_train
    n = X.shape[0]
    U, sv, Vt = np.linalg.svd(X, full_matrices=False)
    eta = step_scale / (sv[0] ** 2 / n)
    c = U.T @ y
    q = 1 - eta * sv ** 2 / n
    t = np.arange(iterations + 1)[:, None]
    W = ((1 - q[None, :] ** t) * (c / sv)[None, :]) @ Vt
    objective = np.sum((W @ X.T - y) ** 2, axis=1) / (2 * n)
    val = np.mean((W @ problem.X_val.T - problem.y_val) ** 2, axis=1)
    return objective, val


@pytest.mark.parametrize("patience", [100, 252, 253, 400])
def test_halting_next_to_a_divergence(tmp_path, patience):
    """Gradient descent with step 2.05/L diverges: by the closed form above the top
    component is multiplied by 1 - 2.05 = -1.05 per step, and the objective first passes
    budget.diverge_factor = 1e10 times its start at iteration `diverge` (265 on
    dataset=wellposed), the last row stored. Holdout halting decides at row
    best + patience (best: the validation minimum, row 12; passes = iterations for gd): a
    decision on a finite row (best + patience < diverge) wins (completed, cut there, also
    when found only by the final check after the loop broke off), a decision that would
    need the diverged row does not. Both numbers come from the closed form, not from the
    run; patience 252 and 253 sit on either side of the boundary."""
    base = ["dataset=wellposed", "solver=gd", "solver.step_scale=2.05", "budget.iterations=1000",
            "stopping=holdout", f"stopping.params.patience={patience}"]
    objective, val = _landweber_closed_form(stopwise.load_problem(base), 2.05, 400)
    diverge = int(np.argmax(objective > 1e10 * objective[0]))
    best = int(np.argmin(val[:diverge]))
    assert (best, diverge) == (12, 265)  # the boundary the parametrization straddles
    expect = "completed" if best + patience < diverge else "diverged"
    full = execute(spec_from_overrides(base))
    assert full.status == "diverged" and len(full.columns["iteration"]) == diverge + 1
    out = run_spec(spec_from_overrides(base + ["stopping.halt=true"]), tmp_path)
    got = pd.read_parquet(out.path)
    assert out.status == expect
    if expect == "completed":
        assert len(got) == best + patience + 1 and out.message.startswith("halted by holdout")
    else:
        assert len(got) == diverge + 1 and "grew" in out.message
    np.testing.assert_array_equal(got["val_error"].to_numpy(), full.columns["val_error"][:len(got)])


def test_halting_decision_deep_in_the_trace_is_exact(tmp_path):
    """a_priori with c = 10, a = 0.5 on 180 training rows: ceil(10 sqrt(180)) = 135, found by
    the bisection between two sparse checks; the trace ends exactly at iteration 135."""
    base = ["dataset=illposed", "solver=gd", "budget.iterations=400", "stopping=a_priori",
            "stopping.params.c=10", "stopping.params.a=0.5"]
    out = run_spec(spec_from_overrides(base + ["stopping.halt=true"]), tmp_path)
    got = pd.read_parquet(out.path)
    assert got["iteration"].iloc[-1] == 135 == math.ceil(10 * math.sqrt(180))
    assert out.message.startswith("halted by a_priori at iteration 135")
    # recomputing the halted run from its stored identity reproduces it
    from stopwise.running.rerun import rerun_one

    c = rerun_one(Store(tmp_path), out.run_id)
    assert c.ok, c.problems

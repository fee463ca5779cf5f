"""Record options: the residual statistics switch (record.residual) and its identity."""
import math

import numpy as np
import pytest

from stopwise.data import cached_problem
from stopwise.stopping.residual import COLUMNS as RESIDUAL_COLUMNS, ncp_distance
from stopwise.running.runner import execute
from stopwise.config.spec import SpecError
from stopwise.config.compose import spec_from_overrides


def _gd_residuals(p, iterations, step_scale=1.0):
    """Residual vectors X w_t - y of gradient descent (Landweber), numpy alone."""
    X, y = p.X_train, p.y_train
    eta = step_scale / np.linalg.norm(X, 2) ** 2  # (s/L)/n with L = ||X||^2/n
    w, res = np.zeros(p.d), []
    for _ in range(iterations + 1):
        r = X @ w - y
        res.append(r)
        w = w - eta * (X.T @ r)
    return res


def test_dot_prev_from_statistics_equals_residual_vectors():
    """On a tall problem the recorder takes <r_prev, r_t> from the training Gram statistics;
    reference: the inner products of numpy's residual vectors of the same iteration."""
    spec = spec_from_overrides(["dataset=wellposed", "solver=gd", "budget.iterations=40"])
    p = cached_problem(spec.dataset, spec.split, spec.seed)
    tr = execute(spec, p)
    assert "train" in tr.problem_info["evaluation"]["statistics"] and not p.signal_rows
    assert "ncp_distance" not in tr.columns  # exchangeable rows: no periodogram
    res = _gd_residuals(p, 40)
    dots = [math.nan] + [float(res[k - 1] @ res[k]) for k in range(1, 41)]
    np.testing.assert_allclose(tr.columns["residual_dot_prev"], dots, rtol=1e-10)
    direct = execute(spec, p, path="direct").columns["residual_dot_prev"]
    np.testing.assert_allclose(tr.columns["residual_dot_prev"], direct, rtol=1e-10)


def test_dot_prev_near_interpolation_falls_back_to_compressed_rows():
    """Noise-free targets: the residual shrinks to rounding level, where the Gram form of
    the inner product cancels to noise; the guard takes it from the compressed rows (QR),
    which agree with numpy's residual vectors to rounding of the residuals themselves."""
    over = ["dataset=wellposed", "dataset.params.noise=none", "solver=gd", "budget.iterations=400"]
    spec = spec_from_overrides(over)
    p = cached_problem(spec.dataset, spec.split, spec.seed)
    tr = execute(spec, p)
    res = _gd_residuals(p, 400)
    ny = np.linalg.norm(p.y_train)
    got = tr.columns["residual_dot_prev"][1:]
    ref = np.array([res[k - 1] @ res[k] for k in range(1, 401)])
    norms = np.array([np.linalg.norm(r) for r in res])
    assert norms[-1] < 1e-12 * ny  # interpolation reached
    tol = 1e-12 * ny * (norms[:-1] + norms[1:]) + 1e-26 * ny ** 2
    assert np.all(np.abs(got - ref) <= tol)
    assert tr.problem_info["evaluation"]["fallbacks"] > 0
    # the unguarded Gram form is off by far more than that where the guard acted
    G, c, yy = p.X_train.T @ p.X_train, p.X_train.T @ p.y_train, float(p.y_train @ p.y_train)
    eta = 1.0 / np.linalg.norm(p.X_train, 2) ** 2
    w, ws = np.zeros(p.d), [np.zeros(p.d)]
    for _ in range(400):
        w = w - eta * (G @ w - c)
        ws.append(w)
    raw = np.array([ws[k - 1] @ G @ ws[k] - c @ ws[k] - c @ ws[k - 1] + yy for k in range(1, 401)])
    assert abs(raw[-1] - ref[-1]) > 1e6 * tol[-1]


@pytest.mark.parametrize("dataset,signal", [("illposed", True), ("integral_green", True), ("wellposed", False),
                                            ("diabetes", False), ("overparam", False)])
def test_ncp_distance_only_on_signal_rows(dataset, signal):
    """ncp_distance is recorded where the training rows are in signal order, and equals the
    periodogram distance of numpy's residual vectors (scipy.signal.periodogram is the
    periodogram's reference in test_stopping); residual_dot_prev is always there."""
    spec = spec_from_overrides([f"dataset={dataset}", "solver=gd", "budget.iterations=8"])
    p = cached_problem(spec.dataset, spec.split, spec.seed)
    tr = execute(spec, p)
    assert p.signal_rows is signal and ("ncp_distance" in tr.columns) is signal
    res = _gd_residuals(p, 8)
    np.testing.assert_allclose(tr.columns["residual_dot_prev"][1:],
                               [res[k - 1] @ res[k] for k in range(1, 9)], rtol=1e-9)
    if signal:
        np.testing.assert_allclose(tr.columns["ncp_distance"], [ncp_distance(r) for r in res],
                                   rtol=1e-9, atol=1e-13)


def test_file_rows_declared_as_a_signal_get_the_ncp(tmp_path):
    import pandas as pd

    rng = np.random.default_rng(0)
    t = np.linspace(0, 1, 300)
    df = pd.DataFrame({"a": np.sin(6 * t), "b": t, "y": np.sin(6 * t) + 0.1 * rng.standard_normal(300)})
    path = tmp_path / "signal.csv"
    df.to_csv(path, index=False)
    base = ["dataset=file", f"dataset.params.path={path}", "dataset.params.target=y", "budget.iterations=5"]
    plain = execute(spec_from_overrides(base)).columns
    sig = execute(spec_from_overrides(base + ["dataset.params.row_order=signal"])).columns
    assert "ncp_distance" not in plain and "ncp_distance" in sig
    with pytest.raises(SpecError, match="row_order"):
        spec_from_overrides(base + ["dataset.params.row_order=sorted"])


@pytest.mark.parametrize("dataset,signal", [("illposed", True), ("integral_green", True), ("wellposed", False),
                                            ("diabetes", False)])
def test_declared_row_order_matches_the_built_problem(dataset, signal):
    """The source's declared row order (known at spec time) is the built problem's."""
    from stopwise.data import dataset_row_order

    spec = spec_from_overrides([f"dataset={dataset}"])
    assert (dataset_row_order(spec.dataset) == "signal") is signal
    assert cached_problem(spec.dataset, spec.split, spec.seed).signal_rows is signal


def test_halting_on_ncp_needs_signal_rows(tmp_path, monkeypatch, capsys):
    from stopwise.cli import main

    halt = ["stopping=ncp", "stopping.params.criterion=first", "stopping.halt=true"]
    with pytest.raises(SpecError, match="recorded only when the training rows are in signal order"):
        spec_from_overrides(["dataset=wellposed", *halt])
    monkeypatch.chdir(tmp_path)  # from the shell: one line, exit 2, nothing written
    assert main(["run", "dataset=wellposed", *halt, f"results_root={tmp_path / 'res'}"]) == 2
    err = capsys.readouterr().err.strip()
    assert len(err.splitlines()) == 1 and "dataset.params.row_order=signal" in err
    assert list(tmp_path.rglob("*")) == []
    # a Problem handed to execute directly is checked too
    spec = spec_from_overrides(["dataset=illposed", "budget.iterations=5", *halt])
    wellposed = spec_from_overrides(["dataset=wellposed"])
    with pytest.raises(ValueError, match="'wellposed' has exchangeable rows"):
        execute(spec, cached_problem(wellposed.dataset, wellposed.split, wellposed.seed))
    assert execute(spec).status in ("completed", "halted")


def test_residual_statistics_can_be_left_out():
    on = spec_from_overrides(["dataset=illposed", "budget.iterations=30"])
    off = spec_from_overrides(["dataset=illposed", "budget.iterations=30", "record.residual=false"])
    assert on.identity()["record"] == {"every": 1}          # the default keeps existing run ids
    assert off.identity()["record"] == {"every": 1, "residual": False}
    assert on.run_id != off.run_id
    a, b = execute(on).columns, execute(off).columns
    assert set(RESIDUAL_COLUMNS) <= set(a) and not set(RESIDUAL_COLUMNS) & set(b)
    for col in set(b) - {"seconds"}:  # everything else is the same, number for number
        np.testing.assert_array_equal(a[col][np.isfinite(a[col])], b[col][np.isfinite(b[col])], err_msg=col)


@pytest.mark.parametrize("rule", ["monotone_error", "ncp"])
def test_halting_on_a_residual_rule_needs_the_residual_columns(rule):
    extra = ["stopping.params.criterion=first"] if rule == "ncp" else []
    with pytest.raises(SpecError) as e:
        spec_from_overrides(["dataset=illposed", f"stopping={rule}", "stopping.halt=true", "record.residual=false",
                             *extra])
    assert str(e.value) == (f"stopping.rule={rule} with halt needs the residual columns: "
                            "drop record.residual=false")


def test_record_residual_must_be_a_boolean():
    with pytest.raises(SpecError, match="record.residual=.* is invalid"):
        spec_from_overrides(["record.residual=sometimes"])

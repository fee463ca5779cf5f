"""CSR designs through the solvers and the recorder.

Reference: the dense path on the dense form of the same matrix (``X.toarray()``), which is
itself checked against closed forms, SciPy and scikit-learn (tests/running/test_fastpath.py:
numpy's X^T (X w - y) and the spectral-filter closed form of gradient descent;
tests/solvers/test_solvers_least_squares.py: scipy.sparse.linalg.lsqr for CGLS), and the CSR
kernels directly against SciPy's own CSR products. Every iterate and every recorded column
agrees to relative 1e-12."""
import tracemalloc

import numpy as np
import pytest
import scipy.sparse as sp

from stopwise.config.compose import spec_from_overrides
from stopwise.problem.design import DesignError, limit_dense_bytes
from stopwise.problem.problem import Problem
from stopwise.running import fastpath, kernels
from stopwise.running.runner import execute, run_rng
from stopwise.solvers import get_solver

REL = 1e-12


def random_csr(n, d, density, seed):
    rng = np.random.default_rng(seed)
    return sp.random(n, d, density=density, format="csr", random_state=rng,
                     data_rvs=rng.standard_normal).astype(np.float64)


def make_pair(n=200, d=30, density=0.1, seed=0, task="regression"):
    X = random_csr(n, d, density, seed)
    rng = np.random.default_rng(seed + 7)
    w = rng.standard_normal(d)
    if task == "regression":
        y = X @ w + 0.1 * rng.standard_normal(n)
    else:
        y = np.where(X @ w + 0.3 * rng.standard_normal(n) > 0, 1.0, -1.0)
    a, b = int(0.6 * n), int(0.8 * n)
    parts = dict(X_train=X[:a], y_train=y[:a], X_val=X[a:b], y_val=y[a:b], X_test=X[b:], y_test=y[b:])
    sparse = Problem(name="csr", task=task, **parts)
    dense = Problem(name="csr", task=task, **{k: (v.toarray() if sp.issparse(v) else v) for k, v in parts.items()})
    return sparse, dense


def rel_close(a, b, rel=REL):
    a, b = np.asarray(a, dtype=float), np.asarray(b, dtype=float)
    assert a.shape == b.shape
    both_nan = np.isnan(a) & np.isnan(b)
    scale = np.nanmax(np.abs(b)) if np.isfinite(b).any() else 1.0
    err = np.where(both_nan, 0.0, np.abs(a - b))
    assert float(np.max(err, initial=0.0)) <= rel * max(scale, 1e-300), (a, b)


def spec(solver, *extra, iterations=25):
    return spec_from_overrides(["dataset=wellposed", f"solver={solver}", f"budget.iterations={iterations}", *extra])


@pytest.mark.parametrize("shape", [(0, 3), (1, 1), (5, 3), (40, 17), (17, 40), (9, 100), (3, 64)])
def test_csr_kernels_equal_scipys_products(shape):
    """Reference: SciPy's CSR products X @ w and X.T @ r (and numpy's on X.toarray()); rows of
    0 to 30 entries exercise the eight-entry scatter and its remainder."""
    n, d = shape
    X = random_csr(n, d, 0.3, n + d) if n else sp.csr_matrix((0, d))
    rng = np.random.default_rng(1)
    w, y = rng.standard_normal(d), rng.standard_normal(n)
    r, g = np.full(n, np.nan), np.full(d, np.nan)
    kernels.csr_residual_gradient(X, w, y, r, g)
    ref_r = X @ w - y
    np.testing.assert_allclose(r, ref_r, rtol=1e-13, atol=1e-14)
    np.testing.assert_allclose(g, X.T @ ref_r, rtol=1e-13, atol=1e-13)
    np.testing.assert_allclose(g, X.toarray().T @ (X.toarray() @ w - y), rtol=1e-13, atol=1e-13)
    r2 = np.full(n, np.nan)
    kernels.csr_residual(X, w, y, r2)
    np.testing.assert_allclose(r2, ref_r, rtol=1e-13, atol=1e-14)
    # a kept scratch (whatever it held before) gives the same bits as a fresh one, twice
    work, r3, g3 = np.full((d, 2), np.nan), np.full(n, np.nan), np.full(d, np.nan)
    for _ in range(2):
        kernels.csr_residual_gradient(X, w, y, r3, g3, work)
        assert np.array_equal(r3, r) and np.array_equal(g3, g)


@pytest.mark.parametrize("work", [np.empty((3, 2)), np.empty((2, 3)), np.empty((2, 2), dtype=np.float32),
                                  np.empty((2, 2), order="F")])
def test_the_csr_kernel_refuses_a_scratch_of_the_wrong_shape(work):
    X = sp.csr_matrix(np.array([[1.0, 0.0], [0.0, 2.0]]))
    with pytest.raises(ValueError, match=r"C-ordered \(2, 2\) float64"):
        kernels.csr_residual_gradient(X, np.ones(2), np.zeros(2), np.empty(2), np.empty(2), work)


def test_the_csr_kernel_refuses_duplicate_entries():
    X = sp.csr_matrix((np.array([1.0, 2.0]), np.array([0, 0]), np.array([0, 2])), shape=(1, 2))
    with pytest.raises(ValueError, match="canonical form"):
        kernels.csr_residual_gradient(X, np.ones(2), np.zeros(1), np.empty(1), np.empty(2))


def iterates(solver, problem, params_spec, path, steps=25):
    """The solver's iterates on ``problem`` under an evaluation path (the runner's preparation)."""
    sdef = get_solver(solver)
    train, _ = fastpath.prepare(problem, problem.training_set(None), path)
    state = sdef.start(train, params_spec.params, run_rng(params_spec), params_spec.budget)
    out = [state.w.copy()]
    for _ in range(steps):
        state = sdef.step(train, params_spec.params, state)
        out.append(state.w.copy())
    return np.array(out), train


SOLVERS = [("gd", ()), ("nesterov", ()), ("heavy_ball", ("solver.momentum=0.7",)), ("cgls", ()),
           ("sgd", ("solver.batch=8",)), ("sgd", ("solver.batch=5", "solver.sampling=replacement")),
           ("sgd", ("solver.batch=1.0", "solver.sampling=cyclic", "solver.schedule=sqrt")),
           ("sgd", ("solver.batch=0.5", "solver.average=full"))]


@pytest.mark.parametrize("solver,extra", SOLVERS, ids=[f"{s}-{'-'.join(e)}" for s, e in SOLVERS])
@pytest.mark.parametrize("shape", [(200, 30, 0.1), (300, 6, 0.5), (60, 90, 0.05)], ids=["tall", "gram", "wide"])
def test_sparse_iterates_equal_the_dense_ones(solver, extra, shape):
    """CGLS is compared on its first 8 iterations: as its Krylov space fills, its recurrences
    amplify rounding differences (of either path) far beyond the products' own."""
    n, d, density = shape
    ps, pd = make_pair(n, d, density, seed=n + d)
    s = spec(solver, *extra)
    steps = 8 if solver == "cgls" else 25
    for path in ("direct", "fused", "gram", "auto"):
        ws, ts = iterates(solver, ps, s, path, steps)
        wd, _ = iterates(solver, pd, s, path, steps)
        assert ts.sparse
        rel_close(ws, wd)


def test_auto_picks_the_fused_csr_kernel_or_a_small_gram_matrix():
    ps, _ = make_pair(200, 30, 0.1)  # d^2 = 900 > nnz_train ~ 360: one pass over the nonzeros
    train, stats = fastpath.prepare(ps, ps.training_set(None), "auto")
    assert isinstance(train.plan, fastpath.SparseFusedGradient) and stats is None
    ps, _ = make_pair(300, 6, 0.5)  # d^2 = 36 < nnz: the 6 x 6 Gram matrix
    train, stats = fastpath.prepare(ps, ps.training_set(None), "auto")
    assert isinstance(train.plan, fastpath.GramGradient) and isinstance(train.plan.G, np.ndarray)
    assert stats is not None and stats.splits == ("train", "val", "test")


@pytest.mark.parametrize("solver,extra", SOLVERS[:6], ids=[f"{s}-{'-'.join(e)}" for s, e in SOLVERS[:6]])
@pytest.mark.parametrize("shape", [(200, 30, 0.1), (300, 6, 0.5)], ids=["fused", "gram"])
def test_recorded_columns_of_a_sparse_run_equal_the_dense_ones(solver, extra, shape):
    ps, pd = make_pair(*shape, seed=11)
    s = spec(solver, *extra, "record.every=3", iterations=8 if solver == "cgls" else 25)
    for path in ("auto", "direct"):
        a, b = execute(s, problem=ps, path=path), execute(s, problem=pd, path=path)
        assert a.status == b.status == "completed"
        assert list(a.columns) == list(b.columns)
        for c in a.columns:
            if c != "seconds":
                rel_close(a.columns[c], b.columns[c])
        assert a.problem_info["design"]["kind"] == "csr" and "design" not in b.problem_info


def test_the_gram_guard_falls_back_to_the_rows_of_a_sparse_split():
    """Noise-free targets: the errors tend to zero, where the Gram form loses its digits and
    the recorder evaluates the split from its rows (the dense path uses a QR factor)."""
    X = random_csr(400, 5, 0.6, 4)
    w = np.arange(1.0, 6.0)
    y = X @ w
    kw = dict(X_train=X[:240], y_train=y[:240], X_val=X[240:320], y_val=y[240:320], X_test=X[320:], y_test=y[320:])
    ps = Problem(name="exact", task="regression", **kw)
    pd = Problem(name="exact", task="regression", **{k: v.toarray() if sp.issparse(v) else v for k, v in kw.items()})
    s = spec("cgls", iterations=12)
    a, b = execute(s, problem=ps, path="gram"), execute(s, problem=pd, path="direct")
    assert a.problem_info["evaluation"]["fallbacks"] > 0 and not ps.row_factors
    for c in ("train_error", "val_error", "test_error"):
        np.testing.assert_allclose(a.columns[c], b.columns[c], rtol=1e-9, atol=1e-28)
    # inner products of residuals at rounding level: within rounding of ||y||^2
    np.testing.assert_allclose(a.columns["residual_dot_prev"], b.columns["residual_dot_prev"], rtol=1e-9,
                               atol=1e-15 * float(y[:240] @ y[:240]))


@pytest.mark.parametrize("solver,extra", [("gd", ()), ("nesterov", ()), ("sgd", ("solver.batch=4",)),
                                          ("gd", ("dataset.loss=hinge",))])
def test_classification_on_a_sparse_design_equals_the_dense_run(solver, extra):
    ps, pd = make_pair(200, 25, 0.15, seed=5, task="binary")
    s = spec_from_overrides(["dataset=separable", f"solver={solver}", "budget.iterations=20", *extra])
    loss = s.dataset.get("loss")
    ps, pd = (Problem(**{**{f: getattr(p, f) for f in ("name", "task", "X_train", "y_train", "X_val", "y_val",
                                                          "X_test", "y_test")}, "loss": loss}) for p in (ps, pd))
    a, b = execute(s, problem=ps), execute(s, problem=pd)
    for c in a.columns:
        if c not in ("seconds", "svm_angle", "svm_dist"):
            rel_close(a.columns[c], b.columns[c])
    assert a.problem_info["svm_method"] == "skipped: sparse design"


def test_a_solver_that_needs_a_dense_design_gets_a_bounded_copy():
    ps, pd = make_pair(150, 20, 0.2, seed=9)
    s = spec("kaczmarz", iterations=10)
    a, b = execute(s, problem=ps), execute(s, problem=pd)
    assert a.problem_info["design"]["kind"] == "dense copy of a csr design"
    for c in ("train_error", "val_error", "w_norm"):
        rel_close(a.columns[c], b.columns[c])
    fresh, _ = make_pair(150, 20, 0.2, seed=9)
    with limit_dense_bytes(1000), pytest.raises(DesignError) as e:
        execute(s, problem=fresh)
    msg = str(e.value)
    assert len(msg.splitlines()) == 1 and "solver 'kaczmarz'" in msg and "150 x 20" in msg and "design=dense" in msg


@pytest.mark.parametrize("solver,extra", [("gd", ()), ("sgd", ("solver.batch=64",)), ("cgls", ()),
                                          ("nesterov", ())])
def test_a_sparse_run_never_makes_a_dense_n_by_p_array(solver, extra):
    """A 20000 x 20000 design with two entries per row: its dense form (3.2 GB), its dense
    training rows (1.9 GB) or a dense d x d Gram matrix (3.2 GB) would show in the peak of
    Python's traced allocations (numpy's arrays are traced); the run stays under 32 MB with
    the densify bound at 1 MB."""
    n = d = 20_000
    rng = np.random.default_rng(0)
    rows = np.repeat(np.arange(n), 2)
    cols = rng.integers(0, d, size=2 * n)
    X = sp.csr_matrix((rng.standard_normal(2 * n), (rows, cols)), shape=(n, d))
    X.sum_duplicates()
    X.sort_indices()
    y = rng.standard_normal(n)
    p = Problem(name="huge", task="regression", X_train=X[:12_000], y_train=y[:12_000], X_val=X[12_000:16_000],
                y_val=y[12_000:16_000], X_test=X[16_000:], y_test=y[16_000:])
    s = spec(solver, *extra, iterations=10)
    with limit_dense_bytes(2**20):
        tracemalloc.start()
        try:
            t = execute(s, problem=p)
            peak = tracemalloc.get_traced_memory()[1]
        finally:
            tracemalloc.stop()
    assert t.status == "completed", t.message
    assert t.problem_info["evaluation"]["gradient"] in ("fused", "direct")
    assert peak < 32 * 2**20, peak

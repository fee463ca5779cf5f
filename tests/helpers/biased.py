"""Small problems built directly from numpy arrays, and independent SciPy references."""
from __future__ import annotations

import numpy as np
from scipy.optimize import linprog, minimize

from stopwise.problem.problem import Problem, TrainingSet
from stopwise.solvers import get_solver
from stopwise.core.params import make_params

FTOL = 1e-12  # SLSQP objective tolerance






def training(X: np.ndarray, y: np.ndarray) -> TrainingSet:
    return TrainingSet(X, y, L=float(np.linalg.norm(X, 2)) ** 2 / X.shape[0])


def underdetermined(seed: int = 3, n: int = 8, d: int = 20):
    """Gaussian n x d system with a 3-sparse truth and exact data."""
    rng = np.random.default_rng(seed)
    X = rng.standard_normal((n, d))
    w = np.zeros(d)
    w[[2, 7, 15]] = [1.5, -1.0, 0.8]
    return X, X @ w, w


def piecewise_constant(seed: int = 5, n: int = 15, d: int = 40):
    """Gaussian n x d system with a piecewise-constant truth (two jumps up/down) and exact data."""
    rng = np.random.default_rng(seed)
    X = rng.standard_normal((n, d))
    w = np.zeros(d)
    w[10:25] = 1.0
    w[25:32] = -0.5
    return X, X @ w, w


def as_problem(X, y, w_true=None, noise_norm=None, seed=0) -> Problem:
    """Wrap training arrays in a Problem (validation/test rows from the same design)."""
    rng = np.random.default_rng([seed, 99])
    d = X.shape[1]
    Xv, Xt = rng.standard_normal((10, d)), rng.standard_normal((10, d))
    wt = w_true if w_true is not None else np.zeros(d)
    return Problem(name="arrays", task="regression", X_train=np.array(X, dtype=float), y_train=np.array(y, dtype=float),
                   X_val=Xv, y_val=Xv @ wt, X_test=Xt, y_test=Xt @ wt,
                   w_true=None if w_true is None else np.array(w_true, dtype=float),
                   noise_level=noise_norm, noise_kind=None if noise_norm is None else "norm")


def iterate(name: str, train: TrainingSet, params: dict, steps: int, rng=None):
    """The list of states of ``steps`` iterations of a registered solver."""
    sdef = get_solver(name)
    p = make_params(sdef.params, params, "solver")
    state = sdef.init(train, p, rng if rng is not None else np.random.default_rng(0))
    out = [state]
    for _ in range(steps):
        state = sdef.step(train, p, state)
        out.append(state)
    return out


def final(name, train, params, steps, rng=None):
    sdef = get_solver(name)
    p = make_params(sdef.params, params, "solver")
    state = sdef.init(train, p, rng if rng is not None else np.random.default_rng(0))
    for _ in range(steps):
        state = sdef.step(train, p, state)
    return state


# ---------------------------------------------------------------- SciPy references

def slsqp_elastic_limit(X, y, lam):
    """argmin lam ||w||_1 + (1/2)||w||^2 s.t. X w = y by SciPy SLSQP, on the smooth split
    w = p - q, p, q >= 0."""
    d = X.shape[1]

    def obj(x):
        w = x[:d] - x[d:]
        return lam * x.sum() + 0.5 * w @ w

    def jac(x):
        w = x[:d] - x[d:]
        return np.concatenate([lam + w, lam - w])
    cons = {"type": "eq", "fun": lambda x: X @ (x[:d] - x[d:]) - y, "jac": lambda x: np.hstack([X, -X])}
    r = minimize(obj, np.zeros(2 * d), jac=jac, method="SLSQP", constraints=[cons],
                 bounds=[(0, None)] * (2 * d), options={"ftol": FTOL, "maxiter": 2000})
    assert r.success, r.message
    return r.x[:d] - r.x[d:]


def slsqp_nonneg_limit(X, y, lam):
    """argmin lam sum(w) + (1/2)||w||^2 s.t. X w = y, w >= 0 by SciPy SLSQP."""
    d = X.shape[1]
    cons = {"type": "eq", "fun": lambda w: X @ w - y, "jac": lambda w: X}
    r = minimize(lambda w: lam * w.sum() + 0.5 * w @ w, np.zeros(d), jac=lambda w: lam + w, method="SLSQP",
                 constraints=[cons], bounds=[(0, None)] * d, options={"ftol": FTOL, "maxiter": 2000})
    assert r.success, r.message
    return r.x


def slsqp_group_limit(X, y, lam, size, quad=1.0):
    """argmin lam sum_g ||w_g|| + (quad/2)||w||^2 s.t. X w = y by SciPy SLSQP on the epigraph
    form (variables w and s_g with s_g >= sqrt(||w_g||^2 + 1e-24))."""
    d = X.shape[1]
    G = len(range(0, d, size))
    member = np.repeat(np.arange(G), size)[:d]

    def obj(x):
        return lam * x[d:].sum() + 0.5 * quad * x[:d] @ x[:d]

    def jac(x):
        return np.concatenate([quad * x[:d], lam * np.ones(G)])
    cons = [{"type": "eq", "fun": lambda x: X @ x[:d] - y, "jac": lambda x: np.hstack([X, np.zeros((X.shape[0], G))])}]
    eps = 1e-12  # s_g >= sqrt(||w_g||^2 + eps^2): smooth, with a nonzero gradient at w_g = 0

    def soft_norm(x, g):
        return np.sqrt(np.sum(x[:d][member == g] ** 2) + eps * eps)
    cons += [{"type": "ineq", "fun": (lambda x, g=g: x[d + g] - soft_norm(x, g)),
              "jac": (lambda x, g=g: np.concatenate([np.where(member == g, -x[:d] / soft_norm(x, g), 0.0),
                                                     1.0 * (np.arange(G) == g)]))} for g in range(G)]
    w0 = np.linalg.lstsq(X, y, rcond=None)[0]
    x0 = np.concatenate([w0, [np.linalg.norm(w0[member == g]) + 1 for g in range(G)]])
    r = minimize(obj, x0, jac=jac, method="SLSQP", constraints=cons,
                 bounds=[(None, None)] * d + [(0, None)] * G, options={"ftol": FTOL, "maxiter": 2000})
    assert r.success, r.message
    return r.x[:d]


def linprog_basis_pursuit(X, y, nonneg=False):
    """min ||w||_1 s.t. X w = y (or min sum w s.t. X w = y, w >= 0) by SciPy linprog (HiGHS)."""
    d = X.shape[1]
    if nonneg:
        r = linprog(np.ones(d), A_eq=X, b_eq=y, bounds=[(0, None)] * d, method="highs")
        assert r.status == 0, r.message
        return r.x
    r = linprog(np.ones(2 * d), A_eq=np.hstack([X, -X]), b_eq=y, bounds=[(0, None)] * (2 * d), method="highs")
    assert r.status == 0, r.message
    return r.x[:d] - r.x[d:]


def linprog_tv(X, y):
    """min sum_j |w_{j+1} - w_j| s.t. X w = y as the LP min sum t s.t. -t <= D w <= t, X w = y
    (SciPy linprog, HiGHS)."""
    n, d = X.shape
    m = d - 1
    D = np.diff(np.eye(d), axis=0)
    c = np.concatenate([np.zeros(d), np.ones(m)])
    A_ub = np.block([[D, -np.eye(m)], [-D, -np.eye(m)]])
    r = linprog(c, A_ub=A_ub, b_ub=np.zeros(2 * m), A_eq=np.hstack([X, np.zeros((n, m))]), b_eq=y,
                bounds=[(None, None)] * d + [(0, None)] * m, method="highs")
    assert r.status == 0, r.message
    return r.x[:d]

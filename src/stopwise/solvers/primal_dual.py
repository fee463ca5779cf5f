"""Chambolle-Pock primal-dual iteration for ``min C(w) subject to X w = y``.

``C`` is a purely convex bias: a registered proximity operator (``l1``: basis pursuit,
``group_l1``, ``nonneg_l1``) or ``tv``, the one-dimensional total variation
``TV(w) = sum_j |w_{j+1} - w_j| = ||D w||_1``. The problem is written as
``min_w G(w) + F(K w)`` (Chambolle and Pock, J. Math. Imaging Vis. 40, 2011) with the data
constraint scaled by ``s = ||X||_2 = sqrt(n L)`` (the solution set does not change):

* prox biases: ``K = X / s``, ``G = C``, ``F = indicator{y / s}``;
* ``tv``: ``K = [X / s; D]``, ``G = 0``, ``F(a, b) = indicator{a = y / s} + ||b||_1``, so
  only simple proximity operators are needed (the difference operator sits in ``K``).

The iteration, from ``w_0 = w^_0 = 0`` and zero dual variables, is::

    z_{k+1} = z_k + sigma (X w^_k - y) / s                        (prox of sigma F*, data part)
    q_{k+1} = clip(q_k + sigma D w^_k, -1, 1)                     (tv only)
    w_{k+1} = prox_{tau G}(w_k - tau K^T (z_{k+1}, q_{k+1}))
    w^_{k+1} = 2 w_{k+1} - w_k

It converges when ``tau sigma ||K||^2 < 1`` (Chambolle and Pock 2011, Thm. 1). The steps
are ``tau = step_scale sqrt(balance) / N`` and ``sigma = step_scale / (sqrt(balance) N)``
with ``N`` a power-iteration estimate of ``||K||``, so ``tau sigma N^2 = step_scale^2``;
``step_scale`` must lie in (0, 1) and its default 0.95 leaves 10% on the product for the
estimate, which approaches ``||K||`` from below. The estimate and the number of power
iterations are recorded on every row (columns ``op_norm``, ``op_norm_iterations``).

Work: one product with X and one with X^T per step, one data pass (products with ``D`` are
O(d) and not data passes). The power iteration is set-up work like the constant ``L`` that
every step size uses and is not counted in ``passes``.

The constraint must be feasible (typically ``d > n`` with full row rank). On an
inconsistent system the dual variable grows without bound and early stopping is the only
regularization.
"""
from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Any, Callable

import numpy as np

from stopwise.problem.problem import TrainingSet
from stopwise.core.params import Interval, param
from stopwise.solvers.base import SolverDef, State, frozen, register
from stopwise.solvers.prox import PROX_OPERATORS, get_prox

POSITIVE = Interval(0.0, None, low_closed=False)
POWER_TOL = 1e-9      # relative change of the norm estimate that ends the power iteration
POWER_MAX = 2000      # at most this many products with K^T K


@dataclass(frozen=True)
class ChambollePockParams:
    step_scale: float = param(0.95, Interval(0.0, 1.0, low_closed=False, high_closed=False),
                              "tau sigma ||K||^2 = step_scale^2; must be < 1")
    balance: float = param(1.0, POSITIVE, "ratio tau / sigma of the primal step to the dual step")
    bias: str = param("l1", PROX_OPERATORS.choice(extra=("tv",)),
                      "C in min C(w) s.t. Xw = y: a registered prox (l1 = basis pursuit) or tv")
    group_size: int = param(1, Interval(1, None, integer=True),
                            "group_l1: size of the contiguous coordinate groups (1 gives l1)")


@dataclass(frozen=True)
class PrimalDualState(State):
    w_bar: np.ndarray | None = None   # extrapolated primal point 2 w_k - w_{k-1}
    z: np.ndarray | None = None       # dual variable of the (scaled) data constraint, length n
    q: np.ndarray | None = None       # dual variable of D w (tv only), length d - 1
    ktz: np.ndarray | None = None     # K^T (z, q) at the current dual point
    tau: float = 0.0
    sigma: float = 0.0
    scale: float = 1.0                # s = ||X||_2 dividing the data constraint
    op_norm: float = 0.0              # power-iteration estimate of ||K||
    op_norm_iterations: int = 0


def diff_t(q: np.ndarray, d: int, out: np.ndarray | None = None) -> np.ndarray:
    """``D^T q`` for the forward difference ``(D w)_j = w_{j+1} - w_j``: adds into ``out``."""
    if out is None:
        out = np.zeros(d)
    out[1:] += q
    out[:-1] -= q
    return out


def operator_norm(apply_gram: Callable[[np.ndarray], np.ndarray], d: int, rng: np.random.Generator,
                  tol: float = POWER_TOL, max_iter: int = POWER_MAX) -> tuple[float, int]:
    """Power iteration on ``K^T K``: returns ``(estimate of ||K||_2, products used)``.

    With ``x`` of unit norm, ``sqrt(||K^T K x||)`` never exceeds ``||K||_2`` and increases
    towards it (Golub and Van Loan, Matrix Computations, Sec. 7.3 / 8.2.1).
    """
    if d == 0:
        return 0.0, 0
    x = rng.standard_normal(d)
    x /= np.linalg.norm(x)
    est = 0.0
    for it in range(1, max_iter + 1):
        u = apply_gram(x)
        nu = float(np.linalg.norm(u))
        if nu == 0.0 or not math.isfinite(nu):
            return 0.0 if nu == 0.0 else math.nan, it
        new = math.sqrt(nu)
        x = u / nu
        if abs(new - est) <= tol * new:
            return new, it
        est = new
    return est, max_iter


def _scale(train: TrainingSet) -> float:
    s = math.sqrt(train.n * train.L) if train.L > 0 else 0.0
    return s if s > 0 else 1.0


def cp_init(train: TrainingSet, params: ChambollePockParams, rng: np.random.Generator) -> PrimalDualState:
    d, n = train.d, train.n
    s = _scale(train)
    X = train.X
    tv = params.bias == "tv"

    def gram(x: np.ndarray) -> np.ndarray:
        g = X.T @ (X @ x)
        g /= s * s
        if tv:
            diff_t(np.diff(x), d, out=g)
        return g

    N, its = operator_norm(gram, d, rng if rng is not None else np.random.default_rng(0))
    root = math.sqrt(params.balance)
    if N > 0 and math.isfinite(N):
        tau, sigma = params.step_scale * root / N, params.step_scale / (root * N)
    else:
        tau, sigma = params.step_scale * root, params.step_scale / root
    zero = frozen(np.zeros(d))
    return PrimalDualState(w=zero, iteration=0, passes=0.0, w_bar=zero, z=frozen(np.zeros(n)),
                           q=frozen(np.zeros(max(d - 1, 0))) if tv else None, ktz=zero,
                           tau=tau, sigma=sigma, scale=s, op_norm=N, op_norm_iterations=its)


def cp_step(train: TrainingSet, params: ChambollePockParams, state: PrimalDualState) -> PrimalDualState:
    """One Chambolle-Pock iteration (theta = 1)::

        z+ = z + sigma (X w^ - y) / s;   q+ = clip(q + sigma D w^, -1, 1)   (tv)
        w+ = prox_{tau G}(w - tau (X^T z+ / s + D^T q+));   w^+ = 2 w+ - w

    >>> import numpy as np
    >>> from stopwise.problem.problem import TrainingSet
    >>> tr = TrainingSet(np.array([[1.0, 1.0]]), np.array([2.0]), L=2.0)
    >>> p = ChambollePockParams()
    >>> s = cp_init(tr, p, np.random.default_rng(0))
    >>> round(s.op_norm, 9), s.passes
    (1.0, 0.0)
    >>> for _ in range(300):
    ...     s = cp_step(tr, p, s)
    >>> np.round(s.w, 6).tolist(), s.passes
    ([1.0, 1.0], 300.0)
    """
    s, sigma, tau = state.scale, state.sigma, state.tau
    r = train.X @ state.w_bar
    r -= train.y
    r *= sigma / s
    r += state.z
    z = frozen(r)
    ktz = train.X.T @ z
    ktz /= s
    q = None
    if state.q is not None:
        qn = np.diff(state.w_bar)
        qn *= sigma
        qn += state.q
        np.clip(qn, -1.0, 1.0, out=qn)
        q = frozen(qn)
        diff_t(q, train.d, out=ktz)
    u = ktz * (-tau)
    u += state.w
    if params.bias == "tv":
        w = u
    else:
        w = get_prox(params.bias).prox(u, tau, params)
    w_bar = 2.0 * w
    w_bar -= state.w
    return PrimalDualState(w=frozen(w), iteration=state.iteration + 1, passes=state.passes + 1.0,
                           w_bar=frozen(w_bar), z=z, q=q, ktz=frozen(ktz), tau=tau, sigma=sigma,
                           scale=s, op_norm=state.op_norm, op_norm_iterations=state.op_norm_iterations)


def tv_value(w: np.ndarray) -> float:
    """One-dimensional total variation ``sum_j |w_{j+1} - w_j|``."""
    return float(np.abs(np.diff(w)).sum())


def cp_metrics(train: TrainingSet, params: ChambollePockParams) -> dict[str, Callable[[State], float]]:
    """Per-iterate columns of the primal-dual method.

    ``bias_value``          C(w_k)
    ``pd_gap``              C(w_k) + <z_k, y> / s: primal value minus the dual value
                            ``-<z, y / s>`` of the Lagrangian ``C(w) + <z, (X w - y) / s>``;
                            zero at a saddle point (meaningful together with the primal
                            feasibility ``residual_norm`` and ``dual_infeasibility``)
    ``dual_infeasibility``  distance of ``-K^T z_k`` from the domain of ``G*`` (prox biases:
                            the entry's ``dual_violation``, e.g. ``max(0, ||X^T z / s||_inf - 1)``
                            for l1; tv: ``||X^T z / s + D^T q||_inf``, since ``G* `` is the
                            indicator of 0)
    ``op_norm``, ``op_norm_iterations``   the power-iteration estimate of ``||K||`` and its cost
    """
    y = train.y
    if params.bias == "tv":
        value = tv_value

        def dual_inf(state: PrimalDualState) -> float:
            return float(np.abs(state.ktz).max(initial=0.0))
    else:
        entry = get_prox(params.bias)

        def value(w: np.ndarray) -> float:
            return entry.value(w, params)

        def dual_inf(state: PrimalDualState) -> float:
            return entry.dual_violation(-state.ktz, params)

    def gap(state: PrimalDualState) -> float:
        return value(state.w) + float(state.z @ y) / state.scale

    return {"bias_value": lambda st: value(st.w), "pd_gap": gap, "dual_infeasibility": dual_inf,
            "op_norm": lambda st: float(st.op_norm), "op_norm_iterations": lambda st: float(st.op_norm_iterations)}


register(SolverDef("chambolle_pock", ChambollePockParams, cp_init, cp_step,
                   "Chambolle-Pock primal-dual for min C(w) s.t. Xw = y (C = l1 basis pursuit, group_l1, "
                   "nonneg_l1 or 1-D total variation), tau sigma ||K||^2 = step_scale^2",
                   metrics=cp_metrics))

"""A diagonal method for the hinge loss whose iterates converge to the hard-margin SVM.

Iteration t takes one step on the lambda_t-regularized hinge problem

    P_t(w) = (1 / n) sum_i max(0, 1 - y_i <x_i, w>) + (lambda_t / 2) ||w||^2,
    lambda_t = lambda0 / (1 + t)^p,

with lambda_t decreasing to zero. P_t has the minimizer of ``1/2 ||w||^2 + C_t sum_i
max(0, 1 - y_i <x_i, w>)``, C_t = 1 / (n lambda_t), whose dual is the box-constrained QP

    max_{0 <= beta <= C_t}  sum_i beta_i - 1/2 ||A^T beta||^2,   A = diag(y) X,   w = A^T beta.

As C_t grows the box opens; on separable data, once C_t exceeds the largest hard-margin dual
variable, the regularized solution *is* the hard-margin solution w* = argmin ||w|| s.t.
A w >= 1 (Schoelkopf and Smola, Learning with Kernels, 2002, ch. 7), so the iterates
themselves converge to w*, not only in direction (iterative regularization by a dual
diagonal method: Garrigos, Rosasco, Villa, J. Math. Imaging Vis. 60, 2018). Updates (param ``update``):

    dual               projected gradient ascent on the dual, tau = s / ||A||^2:
                       beta_{t+1} = clip(beta_t + tau (1 - A w_t), 0, C_t),  w_{t+1} = A^T beta_{t+1}
    dual_accelerated   the same step from the extrapolated point
                       v_t = beta_t + (t - 1)/(t + 2) (beta_t - beta_{t-1})  (FISTA; Beck and
                       Teboulle, SIAM J. Imaging Sci. 2, 2009); w is extrapolated alike, so a
                       step costs one product with X and one with X^T
    primal_dual        Chambolle and Pock (J. Math. Imaging Vis. 40, 2011), tau = sigma = s / ||A||:
                       z_{t+1} = clip(z_t + sigma (A wbar_t - 1), -C_t, 0)
                       w_{t+1} = (w_t - tau A^T z_{t+1}) / (1 + tau),  wbar_{t+1} = 2 w_{t+1} - w_t

Every step costs one data pass. The trace's ``train_loss`` is the unregularized hinge loss. On
non-separable rows the iterates follow the regularized solutions towards the minimum-norm
minimizer of the hinge loss (Attouch, SIAM J. Optim. 6, 1996).
``lambda_power`` p <= 1 keeps sum_t lambda_t infinite; p = 0 fixes lambda = lambda0 (the
soft-margin SVM with C = 1 / (n lambda0)).
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from stopwise.problem.problem import TrainingSet
from stopwise.core.params import Choice, Interval, ParamError, param
from stopwise.solvers.base import SolverDef, State, frozen, register

UPDATES = ("dual", "dual_accelerated", "primal_dual")


@dataclass(frozen=True)
class HingeDiagonalParams:
    update: str = param("dual_accelerated", Choice(UPDATES), "dual step, accelerated dual step, or primal-dual step")
    step_scale: float = param(1.0, Interval(0.0, 1.0, low_closed=False),
                              "dual: tau = s/||A||^2; primal_dual: tau = sigma = s/||A|| (needs s < 1)")
    lambda0: float = param(1.0, Interval(0.0, None, low_closed=False), "lambda_t = lambda0 / (1 + t)^p")
    lambda_power: float = param(1.0, Interval(0.0, 1.0), "decay power p of lambda_t (0: fixed lambda0)")

    def __post_init__(self) -> None:
        if self.update == "primal_dual" and self.step_scale == 1.0:
            raise ParamError("solver.step_scale=1.0 is invalid for update primal_dual: must be < 1 "
                             "(Chambolle-Pock needs tau sigma ||A||^2 < 1)")


@dataclass(frozen=True)
class HingeDiagonalState(State):
    dual: np.ndarray | None = None       # beta (dual methods) or z (primal-dual)
    dual_prev: np.ndarray | None = None  # beta_{t-1} (accelerated)
    w_prev: np.ndarray | None = None     # w_{t-1} (accelerated) or wbar (primal-dual)
    norm_A: float = 0.0                  # ||A||_2 = ||X||_2


def _C(train: TrainingSet, params: HingeDiagonalParams, t: int) -> float:
    lam = params.lambda0 / (1.0 + t) ** params.lambda_power
    return 1.0 / (train.n * lam)


def hinge_diagonal_init(train: TrainingSet, params: HingeDiagonalParams, rng) -> HingeDiagonalState:
    w = frozen(np.zeros(train.d))
    zn = frozen(np.zeros(train.n))
    norm_A = float(np.sqrt(train.L * train.n))  # hinge L = ||X||^2 / n and ||diag(y) X|| = ||X||
    return HingeDiagonalState(w=w, iteration=0, passes=0.0, dual=zn, dual_prev=zn, w_prev=w, norm_A=norm_A)


def hinge_diagonal_step(train: TrainingSet, params: HingeDiagonalParams,
                        state: HingeDiagonalState) -> HingeDiagonalState:
    """One step on the lambda_t-regularized hinge problem (see the module docstring).

    Two points x = +-1 with labels +-1: the hard-margin solution is w* = 1.

    >>> from stopwise.problem.problem import TrainingSet
    >>> tr = TrainingSet(np.array([[1.0], [-1.0]]), np.array([1.0, -1.0]), L=1.0, task="binary", loss="hinge")
    >>> p = HingeDiagonalParams(update="primal_dual", step_scale=0.9)
    >>> s = hinge_diagonal_init(tr, p, None)
    >>> for _ in range(200): s = hinge_diagonal_step(tr, p, s)
    >>> round(float(s.w[0]), 8), s.passes
    (1.0, 200.0)
    """
    X, y, t = train.X, train.y, state.iteration
    C = _C(train, params, t)
    nA = state.norm_A
    if nA == 0.0:
        return HingeDiagonalState(w=state.w, iteration=t + 1, passes=state.passes + 1.0, dual=state.dual,
                                  dual_prev=state.dual_prev, w_prev=state.w_prev, norm_A=nA)
    if params.update == "primal_dual":
        tau = sigma = params.step_scale / nA
        q = X @ state.w_prev            # wbar
        q *= y
        q -= 1.0
        q *= sigma
        q += state.dual
        z = np.clip(q, -C, 0.0, out=q)
        yz = y * z
        w = X.T @ yz
        w *= -tau
        w += state.w
        w /= 1.0 + tau
        wbar = 2.0 * w - state.w
        return HingeDiagonalState(w=frozen(w), iteration=t + 1, passes=state.passes + 1.0, dual=frozen(z),
                                  dual_prev=state.dual_prev, w_prev=frozen(wbar), norm_A=nA)
    tau = params.step_scale / (nA * nA)
    if params.update == "dual_accelerated" and t > 0:
        theta = (t - 1) / (t + 2)
        beta_v = state.dual + theta * (state.dual - state.dual_prev)
        w_v = state.w + theta * (state.w - state.w_prev)
    else:
        beta_v, w_v = state.dual, state.w
    q = X @ w_v
    q *= y
    np.subtract(1.0, q, out=q)
    q *= tau
    q += beta_v
    beta = np.clip(q, 0.0, C, out=q)
    w = X.T @ (y * beta)
    return HingeDiagonalState(w=frozen(w), iteration=t + 1, passes=state.passes + 1.0, dual=frozen(beta),
                              dual_prev=state.dual, w_prev=state.w, norm_A=nA)


register(SolverDef("hinge_diagonal", HingeDiagonalParams, hinge_diagonal_init, hinge_diagonal_step,
                   "diagonal method for the hinge loss: one dual / accelerated dual / primal-dual step on the "
                   "lambda_t-regularized problem, lambda_t -> 0; iterates converge to the hard-margin SVM",
                   tasks=("binary",), loss="hinge"))

"""Krylov methods on least squares: CGLS."""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from stopwise.problem.problem import TrainingSet
from stopwise.solvers.base import SolverDef, State, frozen, register


TOL = 1e-14  # relative accuracy at which CGLS declares a least-squares solution reached


@dataclass(frozen=True)
class CGLSParams:
    """CGLS has no step size: each iteration minimizes over a growing Krylov space."""


@dataclass(frozen=True)
class CGLSState(State):
    r: np.ndarray | None = None  # y - X w
    s: np.ndarray | None = None  # X^T r
    p: np.ndarray | None = None  # search direction
    gamma: float = 0.0           # ||s||^2


def cgls_init(train: TrainingSet, params: CGLSParams, rng) -> CGLSState:
    r = train.y.copy()
    s = train.X.T @ r
    return CGLSState(w=frozen(np.zeros(train.d)), iteration=0, passes=0.0,
                     r=frozen(r), s=frozen(s), p=frozen(s.copy()), gamma=float(s @ s))


def cgls_step(train: TrainingSet, params: CGLSParams, state: CGLSState) -> CGLSState:
    """Conjugate gradients on the normal equations (Hestenes and Stiefel 1952)::

        q = X p;  alpha = gamma / ||q||^2;  w += alpha p;  r -= alpha q
        s = X^T r;  gamma' = ||s||^2;  p = s + (gamma' / gamma) p

    One iteration costs one product with X and one with X^T: one data pass. In exact
    arithmetic iterate k equals LSQR's. The new state is marked ``converged`` when the
    iterate is a least-squares solution to rounding accuracy, with LSQR's two tests
    (Paige and Saunders 1982, section 6) at tolerance ``TOL``:
    ``||X^T r|| <= TOL ||X|| ||r||`` or ``||r|| <= TOL (||X|| ||w|| + ||y||)``; past that point
    the recursion only amplifies rounding errors.
    """
    if state.converged or state.gamma == 0.0:
        return CGLSState(w=state.w, iteration=state.iteration + 1, passes=state.passes, converged=True,
                         r=state.r, s=state.s, p=state.p, gamma=state.gamma)
    q = train.X @ state.p
    qq = float(q @ q)
    alpha = state.gamma / qq if qq > 0 else 0.0
    w = state.w + alpha * state.p
    r = state.r - alpha * q
    s = train.X.T @ r
    gamma = float(s @ s)
    p = s + (gamma / state.gamma) * state.p
    norm_x = float(np.sqrt(train.L * train.n))
    norm_r = float(np.sqrt(r @ r))
    done = (np.sqrt(gamma) <= TOL * norm_x * norm_r
            or norm_r <= TOL * (norm_x * float(np.sqrt(w @ w)) + float(np.sqrt(train.y @ train.y))))
    return CGLSState(w=frozen(w), iteration=state.iteration + 1, passes=state.passes + 1.0, converged=bool(done),
                     r=frozen(r), s=frozen(s), p=frozen(p), gamma=gamma)


register(SolverDef("cgls", CGLSParams, cgls_init, cgls_step,
                   "conjugate gradients on the normal equations (CGLS), no step size", sparse=True))

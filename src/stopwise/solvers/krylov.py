"""Krylov methods on least squares: CGLS."""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from ..problem import TrainingSet
from .base import SolverDef, State, frozen, register


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
    arithmetic iterate k equals LSQR's. Once the normal-equation residual is exactly
    zero the iterate is the least-squares solution and further steps keep it.
    """
    if state.gamma == 0.0:
        return CGLSState(w=state.w, iteration=state.iteration + 1, passes=state.passes + 1.0,
                         r=state.r, s=state.s, p=state.p, gamma=0.0)
    q = train.X @ state.p
    qq = float(q @ q)
    alpha = state.gamma / qq if qq > 0 else 0.0
    w = state.w + alpha * state.p
    r = state.r - alpha * q
    s = train.X.T @ r
    gamma = float(s @ s)
    p = s + (gamma / state.gamma) * state.p
    return CGLSState(w=frozen(w), iteration=state.iteration + 1, passes=state.passes + 1.0,
                     r=frozen(r), s=frozen(s), p=frozen(p), gamma=gamma)


register(SolverDef("cgls", CGLSParams, cgls_init, cgls_step,
                   "conjugate gradients on the normal equations (CGLS), no step size"))

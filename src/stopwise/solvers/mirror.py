"""Mirror descent on a strongly convex bias (linearized Bregman) and its accelerated version.

The bias is ``R(w) = lam C(w) + (1/2) ||w||^2`` with ``C`` taken from the proximity-operator
registry (:mod:`stopwise.solvers.prox`). ``R`` is 1-strongly convex, so its conjugate is
smooth with ``grad R*(v) = prox_{lam C}(v)``. Mirror descent on the training objective
``f(w) = (1/(2n)) ||X w - y||^2`` keeps a dual variable ``v`` and takes plain gradient
steps on it::

    v_{t+1} = v_t - eta grad f(w_t),      w_{t+1} = grad R*(v_{t+1}) = prox_{lam C}(v_{t+1}),

from ``v_0 = 0`` (so ``w_0 = prox(0) = 0``), with ``eta = step_scale / L`` and
``L = ||X||^2 / n``. It is gradient descent on the dual of ``min R(w) s.t. X w = y``
(dual smoothness ``||X||^2``), so for a consistent system it converges for
``0 < step_scale < 2`` to ``argmin lam C(w) + (1/2) ||w||^2 s.t. X w = y`` (Yin, SIAM J.
Imaging Sci. 3, 2010). With ``C = ||.||_1`` this is the linearized Bregman iteration
(Yin, Osher, Goldfarb, Darbon, SIAM J. Imaging Sci. 1, 2008; Cai, Osher, Shen, Math.
Comp. 78, 2009)::

    u = delta shrink(v, mu),   v <- v + A^T (f - A u)

with ``A = X``, ``f = y`` and the correspondence ``delta = step_scale / ||X||^2`` and
``mu = lam ||X||^2 / step_scale`` (scale our ``v`` by ``1 / delta``); the classical condition
``0 < delta < 1 / ||A A^T||`` reads ``0 < step_scale < 1`` and the classical limit
``argmin mu ||u||_1 + ||u||^2 / (2 delta) s.t. A u = f`` is ours. With ``lam = 0`` (and
``C = l1`` or ``group_l1``) the iteration is gradient descent, bit for bit.

Work: one gradient (one product with X and one with X^T) per step, one data pass.
"""
from __future__ import annotations

from dataclasses import dataclass
from typing import Any, Callable

import numpy as np

from stopwise.problem.problem import TrainingSet
from stopwise.core.params import Choice, Interval, param
from stopwise.solvers.base import SolverDef, State, frozen, register, step_size
from stopwise.solvers.prox import PROX_OPERATORS, get_prox

POSITIVE = Interval(0.0, None, low_closed=False)
BIAS = PROX_OPERATORS.choice()
RESTARTS = ("none", "gradient")


@dataclass(frozen=True)
class MirrorParams:
    step_scale: float = param(1.0, POSITIVE, "dual step size in units of 1/L (converges for < 2)")
    bias: str = param("l1", BIAS, "convex part C of the bias R = lam C + (1/2)||.||^2 (a registered prox)")
    lam: float = param(1.0, Interval(0.0, None), "weight lambda of C in the bias (0 with l1: gradient descent)")
    group_size: int = param(1, Interval(1, None, integer=True),
                            "group_l1: size of the contiguous coordinate groups (1 gives l1)")


@dataclass(frozen=True)
class MirrorState(State):
    v: np.ndarray | None = None  # dual (mirror) variable; w = prox_{lam C}(v)


def _primal(v: np.ndarray, params: Any) -> np.ndarray:
    """``grad R*(v) = prox_{lam C}(v)`` as a new read-only array."""
    return frozen(get_prox(params.bias).prox(v, params.lam, params))


def mirror_init(train: TrainingSet, params: MirrorParams, rng) -> MirrorState:
    v = frozen(np.zeros(train.d))
    return MirrorState(w=_primal(v, params), iteration=0, passes=0.0, v=v)


def mirror_step(train: TrainingSet, params: MirrorParams, state: MirrorState) -> MirrorState:
    """Mirror descent / linearized Bregman::

        v_{t+1} = v_t - (s / L) X^T (X w_t - y) / n,     w_{t+1} = prox_{lam C}(v_{t+1})

    >>> import numpy as np
    >>> from stopwise.problem.problem import TrainingSet
    >>> tr = TrainingSet(np.eye(2), np.array([3.0, 0.5]), L=0.5)
    >>> p = MirrorParams(step_scale=1.0, bias="l1", lam=1.0)
    >>> s = mirror_step(tr, p, mirror_init(tr, p, None))
    >>> s.v.tolist(), s.w.tolist(), s.passes
    ([3.0, 0.5], [2.0, 0.0], 1.0)
    """
    g = train.gradient(state.w)
    g *= -step_size(train, params.step_scale)
    g += state.v
    v = frozen(g)
    return MirrorState(w=_primal(v, params), iteration=state.iteration + 1, passes=state.passes + 1.0, v=v)


def bias_metrics(train: TrainingSet, params: Any) -> dict[str, Callable[[State], float]]:
    """Per-iterate value of the bias ``R(w) = lam C(w) + (1/2) ||w||^2`` (column ``bias_value``)."""
    C = get_prox(params.bias).value
    lam = float(params.lam)

    def bias_value(state: State) -> float:
        w = state.w
        c = C(w, params) if lam else 0.0
        return lam * c + 0.5 * float(w @ w)

    return {"bias_value": bias_value}


register(SolverDef("mirror_descent", MirrorParams, mirror_init, mirror_step,
                   "mirror descent on the bias lam C + (1/2)||.||^2 (linearized Bregman for C = l1), "
                   "dual step step_scale/L", metrics=bias_metrics))


# ---------------------------------------------------------------- accelerated (Nesterov on the dual)

@dataclass(frozen=True)
class AccMirrorParams:
    step_scale: float = param(1.0, POSITIVE, "dual step size in units of 1/L (guaranteed for <= 1)")
    bias: str = param("l1", BIAS, "convex part C of the bias R = lam C + (1/2)||.||^2 (a registered prox)")
    lam: float = param(1.0, Interval(0.0, None), "weight lambda of C in the bias (0 with l1: Nesterov)")
    group_size: int = param(1, Interval(1, None, integer=True),
                            "group_l1: size of the contiguous coordinate groups (1 gives l1)")
    restart: str = param("none", Choice(RESTARTS),
                         "none, or gradient: reset the momentum when it points against the step "
                         "(O'Donoghue and Candes 2015)")


@dataclass(frozen=True)
class AccMirrorState(MirrorState):
    v_prev: np.ndarray | None = None
    k: int = 0  # steps since the last (re)start; drives the momentum weight


def acc_mirror_init(train: TrainingSet, params: AccMirrorParams, rng) -> AccMirrorState:
    v = frozen(np.zeros(train.d))
    return AccMirrorState(w=_primal(v, params), iteration=0, passes=0.0, v=v, v_prev=v, k=0)


def acc_mirror_step(train: TrainingSet, params: AccMirrorParams, state: AccMirrorState) -> AccMirrorState:
    """Accelerated linearized Bregman: Nesterov's momentum on the dual variable
    (Huang, Ma, Goldfarb, J. Sci. Comput. 54, 2013)::

        v^_t    = v_t + (k - 1) / (k + 2) (v_t - v_{t-1})        (k = steps since the start)
        v_{t+1} = v^_t - (s / L) grad f(prox_{lam C}(v^_t))
        w_{t+1} = prox_{lam C}(v_{t+1})

    With ``restart = "gradient"`` the momentum is reset (``k = 0``) whenever
    ``(v_{t+1} - v^_t) . (v_{t+1} - v_t) < 0`` (O'Donoghue and Candes, Found. Comput. Math.
    15, 2015, gradient scheme, written in the dual variable). One data pass per step.
    """
    k = state.k
    beta = (k - 1) / (k + 2) if k > 0 else 0.0
    if beta:
        vh = state.v - state.v_prev
        vh *= beta
        vh += state.v
        wh = _primal(vh, params)
    else:
        vh, wh = state.v, state.w
    g = train.gradient(wh)
    g *= -step_size(train, params.step_scale)
    step = g  # v_{t+1} - v^_t
    v = frozen(step + vh)
    restart = params.restart == "gradient" and k > 0 and float(step @ (v - state.v)) < 0.0
    return AccMirrorState(w=_primal(v, params), iteration=state.iteration + 1, passes=state.passes + 1.0,
                          v=v, v_prev=v if restart else state.v, k=0 if restart else k + 1)


register(SolverDef("mirror_nesterov", AccMirrorParams, acc_mirror_init, acc_mirror_step,
                   "accelerated mirror descent / linearized Bregman: Nesterov momentum (k-1)/(k+2) on the "
                   "dual variable, dual step step_scale/L, optional gradient restart", metrics=bias_metrics))

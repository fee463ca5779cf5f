"""Full-batch first-order methods: gradient descent, Nesterov, heavy ball.

They run on every smooth loss of :mod:`stopwise.problem.losses` (least squares, logistic, softmax;
on the hinge, gradient descent is the subgradient method), through ``train.gradient``."""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from stopwise.problem.problem import TrainingSet
from stopwise.core.params import Interval, param
from stopwise.solvers.base import SolverDef, State, frozen, register, step_size

POSITIVE = Interval(0.0, None, low_closed=False)
ALL_TASKS = ("regression", "binary", "multiclass")


# ---------------------------------------------------------------- gradient descent

@dataclass(frozen=True)
class GDParams:
    step_scale: float = param(1.0, POSITIVE, "step size in units of 1/L (converges for < 2)")


def gd_init(train: TrainingSet, params: GDParams, rng: np.random.Generator) -> State:
    return State(w=frozen(np.zeros(train.dim)), iteration=0, passes=0.0)


def gd_step(train: TrainingSet, params: GDParams, state: State) -> State:
    """Gradient descent (Landweber): ``w_{t+1} = w_t - (s / L) X^T (X w_t - y) / n``.

    >>> import numpy as np
    >>> from stopwise.problem.problem import TrainingSet
    >>> X = np.eye(2); tr = TrainingSet(X, np.array([1.0, 2.0]), L=0.5)
    >>> s = gd_step(tr, GDParams(1.0), gd_init(tr, GDParams(1.0), None))
    >>> s.w.tolist(), s.iteration, s.passes
    ([1.0, 2.0], 1, 1.0)
    """
    g = train.gradient(state.w)
    g *= -step_size(train, params.step_scale)
    g += state.w
    return State(w=frozen(g), iteration=state.iteration + 1, passes=state.passes + 1.0)


register(SolverDef("gd", GDParams, gd_init, gd_step,
                   "gradient descent (Landweber iteration) with constant step step_scale/L", tasks=ALL_TASKS))


# ---------------------------------------------------------------- Nesterov

@dataclass(frozen=True)
class NesterovParams:
    step_scale: float = param(1.0, POSITIVE, "step size in units of 1/L (guaranteed for <= 1)")


@dataclass(frozen=True)
class MomentumState(State):
    w_prev: np.ndarray | None = None


def nesterov_init(train: TrainingSet, params: NesterovParams, rng) -> MomentumState:
    w = frozen(np.zeros(train.dim))
    return MomentumState(w=w, iteration=0, passes=0.0, w_prev=w)


def nesterov_step(train: TrainingSet, params: NesterovParams, state: MomentumState) -> MomentumState:
    """Nesterov's accelerated gradient for convex objectives (Nesterov 1983)::

        v_t     = w_t + (t - 1) / (t + 2) (w_t - w_{t-1})
        w_{t+1} = v_t - (s / L) grad f(v_t)

    with ``t`` the number of steps taken so far (so the first step is plain gradient).
    """
    t = state.iteration
    beta = (t - 1) / (t + 2) if t > 0 else 0.0
    v = state.w - state.w_prev
    v *= beta
    v += state.w
    g = train.gradient(v)
    g *= -step_size(train, params.step_scale)
    g += v
    return MomentumState(w=frozen(g), iteration=t + 1, passes=state.passes + 1.0, w_prev=state.w)


register(SolverDef("nesterov", NesterovParams, nesterov_init, nesterov_step,
                   "Nesterov's accelerated gradient, momentum (t-1)/(t+2), step step_scale/L", tasks=ALL_TASKS))


# ---------------------------------------------------------------- heavy ball

@dataclass(frozen=True)
class HeavyBallParams:
    step_scale: float = param(1.0, POSITIVE, "step size in units of 1/L")
    momentum: float = param(0.5, Interval(0.0, 1.0, high_closed=False), "momentum beta in [0, 1)")


def heavy_ball_init(train: TrainingSet, params: HeavyBallParams, rng) -> MomentumState:
    w = frozen(np.zeros(train.dim))
    return MomentumState(w=w, iteration=0, passes=0.0, w_prev=w)


def heavy_ball_step(train: TrainingSet, params: HeavyBallParams, state: MomentumState) -> MomentumState:
    """Polyak's heavy ball (Polyak 1964)::

        w_{t+1} = w_t - (s / L) grad f(w_t) + beta (w_t - w_{t-1})
    """
    g = train.gradient(state.w)
    g *= -step_size(train, params.step_scale)
    g += state.w
    if params.momentum:
        g += params.momentum * (state.w - state.w_prev)
    return MomentumState(w=frozen(g), iteration=state.iteration + 1,
                         passes=state.passes + 1.0, w_prev=state.w)


register(SolverDef("heavy_ball", HeavyBallParams, heavy_ball_init, heavy_ball_step,
                   "Polyak's heavy ball: gradient step step_scale/L plus momentum (w_t - w_{t-1})",
                   tasks=ALL_TASKS))

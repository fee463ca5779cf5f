"""Full-batch first-order methods: gradient descent, Nesterov, heavy ball, and their
constant-momentum variants for strongly convex least squares.

``gd``, ``nesterov`` and ``heavy_ball`` run on every smooth loss of
:mod:`stopwise.problem.losses` (least squares, logistic, softmax; on the hinge, gradient
descent is the subgradient method), through ``train.gradient``. ``nesterov_strong`` and
``heavy_ball_optimal`` take their constants from the extreme eigenvalues ``mu`` and ``L``
of the least-squares Hessian ``X^T X / n`` of the training rows, so they run on regression
problems whose Hessian is positive definite and refuse the others in one line."""
from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from stopwise.core.errors import SpecError
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
                   "gradient descent (Landweber iteration) with constant step step_scale/L", tasks=ALL_TASKS,
                   sparse=True))


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
                   "Nesterov's accelerated gradient, momentum (t-1)/(t+2), step step_scale/L", tasks=ALL_TASKS,
                   sparse=True))


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
                   tasks=ALL_TASKS, sparse=True))



# ---------------------------------------------------------------- strongly convex least squares

def strong_convexity(train: TrainingSet, solver: str) -> tuple[float, float]:
    """``(mu, L)``: the smallest and largest eigenvalues of the least-squares Hessian
    ``X^T X / n`` of the training rows (:attr:`TrainingSet.hessian_range`). Raises
    :class:`SpecError` (one line) when the Hessian is singular to working precision,
    ``mu <= max(n, d) eps L`` (always when ``n < d``): the objective is then not strongly
    convex and the constants below do not exist.

    >>> tr = TrainingSet(np.diag([2.0, 1.0]), np.zeros(2), L=2.0)
    >>> strong_convexity(tr, "nesterov_strong")
    (0.5, 2.0)
    >>> strong_convexity(TrainingSet(np.ones((2, 3)), np.zeros(2), L=3.0), "nesterov_strong")
    Traceback (most recent call last):
    ...
    stopwise.core.errors.SpecError: solver 'nesterov_strong' needs a strongly convex objective, but the least-squares Hessian X^T X / n of the training rows is singular (n_train=2 < d=3); use nesterov or heavy_ball
    """
    n, d = train.n, train.d
    mu, L = train.hessian_range
    if train.loss != "squares":
        raise SpecError(f"solver {solver!r} takes its constants from the least-squares Hessian and trains only "
                        f"the squares loss, not {train.loss}")
    if not L > 0 or mu <= max(n, d) * np.finfo(float).eps * L:
        why = (f"n_train={n} < d={d}" if n < d else
               f"smallest eigenvalue {mu:.3g} against largest {L:.3g}, n_train={n}, d={d}")
        raise SpecError(f"solver {solver!r} needs a strongly convex objective, but the least-squares Hessian "
                        f"X^T X / n of the training rows is singular ({why}); use nesterov or heavy_ball")
    return mu, L


def check_strongly_convex(solver: str):
    """The ``SolverDef.check`` of a solver that needs a strongly convex objective."""
    def check(train: TrainingSet, params) -> None:
        strong_convexity(train, solver)
    return check


@dataclass(frozen=True)
class SpectrumParams:
    """No parameters: the step and the momentum come from the training spectrum."""


@dataclass(frozen=True)
class ConstantMomentumState(MomentumState):
    step: float = 0.0       # absolute step size
    momentum: float = 0.0   # beta
    kappa: float = 0.0      # condition number L / mu of the training Hessian


def nesterov_strong_init(train: TrainingSet, params: SpectrumParams, rng) -> ConstantMomentumState:
    mu, L = strong_convexity(train, "nesterov_strong")
    q = math.sqrt(L / mu)
    w = frozen(np.zeros(train.dim))
    return ConstantMomentumState(w=w, iteration=0, passes=0.0, w_prev=w, step=1.0 / L,
                                 momentum=(q - 1.0) / (q + 1.0), kappa=L / mu)


def nesterov_strong_step(train: TrainingSet, params: SpectrumParams,
                         state: ConstantMomentumState) -> ConstantMomentumState:
    """Nesterov's constant-momentum scheme for ``mu``-strongly convex, ``L``-smooth
    objectives (Nesterov, Introductory Lectures on Convex Optimization, 2004, constant
    step scheme III, (2.2.19))::

        v_t     = w_t + beta (w_t - w_{t-1}),   beta = (sqrt(kappa) - 1) / (sqrt(kappa) + 1)
        w_{t+1} = v_t - (1 / L) grad f(v_t),    kappa = L / mu

    from ``w_0 = w_{-1} = 0``; ``f(w_t) - f* <= (1 - 1/sqrt(kappa))^t (f(w_0) - f* + mu ||w_0 - w*||^2 / 2)``.

    >>> tr = TrainingSet(np.diag([2.0, 1.0]), np.array([2.0, 1.0]), L=2.0)
    >>> s = nesterov_strong_init(tr, SpectrumParams(), None)
    >>> round(s.momentum, 12), s.kappa
    (0.333333333333, 4.0)
    >>> nesterov_strong_step(tr, SpectrumParams(), s).w.tolist()
    [1.0, 0.25]
    """
    v = state.w - state.w_prev
    v *= state.momentum
    v += state.w
    g = train.gradient(v)
    g *= -state.step
    g += v
    return ConstantMomentumState(w=frozen(g), iteration=state.iteration + 1, passes=state.passes + 1.0,
                                 w_prev=state.w, step=state.step, momentum=state.momentum, kappa=state.kappa)


register(SolverDef("nesterov_strong", SpectrumParams, nesterov_strong_init, nesterov_strong_step,
                   "Nesterov's scheme for strongly convex least squares: step 1/L, constant momentum "
                   "(sqrt(kappa)-1)/(sqrt(kappa)+1) from the training spectrum",
                   check=check_strongly_convex("nesterov_strong")))


def heavy_ball_optimal_init(train: TrainingSet, params: SpectrumParams, rng) -> ConstantMomentumState:
    mu, L = strong_convexity(train, "heavy_ball_optimal")
    q = math.sqrt(L / mu)
    w = frozen(np.zeros(train.dim))
    return ConstantMomentumState(w=w, iteration=0, passes=0.0, w_prev=w,
                                 step=4.0 / (math.sqrt(L) + math.sqrt(mu)) ** 2,
                                 momentum=((q - 1.0) / (q + 1.0)) ** 2, kappa=L / mu)


def heavy_ball_optimal_step(train: TrainingSet, params: SpectrumParams,
                            state: ConstantMomentumState) -> ConstantMomentumState:
    """Polyak's heavy ball with the constants that are optimal on a quadratic whose
    Hessian has its eigenvalues in ``[mu, L]`` (Polyak, USSR Comput. Math. Math. Phys. 4, 1964)::

        w_{t+1} = w_t - alpha grad f(w_t) + beta (w_t - w_{t-1}),
        alpha = 4 / (sqrt(L) + sqrt(mu))^2,   beta = ((sqrt(kappa) - 1) / (sqrt(kappa) + 1))^2

    whose iteration matrix has spectral radius ``sqrt(beta) = (sqrt(kappa) - 1) / (sqrt(kappa) + 1)``.

    >>> tr = TrainingSet(np.diag([2.0, 1.0]), np.array([2.0, 1.0]), L=2.0)
    >>> s = heavy_ball_optimal_init(tr, SpectrumParams(), None)
    >>> round(s.step * (2 ** 0.5 + 0.5 ** 0.5) ** 2, 12), round(s.momentum, 12)
    (4.0, 0.111111111111)
    """
    g = train.gradient(state.w)
    g *= -state.step
    g += state.w
    d = state.w - state.w_prev
    d *= state.momentum
    g += d
    return ConstantMomentumState(w=frozen(g), iteration=state.iteration + 1, passes=state.passes + 1.0,
                                 w_prev=state.w, step=state.step, momentum=state.momentum, kappa=state.kappa)


register(SolverDef("heavy_ball_optimal", SpectrumParams, heavy_ball_optimal_init, heavy_ball_optimal_step,
                   "Polyak's heavy ball with its optimal step 4/(sqrt(L)+sqrt(mu))^2 and momentum "
                   "((sqrt(kappa)-1)/(sqrt(kappa)+1))^2 from the training spectrum",
                   check=check_strongly_convex("heavy_ball_optimal")))

"""Iterate averaging, written once as a wrapper around any solver (DESIGN: variants are
wrappers, not flags inside each solver).

``averaged(defn)`` returns a new :class:`~stopwise.solvers.base.SolverDef` whose params
are the base params plus :class:`AveragingParams`, whose step takes one base step and
whose evaluated iterate ``w`` is an average of the base iterates ``w_1, w_2, ...``
(the iterates after each step; ``w_0`` is the starting point):

``none``  ``hat w_t = w_t`` (the base solver unchanged: its own states are returned)
``full``  ``hat w_t = (1 / t) sum_{s=1}^{t} w_s`` (Polyak and Juditsky 1992, SIAM J. Control
          Optim. 30; scikit-learn's ``SGDRegressor(average=True)`` computes the same average)
``tail``  ``hat w_t = w_t`` for ``t < s``, ``hat w_t = (1 / (t - s + 1)) sum_{r=s}^{t} w_r`` for
          ``t >= s``, where ``s = T - ceil(tail * T) + 1`` makes the average cover the last
          fraction ``tail`` of the run's horizon ``T`` (Jain, Kakade, Kidambi, Netrapalli,
          Sidford, JMLR 18, 2018). ``T`` is the iteration budget, or, when a pass budget
          ends the run first, the step at which it does (the work per step is taken from
          the first step, so this assumes constant work per step, as SGD has).
``ema``   ``hat w_0 = w_0``, ``hat w_t = beta hat w_{t-1} + (1 - beta) w_t``.

Running means are updated as ``hat w_k = hat w_{k-1} + (w - hat w_{k-1}) / k``. The base
iterate stays in the state (``inner``), so averaging never changes the base trajectory,
and ``iteration`` and ``passes`` are the base solver's.
"""
from __future__ import annotations

import dataclasses
import math
from dataclasses import dataclass
from typing import Any

import numpy as np

from stopwise.problem.problem import TrainingSet
from stopwise.core.params import Choice, Interval, param  # noqa: F401
from stopwise.core.errors import StopwiseError
from stopwise.solvers.base import SolverDef, State, frozen

AVERAGES = ("none", "full", "tail", "ema")
PASS_EPS = 1e-12  # the runner's tolerance on pass budgets


@dataclass(frozen=True)
class AveragingParams:
    average: str = param("none", Choice(AVERAGES), "iterate averaging: none, full, tail or ema")
    tail: float = param(0.5, Interval(0.0, 1.0, low_closed=False),
                        "tail averaging: fraction of the run's horizon averaged at its end")
    ema_decay: float = param(0.99, Interval(0.0, 1.0, high_closed=False),
                             "ema averaging: weight beta of the previous average")


@dataclass(frozen=True)
class AveragedState(State):
    """``w`` is the average; ``inner`` the base solver's state."""

    inner: State | None = None
    count: int = 0                   # iterates in the current running mean
    start: int = 0                   # tail: first averaged iteration (0 until known)
    horizon_iterations: int | None = None
    horizon_passes: float | None = None


class AveragingError(StopwiseError, ValueError):
    """Averaging asked for something it cannot do; the message is one line."""


def tail_start(tail: float, iterations: int, passes_budget: float | None, per_step: float) -> int:
    """First iteration of the tail average over the last fraction ``tail`` of the horizon."""
    T = int(iterations)
    if passes_budget is not None and per_step > 0:
        tp = max(1, math.ceil((passes_budget - PASS_EPS) / per_step))
        while tp > 1 and (tp - 1) * per_step >= passes_budget - PASS_EPS:
            tp -= 1
        while tp * per_step < passes_budget - PASS_EPS:
            tp += 1
        T = min(T, tp)
    m = max(1, math.ceil(tail * T - 1e-9))
    return max(1, T - m + 1)


def _mean_update(avg: np.ndarray, w: np.ndarray, k: int) -> np.ndarray:
    if k == 1:
        return w
    out = w - avg
    out /= k
    out += avg
    return frozen(out)


def averaged(defn: SolverDef, name: str | None = None, summary: str | None = None) -> SolverDef:
    """Wrap a solver with iterate averaging (see the module docstring for the rules).

    The returned solver's params class is ``defn.params`` when it already derives from
    :class:`AveragingParams`, else a frozen dataclass deriving from both.
    """
    params_cls = defn.params
    if not issubclass(params_cls, AveragingParams):
        params_cls = dataclasses.make_dataclass(
            f"{defn.params.__name__}Averaged", [], bases=(defn.params, AveragingParams), frozen=True)
        params_cls.__module__ = defn.params.__module__

    def init_budget(train: TrainingSet, params: Any, rng: np.random.Generator, budget: dict) -> State:
        inner = defn.start(train, params, rng, budget)
        if params.average == "none":
            return inner
        if params.average == "tail" and not budget.get("iterations"):
            raise AveragingError("tail averaging needs the run's budget (budget.iterations)")
        passes = budget.get("passes")
        return AveragedState(w=inner.w, iteration=inner.iteration, passes=inner.passes, inner=inner,
                             count=0, start=0, horizon_iterations=budget.get("iterations"),
                             horizon_passes=None if passes is None else float(passes))

    def init(train: TrainingSet, params: Any, rng: np.random.Generator) -> State:
        if params.average == "tail":
            raise AveragingError("tail averaging needs the run's budget: start the solver with "
                                 "SolverDef.start(train, params, rng, budget)")
        return init_budget(train, params, rng, {})

    def step(train: TrainingSet, params: Any, state: State) -> State:
        mode = params.average
        if mode == "none":
            return defn.step(train, params, state)
        inner = defn.step(train, params, state.inner)
        t = inner.iteration
        count, start = state.count, state.start
        if mode == "full":
            count += 1
            w = _mean_update(state.w, inner.w, count)
        elif mode == "tail":
            if start == 0:
                start = tail_start(params.tail, state.horizon_iterations, state.horizon_passes,
                                   inner.passes - state.inner.passes)
            if t < start:
                w = inner.w
            else:
                count += 1
                w = _mean_update(state.w, inner.w, count)
        else:  # ema
            beta = params.ema_decay
            w = inner.w * (1.0 - beta)
            w += beta * state.w
            w = frozen(w)
        return AveragedState(w=w, iteration=t, passes=inner.passes, inner=inner, count=count, start=start,
                             horizon_iterations=state.horizon_iterations, horizon_passes=state.horizon_passes)

    step.__doc__ = f"{defn.name} step followed by iterate averaging (stopwise.solvers.averaging)."
    return dataclasses.replace(defn, name=name or defn.name, params=params_cls, init=init, step=step,
                               summary=summary or defn.summary, init_budget=init_budget)


__all__ = ["AVERAGES", "AveragedState", "AveragingError", "AveragingParams", "averaged", "tail_start"]

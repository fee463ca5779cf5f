"""Step-size schedules as a wrapper around a base solver's step: normalized and increasing steps.

On separable data the logistic loss has no minimizer; gradient descent with a fixed step
converges to the hard-margin direction only at rate 1 / log t (Soudry, Hoffer, Nacson,
Gunasekar, Srebro, JMLR 19, 2018), because the gradient vanishes like the loss. Steps that
grow to compensate are much faster in direction:

    w_{t+1} = w_t - (s / L') (t + 1)^p  G_t,

    G_t = grad f / f = grad log f      normalize = "loss"      (Nacson, Lee, Gunasekar, Savarese,
                                       Srebro, Soudry, AISTATS 2019, take p = -1/2 and prove
                                       margin rate log t / sqrt t for the exponential loss;
                                       Ji and Telgarsky, ALT 2021, take p = 0)
    G_t = grad f / ||grad f||          normalize = "gradient"  (normalized gradient descent)
    G_t = grad f                       normalize = "none"      (p > 0: increasing steps)

With normalize = "loss" the step is gradient descent on ``log f``, and the unit ``L'`` is a
smoothness constant of ``log f``: ``R^2 = max_i ||x_i||^2`` for the logistic loss (``2 R^2`` for
softmax; see :func:`log_smoothness`), which makes ``s <= 1`` the step that Ji and Telgarsky
analyse for rows of norm at most 1. normalize = "gradient" uses the same unit; normalize =
"none" uses the loss's own ``L`` as gradient descent does.

The wrapper hands the base step a training set whose ``gradient`` returns ``(t + 1)^p G_t``
computed in one pass at the point where the base method evaluates its gradient (for
Nesterov: the extrapolated point; Ji, Srebro and Telgarsky, ICML 2021, show that momentum
on loss-normalized steps speeds margin maximization further). ``grad log f`` is evaluated
in the log domain (see stopwise.problem.losses.logistic_log_gradient), so the step stays exact after
the loss itself has underflowed to zero.
"""
from __future__ import annotations

import dataclasses
import math
from dataclasses import dataclass
from typing import Any

import numpy as np

from stopwise.problem.losses import log_gradient
from stopwise.problem.problem import TrainingSet
from stopwise.core.params import Choice, Interval, param
from stopwise.solvers.base import SolverDef, State, get_solver, register

NORMALIZE = ("loss", "gradient", "none")


@dataclass(frozen=True)
class ScheduledTrainingSet(TrainingSet):
    """A training set whose gradient is the scheduled direction ``(t + 1)^p G_t``."""

    normalize: str = "loss"
    power: float = 0.0
    t: int = 0

    def gradient(self, w: np.ndarray) -> np.ndarray:
        if self.normalize == "none":
            g = TrainingSet.gradient(self, w)
        else:
            _, g = log_gradient(self, w)
            if self.normalize == "gradient":
                ng = math.sqrt(float(g @ g))
                if ng > 0:
                    g /= ng
        if self.power:
            g *= (self.t + 1.0) ** self.power
        return g


def log_smoothness(train: TrainingSet) -> float:
    """Step unit of the normalized schedules: a smoothness constant of ``log f``.

    For the logistic loss ``grad^2 f <= f R^2`` with ``R = max_i ||x_i||`` (because
    ``sigma'(q) <= log(1 + exp(-q))``), so ``grad^2 log f <= grad^2 f / f <= R^2``; for softmax the
    row Hessian is bounded by twice the row loss, giving ``2 R^2``. Other losses use ``R^2``
    as a scale.
    """
    return (2.0 if train.loss == "softmax" else 1.0) * train.row_norm_max2


def _schedule_fields() -> list[tuple[str, Any, Any]]:
    return [
        ("normalize", str, param("loss", Choice(NORMALIZE),
                                   "divide the gradient by the loss (loss), by its norm (gradient), or not (none)")),
        ("power", float, param(0.0, Interval(-1.0, 1.0), "steps scale like (t + 1)^power")),
    ]


def scheduled(base_name: str, name: str, summary: str) -> SolverDef:
    """Register ``name``: the solver ``base_name`` with the schedule above on its gradient.

    >>> from stopwise.problem.problem import TrainingSet
    >>> X = np.array([[1.0, 0.0], [0.0, 1.0]]); y = np.array([1.0, 1.0])
    >>> tr = TrainingSet(X, y, L=0.125, task="binary", loss="logistic")
    >>> sd = get_solver("gd_normalized"); p = sd.params(normalize="loss")
    >>> s = sd.step(tr, p, sd.init(tr, p, None))  # w_1 = -grad f(0) / (R^2 f(0)) = (1/4) / log 2, R = 1
    >>> np.round(s.w, 6).tolist()
    [0.360674, 0.360674]
    """
    base = get_solver(base_name)
    base_fields = dataclasses.fields(base.params)
    fields = [(f.name, f.type, dataclasses.field(default=f.default, metadata=f.metadata)) for f in base_fields]
    fields += _schedule_fields()
    cls = dataclasses.make_dataclass(f"{name.title().replace('_', '')}Params", fields, frozen=True)
    cls.__doc__ = f"Params of {base_name} plus the step schedule (normalize, power)."
    own = tuple(f.name for f in base_fields)

    def base_params(params):
        return base.params(**{k: getattr(params, k) for k in own})

    def init(train: TrainingSet, params, rng) -> State:
        return base.init(train, base_params(params), rng)

    def step(train: TrainingSet, params, state: State) -> State:
        L = train.L if params.normalize == "none" else log_smoothness(train)
        st = ScheduledTrainingSet(X=train.X, y=train.y, L=L, task=train.task, loss=train.loss, k=train.k,
                                  normalize=params.normalize, power=params.power, t=state.iteration)
        return base.step(st, base_params(params), state)

    step.__doc__ = f"One step of {base_name} with gradient (t + 1)^p G_t (see stopwise.solvers.schedules)."
    return register(SolverDef(name, cls, init, step, summary, tasks=base.tasks, stochastic=base.stochastic))


GDNormalized = scheduled("gd", "gd_normalized",
                         "gradient descent with normalized / increasing steps (s/L)(t+1)^p G_t, G_t = grad log f by default")
NesterovNormalized = scheduled("nesterov", "nesterov_normalized",
                               "Nesterov's method with normalized / increasing steps on its gradient")

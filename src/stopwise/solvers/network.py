"""A small positively homogeneous network trained on the logistic loss.

The model is a two-layer ReLU network without biases,

    f(x; theta) = sum_{j=1}^m a_j max(0, <u_j, x>),   theta = (vec(U), a),

homogeneous of degree 2: f(x; c theta) = c^2 f(x; theta) for c > 0. On separable data
gradient descent on the logistic loss drives the loss to zero and, once it is below
log(2) / n, increases a smoothed version of the normalized margin
min_i y_i f(x_i) / ||theta||^2 (Lyu and Li, "Gradient descent maximizes the margin of
homogeneous neural networks", ICLR 2020); the trace's ``margin`` column records the
normalized margin itself.

Initialization (seeded by the run's rng): u_j ~ N(0, init_scale^2 / d I), a_j ~ N(0, init_scale^2 / m).
Update, with eta = step_scale / L and L = ||X||_2^2 / (4 n) the logistic constant of the
linear model (a scale, not a bound for the network):

    full batch (batch = 0 or >= n):  theta_{t+1} = theta_t - eta grad f(theta_t)       (one pass)
    minibatch b:                          theta_{t+1} = theta_t - eta grad f_B(theta_t)     (b / n passes)

where the minibatches are consecutive blocks of a fresh random permutation of the rows in
every epoch (random reshuffling; the last block of an epoch holds the n mod b leftover rows).
The permutation of epoch e is drawn from a generator seeded by (seed, e), the seed drawn
from the run's rng at init, so a step is a pure function of its state.
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from stopwise.problem.models import TwoLayerReLU
from stopwise.problem.problem import TrainingSet
from stopwise.core.params import Interval, param
from stopwise.solvers.base import SolverDef, State, frozen, register, step_size


@dataclass(frozen=True)
class ReluNetParams:
    width: int = param(32, Interval(1, None, integer=True), "hidden units m")
    init_scale: float = param(1.0, Interval(0.0, None, low_closed=False), "scale of the Gaussian initialization")
    step_scale: float = param(1.0, Interval(0.0, None, low_closed=False), "step size in units of 1/L")
    batch: int = param(0, Interval(0, None, integer=True), "rows per step; 0 = full batch (gradient descent)",
                       stored_as="batch_size")  # run identities keep the former name (same run ids)


@dataclass(frozen=True)
class ReluNetState(State):
    seed: int = 0
    epoch: int = 0
    pos: int = 0                      # next row of the epoch's permutation
    perm: np.ndarray | None = None    # the current epoch's row order (minibatch mode)


def relu_net_model(params: ReluNetParams, train: TrainingSet) -> TwoLayerReLU:
    return TwoLayerReLU(train.d, params.width)


def _perm(seed: int, epoch: int, n: int) -> np.ndarray:
    return frozen(np.random.default_rng([seed, epoch]).permutation(n))


def relu_net_init(train: TrainingSet, params: ReluNetParams, rng: np.random.Generator) -> ReluNetState:
    m, d = params.width, train.d
    U = rng.standard_normal((m, d)) * (params.init_scale / np.sqrt(d))
    a = rng.standard_normal(m) * (params.init_scale / np.sqrt(m))
    seed = int(rng.integers(0, 2**63 - 1))
    full = params.batch == 0 or params.batch >= train.n
    return ReluNetState(w=frozen(np.concatenate([U.ravel(), a])), iteration=0, passes=0.0, seed=seed,
                        epoch=0, pos=0, perm=None if full else _perm(seed, 0, train.n))


def relu_net_step(train: TrainingSet, params: ReluNetParams, state: ReluNetState) -> ReluNetState:
    """One (minibatch) gradient step on the mean logistic loss of the network (module docstring).

    >>> from stopwise.problem.problem import TrainingSet
    >>> X = np.array([[1.0, 0.5], [-1.0, 0.2], [0.3, -1.0], [-0.2, 1.0]]); y = np.array([1.0, -1.0, 1.0, -1.0])
    >>> tr = TrainingSet(X, y, L=0.5, task="binary", loss="logistic")
    >>> p = ReluNetParams(width=3, batch=2)
    >>> s = relu_net_init(tr, p, np.random.default_rng(0))
    >>> s = relu_net_step(tr, p, relu_net_step(tr, p, s))
    >>> s.passes, s.epoch, s.w.shape
    (1.0, 1, (9,))
    """
    model = TwoLayerReLU(train.d, params.width)
    eta = step_size(train, params.step_scale)
    n = train.n
    if state.perm is None:
        _, g = model.logistic_value_and_gradient(train.X, train.y, state.w)
        g *= -eta
        g += state.w
        return ReluNetState(w=frozen(g), iteration=state.iteration + 1, passes=state.passes + 1.0,
                            seed=state.seed, epoch=state.epoch, pos=0, perm=None)
    b = params.batch
    rows = state.perm[state.pos:state.pos + b]
    _, g = model.logistic_value_and_gradient(train.X[rows], train.y[rows], state.w)
    g *= -eta
    g += state.w
    pos, epoch, perm = state.pos + rows.size, state.epoch, state.perm
    if pos >= n:
        pos, epoch = 0, epoch + 1
        perm = _perm(state.seed, epoch, n)
    return ReluNetState(w=frozen(g), iteration=state.iteration + 1, passes=state.passes + rows.size / n,
                        seed=state.seed, epoch=epoch, pos=pos, perm=perm)


register(SolverDef("relu_net", ReluNetParams, relu_net_init, relu_net_step,
                   "two-layer ReLU network without biases (homogeneous of degree 2), full-batch GD or "
                   "minibatch SGD on the logistic loss", tasks=("binary",), stochastic=True,
                   loss="logistic", model=relu_net_model))

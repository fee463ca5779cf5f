"""Stochastic gradient descent with minibatches, sampling orders, step schedules and
iterate averaging (the averaging is the generic wrapper of :mod:`.averaging`).

Update (minibatch ``B_t`` of ``b`` rows, ``t = 0, 1, ...`` steps taken so far)::

    w_{t+1} = w_t - eta_t g_{B_t}(w_t),   g_B(w) = (1 / b) sum_{i in B} grad f_i(w)

(Robbins and Monro 1951). ``passes`` grows by ``b / n`` per step, so after ``t`` steps it
is ``t b / n``.

Batch size: a whole count ``>= 1`` (clipped to ``n``) or a fraction in ``(0, 1)`` of
``n_train`` (``round(batch * n)``, at least 1).

Sampling: the rows come from an endless stream cut into batches of ``b``; the stream is
a sequence of blocks of ``n`` indices, block ``k`` being

``epochs``       a fresh random permutation of ``0..n-1`` (random reshuffling each pass)
``replacement``  ``n`` indices drawn uniformly with replacement
``cyclic``       ``0, 1, ..., n-1`` in stored row order (no randomness)

so a batch may straddle two blocks and every step takes exactly ``b`` rows. A batch of all
``n`` rows without replacement is the full gradient whatever the order, and is computed
as such (through the evaluation paths of :mod:`stopwise.running.fastpath`). Block ``k``
is drawn from its own generator seeded with ``(key, k)``, where ``key`` is drawn once from
the run's generator at ``init`` and kept in the state: the sample order depends only on
the run's seed and the training-set size (the data spec), not on the step size, the
schedule, the averaging or the batch size (a different batch size regroups the same
stream). Runs that differ only in step size therefore see the same draws (common random
numbers).

Step size: ``eta_0 = step`` when an absolute step is given, else ``step_scale / L_b``
with the expected smoothness of a batch (Gower, Loizou, Qian, Sailanbayev, Shulgin,
Richtarik, "SGD: general analysis and improved rates", ICML 2019)::

    without replacement (epochs, cyclic): L_b = n (b - 1) / (b (n - 1)) L + (n - b) / (b (n - 1)) L_max
    with replacement:                     L_b = L_max / b + (1 - 1 / b) L

where ``L`` is the training objective's smoothness constant and ``L_max`` the largest
per-sample one (``max_i ||x_i||^2`` for least squares; the loss's curvature bound times
that for the classification losses). So ``b = n`` without replacement
gives ``L_b = L`` and ``step_scale`` means what it means for gradient descent.

Schedules ``eta_t = eta_0 * factor(t)``:

``constant``  ``1``
``sqrt``      ``sqrt(t0 / (t0 + t))``        (``c / sqrt(t)`` shifted so that step 0 uses ``eta_0``)
``inverse``   ``t0 / (t0 + t)``              (``c / t``, likewise)
``decay``     ``decay_factor ** floor(t b / (decay_every n))``  (step decay every ``decay_every`` passes)
"""
from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Any

import numpy as np

from stopwise.problem.losses import CURVATURE, minibatch_gradient
from stopwise.problem.problem import TrainingSet
from stopwise.solvers.averaging import AveragingParams, averaged
from stopwise.core.params import Choice, Interval, param
from stopwise.solvers.base import SolverDef, State, frozen, register

SAMPLINGS = ("epochs", "replacement", "cyclic")
SCHEDULES = ("constant", "sqrt", "inverse", "decay")
POSITIVE = Interval(0.0, None, low_closed=False)


@dataclass(frozen=True)
class CountOrFraction:
    """A batch size: a fraction in (0, 1) or a whole count >= 1 (constraint as data)."""

    def contains(self, v: Any) -> bool:
        if isinstance(v, bool) or not isinstance(v, (int, float)) or not math.isfinite(float(v)):
            return False
        return 0 < v < 1 or (v >= 1 and float(v).is_integer())

    def describe(self) -> str:
        return "a fraction in (0, 1) of n_train or a whole count >= 1"

    def outside(self) -> Any:
        return 0.0

    def examples(self) -> tuple[float, ...]:
        """Valid values, for tests generated from the declared constraints."""
        return (0.01, 0.25, 0.5, 1.0, 2.0, 7.0, 64.0)


BATCH = CountOrFraction()


@dataclass(frozen=True)
class SGDParams(AveragingParams):
    step_scale: float = param(1.0, POSITIVE, "step size in units of 1/L_b (expected smoothness of a batch)")
    step: float | None = param(None, POSITIVE, "absolute step size eta_0; replaces step_scale when set")
    batch: float = param(1.0, BATCH, "batch size: a whole count >= 1 or a fraction in (0, 1) of n_train")
    sampling: str = param("epochs", Choice(SAMPLINGS), "row order: epochs (reshuffled), replacement, cyclic")
    schedule: str = param("constant", Choice(SCHEDULES), "step schedule: constant, sqrt, inverse, decay")
    t0: float = param(1.0, POSITIVE, "sqrt / inverse schedules: time scale t0 in steps")
    decay_every: float = param(1.0, POSITIVE, "decay schedule: data passes between step reductions")
    decay_factor: float = param(0.5, Interval(0.0, 1.0, low_closed=False), "decay schedule: factor per reduction")


@dataclass(frozen=True)
class SGDState(State):
    key: int = 0                     # seed of the sample stream (drawn from the run's rng)
    block: np.ndarray | None = None  # current block of n indices (None: cyclic order)
    block_index: int = 0
    pos: int = 0                     # next unused position in the current block
    batch: int = 1
    eta0: float = 0.0


def batch_count(batch: float, n: int) -> int:
    """Rows per step for a batch given as a count or as a fraction of ``n``."""
    if batch < 1:
        return max(1, min(n, int(round(batch * n))))
    return max(1, min(n, int(batch)))


def sample_smoothness(train: TrainingSet) -> float:
    """``L_max``: the largest per-sample smoothness constant, ``c max_i ||x_i||^2`` with the
    loss's curvature bound ``c`` (the one in ``L = c ||X||_2^2 / n``: 1 for least squares,
    1/4 logistic, 1/2 softmax, 1 as the scale of the hinge)."""
    return CURVATURE.get(train.loss, 1.0) * train.row_norm_max2


def batch_smoothness(train: TrainingSet, b: int, sampling: str) -> float:
    """Expected smoothness ``L_b`` of a batch of ``b`` rows (Gower et al. 2019)."""
    n, L = train.n, train.L
    Lmax = sample_smoothness(train)
    if sampling == "replacement":
        return Lmax / b + (1.0 - 1.0 / b) * L
    if b >= n:
        return L
    return n * (b - 1) / (b * (n - 1)) * L + (n - b) / (b * (n - 1)) * Lmax


def sample_block(key: int, index: int, n: int, sampling: str) -> np.ndarray | None:
    """Block ``index`` of the sample stream (read-only), or None for cyclic order."""
    if sampling == "cyclic":
        return None
    rng = np.random.default_rng([key, index])
    blk = rng.permutation(n) if sampling == "epochs" else rng.integers(0, n, size=n)
    return frozen(blk)


def schedule_factor(params: SGDParams, t: int, b: int, n: int) -> float:
    s = params.schedule
    if s == "constant":
        return 1.0
    if s == "sqrt":
        return math.sqrt(params.t0 / (params.t0 + t))
    if s == "inverse":
        return params.t0 / (params.t0 + t)
    return params.decay_factor ** math.floor(t * b / (params.decay_every * n) + 1e-9)


def sgd_init(train: TrainingSet, params: SGDParams, rng: np.random.Generator) -> SGDState:
    n = train.n
    b = batch_count(params.batch, n)
    key = int(rng.integers(0, 2**63 - 1))
    if params.step is not None:
        eta0 = float(params.step)
    else:
        Lb = batch_smoothness(train, b, params.sampling)
        eta0 = params.step_scale / Lb if Lb > 0 else 0.0
    return SGDState(w=frozen(np.zeros(train.dim)), iteration=0, passes=0.0, key=key,
                    block=sample_block(key, 0, n, params.sampling), block_index=0, pos=0, batch=b, eta0=eta0)


def next_rows(state: SGDState, n: int, sampling: str):
    """(rows of the next batch, block, block index, position) after taking ``b`` rows."""
    b, pos, blk, k = state.batch, state.pos, state.block, state.block_index
    end = pos + b
    if end <= n:
        return (slice(pos, end) if blk is None else blk[pos:end]), blk, k, end
    k += 1
    rest = end - n
    nxt = sample_block(state.key, k, n, sampling)
    if pos >= n:
        rows = slice(0, rest) if nxt is None else nxt[:rest]
    elif nxt is None:
        rows = np.concatenate((np.arange(pos, n), np.arange(rest)))
    else:
        rows = np.concatenate((blk[pos:], nxt[:rest]))
    return rows, nxt, k, rest


def sgd_step(train: TrainingSet, params: SGDParams, state: SGDState) -> SGDState:
    """``w_{t+1} = w_t - eta_0 factor(t) g_{B_t}(w_t)`` on the next ``b`` rows of the stream.

    >>> import numpy as np
    >>> from stopwise.problem.problem import TrainingSet
    >>> tr = TrainingSet(np.eye(2), np.array([1.0, 2.0]), L=0.5)
    >>> p = SGDParams(step=1.0, batch=2, sampling="cyclic")
    >>> s = sgd_step(tr, p, sgd_init(tr, p, np.random.default_rng(0)))
    >>> s.w.tolist(), s.passes
    ([0.5, 1.0], 1.0)
    """
    n = train.n
    t, b = state.iteration, state.batch
    if b == n and params.sampling != "replacement":
        # every step is one whole pass over the rows: the full gradient, in any order, so it
        # is evaluated as such (through the training set's fast paths); the stream moves on
        # by one block without drawing it
        g = train.gradient(state.w)
        blk, k, pos = None, state.block_index + 1, n
    else:
        rows, blk, k, pos = next_rows(state, n, params.sampling)
        g = minibatch_gradient(train, state.w, rows)
    g *= -state.eta0 * schedule_factor(params, t, b, n)
    g += state.w
    return SGDState(w=frozen(g), iteration=t + 1, passes=(t + 1) * b / n, key=state.key, block=blk,
                    block_index=k, pos=pos, batch=b, eta0=state.eta0)


SGD = register(averaged(SolverDef(
    "sgd", SGDParams, sgd_init, sgd_step,
    "stochastic gradient descent: minibatches, epoch / replacement / cyclic sampling, step schedules, "
    "iterate averaging", tasks=("regression", "binary", "multiclass"), stochastic=True, sparse=True)))


__all__ = ["SAMPLINGS", "SCHEDULES", "SGD", "SGDParams", "SGDState", "batch_count", "batch_smoothness",
           "sample_block", "sample_smoothness", "schedule_factor", "sgd_init", "sgd_step"]

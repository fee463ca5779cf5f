"""Row-action methods on least squares: randomized Kaczmarz.

One step projects the iterate onto the hyperplane of one training row (Kaczmarz 1937),
the row drawn with probability proportional to its squared norm (Strohmer and Vershynin,
J. Fourier Anal. Appl. 15, 2009)::

    i_t ~ P(i) = ||x_i||^2 / ||X||_F^2
    w_{t+1} = w_t + s (y_i - <x_i, w_t>) / ||x_i||^2 x_i

with the relaxation ``s = step_scale`` in ``(0, 2)`` (1: the exact projection). A step
reads one row: ``passes`` grows by ``1 / n`` per step, so after ``t`` steps it is
``t / n``. From ``w_0 = 0`` every iterate lies in the row space of ``X``; on a consistent
system the iterates converge to the minimum-norm solution ``X^+ y``, and with ``s = 1``

    E ||w_t - w*||^2 <= (1 - 1 / kappa_F^2)^t ||w_0 - w*||^2,   kappa_F = ||X||_F ||X^+||_2

(Strohmer and Vershynin, Theorem 2; on an underdetermined system ``||X^+||_2`` is the
inverse of the smallest non-zero singular value). On noisy, inconsistent data the
iterates reach a neighbourhood of the least-squares solution and wander in it: the
iteration count regularizes.

Sampling: rows come from an endless stream of blocks of ``n`` indices. Block ``k`` is
drawn from its own generator, ``numpy.random.default_rng([key, k])``: ``u = g.random(n)``
(uniform in ``[0, 1)``) and ``i_j = searchsorted(cdf, u_j, side="right")`` with
``cdf = cumsum(||x_i||^2) / sum(||x_i||^2)`` (inverse-CDF sampling, so rows of zero norm
are never drawn). ``key`` is drawn once at ``init`` from the run's generator,
``int(rng.integers(0, 2**63 - 1))``, and kept in the state with the current block and the
position in it, as for ``sgd``: the row order depends only on the run's seed and the
training rows, not on the relaxation.
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from stopwise.core.params import Interval, param
from stopwise.problem.problem import TrainingSet
from stopwise.solvers.base import SolverDef, State, frozen, register


@dataclass(frozen=True)
class KaczmarzParams:
    step_scale: float = param(1.0, Interval(0.0, 2.0, low_closed=False, high_closed=False),
                              "relaxation s in (0, 2): the step in units of 1 / ||x_i||^2 (1: exact projection)")


@dataclass(frozen=True)
class KaczmarzState(State):
    key: int = 0                        # seed of the row stream (drawn from the run's rng)
    block: np.ndarray | None = None     # current block of n row indices
    block_index: int = 0
    pos: int = 0                        # next unused position in the block
    norms2: np.ndarray | None = None    # ||x_i||^2 of every training row
    cdf: np.ndarray | None = None       # cumsum(||x_i||^2) / ||X||_F^2


def row_block(key: int, index: int, cdf: np.ndarray) -> np.ndarray:
    """Block ``index`` of the row stream (read-only): ``n`` rows drawn with probability
    ``||x_i||^2 / ||X||_F^2`` by inverse-CDF sampling.

    >>> cdf = np.array([0.0, 0.25, 1.0])            # row 0 has norm 0, rows 1 and 2 weigh 1 : 3
    >>> b = row_block(7, 0, cdf); b.shape, 0 in b
    ((3,), False)
    """
    u = np.random.default_rng([key, index]).random(cdf.shape[0])
    return frozen(np.searchsorted(cdf, u, side="right"))


def kaczmarz_init(train: TrainingSet, params: KaczmarzParams, rng: np.random.Generator) -> KaczmarzState:
    norms2 = np.einsum("ij,ij->i", train.X, train.X)
    total = np.cumsum(norms2)
    key = int(rng.integers(0, 2**63 - 1))
    w = frozen(np.zeros(train.d))
    if train.n == 0 or not total[-1] > 0:  # no row carries information: nothing to project on
        return KaczmarzState(w=w, iteration=0, passes=0.0, converged=True, key=key)
    cdf = frozen(total / total[-1])
    return KaczmarzState(w=w, iteration=0, passes=0.0, key=key, block=row_block(key, 0, cdf), block_index=0,
                         pos=0, norms2=frozen(norms2), cdf=cdf)


def kaczmarz_step(train: TrainingSet, params: KaczmarzParams, state: KaczmarzState) -> KaczmarzState:
    """Project onto the hyperplane of the next row of the stream (module docstring).

    >>> tr = TrainingSet(np.array([[1.0, 0.0], [0.0, 2.0]]), np.array([3.0, 4.0]), L=2.0)
    >>> p = KaczmarzParams()
    >>> s = kaczmarz_init(tr, p, np.random.default_rng(0))
    >>> for _ in range(20):
    ...     s = kaczmarz_step(tr, p, s)
    >>> s.w.tolist(), s.passes                    # both rows drawn: the solution (3, 2)
    ([3.0, 2.0], 10.0)
    """
    n = train.n
    if state.converged:
        return KaczmarzState(w=state.w, iteration=state.iteration + 1, passes=state.passes, converged=True,
                             key=state.key)
    blk, k, pos = state.block, state.block_index, state.pos
    if pos == n:
        k += 1
        blk, pos = row_block(state.key, k, state.cdf), 0
    i = int(blk[pos])
    x = train.X[i]
    w = x * (params.step_scale * (float(train.y[i]) - float(x @ state.w)) / float(state.norms2[i]))
    w += state.w
    t = state.iteration + 1
    return KaczmarzState(w=frozen(w), iteration=t, passes=t / n, key=state.key, block=blk, block_index=k,
                         pos=pos + 1, norms2=state.norms2, cdf=state.cdf)


register(SolverDef("kaczmarz", KaczmarzParams, kaczmarz_init, kaczmarz_step,
                   "randomized Kaczmarz: project onto one row's hyperplane per step, rows drawn with "
                   "probability ||x_i||^2 / ||X||_F^2 (1/n data pass per step)", stochastic=True))

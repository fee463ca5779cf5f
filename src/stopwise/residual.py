"""Residual statistics recorded per iterate, for the residual-based stopping rules.

Two stopping rules need more of the training residual ``r_t = X_train w_t - y_train``
than its norm (which every trace has as ``residual_norm``):

``residual_dot_prev``
    the inner product ``<r_prev, r_t>`` of this iterate's training residual with the one
    of the previous *recorded* iterate (missing on the first row). With the norms it gives
    the monotone-error statistic ``(||r_k||^2 + <r_k, r_{k+1}>) / (2 ||r_k||)``.
``ncp_distance``
    the Kolmogorov-Smirnov distance of the normalized cumulative periodogram (NCP) of
    ``r_t`` from the straight line of white noise::

        rhat = DFT(r_t),  q = floor(m / 2),  p_k = |rhat_k|^2   (k = 1..q, the mean k = 0 left out)
        c_k  = (p_1 + ... + p_k) / (p_1 + ... + p_q),
        ncp_distance = max_k |c_k - k / q|.

    The residual is taken in the order of the training rows, so the statistic means
    something only when row order is a signal order (sampling points of an inverse
    problem, time); for exchangeable rows it is recorded but carries no information.

Both columns are added to every regression trace through :data:`stopwise.record.METRIC_SETS`
(classification traces do not get them). The metric keeps one residual buffer per run
and reuses it, so recording allocates only the FFT output.
"""
from __future__ import annotations

import math
from typing import Callable

import numpy as np

from .problem import Problem

COLUMNS = ("residual_dot_prev", "ncp_distance")


def periodogram_tail(r: np.ndarray) -> np.ndarray:
    """Periodogram ordinates ``p_k = |rhat_k|^2`` for ``k = 1..floor(m/2)`` (mean left out)."""
    m = r.shape[0]
    q = m // 2
    rhat = np.fft.rfft(r)
    p = rhat[1:q + 1]
    return (p.real * p.real + p.imag * p.imag)


def ncp(r: np.ndarray) -> np.ndarray:
    """Normalized cumulative periodogram ``c_1..c_q`` of a vector (empty when q = 0).

    A vector whose periodogram beyond the mean is zero (a constant) has no defined NCP;
    this returns NaNs for it.
    """
    p = periodogram_tail(np.asarray(r, dtype=np.float64))
    if p.size == 0:
        return p
    c = np.cumsum(p)
    total = c[-1]
    if not total > 0:
        return np.full(p.size, math.nan)
    return c / total


def ncp_distance(r: np.ndarray) -> float:
    """``max_k |c_k - k/q|``: Kolmogorov-Smirnov distance of the NCP from white noise."""
    c = ncp(r)
    q = c.size
    if q == 0:
        return math.nan
    return float(np.max(np.abs(c - np.arange(1, q + 1) / q)))


def white_noise_limit(q: int, significance: float = 0.05) -> float:
    """Acceptance limit of the NCP distance for white noise at ``significance``.

    Bartlett's cumulative-periodogram test: for white noise the NCP behaves like the
    empirical distribution of ``q - 1`` uniform variables, so the distance stays below
    ``k_alpha / sqrt(q - 1)`` with probability ``1 - alpha``, ``k_alpha`` the upper
    quantile of the Kolmogorov distribution (``scipy.stats.kstwobign``; 1.358 at 5%).
    """
    from scipy.stats import kstwobign

    if q < 2:
        return math.inf
    return float(kstwobign.ppf(1.0 - significance)) / math.sqrt(q - 1)


def residual_metrics(problem: Problem) -> dict[str, Callable[[np.ndarray], float]]:
    """The metric set: per-run closures over one residual buffer (regression only)."""
    if problem.task != "regression":
        return {}
    X, y = problem.X_train, problem.y_train
    bufs = [np.empty(X.shape[0]), np.empty(X.shape[0])]
    state = {"rows": 0}

    # The recorder calls a row's metrics once each, in this dict's order: dot_prev
    # computes the row's residual into the buffer not holding the previous one.
    def dot_prev(w: np.ndarray) -> float:
        k = state["rows"]
        cur, prev = bufs[k % 2], bufs[(k + 1) % 2]
        np.dot(X, w, out=cur)
        cur -= y
        state["rows"] = k + 1
        return float(prev @ cur) if k else math.nan

    q = X.shape[0] // 2
    line = np.arange(1, q + 1) / max(q, 1)
    p, tmp = np.empty(q), np.empty(q)

    def distance(w: np.ndarray) -> float:
        # ncp_distance with preallocated buffers (the FFT output is the only allocation)
        if q == 0:
            return math.nan
        rhat = np.fft.rfft(bufs[(state["rows"] - 1) % 2])[1:q + 1]
        np.multiply(rhat.real, rhat.real, out=p)
        np.multiply(rhat.imag, rhat.imag, out=tmp)
        np.add(p, tmp, out=p)
        np.cumsum(p, out=tmp)
        total = tmp[-1]
        if not total > 0:
            return math.nan
        np.divide(tmp, total, out=tmp)
        np.subtract(tmp, line, out=tmp)
        np.abs(tmp, out=tmp)
        return float(tmp.max())

    return {"residual_dot_prev": dot_prev, "ncp_distance": distance}


def register() -> None:
    """Add the residual metric set to the recorder (idempotent)."""
    from . import record

    if residual_metrics not in record.METRIC_SETS:
        record.METRIC_SETS.append(residual_metrics)


register()

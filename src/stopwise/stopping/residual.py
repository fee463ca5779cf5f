"""Residual statistics recorded per iterate, for the residual-based stopping rules.

Two stopping rules need more of the training residual ``r_t = X_train w_t - y_train``
than its norm (which every trace has as ``residual_norm``):

``residual_dot_prev``
    the inner product ``<r_prev, r_t>`` of this iterate's training residual with the one
    of the previous *recorded* iterate (missing on the first row). With the norms it gives
    the monotone-error statistic ``(||r_k||^2 + <r_k, r_{k+1}>) / (2 ||r_k||)``. Every
    regression trace has it. Where the recorder evaluates the training error from
    sufficient statistics it gets the inner product from them too, in O(d) beyond the
    error itself (``w_prev^T (G w_t - 2 c) + c^T w_prev - c^T w_t + y^T y``), with the same
    cancellation guard as the errors (see :mod:`stopwise.running.fastpath`); otherwise from the two
    residual vectors.
``ncp_distance``
    the Kolmogorov-Smirnov distance of the normalized cumulative periodogram (NCP) of
    ``r_t`` from the straight line of white noise::

        rhat = DFT(r_t),  q = floor(m / 2),  p_k = |rhat_k|^2   (k = 1..q, the mean k = 0 left out)
        c_k  = (p_1 + ... + p_k) / (p_1 + ... + p_q),
        ncp_distance = max_k |c_k - k / q|.

    The residual is taken in the order of the training rows, so the statistic means
    something only when row order is a signal order (sampling points of an inverse
    problem, time). It is recorded only for problems whose training rows are in signal
    order (``Problem.signal_rows``: the integral-equation generators, a user's file with
    ``dataset.params.row_order=signal``); on exchangeable rows it would cost one read of
    the training rows per recorded row and carry no information.

The regression recorder (:class:`stopwise.running.record.RegressionRecorder`) computes both columns; this module holds
the statistics themselves. ``record.residual: false`` leaves both out.
"""
from __future__ import annotations

import math
from typing import Callable

import numpy as np

from stopwise.problem.problem import Problem

COLUMNS = ("residual_dot_prev", "ncp_distance")
# what recording a column needs, beyond the base columns every trace has:
NEEDS_RESIDUAL = COLUMNS               # left out by record.residual: false
NEEDS_SIGNAL_ROWS = ("ncp_distance",)  # recorded only when the training rows are in signal order


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


class NCPDistance:
    """``ncp_distance`` of residual vectors of length ``m``, with preallocated buffers
    (the FFT output is the only allocation per call)."""

    def __init__(self, m: int):
        self.q = q = m // 2
        self._line = np.arange(1, q + 1) / max(q, 1)
        self._p, self._tmp = np.empty(q), np.empty(q)

    def __call__(self, r: np.ndarray) -> float:
        q = self.q
        if q == 0:
            return math.nan
        p, tmp = self._p, self._tmp
        rhat = np.fft.rfft(r)[1:q + 1]
        np.multiply(rhat.real, rhat.real, out=p)
        np.multiply(rhat.imag, rhat.imag, out=tmp)
        np.add(p, tmp, out=p)
        np.cumsum(p, out=tmp)
        total = tmp[-1]
        if not total > 0:
            return math.nan
        np.divide(tmp, total, out=tmp)
        np.subtract(tmp, self._line, out=tmp)
        np.abs(tmp, out=tmp)
        return float(tmp.max())

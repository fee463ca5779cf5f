"""Sparsity columns of every trace: number of non-zeros and support recovery.

A coordinate of ``w`` counts as non-zero when ``|w_j| > SUPPORT_TOL * max_k |w_k|`` (a
threshold relative to the largest entry, so it does not depend on units; the zero vector
has no non-zeros). The true support is taken from ``w_true`` with the same rule.

Columns (registered as metric set ``sparsity`` by :mod:`stopwise.running`, so every run has them):

``nnz``                number of non-zeros of the iterate
``support_precision``  |supp(w) & supp(w_true)| / |supp(w)|   (NaN when w has no non-zeros)
``support_recall``     |supp(w) & supp(w_true)| / |supp(w_true)|

The last two exist only when the truth is known and not identically zero. The constraint
residual ``||X w - y||`` of the training rows is the base column ``residual_norm``.
"""
from __future__ import annotations

import math
from typing import Callable

import numpy as np

from stopwise.problem.problem import Problem
from stopwise.running.record import register_metric_set

SUPPORT_TOL = 1e-6


def support(w: np.ndarray, tol: float = SUPPORT_TOL) -> np.ndarray:
    """Boolean mask of the entries with ``|w_j| > tol * max_k |w_k|`` (flattened).

    >>> support(np.array([0.0, 1e-9, -0.5, 2.0])).tolist()
    [False, False, True, True]
    """
    a = np.abs(np.asarray(w, dtype=float)).ravel()
    return a > tol * a.max(initial=0.0)


def sparsity_metrics(problem: Problem) -> dict[str, Callable[[np.ndarray], float]]:
    # the three columns of one recorded row share one support computation: the recorder
    # calls them in this dict's order on the same iterate, so nnz computes it
    last: dict = {}

    def nnz(w: np.ndarray) -> float:
        s = support(w)
        m = int(np.count_nonzero(s))
        last["w"], last["s"], last["m"] = w, s, m
        return float(m)

    def row_support(w: np.ndarray) -> tuple[np.ndarray, int]:
        if last.get("w") is w and not w.flags.writeable:  # the same read-only iterate
            return last["s"], last["m"]
        s = support(w)
        return s, int(np.count_nonzero(s))

    out: dict[str, Callable[[np.ndarray], float]] = {"nnz": nnz}
    if problem.w_true is None:
        return out
    truth = support(problem.w_true)
    k = int(truth.sum())
    if k == 0:
        return out

    def precision(w: np.ndarray) -> float:
        s, m = row_support(w)
        return float(np.count_nonzero(s & truth)) / m if m else math.nan

    def recall(w: np.ndarray) -> float:
        s, _ = row_support(w)
        return float(np.count_nonzero(s & truth)) / k

    out["support_precision"] = precision
    out["support_recall"] = recall
    return out


register_metric_set("sparsity", sparsity_metrics)

__all__ = ["SUPPORT_TOL", "sparsity_metrics", "support"]

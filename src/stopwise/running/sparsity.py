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


def supports(W: np.ndarray, tol: float = SUPPORT_TOL) -> np.ndarray:
    """:func:`support` of every row of ``W`` (one flattened iterate per row), as a boolean
    matrix; row by row the same operations, so the same masks.

    >>> supports(np.array([[0.0, 1e-9, -0.5, 2.0], [3.0, 0.0, 0.0, 0.0]])).tolist()
    [[False, False, True, True], [True, False, False, False]]
    """
    A = np.abs(W)
    return A > tol * np.maximum.reduce(A, axis=1, initial=0.0)[:, None]


def sparsity_metrics(problem: Problem) -> dict[str, Callable[[np.ndarray], np.ndarray]]:
    """The columns as batch functions (``f.batch``: a block of recorded iterates, one per
    row; see :mod:`stopwise.running.record`): only elementwise operations and reductions
    along a row, so each value is the one of that iterate alone."""
    last: dict = {}  # the masks of the block being evaluated (the recorder calls nnz first)

    def masks(W: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        if last.get("W") is not W:
            S = supports(W)
            last["W"], last["S"], last["m"] = W, S, np.count_nonzero(S, axis=1)
        return last["S"], last["m"]

    def nnz(W: np.ndarray) -> np.ndarray:
        return masks(W)[1].astype(np.float64)

    out: dict[str, Callable[[np.ndarray], np.ndarray]] = {"nnz": nnz}
    truth = support(problem.w_true) if problem.w_true is not None else None
    k = int(truth.sum()) if truth is not None else 0
    if k:
        def precision(W: np.ndarray) -> np.ndarray:
            S, m = masks(W)
            hits = np.count_nonzero(S & truth, axis=1).astype(np.float64)
            with np.errstate(invalid="ignore", divide="ignore"):
                return np.where(m > 0, hits / m, np.nan)

        def recall(W: np.ndarray) -> np.ndarray:
            S, _ = masks(W)
            return np.count_nonzero(S & truth, axis=1) / k

        out["support_precision"] = precision
        out["support_recall"] = recall
    for f in out.values():
        f.batch = True
    return out


register_metric_set("sparsity", sparsity_metrics)

__all__ = ["SUPPORT_TOL", "sparsity_metrics", "support", "supports"]

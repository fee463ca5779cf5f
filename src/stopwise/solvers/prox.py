"""Proximity operators of simple convex functions, as a small registry.

A bias of the form ``R(w) = lam * C(w) + (1/2) ||w||^2`` is usable by the mirror-descent
solvers as soon as the proximity operator of ``C`` is known, because

    grad R*(v) = argmin_w  lam C(w) + (1/2) ||w - v||^2 = prox_{lam C}(v)

(Moreau 1965; see Beck, First-Order Methods in Optimization, SIAM 2017, Thm. 6.3 and
Sec. 6.3). The primal-dual solver uses the same operators with its primal step ``tau`` as
the weight. Each entry gives:

``prox(v, t, opts)``
    ``argmin_w t C(w) + (1/2) ||w - v||^2`` as a new array (``v`` is not modified);
    ``opts`` is the solver's params object, read for structural options (``group_size``).
``value(w, opts)``
    ``C(w)`` (``inf`` outside the domain of ``C``).
``dual_violation(u, opts)``
    how far ``u`` is from the domain of the conjugate ``C*`` (0 inside); the primal-dual
    solver reports it for ``u = -K^T z`` as its dual feasibility measure.

Built-in entries (``g`` runs over contiguous groups of ``group_size`` coordinates, the last
group possibly shorter):

======== ===================================== ====================================== ==========================
name     C(w)                                  prox_{tC}(v)                           dom C*
======== ===================================== ====================================== ==========================
l1       ||w||_1                               sign(v) max(|v| - t, 0)                ||u||_inf <= 1
group_l1 sum_g ||w_g||_2                       max(0, 1 - t / ||v_g||_2) v_g          max_g ||u_g||_2 <= 1
nonneg_l1 sum_j w_j + indicator(w >= 0)        max(v - t, 0)                          u_j <= 1 for all j
======== ===================================== ====================================== ==========================

With ``t = 0`` the ``l1`` and ``group_l1`` operators return ``v`` exactly (bit for bit), so
mirror descent with ``lam = 0`` is gradient descent; ``nonneg_l1`` keeps its indicator and
becomes the projection onto the nonnegative orthant.
"""
from __future__ import annotations

from dataclasses import dataclass
from typing import Any, Callable

import numpy as np

from stopwise.core.errors import SpecError
from stopwise.core.registry import Registry


@dataclass(frozen=True)
class ProxDef:
    name: str
    prox: Callable[[np.ndarray, float, Any], np.ndarray]
    value: Callable[[np.ndarray, Any], float]
    dual_violation: Callable[[np.ndarray, Any], float]
    summary: str


class UnknownProx(SpecError):
    """An unknown proximity operator name (one line listing the registered ones)."""


PROX_OPERATORS: Registry[ProxDef] = Registry("proximity operator", UnknownProx)


def register_prox(defn: ProxDef) -> ProxDef:
    """Add a convex part ``C`` with a known proximity operator to the registry."""
    return PROX_OPERATORS.register(defn.name, defn)


# ---------------------------------------------------------------- l1

def _l1_prox(v: np.ndarray, t: float, opts: Any = None) -> np.ndarray:
    w = np.abs(v)
    w -= t
    np.maximum(w, 0.0, out=w)
    np.copysign(w, v, out=w)
    return w


def _l1_value(w: np.ndarray, opts: Any = None) -> float:
    return float(np.abs(w).sum())


def _l1_dual(u: np.ndarray, opts: Any = None) -> float:
    return max(0.0, float(np.abs(u).max(initial=0.0)) - 1.0)


register_prox(ProxDef("l1", _l1_prox, _l1_value, _l1_dual,
                      "l1 norm: soft thresholding (with (1/2)||.||^2: elastic net, linearized Bregman)"))


# ---------------------------------------------------------------- group l1

def group_starts(d: int, size: int) -> np.ndarray:
    """First index of each contiguous group of ``size`` coordinates among ``d``."""
    return np.arange(0, d, max(int(size), 1))


def _group_norms(v: np.ndarray, size: int) -> np.ndarray:
    if v.size == 0:
        return np.zeros(0)
    return np.sqrt(np.add.reduceat(v * v, group_starts(v.size, size)))


def _group_size(opts: Any) -> int:
    return int(getattr(opts, "group_size", 1) or 1)


def _group_prox(v: np.ndarray, t: float, opts: Any = None) -> np.ndarray:
    size = _group_size(opts)
    norms = _group_norms(v, size)
    scale = np.zeros_like(norms)
    np.divide(t, norms, out=scale, where=norms > 0)
    np.subtract(1.0, scale, out=scale)
    np.maximum(scale, 0.0, out=scale)
    return v * np.repeat(scale, size)[: v.size]


def _group_value(w: np.ndarray, opts: Any = None) -> float:
    return float(_group_norms(w, _group_size(opts)).sum())


def _group_dual(u: np.ndarray, opts: Any = None) -> float:
    return max(0.0, float(_group_norms(u, _group_size(opts)).max(initial=0.0)) - 1.0)


register_prox(ProxDef("group_l1", _group_prox, _group_value, _group_dual,
                      "sum of Euclidean norms of contiguous groups of group_size coordinates: block soft thresholding"))


# ---------------------------------------------------------------- nonnegative l1

def _nonneg_prox(v: np.ndarray, t: float, opts: Any = None) -> np.ndarray:
    w = v - t
    np.maximum(w, 0.0, out=w)
    return w


def _nonneg_value(w: np.ndarray, opts: Any = None) -> float:
    return float(w.sum()) if not (w < 0).any() else float("inf")


def _nonneg_dual(u: np.ndarray, opts: Any = None) -> float:
    return max(0.0, float(u.max(initial=-np.inf)) - 1.0) if u.size else 0.0


register_prox(ProxDef("nonneg_l1", _nonneg_prox, _nonneg_value, _nonneg_dual,
                      "sum of coordinates restricted to w >= 0: one-sided soft thresholding"))


def get_prox(name: str) -> ProxDef:
    return PROX_OPERATORS.get(name)


__all__ = ["PROX_OPERATORS", "ProxDef", "UnknownProx", "get_prox", "group_starts", "register_prox"]

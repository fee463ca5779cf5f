"""Classical first-kind integral equations of the regularization literature, as sources.

Each problem is ``g(s) = int K(s, t) f(t) dt`` with a published kernel ``K`` and exact
solution ``f``, discretized the way its published definition says, with ``n`` rows
(measurement points or measurement boxes in ``s``) and ``d`` unknowns (grid points or boxes
in ``t``). The published problems are square (``n = d``); more rows than unknowns leave room
for the validation and test rows the split takes out. The clean targets are ``y = A x``
(the discrete system is consistent, so the stated noise is the whole data error) and the
noise is drawn after the split like every generator's (``noise: norm`` gives the training
noise exactly the norm ``noise_level``).

phillips  D. L. Phillips, J. ACM 9 (1962): ``K(s, t) = phi(s - t)``, ``f = phi`` with
          ``phi(x) = 1 + cos(pi x / 3)`` for ``|x| < 3``, else 0, on ``[-6, 6]``;
          ``g(s) = (6 - |s|)(1 + cos(pi s / 3) / 2) + 9 / (2 pi) sin(pi |s| / 3)``.
          Galerkin with orthonormal box functions, every entry in closed form.
shaw      C. B. Shaw, J. Math. Anal. Appl. 37 (1972): ``K(s, t) = (cos s + cos t)^2
          (sin u / u)^2``, ``u = pi (sin s + sin t)``, on ``[-pi/2, pi/2]``;
          ``f(t) = 2 exp(-6 (t - 0.8)^2) + exp(-2 (t + 0.5)^2)``. Midpoint rule.
baart     M. L. Baart, IMA J. Numer. Anal. 2 (1982): ``K(s, t) = exp(s cos t)``,
          ``s in [0, pi/2]``, ``t in [0, pi]``; ``f(t) = sin t``, ``g(s) = 2 sinh(s) / s``.
          Galerkin with orthonormal box functions (Gauss-Legendre on each pair of boxes).
heat      the inverse heat equation (Carasso, SIAM J. Appl. Math. 42, 1982), a Volterra
          equation on ``[0, 1]``: ``K(s, t) = k(s - t)`` for ``t < s``, else 0, with
          ``k(r) = r^(-3/2) / (2 kappa sqrt(pi)) exp(-1 / (4 kappa^2 r))``. Collocation at
          ``s_i = i / n`` and the midpoint rule.
gravity   one-dimensional gravity surveying: a mass density ``f`` at depth ``depth``,
          the vertical field ``g`` at the surface, ``K(s, t) = depth (depth^2 +
          (s - t)^2)^(-3/2)`` on ``[0, 1]``; ``f(t) = sin(pi t) + sin(2 pi t) / 2``.
          Midpoint rule.

The heat and gravity problems and the discretizations are those collected in P. C. Hansen,
"Regularization Tools version 4.0 for Matlab 7.3", Numer. Algorithms 46 (2007) 189-194.
"""
from __future__ import annotations

import math
from dataclasses import dataclass, field
from typing import Callable

import numpy as np

from stopwise.core.params import Interval, param
from stopwise.data.generators import COUNT, LEVEL, NOISE, POS, SEED, _names
from stopwise.data.sources import RawData, SourceDef, register_source

# Gauss-Legendre nodes per box and direction for the Galerkin entries of a smooth kernel
GAUSS_NODES = 8
# kernel values evaluated at once while forming a Galerkin matrix (memory stays O(n d))
GALERKIN_BLOCK = 1 << 21


@dataclass(frozen=True)
class System:
    """A discretized problem: ``A`` (n x d), the exact solution's coefficients ``x``, the
    row positions ``s`` (collocation points or box centres) and unknown positions ``t``."""

    name: str
    A: np.ndarray
    x: np.ndarray
    s: np.ndarray
    t: np.ndarray
    discretization: str
    info: dict = field(default_factory=dict)


def midpoints(a: float, b: float, k: int) -> np.ndarray:
    """``a + (j + 1/2) (b - a) / k`` for ``j = 0 .. k-1``."""
    return a + (np.arange(k) + 0.5) * ((b - a) / k)


def galerkin(kernel: Callable[[np.ndarray, np.ndarray], np.ndarray], s_edges: np.ndarray,
             t_edges: np.ndarray, nodes: int = GAUSS_NODES) -> np.ndarray:
    """``A_ij = int_{S_i} int_{T_j} K(s, t) ds dt / sqrt(|S_i| |T_j|)`` (orthonormal box
    functions), each double integral by the tensor Gauss-Legendre rule with ``nodes`` nodes
    per box and direction (exact to rounding for a kernel analytic on each box)."""
    z, w = np.polynomial.legendre.leggauss(nodes)

    def nodes_of(edges):
        lo, hi = edges[:-1, None], edges[1:, None]
        half = (hi - lo) / 2
        return (lo + half * (z[None, :] + 1)).ravel(), (half * w[None, :]).ravel()

    sn, sw = nodes_of(s_edges)
    tn, tw = nodes_of(t_edges)
    m, k = s_edges.size - 1, t_edges.size - 1
    A = np.empty((m, k))
    rows = max(1, GALERKIN_BLOCK // (nodes * nodes * k))  # boxes of s per block of kernel values
    for i in range(0, m, rows):
        j = min(m, i + rows)
        sl = slice(i * nodes, j * nodes)
        K = kernel(sn[sl, None], tn[None, :]) * sw[sl, None] * tw[None, :]
        A[i:j] = K.reshape(j - i, nodes, k, nodes).sum(axis=(1, 3))
    return A / np.sqrt(np.diff(s_edges)[:, None] * np.diff(t_edges)[None, :])


# ---------------------------------------------------------------- Phillips (1962)

def phillips_phi(x: np.ndarray) -> np.ndarray:
    """``1 + cos(pi x / 3)`` for ``|x| < 3``, else 0."""
    x = np.asarray(x, dtype=np.float64)
    return np.where(np.abs(x) < 3.0, 1.0 + np.cos(np.pi * x / 3.0), 0.0)


def _phillips_int1(x: np.ndarray) -> np.ndarray:
    """``int_{-inf}^x phi``: 0, then ``x + 3 + (3 / pi) sin(pi x / 3)``, then 6."""
    c = np.clip(x, -3.0, 3.0)
    return c + 3.0 + (3.0 / np.pi) * np.sin(np.pi * c / 3.0)


def _phillips_even2(x: np.ndarray) -> np.ndarray:
    """The even part ``E`` of the second antiderivative of phi (``Phi2(x) = E(x) + 3x``):
    ``(x^2 + 9) / 2 - (9 / pi^2)(1 + cos(pi x / 3))`` for ``|x| <= 3``, ``3 |x|`` beyond."""
    a = np.abs(x)
    c = np.minimum(a, 3.0)
    inner = (c * c + 9.0) / 2.0 - (9.0 / np.pi ** 2) * (1.0 + np.cos(np.pi * c / 3.0))
    return np.where(a <= 3.0, inner, 3.0 * a)


def phillips_system(n: int, d: int) -> System:
    """Galerkin discretization with orthonormal box functions on ``n`` and ``d`` equal boxes
    of ``[-6, 6]``. The double integral of ``phi(s - t)`` over boxes ``S_i x T_j`` is
    ``Phi2(s_{i+1} - t_j) - Phi2(s_i - t_j) - Phi2(s_{i+1} - t_{j+1}) + Phi2(s_i - t_{j+1})``
    with ``Phi2'' = phi``; the linear part of ``Phi2`` cancels, so the even part ``E``
    gives every entry, and ``A`` is exactly symmetric when ``n = d``. Pairs of boxes
    farther apart than 3 everywhere give 0. ``x_j`` is the box mean of ``phi`` times
    ``sqrt(h)``, in closed form.

    >>> S = phillips_system(4, 4)
    >>> bool(np.array_equal(S.A, S.A.T)), S.A.shape
    (True, (4, 4))
    """
    se = np.linspace(-6.0, 6.0, n + 1)
    te = np.linspace(-6.0, 6.0, d + 1)
    lo, hi = se[:-1, None], se[1:, None]
    tl, th = te[None, :-1], te[None, 1:]
    E = _phillips_even2
    A = (E(hi - tl) + E(lo - th)) - (E(lo - tl) + E(hi - th))  # an order that transposes exactly
    far = ((lo - th) >= 3.0) | ((hi - tl) <= -3.0)
    A = np.where(far, 0.0, A) / np.sqrt((hi - lo) * (th - tl))
    x = (_phillips_int1(te[1:]) - _phillips_int1(te[:-1])) / np.sqrt(np.diff(te))
    return System("phillips", A, x, (se[:-1] + se[1:]) / 2, (te[:-1] + te[1:]) / 2, "galerkin")


# ---------------------------------------------------------------- Shaw (1972)

def shaw_kernel(s: np.ndarray, t: np.ndarray) -> np.ndarray:
    """``(cos s + cos t)^2 (sin u / u)^2`` with ``u = pi (sin s + sin t)`` (1 at u = 0)."""
    c = np.cos(s) + np.cos(t)
    return c * c * np.sinc(np.sin(s) + np.sin(t)) ** 2


def shaw_solution(t: np.ndarray) -> np.ndarray:
    """``2 exp(-6 (t - 0.8)^2) + exp(-2 (t + 0.5)^2)``."""
    return 2.0 * np.exp(-6.0 * (t - 0.8) ** 2) + np.exp(-2.0 * (t + 0.5) ** 2)


def shaw_system(n: int, d: int) -> System:
    """Midpoint rule on ``[-pi/2, pi/2]``: ``A_ij = (pi / d) K(s_i, t_j)`` at the midpoints
    of ``n`` and ``d`` equal cells; ``x_j = f(t_j)``."""
    s = midpoints(-np.pi / 2, np.pi / 2, n)
    t = midpoints(-np.pi / 2, np.pi / 2, d)
    A = (np.pi / d) * shaw_kernel(s[:, None], t[None, :])
    return System("shaw", A, shaw_solution(t), s, t, "midpoint")


# ---------------------------------------------------------------- Baart (1982)

def baart_kernel(s: np.ndarray, t: np.ndarray) -> np.ndarray:
    """``exp(s cos t)``."""
    return np.exp(s * np.cos(t))


def baart_system(n: int, d: int) -> System:
    """Galerkin discretization with orthonormal box functions on ``n`` equal boxes of
    ``[0, pi/2]`` (rows) and ``d`` of ``[0, pi]`` (unknowns); ``x_j = (cos t_j - cos
    t_{j+1}) / sqrt(h)``, the box integral of ``sin`` in closed form."""
    se = np.linspace(0.0, np.pi / 2, n + 1)
    te = np.linspace(0.0, np.pi, d + 1)
    A = galerkin(baart_kernel, se, te)
    x = (np.cos(te[:-1]) - np.cos(te[1:])) / np.sqrt(np.diff(te))
    return System("baart", A, x, (se[:-1] + se[1:]) / 2, (te[:-1] + te[1:]) / 2, "galerkin")


# ---------------------------------------------------------------- inverse heat equation

def heat_kernel(r: np.ndarray, kappa: float) -> np.ndarray:
    """``k(r) = r^(-3/2) / (2 kappa sqrt(pi)) exp(-1 / (4 kappa^2 r))`` for ``r > 0``, else 0."""
    r = np.asarray(r, dtype=np.float64)
    pos = r > 0
    rr = np.where(pos, r, 1.0)
    return np.where(pos, rr ** -1.5 / (2.0 * kappa * math.sqrt(math.pi)) * np.exp(-1.0 / (4.0 * kappa ** 2 * rr)), 0.0)


def heat_solution(t: np.ndarray) -> np.ndarray:
    """A pulse on the first half of ``[0, 1]`` (with ``u = 20 t``): ``0.75 u^2 / 4`` for
    ``u < 2``, ``0.75 + (u - 2)(3 - u)`` for ``2 <= u < 3``, ``0.75 exp(-2 (u - 3))`` for
    ``3 <= u <= 10``, and 0 for ``t > 1/2``; continuous."""
    u = 20.0 * np.asarray(t, dtype=np.float64)
    return np.select([u < 2.0, u < 3.0, u <= 10.0],
                     [0.75 * u * u / 4.0, 0.75 + (u - 2.0) * (3.0 - u), 0.75 * np.exp(-2.0 * (u - 3.0))], 0.0)


def heat_system(n: int, d: int, kappa: float = 1.0) -> System:
    """Collocation at ``s_i = (i + 1) / n`` and the midpoint rule on ``d`` equal cells of
    ``[0, 1]``: ``A_ij = k(s_i - t_j) / d`` for ``t_j < s_i`` (lower triangular Toeplitz
    when ``n = d``); ``x_j = f(t_j)``."""
    s = (np.arange(n) + 1.0) / n
    t = midpoints(0.0, 1.0, d)
    A = heat_kernel(s[:, None] - t[None, :], kappa) / d
    return System("heat", A, heat_solution(t), s, t, "collocation, midpoint", {"kappa": kappa})


# ---------------------------------------------------------------- gravity surveying

def gravity_kernel(s: np.ndarray, t: np.ndarray, depth: float) -> np.ndarray:
    """``depth (depth^2 + (s - t)^2)^(-3/2)``."""
    return depth * (depth * depth + (s - t) ** 2) ** -1.5


def gravity_solution(t: np.ndarray) -> np.ndarray:
    """``sin(pi t) + sin(2 pi t) / 2``."""
    return np.sin(np.pi * t) + 0.5 * np.sin(2.0 * np.pi * t)


def gravity_system(n: int, d: int, depth: float = 0.25) -> System:
    """Midpoint rule on ``[0, 1]``: ``A_ij = K(s_i, t_j) / d`` at the midpoints of ``n``
    and ``d`` equal cells; ``x_j = f(t_j)``."""
    s = midpoints(0.0, 1.0, n)
    t = midpoints(0.0, 1.0, d)
    A = gravity_kernel(s[:, None], t[None, :], depth) / d
    return System("gravity", A, gravity_solution(t), s, t, "midpoint", {"depth": depth})


# ---------------------------------------------------------------- sources

def _raw(system: System, p) -> RawData:
    return RawData(X=system.A, y=system.A @ system.x, feature_names=_names("t", system.x.size), w_true=system.x,
                   noise=p.noise, noise_level=float(p.noise_level), noise_seed=(p.seed, 2),
                   info={"generator": system.name, "discretization": system.discretization, **system.info,
                         "points": system.s.tolist(), "grid": system.t.tolist()})


def _signal(_p) -> str:
    return "signal"


ROWS = "rows n (measurement points or boxes in s; the published problems have n = d)"
UNKNOWNS = "unknowns d (grid points or boxes in t)"
NOISE_SEED = "seed of the noise stream (the system itself is deterministic)"
NOISE_LEVEL = "sigma (gaussian) or exact training noise norm (norm)"


@dataclass(frozen=True)
class PhillipsParams:
    n: int = param(300, COUNT, ROWS)
    d: int = param(100, COUNT, UNKNOWNS)
    seed: int = param(0, SEED, NOISE_SEED)
    noise: str = param("norm", NOISE, "noise model on the targets")
    noise_level: float = param(0.1, LEVEL, NOISE_LEVEL)


@dataclass(frozen=True)
class ShawParams:
    n: int = param(300, COUNT, ROWS)
    d: int = param(100, COUNT, UNKNOWNS)
    seed: int = param(0, SEED, NOISE_SEED)
    noise: str = param("norm", NOISE, "noise model on the targets")
    noise_level: float = param(0.3, LEVEL, NOISE_LEVEL)


@dataclass(frozen=True)
class BaartParams:
    n: int = param(300, COUNT, ROWS)
    d: int = param(100, COUNT, UNKNOWNS)
    seed: int = param(0, SEED, NOISE_SEED)
    noise: str = param("norm", NOISE, "noise model on the targets")
    noise_level: float = param(0.02, LEVEL, NOISE_LEVEL)


@dataclass(frozen=True)
class HeatParams:
    n: int = param(300, COUNT, ROWS)
    d: int = param(100, COUNT, UNKNOWNS)
    kappa: float = param(1.0, POS, "kappa of the kernel: 1 is ill-conditioned, 5 well-conditioned")
    seed: int = param(0, SEED, NOISE_SEED)
    noise: str = param("norm", NOISE, "noise model on the targets")
    noise_level: float = param(0.005, LEVEL, NOISE_LEVEL)


@dataclass(frozen=True)
class GravityParams:
    n: int = param(300, COUNT, ROWS)
    d: int = param(100, COUNT, UNKNOWNS)
    depth: float = param(0.25, POS, "depth of the mass layer; larger is more ill-posed")
    seed: int = param(0, SEED, NOISE_SEED)
    noise: str = param("norm", NOISE, "noise model on the targets")
    noise_level: float = param(0.5, LEVEL, NOISE_LEVEL)


def load_phillips(p: PhillipsParams) -> RawData:
    return _raw(phillips_system(p.n, p.d), p)


def load_shaw(p: ShawParams) -> RawData:
    return _raw(shaw_system(p.n, p.d), p)


def load_baart(p: BaartParams) -> RawData:
    return _raw(baart_system(p.n, p.d), p)


def load_heat(p: HeatParams) -> RawData:
    return _raw(heat_system(p.n, p.d, p.kappa), p)


def load_gravity(p: GravityParams) -> RawData:
    return _raw(gravity_system(p.n, p.d, p.depth), p)


for _defn in (
        SourceDef("phillips", PhillipsParams, load_phillips,
                  "Phillips' convolution equation (J. ACM 9, 1962), Galerkin", row_order=_signal),
        SourceDef("shaw", ShawParams, load_shaw,
                  "Shaw's one-dimensional image restoration (J. Math. Anal. Appl. 37, 1972), midpoint rule",
                  row_order=_signal),
        SourceDef("baart", BaartParams, load_baart,
                  "Baart's equation with kernel exp(s cos t) (IMA J. Numer. Anal. 2, 1982), Galerkin",
                  row_order=_signal),
        SourceDef("heat", HeatParams, load_heat,
                  "inverse heat equation, a Volterra equation (Carasso 1982; Hansen 2007), collocation",
                  row_order=_signal),
        SourceDef("gravity", GravityParams, load_gravity,
                  "one-dimensional gravity surveying (Hansen 2007), midpoint rule", row_order=_signal)):
    register_source(_defn)

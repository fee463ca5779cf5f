"""Synthetic families with a recorded generator seed, truth and noise model.

Each family is its own dataset source (so the older ``synthetic`` source keeps its exact
parameters and run ids). Every generator returns clean targets plus a noise model; the
noise is drawn after the split (see :func:`stopwise.data.build_problem`), Gaussian with a
stated sigma or worst-case with exactly a stated norm on the training rows.

sparse       compressed-sensing style recovery: ``y = X w*`` with a k-sparse ``w*`` and a
             Gaussian or Rademacher design (Candes and Tao, IEEE Trans. Inf. Theory 51, 2005).
integral     first-kind integral equation ``g(s) = int_0^1 k(s, t) f(t) dt`` with a choice
             of kernels of different smoothness, and a truth that satisfies the source
             condition ``f = (A^T A)^nu omega`` (Engl, Hanke, Neubauer, Regularization of
             Inverse Problems, 1996, section 3.2).
spectral     linear model whose feature covariance has a chosen eigenvalue decay
             (power law or exponential), typically with more features than rows
             (Bartlett, Long, Lugosi, Tsigler, PNAS 117, 2020).
separable    binary labels from a unit direction ``u`` that separates the rows with margin
             exactly ``gamma``, optionally with a share of labels flipped.
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from stopwise.data.errors import DataError
from stopwise.core.params import Choice, Interval, param
from stopwise.data.sources import NOISE_MODELS, RawData, SourceDef, register_source

NOISE = Choice(NOISE_MODELS)
POS = Interval(0.0, None, low_closed=False)
COUNT = Interval(1, None, integer=True)
SEED = Interval(0, None, integer=True)
LEVEL = Interval(0.0, None)


class GeneratorError(DataError):
    """Inconsistent generator parameters (one line)."""


def _rng(seed: int, stream: int) -> np.random.Generator:
    return np.random.default_rng([seed, stream])


def _names(prefix: str, d: int) -> tuple[str, ...]:
    return tuple(f"{prefix}{j}" for j in range(d))


# ---------------------------------------------------------------- sparse recovery

@dataclass(frozen=True)
class SparseParams:
    n: int = param(100, COUNT, "rows (before splitting)")
    d: int = param(400, COUNT, "features")
    k: int = param(10, Interval(0, None, integer=True), "number of nonzero entries of the truth")
    design: str = param("gaussian", Choice(("gaussian", "rademacher")), "entries N(0, 1) or +-1 with equal odds")
    amplitude: str = param("sign", Choice(("sign", "gaussian")), "nonzero truth values: +-1, or N(0, 1)")
    seed: int = param(0, SEED, "generator seed (design, truth and noise)")
    noise: str = param("gaussian", NOISE, "noise model on the targets")
    noise_level: float = param(0.1, LEVEL, "sigma (gaussian) or exact training noise norm (norm)")


def load_sparse(p: SparseParams) -> RawData:
    """``X`` with i.i.d. N(0, 1) or Rademacher entries; ``w*`` has exactly ``k`` nonzeros on a
    uniformly random support, each +-1 (``sign``) or N(0, 1) (``gaussian``); ``y = X w*``.

    >>> raw = load_sparse(SparseParams(n=20, d=50, k=3))
    >>> int((raw.w_true != 0).sum()), raw.X.shape
    (3, (20, 50))
    """
    if p.k > p.d:
        raise GeneratorError(f"dataset.params.k={p.k} is invalid: a {p.k}-sparse truth needs k <= d={p.d}")
    rng = _rng(p.seed, 1)
    if p.design == "gaussian":
        X = rng.standard_normal((p.n, p.d))
    else:
        X = rng.choice(np.array([-1.0, 1.0]), size=(p.n, p.d))
    support = np.sort(rng.choice(p.d, size=p.k, replace=False))
    w = np.zeros(p.d)
    if p.amplitude == "sign":
        vals = rng.choice(np.array([-1.0, 1.0]), size=p.k)
    else:
        vals = rng.standard_normal(p.k)
        vals[vals == 0.0] = 1.0  # keep exactly k nonzeros
    w[support] = vals
    return RawData(X=X, y=X @ w, feature_names=_names("x", p.d), w_true=w, noise=p.noise,
                   noise_level=float(p.noise_level), noise_seed=(p.seed, 2),
                   info={"generator": "sparse", "support": support.tolist(), "k": p.k, "design": p.design})


register_source(SourceDef("sparse", SparseParams, load_sparse,
                          "k-sparse truth with a Gaussian or Rademacher design"))


# ---------------------------------------------------------------- first-kind integral equations

KERNELS = ("gaussian", "green", "volterra")


@dataclass(frozen=True)
class IntegralParams:
    kernel: str = param("green", Choice(KERNELS), "gaussian (severely ill-posed), green or volterra (mildly)")
    n: int = param(300, COUNT, "measurement points s_i (rows, before splitting)")
    d: int = param(100, COUNT, "grid points t_j (features)")
    points: str = param("random", Choice(("random", "grid")), "s_i sorted uniform random, or midpoints (i + 1/2) / n")
    width: float = param(0.03, POS, "gaussian kernel: its standard deviation")
    smoothness: float = param(0.5, Interval(0.0, 4.0), "nu of the source condition f = (A^T A)^nu omega")
    seed: int = param(0, SEED, "generator seed (points, source element and noise)")
    noise: str = param("norm", NOISE, "noise model on the targets")
    noise_level: float = param(0.5, LEVEL, "sigma (gaussian) or exact training noise norm (norm)")


def integral_kernel(kernel: str, s: np.ndarray, t: np.ndarray, width: float = 0.03) -> np.ndarray:
    """Kernel matrix ``k(s_i, t_j)``.

    gaussian  ``exp(-(s - t)^2 / (2 width^2)) / (width sqrt(2 pi))``: infinitely smooth;
              singular values decay like ``exp(-(pi k width)^2 / 2)`` (severely ill-posed).
    green     Green's function of ``-u'' = f``, ``u(0) = u(1) = 0``: ``s (1 - t)`` for
              ``s <= t``, ``t (1 - s)`` otherwise; continuous with a kink; singular values
              ``1 / (pi k)^2`` (mildly ill-posed; the ``deriv2`` problem of Hansen,
              Regularization Tools, Numer. Algorithms 6, 1994).
    volterra  integration ``int_0^s f``: ``1`` for ``t < s``, else ``0``; discontinuous;
              singular values ``2 / ((2k - 1) pi)``.
    """
    S, T = s[:, None], t[None, :]
    if kernel == "gaussian":
        return np.exp(-((S - T) ** 2) / (2 * width ** 2)) / (width * np.sqrt(2 * np.pi))
    if kernel == "green":
        return np.where(S <= T, S * (1 - T), T * (1 - S))
    if kernel == "volterra":
        return (T < S).astype(np.float64)
    raise GeneratorError(f"unknown kernel {kernel!r}; valid: {', '.join(KERNELS)}")


def load_integral(p: IntegralParams) -> RawData:
    """Midpoint-rule discretization ``X_ij = h k(s_i, t_j)``, ``h = 1/d``, ``t_j = (j + 1/2) h``.

    With the scaled operator ``A = X / sqrt(n h)`` (it maps grid values of f, in the L2 norm,
    to point values of g, in the mean-square norm, so its singular values approximate the
    integral operator's) the truth is ``f = (A^T A)^nu omega`` with a seeded Gaussian
    ``omega``, rescaled so that ``f`` has unit L2 norm. ``info`` records ``nu``, the source
    element ``omega`` after rescaling, and its L2 norm ``rho``.
    """
    rng = _rng(p.seed, 1)
    if p.points == "random":
        s = np.sort(rng.uniform(0.0, 1.0, p.n))
    else:
        s = (np.arange(p.n) + 0.5) / p.n
    h = 1.0 / p.d
    t = (np.arange(p.d) + 0.5) * h
    X = h * integral_kernel(p.kernel, s, t, p.width)
    A = X / np.sqrt(p.n * h)
    omega = rng.standard_normal(p.d)
    if p.smoothness == 0.0:
        f = omega.copy()
    else:
        lam, V = np.linalg.eigh(A.T @ A)
        lam = np.clip(lam, 0.0, None)
        f = V @ (lam ** p.smoothness * (V.T @ omega))
    l2 = float(np.sqrt(h) * np.linalg.norm(f))
    if l2 == 0.0:
        raise GeneratorError("dataset.params.smoothness is too large for this kernel: the truth underflows to zero")
    f, omega = f / l2, omega / l2
    return RawData(X=X, y=X @ f, feature_names=_names("t", p.d), w_true=f, noise=p.noise,
                   noise_level=float(p.noise_level), noise_seed=(p.seed, 2),
                   info={"generator": "integral", "kernel": p.kernel, "smoothness": p.smoothness,
                         "source_norm": float(np.sqrt(h) * np.linalg.norm(omega)),
                         "source_element": omega.tolist(), "points": s.tolist(), "grid": t.tolist(),
                         "operator_scale": float(1.0 / np.sqrt(p.n * h))})


register_source(SourceDef("integral", IntegralParams, load_integral,
                          "first-kind integral equations (three kernels) with a source-condition truth",
                          row_order=lambda p: "signal"))


# ---------------------------------------------------------------- chosen spectral decay

@dataclass(frozen=True)
class SpectralParams:
    n: int = param(100, COUNT, "rows (before splitting)")
    d: int = param(400, COUNT, "features")
    decay: str = param("power", Choice(("power", "exponential")), "lambda_j = j^-rate, or exp(-rate (j - 1))")
    rate: float = param(1.0, Interval(0.0, None), "decay rate of the covariance eigenvalues")
    design: str = param("fixed", Choice(("fixed", "gaussian")),
                        "fixed: X^T X / n has exactly the eigenvalues lambda_1..lambda_min(n,d); "
                        "gaussian: rows ~ N(0, diag(lambda))")
    seed: int = param(0, SEED, "generator seed (design, truth and noise)")
    noise: str = param("gaussian", NOISE, "noise model on the targets")
    noise_level: float = param(0.1, LEVEL, "sigma (gaussian) or exact training noise norm (norm)")


def spectrum(decay: str, rate: float, m: int) -> np.ndarray:
    j = np.arange(1, m + 1, dtype=np.float64)
    return j ** (-rate) if decay == "power" else np.exp(-rate * (j - 1))


def _haar_columns(rng: np.random.Generator, rows: int, cols: int) -> np.ndarray:
    """``cols`` orthonormal columns drawn from the Haar measure (QR with sign fix;
    Mezzadri, Notices AMS 54, 2007)."""
    q, r = np.linalg.qr(rng.standard_normal((rows, cols)))
    return q * np.sign(np.diag(r))[None, :]


def load_spectral(p: SpectralParams) -> RawData:
    """``fixed``: ``X = sqrt(n) U diag(sqrt(lambda)) V^T`` with Haar-random orthonormal
    ``U`` (n x r) and ``V`` (d x r), ``r = min(n, d)``, so the singular values of ``X`` are
    exactly ``sqrt(n lambda_j)``. ``gaussian``: ``X = Z diag(sqrt(lambda))`` with standard
    Gaussian ``Z``, so the population covariance is ``diag(lambda)``. Truth ``w* ~ N(0, I/d)``."""
    rng = _rng(p.seed, 1)
    if p.design == "fixed":
        r = min(p.n, p.d)
        lam = spectrum(p.decay, p.rate, r)
        U = _haar_columns(rng, p.n, r)
        V = _haar_columns(rng, p.d, r)
        X = np.sqrt(p.n) * (U * np.sqrt(lam)[None, :]) @ V.T
    else:
        lam = spectrum(p.decay, p.rate, p.d)
        X = rng.standard_normal((p.n, p.d)) * np.sqrt(lam)[None, :]
    w = rng.standard_normal(p.d) / np.sqrt(p.d)
    return RawData(X=X, y=X @ w, feature_names=_names("x", p.d), w_true=w, noise=p.noise,
                   noise_level=float(p.noise_level), noise_seed=(p.seed, 2),
                   info={"generator": "spectral", "decay": p.decay, "rate": p.rate, "design": p.design,
                         "eigenvalues": lam.tolist()})


register_source(SourceDef("spectral", SpectralParams, load_spectral,
                          "linear model with a chosen covariance spectrum (overparameterized when d > n)"))


# ---------------------------------------------------------------- separable classification

@dataclass(frozen=True)
class SeparableParams:
    n: int = param(200, COUNT, "rows (before splitting)")
    d: int = param(20, COUNT, "features")
    margin: float = param(0.5, Interval(0.0, None), "gamma = min_i y_i <u, x_i> for the unit separator u")
    label_noise: float = param(0.0, Interval(0.0, 0.5), "probability that a label is flipped")
    seed: int = param(0, SEED, "generator seed (rows, separator, flips)")


def load_separable(p: SeparableParams) -> RawData:
    """Rows ``z_i ~ N(0, I_d)``, a Haar-random unit ``u``, labels ``y_i = sign(<u, z_i>)``
    (+1 at 0); the component along ``u`` is moved to ``y_i (gamma + |a_i| - min_j |a_j|)``,
    ``a_i = <u, z_i>``, so that ``min_i y_i <u, x_i> = gamma`` exactly and the hard-margin
    value of the data is at least ``gamma``. Then each label flips with probability
    ``label_noise`` (the clean labels stay recorded in ``info``).

    >>> raw = load_separable(SeparableParams(n=50, d=3, margin=0.25))
    >>> round(float(min(raw.y * (raw.X @ np.array(raw.info["separator"])))), 12)
    0.25
    """
    if p.n < 2:
        raise GeneratorError("dataset.params.n must be >= 2 for a two-class problem")
    rng = _rng(p.seed, 1)
    Z = rng.standard_normal((p.n, p.d))
    u = rng.standard_normal(p.d)
    u /= np.linalg.norm(u)
    a = Z @ u
    y = np.where(a >= 0, 1, -1)
    along = y * (p.margin + np.abs(a) - np.abs(a).min())
    X = Z + np.outer(along - a, u)
    flips = np.zeros(p.n, dtype=bool)
    if p.label_noise > 0:
        flips = _rng(p.seed, 3).random(p.n) < p.label_noise
    y_obs = np.where(flips, -y, y)
    return RawData(X=X, y=y_obs.astype(np.int64), task="binary", feature_names=_names("x", p.d),
                   info={"generator": "separable", "margin": p.margin, "separator": u.tolist(),
                         "label_noise": p.label_noise, "flipped": np.flatnonzero(flips).tolist(),
                         "clean_labels": y.tolist()})


register_source(SourceDef("separable", SeparableParams, load_separable,
                          "linearly separable two-class data with a chosen margin, optional label flips"))

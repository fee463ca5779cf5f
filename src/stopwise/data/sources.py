"""Dataset sources: each turns its params into raw arrays (before splitting).

A source returns :class:`RawData`. Synthetic sources return clean targets and a noise
model; the noise is drawn after the split so that worst-case noise has exactly its
stated norm on the training rows.
"""
from __future__ import annotations

from dataclasses import dataclass, field
from typing import Any, Callable

import numpy as np

from ..solvers.base import Choice, Flag, Interval, param

NOISE_MODELS = ("none", "gaussian", "norm")


@dataclass(frozen=True)
class RawData:
    """What a source returns, before splitting.

    Numeric sources fill ``X`` (float64). Tabular sources (user files, OpenML) fill
    ``frame`` instead: a pandas DataFrame of the raw feature columns, which may hold
    categorical columns and missing values; ``categorical`` names the columns to one-hot
    encode. ``y`` holds float targets for regression and the original class labels for
    classification (any dtype; missing targets as NaN / None). ``folds`` maps
    ``(repeat, fold)`` to predefined ``(train_rows, test_rows)`` (an OpenML task's folds).
    """

    X: np.ndarray | None
    y: np.ndarray
    task: str = "regression"
    feature_names: tuple[str, ...] = ()
    w_true: np.ndarray | None = None
    noise: str = "none"           # none | gaussian (level = sigma) | norm (level = ||e_train||)
    noise_level: float = 0.0
    noise_seed: tuple[int, ...] = (0,)  # seed sequence of the noise stream
    info: dict[str, Any] = field(default_factory=dict)
    frame: Any = None             # pandas.DataFrame of raw feature columns (tabular sources)
    categorical: tuple[str, ...] = ()
    folds: dict[tuple[int, int], tuple[np.ndarray, np.ndarray]] | None = None

    @property
    def n_rows(self) -> int:
        return int(self.frame.shape[0] if self.frame is not None else self.X.shape[0])


@dataclass(frozen=True)
class SourceDef:
    """A dataset source. ``fingerprint(params)`` (optional) returns a digest of the
    underlying data (a file's bytes), so the processed-problem cache is rebuilt when
    the data changes under an unchanged config; ``check(params)`` (optional) is a cheap
    validation run when a config is validated (a missing file, a missing option)."""

    name: str
    params: type
    load: Callable[[Any], RawData]
    summary: str
    fingerprint: Callable[[Any], str] | None = None
    check: Callable[[Any], None] | None = None


SOURCES: dict[str, SourceDef] = {}


def register_source(defn: SourceDef) -> SourceDef:
    SOURCES[defn.name] = defn
    return defn


# ---------------------------------------------------------------- scikit-learn's bundled data

SKLEARN_LOADERS = ("diabetes",)


@dataclass(frozen=True)
class SklearnParams:
    loader: str = param("diabetes", Choice(SKLEARN_LOADERS), "which scikit-learn bundled dataset")
    scaled: bool = param(False, Flag(), "diabetes: the loader's own scaling (columns centered, unit norm over all rows)")


def load_sklearn(p: SklearnParams) -> RawData:
    from sklearn import datasets

    if p.loader == "diabetes":
        bunch = datasets.load_diabetes(scaled=p.scaled)
        return RawData(X=np.asarray(bunch.data, dtype=np.float64), y=np.asarray(bunch.target, dtype=np.float64),
                       feature_names=tuple(bunch.feature_names),
                       info={"origin": f"sklearn.datasets.load_diabetes(scaled={p.scaled})"})
    raise ValueError(f"unknown scikit-learn loader {p.loader!r}")  # unreachable after validation


register_source(SourceDef("sklearn", SklearnParams, load_sklearn, "datasets that scikit-learn ships"))


# ---------------------------------------------------------------- synthetic least squares with known truth

GENERATORS = ("wellposed", "overparam", "illposed")
NOISE = Choice(NOISE_MODELS)
POS = Interval(0.0, None, low_closed=False)
COUNT = Interval(1, None, integer=True)


@dataclass(frozen=True)
class SyntheticParams:
    generator: str = param("wellposed", Choice(GENERATORS), "which synthetic family")
    n: int = param(400, COUNT, "rows (before splitting)")
    d: int = param(40, COUNT, "features")
    seed: int = param(0, Interval(0, None, integer=True), "generator seed (design, truth and noise)")
    noise: str = param("gaussian", NOISE, "noise model on the targets")
    noise_level: float = param(0.5, Interval(0.0, None), "sigma (gaussian) or exact training noise norm (norm)")
    width: float = param(0.05, POS, "illposed: width of the Gaussian smoothing kernel")


def _rng(p: SyntheticParams, stream: int) -> np.random.Generator:
    return np.random.default_rng([p.seed, stream])


def load_synthetic(p: SyntheticParams) -> RawData:
    """Generators with known truth ``w_true``; targets are ``X w_true`` before noise.

    wellposed   X ~ N(0, 1)^{n x d}, w_true ~ N(0, 1/d)^d.
    overparam   as wellposed, meant for d > n (minimum-norm interpolation).
    illposed    first-kind integral equation g(s) = int_0^1 k(s, t) f(t) dt with the Gaussian
                kernel k(s, t) = exp(-(s - t)^2 / (2 width^2)) / (width sqrt(2 pi)), measured at
                n random points s_i in [0, 1], discretized by the midpoint rule on d points;
                the truth f(t) = sin(pi t) + 0.5 sin(3 pi t) is smooth. Singular values decay
                like exp(-c k^2): severely ill-posed.
    """
    rng = _rng(p, 1)
    if p.generator in ("wellposed", "overparam"):
        X = rng.standard_normal((p.n, p.d))
        w = rng.standard_normal(p.d) / np.sqrt(p.d)
        names = tuple(f"x{j}" for j in range(p.d))
    else:
        s = np.sort(rng.uniform(0.0, 1.0, p.n))
        t = (np.arange(p.d) + 0.5) / p.d
        h = 1.0 / p.d
        X = h * np.exp(-((s[:, None] - t[None, :]) ** 2) / (2 * p.width ** 2)) / (p.width * np.sqrt(2 * np.pi))
        w = np.sin(np.pi * t) + 0.5 * np.sin(3 * np.pi * t)
        names = tuple(f"t{j}" for j in range(p.d))
    return RawData(X=X, y=X @ w, feature_names=names, w_true=w, noise=p.noise,
                   noise_level=float(p.noise_level), noise_seed=(p.seed, 2),
                   info={"generator": p.generator})


register_source(SourceDef("synthetic", SyntheticParams, load_synthetic,
                          "synthetic least-squares problems with known truth and noise"))

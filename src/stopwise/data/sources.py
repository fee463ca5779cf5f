"""Dataset sources: each turns its params into raw arrays (before splitting).

A source returns :class:`RawData`. Synthetic sources return clean targets and a noise
model; the noise is drawn after the split so that worst-case noise has exactly its
stated norm on the training rows.
"""
from __future__ import annotations

from dataclasses import dataclass, field
from typing import Any, Callable

import numpy as np

from stopwise.core.params import Choice, Flag, Interval, param
from stopwise.core.registry import Registry
from stopwise.core.errors import StopwiseError
from stopwise.data.errors import DataError

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
    # optional check of the params at spec time: raises a one-line ValueError; may return the
    # task the params give when it is known without loading the data (else None)
    check: Callable[[Any], str | None] | None = None
    # optional: the row order the params give, "signal" (rows are samples of a signal in
    # order, see Problem.signal_rows) or "exchangeable" (the default when absent)
    row_order: Callable[[Any], str] | None = None
    # optional: the packages whose versions decide what ``load`` returns, for a source whose
    # raw data may be kept in the on-disk cache between processes (data/cache.py: a worker
    # then reads a few arrays instead of importing the package that ships them)
    raw_cache: tuple[str, ...] = ()
    # optional: params -> params with choices that depend on the data made (the file
    # source's design=auto, decided by the file's density); applied when a dataset config
    # is normalized, so the run identity holds the choice made
    resolve: Callable[[Any], Any] | None = None


SOURCES: Registry[SourceDef] = Registry("dataset source", DataError, sort=True)


def register_source(defn: SourceDef) -> SourceDef:
    """Add a dataset source (a name registered twice raises ValueError)."""
    return SOURCES.register(defn.name, defn)


# ---------------------------------------------------------------- scikit-learn's bundled data

SKLEARN_LOADERS = ("diabetes", "breast_cancer", "digits", "wine", "iris")
# Class names of the classification loaders in target-code order (checked against
# scikit-learn's ``target_names`` by the tests); digits are named by their digit.
SKLEARN_CLASSES: dict[str, tuple[str, ...]] = {
    "breast_cancer": ("malignant", "benign"),
    "digits": tuple(str(i) for i in range(10)),
    "wine": ("class_0", "class_1", "class_2"),
    "iris": ("setosa", "versicolor", "virginica"),
}


class SourceParamError(StopwiseError, ValueError):
    """Source params that are each valid but do not fit together; the message is one line."""


@dataclass(frozen=True)
class SklearnParams:
    """``classes`` keeps only the rows of the listed classes (codes or names) and encodes
    them in the listed order: two classes give a binary task (first -> -1, second -> +1),
    more a multiclass task (0..K-1). ``positive`` makes a one-vs-rest binary task: that
    class -> +1, every other kept class -> -1."""

    loader: str = param("diabetes", Choice(SKLEARN_LOADERS), "which scikit-learn bundled dataset")
    scaled: bool = param(False, Flag(), "diabetes: the loader's own scaling (columns centered, unit norm over all rows)")
    classes: Any = param(None, None, "classification loaders: list of classes to keep, in encoding order",
                         omit_default=True)
    positive: Any = param(None, None, "classification loaders: the +1 class of a one-vs-rest binary task",
                          omit_default=True)


def _class_code(loader: str, label: Any, what: str) -> int:
    names = SKLEARN_CLASSES[loader]
    if isinstance(label, int) and not isinstance(label, bool) and 0 <= label < len(names):
        return int(label)
    if isinstance(label, str) and label in names:
        return names.index(label)
    shown = f"dataset.params.classes lists {label!r}, which" if what == "classes" else f"dataset.params.{what}={label!r}"
    raise SourceParamError(f"{shown} is not a class of {loader}; valid: {', '.join(names)} "
                           f"(or codes 0..{len(names) - 1})")


def sklearn_classes(p: SklearnParams) -> tuple[list[int], int | None]:
    """Validate ``classes`` / ``positive`` against the loader: (kept codes in order, positive code)."""
    if p.loader not in SKLEARN_CLASSES:
        for what in ("classes", "positive"):
            if getattr(p, what) is not None:
                raise SourceParamError(f"dataset.params.{what} applies to classification loaders "
                                       f"({', '.join(SKLEARN_CLASSES)}), not {p.loader}")
        return [], None
    names = SKLEARN_CLASSES[p.loader]
    if p.classes is None:
        kept = list(range(len(names)))
    else:
        if not isinstance(p.classes, (list, tuple)):
            raise SourceParamError(f"dataset.params.classes={p.classes!r} is invalid: must be a list of classes")
        kept = [_class_code(p.loader, c, "classes") for c in p.classes]
        if len(set(kept)) != len(kept):
            raise SourceParamError(f"dataset.params.classes={list(p.classes)!r} lists a class twice")
        if len(kept) < 2:
            raise SourceParamError(f"dataset.params.classes={list(p.classes)!r} is invalid: needs at least 2 classes")
    pos = None
    if p.positive is not None:
        pos = _class_code(p.loader, p.positive, "positive")
        if pos not in kept:
            raise SourceParamError(f"dataset.params.positive={p.positive!r} is not among dataset.params.classes")
    return kept, pos


def check_sklearn(p: SklearnParams) -> str:
    """Validate the class options and return the task they give (without loading data)."""
    kept, pos = sklearn_classes(p)
    if p.loader not in SKLEARN_CLASSES:
        return "regression"
    return "binary" if pos is not None or len(kept) == 2 else "multiclass"


def load_sklearn(p: SklearnParams) -> RawData:
    """scikit-learn's bundled datasets (no network).

    diabetes        442 x 10 regression (scaled=False, the original measurements).
    breast_cancer   569 x 30, malignant / benign.
    digits          1797 x 64 pixel values 0..16, digits 0..9.
    wine            178 x 13, three cultivars.
    iris            150 x 4, setosa / versicolor / virginica.

    Binary targets are -1.0 / +1.0 and multiclass targets 0.0..K-1; ``info["classes"]``
    lists the original class names in encoded order.
    """
    from sklearn import datasets

    if p.loader == "diabetes":
        bunch = datasets.load_diabetes(scaled=p.scaled)
        return RawData(X=np.asarray(bunch.data, dtype=np.float64), y=np.asarray(bunch.target, dtype=np.float64),
                       feature_names=tuple(bunch.feature_names),
                       info={"origin": f"sklearn.datasets.load_diabetes(scaled={p.scaled})"})
    kept, pos = sklearn_classes(p)
    bunch = getattr(datasets, f"load_{p.loader}")()
    target = np.asarray(bunch.target)
    names = SKLEARN_CLASSES[p.loader]
    rows = np.flatnonzero(np.isin(target, kept))
    X = np.asarray(bunch.data, dtype=np.float64)[rows]
    t = target[rows]
    if pos is not None:
        y = np.where(t == pos, 1.0, -1.0)
        task, classes = "binary", [f"not {names[pos]}", names[pos]]
    elif len(kept) == 2:
        y = np.where(t == kept[1], 1.0, -1.0)
        task, classes = "binary", [names[kept[0]], names[kept[1]]]
    else:
        code = {c: i for i, c in enumerate(kept)}
        y = np.array([code[int(v)] for v in t], dtype=np.float64)
        task, classes = "multiclass", [names[c] for c in kept]
    enc = np.unique(y)
    counts = {str(classes[i]): int(np.count_nonzero(y == v)) for i, v in enumerate(enc)}
    feats = tuple(str(f) for f in bunch.feature_names)
    return RawData(X=X, y=y, task=task, feature_names=feats,
                   info={"origin": f"sklearn.datasets.load_{p.loader}()", "classes": classes,
                         "class_counts": counts})


register_source(SourceDef("sklearn", SklearnParams, load_sklearn, "datasets that scikit-learn ships",
                          check=check_sklearn, raw_cache=("scikit-learn", "numpy")))


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
                          "synthetic least-squares problems with known truth and noise",
                          row_order=lambda p: "signal" if p.generator == "illposed" else "exchangeable"))

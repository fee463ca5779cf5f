"""Explicit-regularization baselines on exactly the splits the runs see.

Each baseline fits a path of explicitly regularized estimators on the training rows of
a :class:`~stopwise.problem.problem.Problem`, evaluates every penalty on the validation and test
rows, and selects the penalty of smallest **validation** error (the first of ties).
Test errors are stored for every penalty but never read when selecting.

Methods (penalty conventions are those of the named scikit-learn estimators):

``ridge``        ``min_w ||y - X w||^2 + alpha ||w||^2`` for a dense grid of ``alpha``,
                 all from one thin SVD ``X = U S V^T``:
                 ``w(alpha) = V diag(s_i / (s_i^2 + alpha)) U^T y`` (``alpha = 0``: the
                 minimum-norm least-squares solution).
``lasso``        ``min_w ||y - X w||^2 / (2 n) + alpha ||w||_1``
                 (:func:`sklearn.linear_model.lasso_path`, warm-started coordinate descent).
``elastic_net``  ``min_w ||y - X w||^2 / (2 n) + alpha rho ||w||_1 + alpha (1 - rho) ||w||^2 / 2``
                 (:func:`sklearn.linear_model.enet_path`, ``rho = l1_ratio``).
``logistic``     L2-penalized logistic regression over a grid of ``C``
                 (:class:`sklearn.linear_model.LogisticRegression`, multinomial for K > 2).
``linear_svm``   linear SVM (squared hinge) over a grid of ``C``
                 (:class:`sklearn.svm.LinearSVC`, one-vs-rest for K > 2).
``kernel_ridge`` ``min_c ||y - K c||^2 + alpha c^T K c`` with ``K = k(X_train, X_train)``
                 (:class:`sklearn.kernel_ridge.KernelRidge`'s convention, kernels of
                 :mod:`sklearn.metrics.pairwise`), every alpha from one eigendecomposition
                 ``K = Q diag(s) Q^T``: ``c(alpha) = Q diag(1 / (s + alpha)) Q^T y``. Computed
                 only when asked for by name (the explicit peer of ``kernel_gd``), not by default.

Regression baselines fit the same model as the solvers, ``y ~ X w`` on the Problem's
arrays without an intercept: the data pipeline centers the target and standardizes (or
only centers) the features on the training rows, which makes this equal to a model with
an unpenalized intercept. Classification baselines fit an unpenalized intercept unless
``fit_intercept`` is false. Errors: mean squared error (regression), share of
misclassified rows (classification), as in the traces.

Stored under the results root as ``baselines/<id16>.parquet``, one row per penalty, with
``id`` the SHA-256 of the data spec (dataset, split, seed), the method and its grid.
"""
from __future__ import annotations

import dataclasses
import hashlib
import math
import time
import warnings
from dataclasses import dataclass
from pathlib import Path
from typing import Any, Callable, Iterable, Mapping, Sequence

import numpy as np
import pandas as pd
import pyarrow as pa

from stopwise.core.errors import SpecError
from stopwise.problem.problem import Problem
from stopwise.core.registry import Registry
from stopwise.core.params import Choice, Flag, Interval, ParamError, make_params, normalize_number, param
from stopwise.problem.models import KERNELS, kernel_matrix, training_kernel
from stopwise.results.schema import read_table
from stopwise.results.store import Store, StoreError

BASELINE_FORMAT = 1
BASELINE_COLUMNS = ("baseline_id", "dataset", "seed", "method", "penalty", "val_error", "test_error",
                    "selected", "n_fits", "seconds")


class BaselineError(SpecError):
    """Bad baseline request; ``str(e)`` is one line naming the valid choices."""


@dataclass(frozen=True)
class PenaltyList:
    """Constraint: ``None`` or a non-empty list of finite numbers above ``low``."""

    low: float = 0.0
    low_closed: bool = True

    def contains(self, v: Any) -> bool:
        if v is None:
            return True
        if not isinstance(v, (list, tuple)) or not v:
            return False
        iv = Interval(self.low, None, low_closed=self.low_closed)
        return all(iv.contains(x) for x in v)

    def describe(self) -> str:
        op = ">=" if self.low_closed else ">"
        return f"a non-empty list of numbers {op} {self.low:g}"

    def outside(self) -> Any:
        return [self.low - 1.0]


POS = Interval(0.0, None, low_closed=False)
COUNT = Interval(1, None, integer=True)


@dataclass(frozen=True)
class RidgeParams:
    penalties: list | None = param(None, PenaltyList(0.0), "explicit alphas (none: geometric grid below)")
    n_penalties: int = param(100, COUNT, "grid size")
    low: float = param(1e-8, POS, "smallest alpha as a fraction of ||X_train||_2^2")
    high: float = param(1e2, POS, "largest alpha as a fraction of ||X_train||_2^2")


@dataclass(frozen=True)
class LassoParams:
    penalties: list | None = param(None, PenaltyList(0.0, low_closed=False), "explicit alphas (none: grid below)")
    n_penalties: int = param(100, COUNT, "grid size")
    eps: float = param(1e-3, Interval(0.0, 1.0, low_closed=False, high_closed=False),
                       "alpha_min / alpha_max; alpha_max = max|X^T y| / n, the smallest alpha giving w = 0")
    max_iter: int = param(10000, COUNT, "coordinate descent sweeps per alpha")
    tol: float = param(1e-7, POS, "coordinate descent tolerance (scikit-learn's tol: duality gap relative to ||y||^2)")


@dataclass(frozen=True)
class ElasticNetParams:
    penalties: list | None = param(None, PenaltyList(0.0, low_closed=False), "explicit alphas (none: grid below)")
    n_penalties: int = param(100, COUNT, "grid size")
    eps: float = param(1e-3, Interval(0.0, 1.0, low_closed=False, high_closed=False),
                       "alpha_min / alpha_max; alpha_max = max|X^T y| / (n l1_ratio)")
    l1_ratio: float = param(0.5, Interval(0.0, 1.0, low_closed=False), "rho: share of the l1 penalty")
    max_iter: int = param(10000, COUNT, "coordinate descent sweeps per alpha")
    tol: float = param(1e-7, POS, "coordinate descent tolerance (scikit-learn's tol: duality gap relative to ||y||^2)")


@dataclass(frozen=True)
class ClassifierParams:
    penalties: list | None = param(None, PenaltyList(0.0, low_closed=False), "explicit C values (none: grid below)")
    n_penalties: int = param(25, COUNT, "grid size")
    low: float = param(1e-4, POS, "smallest C")
    high: float = param(1e4, POS, "largest C")
    fit_intercept: bool = param(True, Flag(), "fit an unpenalized intercept")
    max_iter: int = param(2000, COUNT, "solver iterations per fit")


@dataclass(frozen=True)
class KernelRidgeParams:
    kernel: str = param("rbf", Choice(KERNELS), "kernel of sklearn.metrics.pairwise: linear, rbf, polynomial, laplacian")
    gamma: float | None = param(None, POS, "rbf / polynomial / laplacian: gamma; null = 1 / n_features")
    degree: int = param(3, COUNT, "polynomial: degree")
    coef0: float = param(1.0, Interval(None, None), "polynomial: coef0")
    penalties: list | None = param(None, PenaltyList(0.0), "explicit alphas (none: geometric grid below)")
    n_penalties: int = param(100, COUNT, "grid size")
    low: float = param(1e-8, POS, "smallest alpha as a fraction of lambda_max(K)")
    high: float = param(1e2, POS, "largest alpha as a fraction of lambda_max(K)")


@dataclass
class PathResult:
    """A fitted path: one entry per penalty (in grid order)."""

    penalties: np.ndarray
    val_error: np.ndarray
    test_error: np.ndarray
    n_fits: int
    seconds: float
    coefs: np.ndarray | None = None        # (K, d) for the regression paths
    models: list | None = None             # fitted estimators for the classifiers
    notes: dict[str, Any] = dataclasses.field(default_factory=dict)

    @property
    def selected(self) -> int | None:
        """Index of the penalty of smallest validation error (first of ties), None without validation."""
        v = self.val_error
        if v.size == 0 or not np.isfinite(v).any():
            return None
        return int(np.nanargmin(np.where(np.isfinite(v), v, np.nan)))


# ---------------------------------------------------------------- errors

def _mse_rows(X: np.ndarray, y: np.ndarray, W: np.ndarray) -> np.ndarray:
    """Mean squared error of each row of W (K x d) on (X, y); NaN when X has no rows."""
    if X.shape[0] == 0:
        return np.full(W.shape[0], math.nan)
    R = X @ W.T - y[:, None]
    return np.einsum("ij,ij->j", R, R) / X.shape[0]


def _err_rate(model: Any, X: np.ndarray, y: np.ndarray) -> float:
    if X.shape[0] == 0:
        return math.nan
    return float(np.mean(model.predict(X) != y))


# ---------------------------------------------------------------- paths

def _geometric(lo: float, hi: float, k: int) -> np.ndarray:
    if k == 1:
        return np.array([math.sqrt(lo * hi)])
    return np.geomspace(lo, hi, k)


def ridge_grid(problem: Problem, p: RidgeParams) -> np.ndarray:
    if p.penalties is not None:
        return np.asarray(p.penalties, dtype=np.float64)
    if p.low >= p.high:
        raise BaselineError(f"ridge low={p.low:g} must be below high={p.high:g}")
    s2 = float(np.linalg.norm(problem.X_train, 2)) ** 2 if problem.X_train.size else 1.0
    s2 = s2 if s2 > 0 else 1.0
    return _geometric(p.low * s2, p.high * s2, p.n_penalties)


def ridge_svd_path(X: np.ndarray, y: np.ndarray, alphas: np.ndarray) -> np.ndarray:
    """Ridge weights for every alpha from one thin SVD: rows of the returned (K, d) array.

    ``w(alpha) = V diag(s_i / (s_i^2 + alpha)) U^T y`` over the singular values above
    ``s_max max(n, d) eps`` (so ``alpha = 0`` gives ``pinv(X) y``).
    """
    U, s, Vt = np.linalg.svd(X, full_matrices=False)
    keep = s > (s[0] if s.size else 0.0) * max(X.shape) * np.finfo(float).eps
    U, s, Vt = U[:, keep], s[keep], Vt[keep]
    uy = U.T @ y
    F = s[None, :] / (s[None, :] ** 2 + np.asarray(alphas, dtype=np.float64)[:, None])
    return (F * uy[None, :]) @ Vt


def fit_ridge(problem: Problem, p: RidgeParams) -> PathResult:
    alphas = ridge_grid(problem, p)
    t0 = time.perf_counter()
    W = ridge_svd_path(problem.X_train, problem.y_train, alphas)
    sec = time.perf_counter() - t0
    return PathResult(alphas, _mse_rows(problem.X_val, problem.y_val, W),
                      _mse_rows(problem.X_test, problem.y_test, W), 1, sec, coefs=W)


def kernel_ridge_path(K: np.ndarray, y: np.ndarray, alphas: np.ndarray,
                      eig: tuple[np.ndarray, np.ndarray] | None = None) -> np.ndarray:
    """Kernel ridge coefficients for every alpha from one eigendecomposition ``K = Q diag(s) Q^T``
    (``eig``, else ``numpy.linalg.eigh(K)``; rows of the returned (A, n) array):
    ``c(alpha) = Q diag(1 / (s + alpha)) Q^T y``. Eigenvalues below ``s_max n eps`` count as 0
    (their rounding sign dropped); at ``alpha = 0`` those directions are left out, so
    ``c(0) = K^+ y``.

    >>> kernel_ridge_path(np.array([[2.0, 0.0], [0.0, 0.0]]), np.array([1.0, 1.0]), [0.0, 1.0]).tolist()
    [[0.5, 0.0], [0.3333333333333333, 1.0]]
    """
    s, Q = eig if eig is not None else np.linalg.eigh(K)
    tol = (s[-1] if s.size else 0.0) * max(K.shape[0], 1) * np.finfo(float).eps
    s = np.where(s > tol, s, 0.0)
    a = np.asarray(alphas, dtype=np.float64)[:, None]
    with np.errstate(divide="ignore"):
        F = np.where((a == 0.0) & (s[None, :] == 0.0), 0.0, 1.0 / (s[None, :] + a))
    return (F * (Q.T @ y)[None, :]) @ Q.T


def fit_kernel_ridge(problem: Problem, p: KernelRidgeParams) -> PathResult:
    def kern(A: np.ndarray) -> np.ndarray:
        return kernel_matrix(A, problem.X_train, p.kernel, p.gamma, p.degree, p.coef0)

    t0 = time.perf_counter()
    K = training_kernel(problem.X_train, p.kernel, p.gamma, p.degree, p.coef0)
    eig = np.linalg.eigh(K)
    if p.penalties is not None:
        alphas = np.asarray(p.penalties, dtype=np.float64)
    else:
        if p.low >= p.high:
            raise BaselineError(f"kernel_ridge low={p.low:g} must be below high={p.high:g}")
        top = float(eig[0][-1]) if K.size else 1.0
        top = top if top > 0 else 1.0
        alphas = _geometric(p.low * top, p.high * top, p.n_penalties)
    C = kernel_ridge_path(K, problem.y_train, alphas, eig)
    sec = time.perf_counter() - t0

    def mse(split: str) -> np.ndarray:
        X, y = getattr(problem, "X_" + split), getattr(problem, "y_" + split)
        if X.shape[0] == 0:
            return np.full(alphas.size, math.nan)
        R = kern(X) @ C.T - y[:, None]
        return np.einsum("ij,ij->j", R, R) / X.shape[0]

    return PathResult(alphas, mse("val"), mse("test"), 1, sec, coefs=C,
                      notes={"kernel": p.kernel, "gamma": p.gamma if p.gamma is not None else 1.0 / max(problem.d, 1)})


def lasso_alpha_max(X: np.ndarray, y: np.ndarray, l1_ratio: float = 1.0) -> float:
    """Smallest alpha whose (elastic-net) solution is zero: ``max_j |x_j^T y| / (n rho)``."""
    return float(np.max(np.abs(X.T @ y))) / (X.shape[0] * l1_ratio) if X.size else 1.0


def _cd_path(problem: Problem, p: LassoParams | ElasticNetParams, l1_ratio: float) -> PathResult:
    from sklearn.exceptions import ConvergenceWarning
    from sklearn.linear_model import enet_path

    X, y = problem.X_train, problem.y_train
    if p.penalties is not None:
        alphas = np.asarray(p.penalties, dtype=np.float64)
    else:
        amax = lasso_alpha_max(X, y, l1_ratio)
        amax = amax if amax > 0 else 1.0
        alphas = _geometric(amax * p.eps, amax, p.n_penalties)[::-1]
    t0 = time.perf_counter()
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always", ConvergenceWarning)
        got, coefs, _ = enet_path(np.asfortranarray(X), y, l1_ratio=l1_ratio, alphas=alphas, max_iter=p.max_iter,
                                 tol=p.tol)
    sec = time.perf_counter() - t0
    # enet_path returns the alphas it was given, sorted from largest to smallest
    order = np.argsort(-alphas, kind="stable")
    W = np.empty((alphas.size, X.shape[1]))
    W[order] = coefs.T
    notes = {"not_converged": sum(1 for w in caught if issubclass(w.category, ConvergenceWarning))}
    return PathResult(alphas, _mse_rows(problem.X_val, problem.y_val, W),
                      _mse_rows(problem.X_test, problem.y_test, W), int(alphas.size), sec, coefs=W, notes=notes)


def fit_lasso(problem: Problem, p: LassoParams) -> PathResult:
    return _cd_path(problem, p, 1.0)


def fit_elastic_net(problem: Problem, p: ElasticNetParams) -> PathResult:
    return _cd_path(problem, p, p.l1_ratio)


def _c_grid(p: ClassifierParams) -> np.ndarray:
    if p.penalties is not None:
        return np.asarray(p.penalties, dtype=np.float64)
    if p.low >= p.high:
        raise BaselineError(f"low={p.low:g} must be below high={p.high:g}")
    return _geometric(p.low, p.high, p.n_penalties)


def _classifier_path(problem: Problem, p: ClassifierParams, make: Callable[[float], Any]) -> PathResult:
    from sklearn.exceptions import ConvergenceWarning

    Cs = _c_grid(p)
    y_tr = _labels(problem.y_train)
    val, test, models = [], [], []
    t0 = time.perf_counter()
    not_converged = 0
    for C in Cs:
        with warnings.catch_warnings(record=True) as caught:
            warnings.simplefilter("always", ConvergenceWarning)
            m = make(float(C)).fit(problem.X_train, y_tr)
        not_converged += sum(1 for w in caught if issubclass(w.category, ConvergenceWarning))
        models.append(m)
    sec = time.perf_counter() - t0
    for m in models:
        val.append(_err_rate(m, problem.X_val, _labels(problem.y_val)))
        test.append(_err_rate(m, problem.X_test, _labels(problem.y_test)))
    return PathResult(Cs, np.array(val, dtype=np.float64), np.array(test, dtype=np.float64), int(Cs.size), sec,
                      models=models, notes={"not_converged": not_converged})


def _labels(y: np.ndarray) -> np.ndarray:
    """Class labels as integers (-1/+1 binary, 0..K-1 multiclass are stored as floats)."""
    return np.rint(y).astype(np.int64)


def fit_logistic(problem: Problem, p: ClassifierParams) -> PathResult:
    from sklearn.linear_model import LogisticRegression

    return _classifier_path(problem, p, lambda C: LogisticRegression(C=C, fit_intercept=p.fit_intercept,
                                                                     max_iter=p.max_iter))


def fit_linear_svm(problem: Problem, p: ClassifierParams) -> PathResult:
    from sklearn.svm import LinearSVC

    return _classifier_path(problem, p, lambda C: LinearSVC(C=C, fit_intercept=p.fit_intercept,
                                                            max_iter=p.max_iter, dual="auto"))


# ---------------------------------------------------------------- registry

@dataclass(frozen=True)
class BaselineDef:
    name: str
    params: type
    fit: Callable[[Problem, Any], PathResult]
    tasks: tuple[str, ...]
    summary: str
    default: bool = True  # computed when no method is named (else only when asked for by name)


BASELINES: Registry[BaselineDef] = Registry("baseline", BaselineError)


def register_baseline(d: BaselineDef) -> BaselineDef:
    """Add a baseline (a name registered twice raises ValueError)."""
    return BASELINES.register(d.name, d)


register_baseline(BaselineDef("ridge", RidgeParams, fit_ridge, ("regression",),
                              "ridge over a dense alpha grid through one SVD"))
register_baseline(BaselineDef("lasso", LassoParams, fit_lasso, ("regression",), "lasso path (coordinate descent)"))
register_baseline(BaselineDef("elastic_net", ElasticNetParams, fit_elastic_net, ("regression",),
                              "elastic-net path (coordinate descent)"))
register_baseline(BaselineDef("logistic", ClassifierParams, fit_logistic, ("binary", "multiclass"),
                              "L2 logistic regression over a C grid"))
register_baseline(BaselineDef("linear_svm", ClassifierParams, fit_linear_svm, ("binary", "multiclass"),
                              "linear SVM (squared hinge) over a C grid"))
register_baseline(BaselineDef("kernel_ridge", KernelRidgeParams, fit_kernel_ridge, ("regression",),
                              "kernel ridge regression over a dense alpha grid through one eigendecomposition",
                              default=False))


def get_baseline(name: str) -> BaselineDef:
    return BASELINES.get(name)


def baseline_params(name: str, values: Mapping[str, Any] | None = None):
    d = get_baseline(name)
    vals = dict(values or {})
    if isinstance(vals.get("penalties"), tuple):
        vals["penalties"] = list(vals["penalties"])
    if isinstance(vals.get("penalties"), list):
        vals["penalties"] = [normalize_number(float, x) for x in vals["penalties"]]
    try:
        return make_params(d.params, vals, f"baseline {name}")
    except ParamError as e:
        raise BaselineError(str(e)) from None


def default_methods(task: str) -> list[str]:
    """The baselines computed for a task when none is named (``kernel_ridge`` only by name)."""
    return [n for n, d in BASELINES.items() if task in d.tasks and d.default]


def fit_path(problem: Problem, method: str, params: Mapping[str, Any] | Any = None) -> PathResult:
    """Fit one baseline path on a Problem (nothing written).

    >>> import stopwise
    >>> p = stopwise.load_problem(["dataset=diabetes"])
    >>> r = fit_path(p, "ridge", {"penalties": [0.0, 10.0]})
    >>> r.n_fits, r.selected in (0, 1)
    (1, True)
    """
    d = get_baseline(method)
    p = params if isinstance(params, d.params) else baseline_params(method, params)
    if problem.task not in d.tasks:
        raise BaselineError(f"baseline {method!r} does not handle {problem.task} problems; "
                            f"for {problem.task}: {', '.join(default_methods(problem.task)) or '(none)'}")
    # the explicit baselines factor dense matrices (SVD, kernels): a sparse problem is made
    # dense within the bound of stopwise.problem.design, else refused in one line
    return d.fit(problem.dense(f"baseline {method!r}"), p)


# ---------------------------------------------------------------- identity and store

def data_spec(dataset: Mapping[str, Any], split: Mapping[str, Any], seed: int) -> dict[str, Any]:
    from stopwise.data import normalize_dataset

    return {"dataset": normalize_dataset(dict(dataset)), "split": dict(split), "seed": int(seed)}


def baseline_identity(spec: Mapping[str, Any], method: str, params: Any) -> dict[str, Any]:
    p = params if dataclasses.is_dataclass(params) else baseline_params(method, params)
    return {"format": BASELINE_FORMAT, "data": dict(spec), "method": method, "params": dataclasses.asdict(p)}


def baseline_id(spec: Mapping[str, Any], method: str, params: Any = None) -> str:
    from stopwise.config.spec import canonical_json

    return hashlib.sha256(canonical_json(baseline_identity(spec, method, params)).encode()).hexdigest()


def baseline_table(bid: str, problem: Problem, spec: Mapping[str, Any], method: str,
                   res: PathResult) -> pd.DataFrame:
    k = res.penalties.size
    sel = res.selected
    return pd.DataFrame({
        "baseline_id": [bid[:16]] * k, "dataset": [spec["dataset"].get("name") or problem.name] * k,
        "seed": np.full(k, int(spec["seed"]), dtype=np.int64), "method": [method] * k,
        "penalty": res.penalties.astype(np.float64), "val_error": res.val_error, "test_error": res.test_error,
        "selected": np.arange(k) == (sel if sel is not None else -1),
        "n_fits": np.full(k, res.n_fits, dtype=np.int64), "seconds": np.full(k, res.seconds, dtype=np.float64),
    })


def write_baseline(root: str | Path, table: pd.DataFrame, meta: dict[str, Any]) -> Path:
    bid = str(table["baseline_id"].iloc[0]) if len(table) else meta["baseline_id"][:16]
    return Store(root).write_baseline(bid, pa.Table.from_pandas(table, preserve_index=False), meta)


def ensure_baseline(root: str | Path, spec: Mapping[str, Any], method: str, params: Any = None,
                    problem: Problem | None = None) -> Path:
    """Compute and store one baseline unless a readable file with its id exists."""
    from stopwise.data import cached_problem
    from stopwise.running.runner import environment

    d = get_baseline(method)
    p = params if isinstance(params, d.params) else baseline_params(method, params)
    ident = baseline_identity(spec, method, p)
    digest = baseline_id(spec, method, p)
    store = Store(root)
    if store.has_baseline(digest):
        return store.baseline_path(digest)
    prob = problem if problem is not None else cached_problem(spec["dataset"], spec["split"], spec["seed"])
    res = fit_path(prob, method, p)
    table = baseline_table(digest, prob, spec, method, res)
    sel = res.selected
    meta = {"baseline_id": digest[:16], "digest": digest, "identity": ident, "task": prob.task,
            "penalty_convention": _CONVENTIONS[method], "notes": res.notes,
            "selected_penalty": None if sel is None else float(res.penalties[sel]),
            "selection": "smallest validation error (first of ties); test error never read" if sel is not None
            else "no validation rows: nothing selected",
            "problem": {"n_train": prob.n_train, "n_val": int(prob.X_val.shape[0]),
                        "n_test": int(prob.X_test.shape[0]), "d": prob.d},
            "created": time.time(), **environment()}
    return write_baseline(root, table, meta)


_CONVENTIONS = {
    "ridge": "alpha in ||y - Xw||^2 + alpha ||w||^2 (sklearn Ridge)",
    "lasso": "alpha in ||y - Xw||^2 / (2n) + alpha ||w||_1 (sklearn Lasso)",
    "elastic_net": "alpha in ||y - Xw||^2 / (2n) + alpha rho ||w||_1 + alpha (1 - rho) ||w||^2 / 2 (sklearn ElasticNet)",
    "logistic": "C, inverse L2 penalty strength (sklearn LogisticRegression)",
    "linear_svm": "C, inverse L2 penalty strength (sklearn LinearSVC)",
    "kernel_ridge": "alpha in ||y - Kc||^2 + alpha c^T K c (sklearn KernelRidge)",
}


def _campaign_specs(store: Store, campaign: str | Sequence[str] | None) -> list[dict[str, Any]]:
    """Distinct data specs (dataset, split, seed) of a campaign's stored runs (of several
    campaigns: of the union of their runs)."""
    from stopwise.analysis.selection import campaign_run_ids, find_campaigns

    if campaign is None:
        files = store.run_files()
    else:
        files = store.run_files(campaign_run_ids(find_campaigns(store, campaign)))
    out: list[dict[str, Any]] = []
    seen: set[str] = set()
    from stopwise.config.spec import canonical_json

    for f in files:
        try:
            cfg = store.read_meta(f).get("config") or {}
            spec = data_spec(cfg["dataset"], cfg["split"], cfg["seed"])
        except Exception as e:  # an unreadable run has no data spec to offer
            warnings.warn(f"skipping run file {f}: {type(e).__name__}: {e}", stacklevel=3)
            continue
        key = canonical_json(spec)
        if key not in seen:
            seen.add(key)
            out.append(spec)
    return out


def ensure_baselines(root: str | Path, campaign: str | Sequence[str] | None,
                     methods: Iterable[str | tuple[str, Mapping[str, Any]]] | None = None) -> pd.DataFrame:
    """Compute (or reuse) baselines for every distinct (dataset, split, seed) of a campaign.

    ``methods``: names, or ``(name, params)`` pairs; ``None`` means every baseline that
    handles the problem's task with its default grid. Returns the campaign's baselines
    as :func:`load_baselines` does.
    """
    from stopwise.data import cached_problem

    store = Store(root)
    wanted = None if methods is None else [(m, {}) if isinstance(m, str) else (m[0], dict(m[1])) for m in methods]
    for name, params in wanted or []:
        baseline_params(name, params)  # validate before computing anything
    for spec in _campaign_specs(store, campaign):
        prob = cached_problem(spec["dataset"], spec["split"], spec["seed"])
        todo = wanted if wanted is not None else [(m, {}) for m in default_methods(prob.task)]
        for name, params in todo:
            if prob.task not in get_baseline(name).tasks:
                continue
            ensure_baseline(root, spec, name, params, problem=prob)
    return load_baselines(root, campaign)


def load_baselines(root: str | Path = "results", campaign: str | Sequence[str] | None = None) -> pd.DataFrame:
    """Every stored baseline row (one per penalty) as a DataFrame.

    With ``campaign``, only baselines computed on a (dataset, split, seed) of that
    campaign's runs. Columns: baseline_id, dataset, seed, method, penalty, val_error,
    test_error, selected, n_fits, seconds.
    """
    from stopwise.config.spec import canonical_json

    store = Store(root)
    keep = None
    if campaign is not None:
        keep = {canonical_json(s) for s in _campaign_specs(store, campaign)}
    frames = []
    for f in store.baseline_files():
        try:
            md = store.read_meta(f)
            if keep is not None and canonical_json(md["identity"]["data"]) not in keep:
                continue
            frames.append(read_table(f).to_pandas())
        except Exception as e:
            warnings.warn(f"skipping unreadable baseline {f}: {type(e).__name__}: {e}", stacklevel=2)
    if not frames:
        return pd.DataFrame({c: pd.Series(dtype=object) for c in BASELINE_COLUMNS})
    df = pd.concat(frames, ignore_index=True)
    return df[list(BASELINE_COLUMNS)].sort_values(["dataset", "seed", "method", "penalty"],
                                                  kind="stable").reset_index(drop=True)


__all__ = ["BASELINES", "BASELINE_COLUMNS", "BaselineError", "PathResult", "baseline_id", "data_spec",
           "ensure_baseline", "ensure_baselines", "fit_path", "load_baselines", "ridge_svd_path", "StoreError"]

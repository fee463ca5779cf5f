"""Statistics for comparing methods across datasets: ranks, rank tests, profiles, intervals.

Everything here works on plain tables (pandas DataFrames or arrays) and knows nothing
about runs, traces or the store, so each function can be checked on hand-built numbers.

Rank tests (Demsar, "Statistical Comparisons of Classifiers over Multiple Data Sets",
JMLR 7, 2006, section 3.2.2). With ``N`` datasets, ``k`` methods and ``r_ij`` the rank
of method ``j`` on dataset ``i`` (1 = best, ties get the average of the ranks they
span), the average rank is ``R_j = (1/N) sum_i r_ij`` and

    chi2_F = 12 N / (k (k + 1)) * (sum_j R_j^2 - k (k + 1)^2 / 4)        (Friedman)
    F_F    = (N - 1) chi2_F / (N (k - 1) - chi2_F)                       (Iman-Davenport)
    CD     = q_alpha sqrt(k (k + 1) / (6 N))                             (Nemenyi)

``F_F`` follows the F distribution with ``k - 1`` and ``(k - 1)(N - 1)`` degrees of
freedom; ``q_alpha`` is the studentized range quantile with infinite degrees of freedom
divided by sqrt(2).

Profiles. Performance profiles (Dolan and More, Math. Program. 91, 2002):
``r_ps = t_ps / min_s t_ps`` and ``rho_s(tau) = |{p : r_ps <= tau}| / |P|``. Data
profiles (More and Wild, SIAM J. Optim. 20, 2009): ``d_s(alpha) = |{p : t_ps <= alpha}| / |P|``
with the budget ``alpha`` counted in data passes. A failure (the target never reached)
has cost ``inf`` and counts for no finite ``tau`` or ``alpha``.
"""
from __future__ import annotations

import math
import warnings
from dataclasses import dataclass

import numpy as np
import pandas as pd
from scipy import stats

from stopwise.core.errors import SpecError


class StatsError(SpecError):
    """Bad input to a statistic; ``str(e)`` is one line."""


# ---------------------------------------------------------------- confidence intervals

def student_interval(values, confidence: float = 0.95) -> tuple[float, float, float, int]:
    """Mean and two-sided Student t interval of the mean: ``(mean, low, high, n)``.

    ``mean +- t_{(1+c)/2, n-1} * s / sqrt(n)`` with ``s`` the sample standard deviation
    (``ddof = 1``). NaN values are dropped; with fewer than two values the interval is
    undefined and returned as NaN. An infinite value makes the mean infinite.

    >>> m, lo, hi, n = student_interval([1.0, 2.0, 3.0])
    >>> round(m, 6), round(hi - m, 4), n
    (2.0, 2.4841, 3)
    """
    if not 0.0 < confidence < 1.0:
        raise StatsError(f"confidence={confidence!r} is invalid: must be strictly between 0 and 1")
    a = np.asarray(values, dtype=float)
    a = a[~np.isnan(a)]
    n = int(a.size)
    if n == 0:
        return math.nan, math.nan, math.nan, 0
    mean = float(a.mean())
    if n < 2 or not np.isfinite(a).all():
        return mean, math.nan, math.nan, n
    half = float(stats.t.ppf(0.5 + confidence / 2, n - 1) * a.std(ddof=1) / math.sqrt(n))
    return mean, mean - half, mean + half, n


MIN_INTERVAL_SEEDS = 3  # fewer values give no usable interval of the mean
BOOTSTRAP_RESAMPLES = 9999


def bootstrap_interval(values, confidence: float = 0.95, n_resamples: int = BOOTSTRAP_RESAMPLES,
                       seed: int = 0) -> tuple[float, float, float, int]:
    """Mean and percentile bootstrap interval of the mean: ``(mean, low, high, n)``.

    The ``(1-c)/2`` and ``(1+c)/2`` quantiles of the means of ``n_resamples`` resamples
    drawn with replacement (Efron & Tibshirani 1993, ch. 13), computed by
    ``scipy.stats.bootstrap(method="percentile")`` with a generator seeded by ``seed``, so
    the same values give the same interval. Every resampled mean lies between the smallest
    and the largest value, so the interval of a nonnegative quantity (an error, a pass
    count) never goes below 0, unlike ``mean +- t s / sqrt(n)``. With fewer than
    :data:`MIN_INTERVAL_SEEDS` values the interval is not computed (NaN): two seeds give
    no usable interval. Equal values give the point interval; an infinite value makes the
    mean infinite and the interval NaN.

    >>> m, lo, hi, n = bootstrap_interval([1.0, 2.0, 3.0, 4.0])
    >>> m, 1.0 <= lo < m < hi <= 4.0, n
    (2.5, True, 4)
    """
    if not 0.0 < confidence < 1.0:
        raise StatsError(f"confidence={confidence!r} is invalid: must be strictly between 0 and 1")
    a = np.asarray(values, dtype=float)
    a = a[~np.isnan(a)]
    n = int(a.size)
    if n == 0:
        return math.nan, math.nan, math.nan, 0
    mean = float(a.mean())
    if n < MIN_INTERVAL_SEEDS or not np.isfinite(a).all():
        return mean, math.nan, math.nan, n
    if float(a.max()) == float(a.min()):
        return mean, mean, mean, n
    res = stats.bootstrap((a,), np.mean, confidence_level=confidence, n_resamples=n_resamples,
                          method="percentile", vectorized=True, random_state=np.random.default_rng(seed))
    lo, hi = float(res.confidence_interval.low), float(res.confidence_interval.high)
    return mean, max(lo, float(a.min())), min(hi, float(a.max())), n


# ---------------------------------------------------------------- ranks and rank tests

def rank_table(scores: pd.DataFrame, lower_is_better: bool = True) -> pd.DataFrame:
    """Rank the methods (columns) on every dataset (row); 1 is best, ties get average ranks.

    A missing score (NaN) or an infinite one is a failure: it ranks behind every finite
    score, and failures on the same dataset tie among themselves.

    >>> t = pd.DataFrame({"a": [0.1, 0.3], "b": [0.2, 0.3], "c": [0.1, float("nan")]})
    >>> rank_table(t).to_numpy().tolist()
    [[1.5, 3.0, 1.5], [1.5, 1.5, 3.0]]
    """
    if scores.shape[1] < 1:
        raise StatsError("no methods to rank")
    a = scores.to_numpy(dtype=float, copy=True)
    if not lower_is_better:
        a = -a
    a[~np.isfinite(a)] = np.inf
    ranks = stats.rankdata(a, method="average", axis=1)
    return pd.DataFrame(ranks, index=scores.index, columns=scores.columns)


@dataclass(frozen=True)
class RankTest:
    """Friedman / Iman-Davenport / Nemenyi results for ``k`` methods on ``N`` datasets."""

    methods: tuple[str, ...]
    average_ranks: tuple[float, ...]
    n_datasets: int
    chi2_f: float
    chi2_p: float
    f_f: float
    f_p: float
    df1: int
    df2: int
    alpha: float
    q_alpha: float
    cd: float

    @property
    def k(self) -> int:
        return len(self.methods)

    def as_frame(self) -> pd.DataFrame:
        """The statistics as a two-column (quantity, value) table."""
        rows = [("datasets N", self.n_datasets), ("methods k", self.k),
                ("Friedman chi2_F", self.chi2_f), ("p (chi2, k-1 df)", self.chi2_p),
                ("Iman-Davenport F_F", self.f_f), (f"p (F, {self.df1} and {self.df2} df)", self.f_p),
                ("alpha", self.alpha), ("Nemenyi q_alpha", self.q_alpha), ("critical difference CD", self.cd)]
        return pd.DataFrame(rows, columns=["quantity", "value"])

    def groups(self) -> list[tuple[str, ...]]:
        """Maximal runs of methods (sorted by average rank) whose ranks differ by less than CD.

        These are the groups a critical-difference diagram joins with a bar: no pair in
        a group is significantly different by the Nemenyi test. Groups contained in
        another group are dropped.
        """
        order = np.argsort(self.average_ranks, kind="stable")
        r = np.asarray(self.average_ranks)[order]
        names = [self.methods[i] for i in order]
        out: list[tuple[int, int]] = []
        for i in range(len(r)):
            j = i
            while j + 1 < len(r) and r[j + 1] - r[i] < self.cd:
                j += 1
            if j > i and not any(a <= i and j <= b for a, b in out):
                out.append((i, j))
        return [tuple(names[a:b + 1]) for a, b in out]


def nemenyi_q(k: int, alpha: float = 0.05) -> float:
    """Critical value ``q_alpha`` of the Nemenyi test for ``k`` methods.

    ``q_alpha = studentized_range.ppf(1 - alpha, k, inf) / sqrt(2)`` (Demsar 2006, Table 5).

    >>> round(nemenyi_q(4, 0.05), 3)
    2.569
    """
    if not isinstance(k, (int, np.integer)) or k < 2:
        raise StatsError(f"k={k!r} is invalid: the Nemenyi test needs at least 2 methods")
    if not 0.0 < alpha < 1.0:
        raise StatsError(f"alpha={alpha!r} is invalid: must be strictly between 0 and 1")
    return float(stats.studentized_range.ppf(1.0 - alpha, int(k), np.inf) / math.sqrt(2.0))


def critical_difference(k: int, n_datasets: int, alpha: float = 0.05) -> float:
    """Nemenyi critical difference ``q_alpha sqrt(k (k + 1) / (6 N))`` (Demsar 2006, eq. 5)."""
    if n_datasets < 1:
        raise StatsError(f"N={n_datasets!r} is invalid: needs at least one dataset")
    return nemenyi_q(k, alpha) * math.sqrt(k * (k + 1) / (6.0 * n_datasets))


def friedman_from_ranks(average_ranks, n_datasets: int, alpha: float = 0.05,
                        methods=None) -> RankTest:
    """Friedman, Iman-Davenport and Nemenyi statistics from average ranks.

    Computed from the average ranks exactly as in Demsar (2006), section 3.2.2, so ties
    enter only through the averaged ranks. (SciPy's ``friedmanchisquare`` divides by a
    tie correction and gives a different number on tied data.)

    >>> t = friedman_from_ranks([3.143, 2.000, 2.893, 1.964], 14)
    >>> round(t.chi2_f, 2), round(t.f_f, 2), round(t.cd, 2)
    (9.28, 3.69, 1.25)
    """
    R = np.asarray(average_ranks, dtype=float)
    k, N = int(R.size), int(n_datasets)
    if k < 2:
        raise StatsError(f"rank tests need at least 2 methods, got {k}")
    if N < 2:
        raise StatsError(f"rank tests need at least 2 datasets, got {N}")
    if not np.isfinite(R).all() or (R < 1).any() or (R > k).any():
        raise StatsError(f"average ranks must lie in [1, {k}]")
    methods = tuple(str(m) for m in (methods if methods is not None else range(1, k + 1)))
    if len(methods) != k:
        raise StatsError(f"{len(methods)} method names for {k} average ranks")
    chi2 = 12.0 * N / (k * (k + 1)) * (float(np.sum(R ** 2)) - k * (k + 1) ** 2 / 4.0)
    chi2 = max(chi2, 0.0)  # rounding can push a perfect tie a hair below zero
    df1, df2 = k - 1, (k - 1) * (N - 1)
    denom = N * (k - 1) - chi2
    if denom <= 1e-12 * N * k:  # every dataset ranks the methods the same way
        f_f, f_p = math.inf, 0.0
    else:
        f_f = (N - 1) * chi2 / denom
        f_p = float(stats.f.sf(f_f, df1, df2))
    q = nemenyi_q(k, alpha)
    return RankTest(methods=methods, average_ranks=tuple(float(x) for x in R), n_datasets=N,
                    chi2_f=chi2, chi2_p=float(stats.chi2.sf(chi2, df1)), f_f=f_f, f_p=f_p,
                    df1=df1, df2=df2, alpha=alpha, q_alpha=q,
                    cd=q * math.sqrt(k * (k + 1) / (6.0 * N)))


def friedman_test(scores: pd.DataFrame, alpha: float = 0.05, lower_is_better: bool = True) -> RankTest:
    """Rank a datasets x methods score table (ties averaged) and run :func:`friedman_from_ranks`."""
    ranks = rank_table(scores, lower_is_better)
    return friedman_from_ranks(ranks.mean(axis=0).to_numpy(), ranks.shape[0], alpha,
                               methods=list(scores.columns))


# ---------------------------------------------------------------- pairwise tests

PAIRWISE_COLUMNS = ("method_a", "method_b", "datasets", "r_plus", "r_minus", "T", "p", "p_holm", "significant",
                    "better")


def holm_adjust(pvalues) -> np.ndarray:
    """Holm's step-down adjusted p-values (Holm 1979): with ``p_(1) <= ... <= p_(m)``,
    ``p~_(i) = max_{j <= i} min(1, (m - j + 1) p_(j))``; rejecting where ``p~ <= alpha`` is
    rejecting while ``p_(i) <= alpha / (m - i + 1)``. NaN stays NaN and does not count in m.

    >>> holm_adjust([0.01, 0.04, 0.03, 0.005]).round(4).tolist()
    [0.03, 0.06, 0.06, 0.02]
    """
    p = np.asarray(pvalues, dtype=float)
    out = np.full(p.shape, np.nan)
    ok = np.flatnonzero(~np.isnan(p))
    m = ok.size
    if m == 0:
        return out
    order = ok[np.argsort(p[ok], kind="stable")]
    adj = np.minimum(1.0, (m - np.arange(m)) * p[order])
    out[order] = np.maximum.accumulate(adj)
    return out


def signed_ranks(diff) -> tuple[float, float]:
    """``(R+, R-)`` of the Wilcoxon signed-rank test: ranks of ``|d|`` (ties averaged), zero
    differences split evenly between the two sums (Demsar 2006, section 3.1.3)."""
    d = np.asarray(diff, dtype=float)
    r = stats.rankdata(np.abs(d))
    zero = r[d == 0].sum() / 2
    return float(r[d > 0].sum() + zero), float(r[d < 0].sum() + zero)


def pairwise_wilcoxon(scores: pd.DataFrame, alpha: float = 0.05, lower_is_better: bool = True) -> pd.DataFrame:
    """Wilcoxon signed-rank test of every pair of methods (columns) over the datasets (rows),
    with Holm's correction over the pairs (Demsar 2006 recommends the Wilcoxon test for
    two methods over many datasets; Holm 1979).

    For methods a and b, ``d = score_b - score_a`` on the datasets where both are finite;
    ``T = min(R+, R-)``; ``p`` two-sided from ``scipy.stats.wilcoxon(d, zero_method="zsplit")``
    (exact for small samples without ties, the normal approximation otherwise); ``p_holm``
    the step-down adjusted p-value over all pairs; ``better``, where the test rejects at
    ``alpha`` after the correction, the method whose scores are mostly lower
    (``lower_is_better``; the larger rank sum is on the other side), else empty.
    A pair with fewer than 2 shared finite datasets has no test (NaN).
    """
    if not 0.0 < alpha < 1.0:
        raise StatsError(f"alpha={alpha!r} is invalid: must be strictly between 0 and 1")
    cols = list(scores.columns)
    rows = []
    for i in range(len(cols)):
        for j in range(i + 1, len(cols)):
            a = scores[cols[i]].to_numpy(dtype=float)
            b = scores[cols[j]].to_numpy(dtype=float)
            ok = np.isfinite(a) & np.isfinite(b)
            d = b[ok] - a[ok]
            if d.size < 2:
                rows.append([cols[i], cols[j], int(d.size), math.nan, math.nan, math.nan, math.nan])
                continue
            rp, rm = signed_ranks(d)
            if np.all(d == 0):
                p = 1.0
            else:
                with warnings.catch_warnings():
                    warnings.simplefilter("ignore")  # scipy's note on the normal approximation with few values
                    p = float(stats.wilcoxon(d, zero_method="zsplit").pvalue)
            rows.append([cols[i], cols[j], int(d.size), rp, rm, min(rp, rm), p])
    out = pd.DataFrame(rows, columns=list(PAIRWISE_COLUMNS[:7]))
    out["p_holm"] = holm_adjust(out["p"].to_numpy(float)) if len(out) else []
    out["significant"] = out["p_holm"] <= alpha
    better = []
    for row in out.itertuples(index=False):
        if not row.significant:
            better.append("")
            continue
        # R+ > R-: b's scores are mostly above a's
        a_wins = (row.r_plus > row.r_minus) if lower_is_better else (row.r_plus < row.r_minus)
        better.append(str(row.method_a if a_wins else row.method_b))
    out["better"] = better
    return out


# ---------------------------------------------------------------- profiles

def _costs(costs: pd.DataFrame) -> np.ndarray:
    a = costs.to_numpy(dtype=float, copy=True)
    if (a[~np.isnan(a)] < 0).any():
        raise StatsError("profile costs must be non-negative (data passes)")
    a[np.isnan(a)] = np.inf
    return a


def performance_ratios(costs: pd.DataFrame) -> pd.DataFrame:
    """Dolan-More ratios ``r_ps = t_ps / min_s t_ps`` (problems are rows, methods columns).

    Failures (NaN or inf cost) get ``inf``, which is above every finite ratio, as Dolan
    and More's ``r_M``. When the best cost on a problem is 0 (the starting iterate already
    meets the target), methods with cost 0 get ratio 1 and the others ``inf`` (the limit of
    ``t / min`` as the minimum goes to 0).
    """
    a = _costs(costs)
    best = a.min(axis=1, keepdims=True)
    with np.errstate(divide="ignore", invalid="ignore"):
        r = a / best
    r[np.isinf(a)] = np.inf
    zero = (best == 0).ravel()
    if zero.any():
        r[zero] = np.where(a[zero] == 0, 1.0, np.inf)
    return pd.DataFrame(r, index=costs.index, columns=costs.columns)


def _profile(values: np.ndarray, columns, xs: np.ndarray, xname: str) -> pd.DataFrame:
    n = values.shape[0]
    rows = []
    for j, m in enumerate(columns):
        v = np.sort(values[:, j])
        share = np.searchsorted(v, xs, side="right") / n if n else np.zeros_like(xs)
        rows.append(pd.DataFrame({"method": str(m), xname: xs, "share": share}))
    return pd.concat(rows, ignore_index=True) if rows else pd.DataFrame(columns=["method", xname, "share"])


def performance_profile(costs: pd.DataFrame, taus=None) -> pd.DataFrame:
    """Dolan-More performance profile ``rho_s(tau) = |{p : r_ps <= tau}| / |P|``.

    Returns a long table (method, tau, share). Without ``taus`` the grid is 1 and every
    finite ratio that occurs, which are the profile's only jump points.

    >>> c = pd.DataFrame({"a": [1.0, 4.0], "b": [2.0, 2.0]})
    >>> performance_profile(c, taus=[1, 2]).share.tolist()
    [0.5, 1.0, 0.5, 1.0]
    """
    r = performance_ratios(costs).to_numpy()
    if taus is None:
        fin = r[np.isfinite(r)]
        taus = np.unique(np.concatenate([[1.0], fin]))
    return _profile(r, costs.columns, np.asarray(taus, dtype=float), "tau")


def data_profile(costs: pd.DataFrame, budgets=None) -> pd.DataFrame:
    """More-Wild data profile ``d_s(alpha) = |{p : t_ps <= alpha}| / |P|``, budget in data passes.

    Returns a long table (method, budget, share). Without ``budgets`` the grid is 0 and
    every finite cost that occurs.

    >>> c = pd.DataFrame({"a": [1.0, float("inf")], "b": [3.0, 2.0]})
    >>> data_profile(c, budgets=[1, 3]).share.tolist()
    [0.5, 0.5, 0.0, 1.0]
    """
    a = _costs(costs)
    if budgets is None:
        fin = a[np.isfinite(a)]
        budgets = np.unique(np.concatenate([[0.0], fin]))
    return _profile(a, costs.columns, np.asarray(budgets, dtype=float), "budget")


__all__ = ["RankTest", "StatsError", "critical_difference", "data_profile", "friedman_from_ranks",
           "friedman_test", "nemenyi_q", "performance_profile", "performance_ratios", "rank_table",
           "student_interval", "bootstrap_interval", "MIN_INTERVAL_SEEDS", "PAIRWISE_COLUMNS", "holm_adjust",
           "pairwise_wilcoxon", "signed_ranks"]

"""Rank tests, profiles and intervals against published values and SciPy."""
import math

import numpy as np
import pandas as pd
import pytest
from scipy import stats

from stopwise.analysis.rankstats import (
    StatsError,
    critical_difference,
    data_profile,
    friedman_from_ranks,
    friedman_test,
    nemenyi_q,
    performance_profile,
    performance_ratios,
    rank_table,
    student_interval,
    bootstrap_interval,
    holm_adjust,
    pairwise_wilcoxon,
    signed_ranks,
)

# Demsar, "Statistical Comparisons of Classifiers over Multiple Data Sets", JMLR 7 (2006),
# worked example of section 3.2.2 (Table 6): N = 14 data sets, k = 4 variants of C4.5.
DEMSAR_RANKS = [3.143, 2.000, 2.893, 1.964]


def test_demsar_worked_example():
    """Demsar (2006): chi2_F = 9.28, F_F = 3.69 (critical F(3, 39) = 2.85), CD = 1.25 / 1.12."""
    t = friedman_from_ranks(DEMSAR_RANKS, 14, alpha=0.05)
    assert round(t.chi2_f, 2) == 9.28
    assert round(t.f_f, 2) == 3.69
    assert (t.df1, t.df2) == (3, 39)
    assert round(float(stats.f.ppf(0.95, t.df1, t.df2)), 2) == 2.85  # the paper's critical value
    assert t.f_p < 0.05  # the paper rejects the null hypothesis
    assert round(t.cd, 2) == 1.25
    assert round(friedman_from_ranks(DEMSAR_RANKS, 14, alpha=0.10).cd, 2) == 1.12
    assert round(critical_difference(4, 14, 0.05), 2) == 1.25


def test_nemenyi_q_table():
    """Demsar (2006) Table 5(a), q_0.05 for k = 2..10 (the paper's table, 3 decimals)."""
    published = [1.960, 2.343, 2.569, 2.728, 2.850, 2.949, 3.031, 3.102, 3.164]
    ours = [nemenyi_q(k, 0.05) for k in range(2, 11)]
    np.testing.assert_allclose(ours, published, atol=1e-3)


def test_nemenyi_q_010_table():
    """Demsar (2006) Table 5(a), q_0.10 for k = 2..10."""
    published = [1.645, 2.052, 2.291, 2.459, 2.589, 2.693, 2.780, 2.855, 2.920]
    np.testing.assert_allclose([nemenyi_q(k, 0.10) for k in range(2, 11)], published, atol=1e-3)


def test_friedman_equals_scipy_without_ties():
    """Without ties chi2_F from average ranks is SciPy's friedmanchisquare statistic."""
    rng = np.random.default_rng(3)
    scores = pd.DataFrame(rng.random((9, 5)), columns=list("abcde"))
    t = friedman_test(scores)
    ref = stats.friedmanchisquare(*[scores[c] for c in scores])
    assert math.isclose(t.chi2_f, ref.statistic, rel_tol=1e-12)
    assert math.isclose(t.chi2_p, ref.pvalue, rel_tol=1e-9)


def test_friedman_with_ties_is_not_tie_corrected():
    """With ties Demsar's formula is used as printed; SciPy divides by a tie correction (< 1)."""
    scores = pd.DataFrame({"a": [1, 1, 2, 1], "b": [1, 2, 2, 3], "c": [2, 3, 1, 3]}, dtype=float)
    ranks = rank_table(scores)
    R = ranks.mean(axis=0).to_numpy()
    N, k = 4, 3
    by_hand = 12 * N / (k * (k + 1)) * (np.sum(R ** 2) - k * (k + 1) ** 2 / 4)
    t = friedman_test(scores)
    assert math.isclose(t.chi2_f, by_hand, rel_tol=1e-12)
    assert t.chi2_f < stats.friedmanchisquare(*[scores[c] for c in scores]).statistic - 1e-6


def test_rank_table_averages_ties_and_puts_failures_last():
    """Hand-computed: ties share the mean of the ranks they span; NaN and inf rank last together."""
    scores = pd.DataFrame({"a": [0.1, 0.5, np.nan], "b": [0.1, 0.2, np.inf], "c": [0.3, 0.2, 0.4],
                           "d": [0.1, np.nan, 0.9]})
    expect = [[2, 2, 4, 2], [3, 1.5, 1.5, 4], [3.5, 3.5, 1, 2]]
    assert rank_table(scores).to_numpy().tolist() == expect
    assert rank_table(-scores.fillna(-np.inf), lower_is_better=False).iloc[0].tolist() == [2, 2, 4, 2]


def test_perfect_agreement_gives_infinite_f():
    scores = pd.DataFrame({"a": [1.0, 1.0, 1.0], "b": [2.0, 2.0, 2.0]})
    t = friedman_test(scores)
    assert t.average_ranks == (1.0, 2.0) and t.f_f == math.inf and t.f_p == 0.0


def test_cd_groups():
    t = friedman_from_ranks([1.0, 1.5, 3.0, 3.2, 4.3], 20, alpha=0.05)
    # CD = 2.728 * sqrt(5 * 6 / 120) = 1.364
    assert round(t.cd, 3) == 1.364
    assert t.groups() == [("1", "2"), ("3", "4", "5")]


def test_bad_input_one_line():
    for call in (lambda: friedman_from_ranks([1.5, 1.5], 1), lambda: friedman_from_ranks([1.0], 5),
                 lambda: nemenyi_q(1), lambda: nemenyi_q(3, 1.5), lambda: student_interval([1, 2], 2.0),
                 lambda: friedman_from_ranks([0.5, 2.5], 4)):
        with pytest.raises(StatsError) as e:
            call()
        assert "\n" not in str(e.value)


def test_student_interval_matches_scipy():
    """Two-sided Student t interval of the mean, as scipy.stats.t.interval computes it."""
    x = np.array([0.31, 0.29, 0.35, 0.33, 0.30])
    m, lo, hi, n = student_interval(x, 0.9)
    ref = stats.t.interval(0.9, len(x) - 1, loc=x.mean(), scale=stats.sem(x))
    assert n == 5 and math.isclose(m, x.mean())
    np.testing.assert_allclose([lo, hi], ref, rtol=1e-12)
    assert all(math.isnan(v) for v in student_interval([0.4])[1:3])


def test_bootstrap_interval_is_the_percentile_bootstrap_of_the_mean():
    """Percentile bootstrap (Efron & Tibshirani 1993, ch. 13) written out by hand with numpy:
    the quantiles of resampled means. Both sides are Monte Carlo estimates of the same
    quantiles. The standard error of a p-quantile from B resamples is about
    sqrt(p (1 - p) / B) / f(q) (Efron & Tibshirani 1993, ch. 19), 0.03 standard deviations
    of the mean's distribution for p = 0.05 and B = 9999 on near-normal means; 200,000 hand
    resamples make the hand side's error small. The bound is five standard errors. Values
    with distinct irrational parts keep the distribution of resampled means nearly
    continuous (on a coarse lattice its tail quantiles jump between atoms)."""
    x = np.exp(np.sqrt([2, 3, 5, 7, 11, 13, 17, 19, 23, 29])) / 10
    m, lo, hi, n = bootstrap_interval(x, 0.9)
    rng = np.random.default_rng(12345)
    means = x[rng.integers(0, x.size, size=(200_000, x.size))].mean(axis=1)
    ref_lo, ref_hi = np.quantile(means, [0.05, 0.95])
    spread = means.std()
    assert n == 10 and m == x.mean()
    assert abs(lo - ref_lo) < 0.15 * spread and abs(hi - ref_hi) < 0.15 * spread
    assert bootstrap_interval(x, 0.9) == (m, lo, hi, n)  # seeded: the same values give the same interval


def test_bootstrap_interval_of_a_nonnegative_quantity_never_goes_below_zero():
    x = [0.01, 0.02, 50.0]  # one bad seed: the t interval reaches far below 0
    _, t_lo, _, _ = student_interval(x)
    m, lo, hi, _ = bootstrap_interval(x)
    assert t_lo < 0 and 0.01 <= lo < m < hi <= 50.0
    assert bootstrap_interval([2.0, 2.0, 2.0])[1:3] == (2.0, 2.0)


def test_fewer_than_three_seeds_give_no_interval():
    for x in ([0.4], [0.4, 0.5]):
        m, lo, hi, n = bootstrap_interval(x)
        assert m == pytest.approx(np.mean(x)) and math.isnan(lo) and math.isnan(hi) and n == len(x)
    assert bootstrap_interval([])[3] == 0


# Demsar 2006, section 3.1.3, Table 2: AUC of C4.5 and C4.5 with m tuned ("C4.5+m") on 14
# data sets; the paper ranks the differences to R+ = 93, R- = 12, so T = 12, below the exact
# two-sided critical value 21 for N = 14 at alpha = 0.05 (significant). Differences rounded to
# the table's three decimals, as the paper ranks them (0.005 and -0.005 tie).
C45 = [0.763, 0.599, 0.954, 0.628, 0.882, 0.936, 0.661, 0.583, 0.775, 1.000, 0.940, 0.619, 0.972, 0.957]
C45M = [0.768, 0.591, 0.971, 0.661, 0.888, 0.931, 0.668, 0.583, 0.838, 1.000, 0.962, 0.666, 0.981, 0.978]


def test_signed_ranks_reproduce_demsars_worked_example():
    d = np.round(np.array(C45M) - np.array(C45), 3)
    assert signed_ranks(d) == (93.0, 12.0)
    # scipy.stats.wilcoxon's statistic with zeros split evenly is the same T
    assert stats.wilcoxon(d, zero_method="zsplit").statistic == 12.0


def test_pairwise_wilcoxon_on_the_worked_example_and_against_scipy():
    scores = pd.DataFrame({"C4.5": C45, "C4.5+m": list(np.round(np.array(C45) + np.round(
        np.array(C45M) - np.array(C45), 3), 3))})
    pw = pairwise_wilcoxon(scores, alpha=0.05, lower_is_better=False)  # AUC: higher is better
    (row,) = pw.itertuples(index=False)
    d = scores["C4.5+m"].to_numpy() - scores["C4.5"].to_numpy()
    assert (row.r_plus, row.r_minus, row.T) == signed_ranks(d) + (min(signed_ranks(d)),)
    assert row.p == pytest.approx(stats.wilcoxon(d, zero_method="zsplit").pvalue, rel=1e-12)
    assert row.p < 0.05 and row.p_holm == row.p and row.significant and row.better == "C4.5+m"


def test_holm_step_down_rule():
    """Holm 1979: reject p_(i) while p_(i) <= alpha / (m - i + 1), step by step."""
    p = np.array([0.01, 0.04, 0.03, 0.005, np.nan])
    adj = holm_adjust(p)
    alpha, m = 0.05, 4
    order = np.argsort(p[:4])
    rejected = set()
    for i, k in enumerate(order, start=1):
        if p[k] <= alpha / (m - i + 1):
            rejected.add(int(k))
        else:
            break
    assert {int(k) for k in np.flatnonzero(adj <= alpha)} == rejected == {0, 3}
    np.testing.assert_allclose(adj[:4], [0.03, 0.06, 0.06, 0.02])
    assert math.isnan(adj[4])


def test_pairwise_tests_skip_failures_and_correct_over_every_pair():
    scores = pd.DataFrame({"a": [0.1, 0.2, 0.3, 0.4, 0.5, 0.6], "b": [0.2, 0.3, 0.4, 0.5, 0.6, np.inf],
                           "c": [0.11, 0.19, 0.32, 0.41, 0.48, 0.6]})
    pw = pairwise_wilcoxon(scores).set_index(["method_a", "method_b"])
    assert pw.loc[("a", "b"), "datasets"] == 5  # the failure (inf) is left out of that pair
    raw = pw["p"].to_numpy()
    np.testing.assert_allclose(pw["p_holm"].to_numpy(), holm_adjust(raw))
    assert len(pw) == 3


# ---------------------------------------------------------------- profiles

# Hand-computed example (Dolan and More 2002 definitions): 3 problems, 3 methods.
COSTS = pd.DataFrame({"a": [2.0, 6.0, 1.0], "b": [4.0, 3.0, np.inf], "c": [np.nan, 3.0, 5.0]},
                     index=["p1", "p2", "p3"])


def test_performance_ratios_by_hand():
    r = performance_ratios(COSTS)
    expect = [[1, 2, np.inf], [2, 1, 1], [1, np.inf, 5]]
    assert r.to_numpy().tolist() == expect


def test_performance_profile_by_hand():
    prof = performance_profile(COSTS, taus=[1, 2, 4.99, 5, 1e9])
    got = {m: g["share"].tolist() for m, g in prof.groupby("method")}
    assert got["a"] == pytest.approx([2 / 3, 1, 1, 1, 1])
    assert got["b"] == pytest.approx([1 / 3, 2 / 3, 2 / 3, 2 / 3, 2 / 3])
    assert got["c"] == pytest.approx([1 / 3, 1 / 3, 1 / 3, 2 / 3, 2 / 3])
    # default grid: 1 and every finite ratio (the jump points)
    assert sorted(performance_profile(COSTS)["tau"].unique()) == [1, 2, 5]


def test_data_profile_by_hand():
    """More and Wild (2009): share of problems solved within a budget (here data passes)."""
    prof = data_profile(COSTS, budgets=[0, 1, 2, 3, 4, 5, 6, 100])
    got = {m: g["share"].tolist() for m, g in prof.groupby("method")}
    third = 1 / 3
    assert got["a"] == pytest.approx([0, third, 2 * third, 2 * third, 2 * third, 2 * third, 1, 1])
    assert got["b"] == pytest.approx([0, 0, 0, third, 2 * third, 2 * third, 2 * third, 2 * third])
    assert got["c"] == pytest.approx([0, 0, 0, third, third, 2 * third, 2 * third, 2 * third])


def test_zero_cost_profile():
    r = performance_ratios(pd.DataFrame({"a": [0.0, 1.0], "b": [2.0, 1.0]}))
    assert r.to_numpy().tolist() == [[1, np.inf], [1, 1]]
    with pytest.raises(StatsError):
        performance_ratios(pd.DataFrame({"a": [-1.0]}))

"""Reference checks of harness.analysis.stats against statsmodels, scipy and published values.

Every reference names its source in a comment.
"""

from __future__ import annotations

import numpy as np
import pytest
from scipy import stats as st
from statsmodels.stats.multitest import multipletests
from statsmodels.stats.proportion import confint_proportions_2indep, proportion_confint

from harness.analysis import stats as S

EXACT = 1e-9


# --- Wilson score interval -------------------------------------------------------------------------

@pytest.mark.parametrize("confidence", [0.8, 0.9, 0.95, 0.99])
def test_wilson_equals_statsmodels_over_a_grid(confidence):
    # Reference: statsmodels proportion_confint(method="wilson")
    n = np.concatenate([np.arange(1, 41), [57, 100, 263, 1000, 12345]])
    ks = [np.unique(np.linspace(0, m, 41).round().astype(int)) for m in n]
    k = np.concatenate(ks)
    trials = np.repeat(n, [len(x) for x in ks])
    lo, hi = S.wilson_interval(k, trials, confidence)
    ref_lo, ref_hi = proportion_confint(k, trials, alpha=1 - confidence, method="wilson")
    np.testing.assert_allclose(lo, ref_lo, rtol=0, atol=EXACT)
    np.testing.assert_allclose(hi, ref_hi, rtol=0, atol=EXACT)


@pytest.mark.parametrize("k, n, lo, hi", [
    (81, 263, 0.2553, 0.3662),
    (15, 148, 0.0624, 0.1605),
    (0, 20, 0.0, 0.1611),
    (1, 29, 0.0061, 0.1718),
])
def test_wilson_matches_newcombe_1998_worked_examples(k, n, lo, hi):
    # Newcombe (1998), Statistics in Medicine 17:857-872, Table I, method 3 (score, no continuity
    # correction): values recalled from memory, each confirmed equal to statsmodels' wilson interval.
    got = S.wilson_interval(k, n)
    assert np.round(got, 4).tolist() == [lo, hi]


def test_wilson_is_nan_without_trials():
    lo, hi = S.wilson_interval(0, 0)
    assert np.isnan(lo) and np.isnan(hi)


# --- McNemar, Fisher -------------------------------------------------------------------------------

def test_mcnemar_equals_scipy_binomtest_on_discordant_pairs():
    # Reference: scipy.stats.binomtest(b, b + c, 0.5), two-sided (the exact McNemar test)
    b, c = np.meshgrid(np.arange(0, 41), np.arange(0, 41))
    b, c = b.ravel(), c.ravel()
    keep = b + c > 0
    got = S.mcnemar_exact_p(b[keep], c[keep])
    ref = [st.binomtest(int(x), int(x + y), 0.5).pvalue for x, y in zip(b[keep], c[keep])]
    np.testing.assert_allclose(got, ref, rtol=1e-10, atol=1e-15)


def test_mcnemar_large_counts_equal_scipy_binomtest():
    # Reference: scipy.stats.binomtest
    for b, c in [(480, 520), (4012, 3870), (10, 2000)]:
        assert S.mcnemar_exact_p(b, c) == pytest.approx(st.binomtest(b, b + c, 0.5).pvalue, rel=1e-9)


def test_mcnemar_without_discordant_pairs_is_one():
    assert S.mcnemar_exact_p(0, 0) == 1.0


def test_fisher_equals_hypergeometric_sum():
    # Reference: definition of Fisher's exact test (common practice): sum of the hypergeometric
    # probabilities of all tables with the same margins no more likely than the observed one,
    # computed here with scipy.stats.hypergeom.
    for k1, n1, k2, n2 in [(3, 10, 9, 11), (0, 5, 5, 5), (12, 40, 20, 37), (7, 7, 1, 9)]:
        dist = st.hypergeom(n1 + n2, k1 + k2, n1)
        support = np.arange(max(0, k1 + k2 - n2), min(n1, k1 + k2) + 1)
        pmf = dist.pmf(support)
        ref = pmf[pmf <= dist.pmf(k1) * (1 + 1e-7)].sum()
        assert S.fisher_exact_p(k1, n1, k2, n2) == pytest.approx(ref, rel=1e-9)


def test_fisher_with_an_empty_side_is_nan():
    assert np.isnan(S.fisher_exact_p(0, 0, 3, 10))


# --- Wilcoxon, Mann-Whitney ------------------------------------------------------------------------

@pytest.mark.parametrize("n, ties", [(8, False), (30, False), (49, True), (400, True)])
def test_wilcoxon_equals_scipy(n, ties):
    # Reference: scipy.stats.wilcoxon(x, y) on the paired samples
    rng = np.random.default_rng(n)
    x = rng.normal(2, 1, n)
    y = x + rng.normal(0.3, 1, n)
    if ties:
        x, y = x.round(1), y.round(1)
    assert S.wilcoxon_p(y - x) == pytest.approx(st.wilcoxon(x, y).pvalue, rel=1e-12)


def test_wilcoxon_drops_missing_differences():
    # Reference: scipy.stats.wilcoxon on the pairs left after dropping NaN
    rng = np.random.default_rng(5)
    d = rng.normal(0.4, 1, 60)
    with_nan = np.concatenate([d, [np.nan, np.nan]])
    assert S.wilcoxon_p(with_nan) == pytest.approx(st.wilcoxon(d).pvalue, rel=1e-12)


def test_wilcoxon_edge_cases():
    assert S.wilcoxon_p(np.zeros(10)) == 1.0
    assert np.isnan(S.wilcoxon_p([np.nan]))


@pytest.mark.parametrize("n1, n2", [(5, 7), (40, 33), (500, 800)])
def test_mann_whitney_equals_scipy(n1, n2):
    # Reference: scipy.stats.mannwhitneyu(alternative="two-sided")
    rng = np.random.default_rng(n1)
    x, y = rng.gamma(2, 1, n1).round(1), rng.gamma(2.3, 1, n2).round(1)
    ref = st.mannwhitneyu(x, y, alternative="two-sided").pvalue
    assert S.mann_whitney_p(np.append(x, np.nan), y) == pytest.approx(ref, rel=1e-12)


def test_mann_whitney_edge_cases():
    assert S.mann_whitney_p(np.ones(4), np.ones(6)) == 1.0
    assert np.isnan(S.mann_whitney_p([], [1.0, 2.0]))


# --- Holm ------------------------------------------------------------------------------------------

@pytest.mark.parametrize("seed", range(5))
def test_holm_equals_statsmodels_multipletests(seed):
    # Reference: statsmodels.stats.multitest.multipletests(method="holm")
    rng = np.random.default_rng(seed)
    p = np.concatenate([rng.uniform(0, 0.05, 6), rng.uniform(0, 1, 20), [0.01, 0.01, 1.0]])
    rng.shuffle(p)
    ref = multipletests(p, method="holm")[1]
    np.testing.assert_allclose(S.holm(p), ref, rtol=0, atol=1e-15)


def test_holm_leaves_nan_out_of_the_family():
    # Reference: statsmodels multipletests on the finite values only
    p = np.array([0.01, np.nan, 0.04, 0.03])
    got = S.holm(p)
    assert np.isnan(got[1])
    np.testing.assert_allclose(got[[0, 2, 3]], multipletests(p[[0, 2, 3]], method="holm")[1], atol=1e-15)


# --- differences of proportions --------------------------------------------------------------------

def test_unpaired_difference_equals_statsmodels_newcombe():
    # Reference: statsmodels confint_proportions_2indep(method="newcomb", compare="diff"), which
    # gives an interval for p1 - p2 (Newcombe 1998, method 10)
    for k1, n1, k2, n2 in [(56, 70, 48, 80), (9, 10, 3, 10), (0, 25, 4, 30), (30, 30, 29, 31), (5, 56, 0, 29)]:
        lo, hi = S.difference_interval(k1, n1, k2, n2)
        ref = confint_proportions_2indep(k2, n2, k1, n1, method="newcomb", compare="diff")
        np.testing.assert_allclose([lo, hi], ref, rtol=0, atol=EXACT)


def test_paired_difference_reverses_sign_with_the_roles():
    # Reference: common practice (the interval for p2 - p1 is minus the interval for p1 - p2)
    lo, hi = S.paired_difference_interval(12, 7, 2, 19)
    lo2, hi2 = S.paired_difference_interval(12, 2, 7, 19)
    assert (lo, hi) == pytest.approx((-hi2, -lo2), abs=1e-15)


def test_paired_difference_without_correlation_is_the_unpaired_interval():
    # Newcombe (1998), Statistics in Medicine 17:2635-2650, method 10: with ad - bc between 0 and
    # n/2 the corrected phi is 0 and the interval is the square-and-add of the two Wilson intervals,
    # i.e. the independent-proportions interval (reference: statsmodels newcomb on the margins).
    a, b, c, d = 4, 8, 5, 10  # ad - bc = 0
    n = a + b + c + d
    lo, hi = S.paired_difference_interval(a, b, c, d)
    ref = confint_proportions_2indep(a + c, n, a + b, n, method="newcomb", compare="diff")
    np.testing.assert_allclose([lo, hi], ref, rtol=0, atol=EXACT)


def test_paired_difference_covers_the_true_difference():
    # Newcombe (1998), Statistics in Medicine 17:2635-2650, reports coverage near the nominal 95 %
    # for method 10; checked here by simulation of correlated pairs (true difference -0.05).
    rng = np.random.default_rng(0)
    cells = rng.multinomial(60, [0.4, 0.15, 0.10, 0.35], size=4000)
    lo, hi = S.paired_difference_interval(*cells.T)
    coverage = np.mean((lo <= -0.05) & (-0.05 <= hi))
    assert 0.93 <= coverage <= 0.98


def test_paired_interval_is_narrower_than_unpaired_for_correlated_pairs():
    # Newcombe (1998), Statistics in Medicine 17:2635-2650: positive correlation narrows the interval
    lo, hi = S.paired_difference_interval(40, 3, 10, 47)
    lo_u, hi_u = S.difference_interval(43, 100, 50, 100)
    assert hi - lo < hi_u - lo_u


# --- medians ---------------------------------------------------------------------------------------

def test_median_interval_covers_the_true_median():
    # McKean and Schrader (1984), Communications in Statistics - Simulation and Computation 13:751-773:
    # the order-statistic standard error gives near-nominal intervals; checked by simulation.
    rng = np.random.default_rng(1)
    hits = [abs(np.median(x)) <= 1.96 * S.median_se(x) for x in rng.standard_normal((2000, 41))]
    assert 0.92 <= np.mean(hits) <= 0.98


def test_median_se_is_close_to_its_asymptotic_value():
    # Reference: the sample median of N(0, sigma^2) is asymptotically normal with variance
    # 1 / (4 n f(0)^2) = pi sigma^2 / (2 n), f the normal density at the median (asymptotic
    # distribution of sample quantiles, Cramer 1946, "Mathematical Methods of Statistics"; recalled from memory)
    rng = np.random.default_rng(2)
    x = rng.standard_normal(40000)
    assert S.median_se(x) == pytest.approx(np.sqrt(np.pi / (2 * x.size)), rel=0.05)


def test_median_difference_paired_and_unpaired():
    # Reference: numpy medians for the estimates; interval = estimate -/+ 1.96 se (definition)
    rng = np.random.default_rng(3)
    d = rng.normal(1, 1, 200)
    est, lo, hi = S.median_difference(d)
    assert est == np.median(d)
    assert (hi - lo) / 2 == pytest.approx(S.z_value() * S.median_se(d), rel=1e-12)
    x, y = rng.normal(0, 1, 150), rng.normal(2, 1, 170)
    est, lo, hi = S.median_difference(y, x)
    assert est == pytest.approx(np.median(y) - np.median(x))
    assert (hi - lo) / 2 == pytest.approx(S.z_value() * np.hypot(S.median_se(x), S.median_se(y)), rel=1e-12)


def test_median_se_needs_a_few_values():
    assert np.isnan(S.median_se([1.0, 2.0, 3.0]))
    assert np.isfinite(S.median_se([1.0, 2.0, 3.0, 4.0, 5.0]))


# --- Hodges-Lehmann estimate and interval ----------------------------------------------------------

# The depression-scale pairs of Hollander and Wolfe (1999), Nonparametric Statistical Methods, 2nd ed.,
# Example 3.1 (also the example of R's wilcox.test help page).
HW_X = [1.83, 0.50, 1.62, 2.48, 1.68, 1.88, 1.55, 3.06, 1.30]
HW_Y = [0.878, 0.647, 0.598, 2.05, 1.06, 1.29, 1.06, 3.14, 1.29]


def test_hodges_lehmann_matches_the_hollander_wolfe_example():
    # Estimate 0.46 and 95 % interval [0.010, 0.786]: values recalled from memory (R's wilcox.test
    # (x, y, paired = TRUE, conf.int = TRUE) on these data); the estimate is also checked against
    # the definition (median of the 45 Walsh averages) below.
    d = np.subtract(HW_X, HW_Y)
    est, lo, hi = S.hodges_lehmann(d)
    assert round(est, 3) == 0.46 and round(lo, 3) == 0.010 and round(hi, 3) == 0.786
    i, j = np.triu_indices(d.size)
    assert est == pytest.approx(np.median((d[i] + d[j]) / 2), abs=EXACT)


def test_hodges_lehmann_interval_excludes_zero_exactly_when_scipy_wilcoxon_rejects():
    # Reference: scipy.stats.wilcoxon (exact two-sided test for n <= 50 untied differences). The
    # interval inverts that test (Hollander and Wolfe 1999, section 3.3), so the two must agree.
    rng = np.random.default_rng(11)
    for _ in range(1000):
        n = int(rng.integers(3, 41))
        d = rng.normal(rng.uniform(-0.8, 0.8), 1.0, n)
        _, lo, hi = S.hodges_lehmann(d)
        assert (lo > 0 or hi < 0) == (st.wilcoxon(d).pvalue <= 0.05), d


def test_hodges_lehmann_selection_equals_listing_every_walsh_average(monkeypatch):
    # Reference: the definition, all n(n+1)/2 Walsh averages listed and sorted (common practice).
    rng = np.random.default_rng(5)
    d = np.round(rng.lognormal(0, 1, 1500) - 1.5, 1)  # many ties
    i, j = np.triu_indices(d.size)
    walsh = np.sort((d[i] + d[j]) / 2)
    monkeypatch.setattr(S, "SELECT_LIST", 500)  # force the sampled bracketing
    est, lo, hi = S.hodges_lehmann(d)
    k = int(np.floor(walsh.size / 2 - 1.959963984540054 * np.sqrt(1500 * 1501 * 3001 / 24)))
    assert (est, lo, hi) == (np.median(walsh), walsh[k - 1], walsh[walsh.size - k])


def test_unpaired_hodges_lehmann_is_the_median_of_all_differences_and_covers_the_shift():
    # Reference: the definition (median of the n1 n2 differences; Hollander and Wolfe 1999, section 4.3)
    # and coverage of the true shift near 95 % over 400 simulated samples (common practice).
    rng = np.random.default_rng(8)
    x, y = rng.normal(0, 1, 37), rng.normal(0.5, 1, 44)
    est, _, _ = S.hodges_lehmann(y, x)
    assert est == pytest.approx(np.median(np.subtract.outer(y, x)), abs=EXACT)
    hits = 0
    for _ in range(400):
        x, y = rng.exponential(1, 30), rng.exponential(1, 40) + 0.3
        _, lo, hi = S.hodges_lehmann(y, x)
        hits += lo <= 0.3 <= hi
    assert 0.92 <= hits / 400 <= 0.98


def test_signed_rank_null_equals_scipy_exact_distribution():
    # Reference: scipy.stats.wilcoxon's exact p-value, P(T+ <= t) doubled, for n = 10.
    null = S.signed_rank_null(10)
    assert null.sum() == pytest.approx(1.0) and null.size == 56
    d = np.array([1, -2, 3, -4, 5, 6, 7, -8, 9, 10], dtype=float)  # T- = 2 + 4 + 8 = 14
    assert 2 * null[:15].sum() == pytest.approx(st.wilcoxon(d).pvalue, abs=EXACT)

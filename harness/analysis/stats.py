"""Statistical building blocks for the analysis: intervals, tests and multiplicity correction.

Counts-based functions take numpy arrays (or scalars) and work element-wise, so a whole table of
cells is handled in one call; the rank tests wrap scipy and add the edge cases a results table
produces (no data, all differences zero).
"""

from __future__ import annotations

import numpy as np
from scipy import stats as _st

__all__ = ["z_value", "wilson_interval", "mcnemar_exact_p", "fisher_exact_p", "wilcoxon_p",
           "mann_whitney_p", "holm", "difference_interval", "paired_difference_interval",
           "median_se", "median_difference", "signed_rank_null", "hodges_lehmann"]


def z_value(confidence=0.95):
    """Two-sided standard normal quantile for a confidence level (1.96 for 0.95)."""
    return float(_st.norm.ppf(0.5 + confidence / 2))


def wilson_interval(successes, trials, confidence=0.95):
    """Wilson (1927) score interval for a binomial proportion; NaN where trials == 0.

    Method 3 of Newcombe (1998), Statistics in Medicine 17:857-872: the interval inverts the
    score test, so it stays inside [0, 1] and keeps its coverage near 0 and 1.
    """
    k = np.asarray(successes, dtype=float)
    n = np.asarray(trials, dtype=float)
    z2 = z_value(confidence) ** 2
    with np.errstate(invalid="ignore", divide="ignore"):
        p = k / n
        denom = 1 + z2 / n
        centre = (p + z2 / (2 * n)) / denom
        half = np.sqrt(z2 * p * (1 - p) / n + z2 * z2 / (4 * n * n)) / denom
    return np.clip(centre - half, 0, 1), np.clip(centre + half, 0, 1)


def mcnemar_exact_p(only_base, only_cand):
    """Exact McNemar test: two-sided binomial test of the discordant pairs against 1/2.

    With p = 1/2 the binomial law is symmetric, so the two-sided p-value is twice the smaller
    tail, capped at 1; no discordant pairs gives p = 1 (no evidence of a change).
    """
    b = np.asarray(only_base)
    c = np.asarray(only_cand)
    p = 2 * _st.binom.cdf(np.minimum(b, c), b + c, 0.5)
    return np.where(b + c == 0, 1.0, np.minimum(p, 1.0))


def fisher_exact_p(k1, n1, k2, n2):
    """Two-sided Fisher exact test of k1/n1 against k2/n2 (unpaired); NaN when a side is empty."""
    if n1 == 0 or n2 == 0:
        return np.nan
    return float(_st.fisher_exact([[k1, n1 - k1], [k2, n2 - k2]]).pvalue)


def wilcoxon_p(differences):
    """Wilcoxon signed-rank p-value of paired differences (scipy's defaults; zeros dropped).

    NaN differences are dropped; all-zero differences give p = 1, no differences give NaN.
    """
    d = np.asarray(differences, dtype=float)
    d = d[np.isfinite(d)]
    if d.size == 0:
        return np.nan
    if not d.any():
        return 1.0
    return float(_st.wilcoxon(d).pvalue)


def mann_whitney_p(x, y):
    """Two-sided Mann-Whitney U p-value (scipy's defaults); NaN values dropped.

    An empty side gives NaN; two samples of one and the same value give p = 1.
    """
    x = _finite(x)
    y = _finite(y)
    if x.size == 0 or y.size == 0:
        return np.nan
    if np.ptp(np.concatenate([x, y])) == 0:
        return 1.0
    return float(_st.mannwhitneyu(x, y, alternative="two-sided").pvalue)


def holm(p_values):
    """Holm (1979) step-down adjusted p-values; NaN entries are left out of the family and stay NaN."""
    p = np.asarray(p_values, dtype=float)
    out = np.full(p.shape, np.nan)
    idx = np.flatnonzero(np.isfinite(p))
    order = idx[np.argsort(p[idx], kind="stable")]
    m = order.size
    scaled = (m - np.arange(m)) * p[order]
    out[order] = np.minimum(np.maximum.accumulate(scaled), 1.0)
    return out


def _square_and_add(p1, l1, u1, p2, l2, u2, phi):
    """Interval for p2 - p1 from the two Wilson intervals (Newcombe's square-and-add), correlation phi."""
    lo = np.sqrt((p2 - l2) ** 2 - 2 * phi * (p2 - l2) * (u1 - p1) + (u1 - p1) ** 2)
    hi = np.sqrt((u2 - p2) ** 2 - 2 * phi * (u2 - p2) * (p1 - l1) + (p1 - l1) ** 2)
    return p2 - p1 - lo, p2 - p1 + hi


def difference_interval(k1, n1, k2, n2, confidence=0.95):
    """Interval for p2 - p1 of two independent proportions: Newcombe's hybrid score interval.

    Method 10 of Newcombe (1998), "Interval estimation for the difference between independent
    proportions: comparison of eleven methods", Statistics in Medicine 17:873-890.
    """
    l1, u1 = wilson_interval(k1, n1, confidence)
    l2, u2 = wilson_interval(k2, n2, confidence)
    with np.errstate(invalid="ignore", divide="ignore"):
        return _square_and_add(np.divide(k1, n1), l1, u1, np.divide(k2, n2), l2, u2, 0.0)


def paired_difference_interval(both, only_base, only_cand, neither, confidence=0.95):
    """Interval for p_cand - p_base of paired proportions: Newcombe's score-based method 10.

    Newcombe (1998), "Improved confidence intervals for the difference between binomial
    proportions based on paired data", Statistics in Medicine 17:2635-2650: the two Wilson
    intervals combined with the phi correlation of the 2x2 table, continuity-corrected as in the
    paper (phi = 0 when 0 <= ad - bc <= n/2, ad - bc - n/2 above that, and uncorrected below 0).
    """
    a, b, c, d = (np.asarray(x, dtype=float) for x in (both, only_base, only_cand, neither))
    n = a + b + c + d
    k_base, k_cand = a + b, a + c
    margins = k_base * (c + d) * k_cand * (b + d)
    cross = a * d - b * c
    corrected = np.where(cross > n / 2, cross - n / 2, np.where(cross < 0, cross, 0.0))
    with np.errstate(invalid="ignore", divide="ignore"):
        phi = np.where(margins > 0, corrected / np.sqrt(margins), 0.0)
        l1, u1 = wilson_interval(k_base, n, confidence)
        l2, u2 = wilson_interval(k_cand, n, confidence)
        return _square_and_add(k_base / n, l1, u1, k_cand / n, l2, u2, phi)


def _finite(x):
    x = np.asarray(x, dtype=float)
    return x[np.isfinite(x)]


def median_se(x, confidence=0.95):
    """Standard error of a sample median from two order statistics; NaN below about 4 values.

    McKean and Schrader (1984), "A comparison of methods for studentizing the sample median",
    Communications in Statistics - Simulation and Computation 13:751-773:
    se = (x_(n-c+1) - x_(c)) / (2 z), c = round((n + 1) / 2 - z sqrt(n / 4)). It needs no density
    estimate and no resampling, so it is cheap on cells of any size.
    """
    x = _finite(x)
    n = x.size
    z = z_value(confidence)
    c = int(round((n + 1) / 2 - z * np.sqrt(n / 4)))
    if c < 1 or n - c + 1 <= c:
        return np.nan
    lo, hi = np.partition(x, (c - 1, n - c))[[c - 1, n - c]]
    return float((hi - lo) / (2 * z))


def median_difference(cand, base=None, confidence=0.95):
    """(estimate, lo, hi) of a location change, with a normal interval from `median_se`.

    Paired (base None): `cand` holds the differences and the estimate is their median. Unpaired:
    median(cand) - median(base), whose standard error adds the two in quadrature.
    """
    z = z_value(confidence)
    cand = _finite(cand)
    if base is None:
        est = np.median(cand) if cand.size else np.nan
        se = median_se(cand, confidence)
    else:
        base = _finite(base)
        est = np.median(cand) - np.median(base) if cand.size and base.size else np.nan
        se = np.hypot(median_se(cand, confidence), median_se(base, confidence))
    return float(est), float(est - z * se), float(est + z * se)


# --- Hodges-Lehmann estimates with the intervals that invert the rank tests -------------------------

EXACT_SIGNED_RANK = 50  # up to this many differences the signed-rank critical value is exact (as scipy's test)
SELECT_LIST = 200_000  # sums listed outright once this few remain in play (`_order_stats`)
SELECT_SAMPLE = 20_000  # sums sampled per bracketing step


def signed_rank_null(n):
    """Null distribution of the Wilcoxon signed-rank statistic T+ for n untied, non-zero differences.

    Returns P(T+ = t) for t = 0 .. n(n+1)/2: the number of subsets of {1..n} with sum t, over 2^n
    (the counting recursion of Hollander and Wolfe (1999), Nonparametric Statistical Methods, 2nd
    ed., section 3.1).
    """
    counts = np.zeros(n * (n + 1) // 2 + 1)
    counts[0] = 1.0
    for k in range(1, n + 1):
        counts[k:] = counts[k:] + counts[:-k].copy()
    return counts / 2.0 ** n


def _order_stats(x, y, ks, same):
    """The ks-th smallest (1-based) of the sums x_i + y_j (all i, j), or x_i + x_j (i <= j) when `same`.

    Selection without listing all n^2 sums (the idea of Monahan (1984), "Fast computation of the
    Hodges-Lehmann location estimator", ACM TOMS 10:265-270): the sorted rows keep, per row, the
    range of columns still in play; a uniform sample of the sums in play brackets the wanted rank,
    one searchsorted per row counts the bracket exactly, and once few enough remain they are listed.
    The result is exact; the seeded sample only sets the speed.
    """
    x, y = np.sort(np.asarray(x, dtype=float)), np.sort(np.asarray(y, dtype=float))
    rng = np.random.default_rng(0)
    start = np.arange(x.size) if same else np.zeros(x.size, dtype=np.int64)
    out = []
    for k in ks:
        left, right, below = start.copy(), np.full(x.size, y.size), 0
        while True:
            width = np.maximum(right - left, 0)
            total = int(width.sum())
            if total <= SELECT_LIST:
                rows = np.repeat(np.arange(x.size), width)
                cols = np.arange(total) - np.repeat(np.cumsum(width) - width, width) + np.repeat(left, width)
                sums = x[rows] + y[cols]
                out.append(float(np.partition(sums, k - below - 1)[k - below - 1]))
                break
            draws = min(SELECT_SAMPLE, int(np.sqrt(total)) * 8)
            flat = rng.integers(0, total, draws)  # uniform over the sums in play, row by row
            ends = np.cumsum(width)
            rows = np.searchsorted(ends, flat, side="right")
            cols = left[rows] + flat - (ends[rows] - width[rows])
            sample = np.sort(x[rows] + y[cols])
            at = (k - below) / total * draws
            spread = 4 * np.sqrt(draws)
            a = sample[int(np.clip(at - spread, 0, draws - 1))]
            b = sample[int(np.clip(at + spread, 0, draws - 1))]
            pa = np.clip(np.searchsorted(y, a - x, side="left"), left, right)  # sums < a
            pb = np.clip(np.searchsorted(y, b - x, side="right"), left, right)  # sums <= b
            under, inside = below + int((pa - left).sum()), int((pb - pa).sum())
            if inside == total:  # ties kept the bracket whole: split at one pivot (<, ==, > it) instead
                a = b = sample[int(np.clip(at, 0, draws - 1))]
                pa = np.clip(np.searchsorted(y, a - x, side="left"), left, right)
                pb = np.clip(np.searchsorted(y, b - x, side="right"), left, right)
                under, inside = below + int((pa - left).sum()), int((pb - pa).sum())
                if under < k <= under + inside:
                    out.append(float(a))
                    break
            if k <= under:
                right = pa
            elif k > under + inside:
                left, below = pb, under + inside
            else:
                left, right, below = pa, pb, under
    return out


def hodges_lehmann(cand, base=None, confidence=0.95):
    """(estimate, lo, hi) of a location shift: the Hodges-Lehmann estimate and the interval that
    inverts the rank test beside it.

    Paired (base None, `cand` the differences): the median of the Walsh averages (d_i + d_j) / 2,
    i <= j, and the interval between the k-th smallest and k-th largest of them, k - 1 the lower
    critical value of the signed-rank statistic at (1 - confidence) / 2 (Hollander and Wolfe (1999),
    Nonparametric Statistical Methods, 2nd ed., section 3.3; exact up to 50 differences, normal
    approximation above). Without ties or zeros the interval excludes 0 exactly when the exact
    two-sided signed-rank test rejects at 1 - confidence.
    Unpaired: the median of all differences cand_j - base_i and the interval from the Mann-Whitney
    critical value (same book, section 4.3; normal approximation). NaN when a side is empty.
    """
    z = z_value(confidence)
    a = (1 - confidence) / 2
    cand = _finite(cand)
    if base is None:
        n = cand.size
        if n == 0:
            return np.nan, np.nan, np.nan
        m = n * (n + 1) // 2
        if n <= EXACT_SIGNED_RANK:
            k = int(np.searchsorted(np.cumsum(signed_rank_null(n)), a * (1 + 1e-12), side="right"))
        else:
            k = int(np.floor(m / 2 - z * np.sqrt(n * (n + 1) * (2 * n + 1) / 24)))
        x = y = cand
        same = True
    else:
        base = _finite(base)
        if cand.size == 0 or base.size == 0:
            return np.nan, np.nan, np.nan
        m = cand.size * base.size
        k = int(np.floor(m / 2 - z * np.sqrt(m * (cand.size + base.size + 1) / 12)))
        x, y, same = cand, -base, False
    half = 0.5 if same else 1.0  # Walsh averages are half the sums
    if k < 1:  # too few values for any interval at this confidence
        a, b = _order_stats(x, y, [(m + 1) // 2, m // 2 + 1], same)
        return float((a + b) / 2 * half), -np.inf, np.inf
    a, b, lo, hi = _order_stats(x, y, [(m + 1) // 2, m // 2 + 1, k, m + 1 - k], same)
    return float((a + b) / 2 * half), float(lo * half), float(hi * half)

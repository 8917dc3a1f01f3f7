"""What a paired success comparison can see: exact power of McNemar's test, and the drops it can flag.

A campaign compares a candidate with a base on n pairs of trials (same draws). Of the pairs, a share
p10 succeeds on the base only and p01 on the candidate only; the drop in success rate is p10 - p01.
The exact McNemar test conditions on the d = b + c discordant pairs and rejects when the smaller of
b and c is at most the critical value of Binomial(d, 1/2) at the level. Its power is the sum over d of
P(d discordant | n, p10 + p01) P(reject | d, p10 / (p10 + p01)): enumeration of the unconditional
distribution, as in Suissa and Shuster (1991), "The 2 x 2 matched-pairs trial: exact unconditional
design and analysis", Biometrics 47:361-372 (who use it to size designs); Connor (1987), "Sample size
for testing differences in proportions for the paired-sample design", Biometrics 43:207-211, gives
the normal approximation the tests compare against.

Multiple testing: `compare` Holm-adjusts across its m rows, so a lone changed cell is tested at
alpha / m (Holm's first step); the plan uses that level. A drop is "detectable" at 80 % power
(`POWER`). The plan assumes the candidate only loses trials the base won (p01 = 0, a pure drop):
the most favourable case for a given drop, so "cannot detect a drop smaller than D" is a bound that
holds whatever the flips; flips in both directions need more pairs.
"""

from __future__ import annotations

import math

import numpy as np
from scipy import stats as _st

__all__ = ["POWER", "mcnemar_power", "mcnemar_power_normal", "fewest_flaggable", "detectable_drop",
           "pairs_needed"]

POWER = 0.8  # the power at which a drop counts as detectable (common practice in design)


def _critical(d, level):
    """Largest k with 2 P(Binomial(d, 1/2) <= k) <= level, per d; -1 where no k qualifies."""
    d = np.asarray(d)
    out = np.full(d.shape, -1)
    for i, di in np.ndenumerate(d):
        k = np.arange(di + 1)
        ok = 2 * _st.binom.cdf(k, di, 0.5) <= level
        out[i] = k[ok].max() if ok.any() else -1
    return out


def mcnemar_power(n, p10, p01=0.0, level=0.05):
    """Exact power of the two-sided exact McNemar test with n pairs at `level` (enumeration over d)."""
    n = int(n)
    psi = p10 + p01
    if n <= 0 or psi <= 0:
        return 0.0
    d = np.arange(n + 1)
    k = _critical(d, level)
    q = p10 / psi
    # reject when b <= k or b >= d - k (the two tails never overlap: k < d / 2 whenever level < 1)
    low = np.where(k >= 0, _st.binom.cdf(k, d, q), 0.0)
    high = np.where(k >= 0, _st.binom.sf(d - k - 1, d, q), 0.0)
    return float(np.sum(_st.binom.pmf(d, n, psi) * (low + high)))


def mcnemar_power_normal(n, p10, p01=0.0, level=0.05):
    """Connor's (1987) normal approximation: z_beta = (sqrt(n) |delta| - z_(level/2) sqrt(psi)) /
    sqrt(psi - delta^2), delta = p10 - p01, psi = p10 + p01 (Biometrics 43:207-211, recalled from memory)."""
    psi, delta = p10 + p01, p10 - p01
    za = _st.norm.isf(level / 2)
    zb = (math.sqrt(n * psi) * abs(delta) / math.sqrt(psi) - za * math.sqrt(psi)) / math.sqrt(psi - delta ** 2)
    return float(_st.norm.cdf(zb))


def fewest_flaggable(level):
    """Fewest discordant pairs that can ever give an exact McNemar p <= level (all in one direction)."""
    return max(1, math.ceil(math.log2(2 / level)))


def detectable_drop(n, level, power=POWER):
    """Smallest pure drop (p10 = drop, p01 = 0) that n pairs flag with `power` at `level`; NaN when
    no drop can be flagged (n below `fewest_flaggable`). With p01 = 0 the test rejects exactly when
    at least `fewest_flaggable(level)` pairs are discordant, so power = P(Binomial(n, drop) >= that).
    """
    need = fewest_flaggable(level)
    n = int(n)
    if n < need:
        return math.nan
    # P(Binomial(n, p) >= need) = I_p(need, n - need + 1) (regularised incomplete beta), increasing in p
    return float(_st.beta.ppf(power, need, n - need + 1))


def pairs_needed(drop, level, power=POWER, p01=0.0, limit=100_000):
    """Fewest pairs whose exact McNemar test flags `drop` (p10 = drop + p01) with `power` at `level`.

    With p01 = 0 power rises with n and this is exact; with flips both ways the exact test's power
    saw-tooths in n, and this is the first n that reaches `power`.
    """
    if p01 == 0:
        need = fewest_flaggable(level)
        n = need
        while _st.binom.sf(need - 1, n, drop) < power:
            n += 1
            if n > limit:
                return None
        return n
    for n in range(1, limit + 1):
        if mcnemar_power(n, drop + p01, p01, level) >= power:
            return n
    return None

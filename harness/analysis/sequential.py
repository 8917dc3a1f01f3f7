"""Sequential regression gate: stop each cell as soon as its verdict is settled, error rates held.

Each pair of trials (same draw, base and candidate) gives D = success_base - success_cand, in
{-1, 0, 1}; its mean is the drop in success rate, p10 - p01. A cell carries two test martingales
built by betting on the pairs as they come (Shafer (2021), "Testing by betting", JRSS A 184:407-431;
Waudby-Smith and Ramdas (2024), "Estimating means of bounded random variables by betting", JRSS B
86:1-27), each an equal-weight mixture over a grid of constant bets (so it is itself a test
martingale, like Robbins' mixture SPRT):

- worse: against H0 "drop <= margin", wealth prod(1 + l (D - margin)), l in (0, 1 / (1 + margin)).
  Under H0 its expectation never grows, so by Ville's inequality it ever reaches m / alpha with
  probability at most alpha / m; over the m cells (Bonferroni) no cell is wrongly called worse with
  probability above alpha, whenever the run stops and however often it is looked at.
- settled: against H1 "drop >= detect_drop", wealth prod(1 + l (detect_drop - D)). Reaching 1 / beta
  settles the cell as "no drop of detect_drop": a cell that truly dropped that much is cleared with
  probability at most beta (beta = 1 - power, per cell, as the fixed design's power is per cell).

A cell stops at the first crossing, or at `max_pairs` pairs ("unsettled": neither shown). The
statements hold for any success rates, any flips, and rates that drift while the run goes, as long
as the pairs' draws are independent.
"""

from __future__ import annotations

import numpy as np

__all__ = ["BETS", "WORSE", "SETTLED", "UNSETTLED", "wealth", "settle", "SequentialGate"]

BETS = (np.arange(20) + 0.5) / 20  # bet sizes as fractions of the largest safe bet (our own grid)
WORSE, SETTLED, UNSETTLED, OPEN = "worse", "no drop of detect_drop", "unsettled", "open"


def wealth(x, null):
    """Mixture wealth after each score against H0 "mean of x <= `null`", for scores x >= -1.

    x: (..., n) array; returns (..., n). A bet l (x - null) with l < 1 / (1 + null) never loses
    everything, since x - null >= -(1 + null).
    """
    x = np.asarray(x, dtype=float)
    total = np.zeros(x.shape)
    for frac in BETS:
        lam = frac / (1 + null)
        with np.errstate(divide="ignore"):
            total += np.exp(np.cumsum(np.log1p(lam * (x - null)), axis=-1))
    return total / len(BETS)


def settle(d, *, cells, detect_drop, alpha=0.05, beta=0.2, margin=0.0, max_pairs=None):
    """(verdict, pairs used) of each row of d (..., n), scores of the pairs in the order they ran.

    `cells` is the family size m of the Bonferroni split. Rows shorter than `max_pairs` that
    settled nothing are "open" (the run may go on). Verdict strings: WORSE, SETTLED, UNSETTLED, OPEN.
    """
    d = np.asarray(d, dtype=float)
    n = d.shape[-1]
    limit = n if max_pairs is None else min(n, max_pairs)
    d = d[..., :limit]
    worse = wealth(d, margin) >= cells / alpha
    # against "drop >= detect_drop": bet that D falls short of it, i.e. on detect_drop - D
    cleared = wealth(-d, -detect_drop) >= 1 / beta
    t_w = np.where(worse.any(-1), worse.argmax(-1), limit)
    t_c = np.where(cleared.any(-1), cleared.argmax(-1), limit)
    verdict = np.where(t_w <= t_c, WORSE, SETTLED).astype(object)
    stopped = np.minimum(t_w, t_c)
    verdict[stopped >= limit] = UNSETTLED if max_pairs is not None and n >= max_pairs else OPEN
    used = np.where(stopped >= limit, limit, stopped + 1)
    return verdict, used


class SequentialGate:
    """Streams pairs into cells and says which cells are settled.

    `add(place, pair_key, side, success)` records one trial (side "base" or "candidate"; success
    None for a trial that says nothing: error, timeout or invalid, which voids its pair). Once a pair
    has both sides, its score joins the place's sequence in arrival order.
    """

    def __init__(self, *, cells, detect_drop, alpha=0.05, beta=0.2, margin=0.0, max_pairs=None):
        self.options = dict(cells=cells, detect_drop=detect_drop, alpha=alpha, beta=beta, margin=margin,
                            max_pairs=max_pairs)
        self.halves = {}  # (place, pair_key) -> {side: success}
        self.scores = {}  # place -> [D, ...]
        self.voided = {}  # place -> pairs voided by a broken trial
        self.verdicts = {}  # place -> (verdict, pairs used), kept current by `add`

    def add(self, place, pair_key, side, success):
        half = self.halves.setdefault((place, pair_key), {})
        half[side] = success
        if len(half) == 2:
            if None in half.values():
                self.voided[place] = self.voided.get(place, 0) + 1
            else:
                scores = self.scores.setdefault(place, [])
                scores.append(int(half["base"]) - int(half["candidate"]))
                if self.verdict(place)[0] not in (WORSE, SETTLED):  # a settled verdict stays
                    verdict, used = settle(np.array(scores), **self.options)
                    self.verdicts[place] = (str(verdict), int(used))
            del self.halves[(place, pair_key)]

    def verdict(self, place):
        """(verdict, pairs used) of one place so far."""
        return self.verdicts.get(place, (OPEN, 0))

    def settled(self, place):
        return self.verdict(place)[0] in (WORSE, SETTLED)

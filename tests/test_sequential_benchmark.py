"""Benchmark (pytest -m benchmark): trials to a settled verdict, sequential gate against the fixed design.

A campaign of 28 cells (the demo pair's size) designed to detect a 20-point drop in any cell at 80 %
power with Holm over 29 rows: the fixed design runs P.pairs_needed pairs in every cell; the sequential
gate (cap: twice that) stops each cell once settled. Simulated with numpy: 3 cells drop by 20 points
(the candidate loses trials the base won: the case the plan sizes for), the others have no change
but flip both ways (p10 = p01 drawn in [0, 0.1]). The fixed design's power is measured on the same
pairs (its first `fixed` of each dropped cell, exact McNemar at 0.05 / 29).
"""

from __future__ import annotations

import numpy as np
import pytest

from harness.analysis import power as P
from harness.analysis import sequential as Q
from harness.analysis import stats as S

GOAL = 2.0  # issue 13: at least 2x fewer trials


@pytest.mark.benchmark
def test_sequential_gate_needs_at_least_half_the_trials_of_the_fixed_design():
    rng = np.random.default_rng(21)
    campaigns, cells, dropped = 500, 28, 3
    fixed = P.pairs_needed(0.2, 0.05 / (cells + 1))
    cap = 2 * fixed
    flips = rng.uniform(0, 0.1, (campaigns, cells, 1))
    flips[:, :dropped] = 0.0
    p10 = flips.copy()
    p10[:, :dropped] = 0.2
    u = rng.random((campaigns, cells, cap))
    d = np.where(u < p10, 1, np.where(u < p10 + flips, -1, 0))
    verdict, used = Q.settle(d, cells=cells, detect_drop=0.2, max_pairs=cap)
    seq_total = used.sum(axis=1).mean()
    ratio = fixed * cells / seq_total
    power = np.mean(verdict[:, :dropped] == Q.WORSE)
    wrong = np.mean((verdict[:, dropped:] == Q.WORSE).any(axis=1))
    first = d[:, :dropped, :fixed]
    fixed_power = np.mean(S.mcnemar_exact_p((first == 1).sum(-1), (first == -1).sum(-1)) <= 0.05 / (cells + 1))
    print(f"\nfixed design: {fixed} pairs per cell, {fixed * cells} per campaign; sequential: "
          f"{seq_total:.0f} pairs per campaign on average ({ratio:.1f}x fewer); dropped cells: "
          f"{used[:, :dropped].mean():.1f} pairs on average, power {power:.3f} (fixed design {fixed_power:.3f}); unchanged cells: "
          f"{used[:, dropped:].mean():.1f} pairs; campaigns with an unchanged cell called worse: {wrong:.3f}")
    assert ratio >= GOAL and power >= 0.8 and wrong <= 0.05

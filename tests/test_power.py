"""Exact power of McNemar's test (harness.analysis.power) against simulation and Connor's formula."""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy import stats as st

from harness.analysis import power as P
from harness.analysis import stats as S


@pytest.mark.parametrize("n, p10, p01, level", [(30, 0.25, 0.05, 0.05), (60, 0.15, 0.05, 0.01),
                                                 (44, 0.3, 0.0, 0.05 / 29), (120, 0.1, 0.08, 0.05)])
def test_exact_power_equals_simulation_of_10000_campaigns(n, p10, p01, level):
    # Reference: simulation, 10,000 seeded replicates of n pairs (numpy multinomial) tested with the
    # exact McNemar test (itself checked against scipy.stats.binomtest in this file's sibling);
    # tolerance 4 binomial standard errors.
    rng = np.random.default_rng(2024)
    counts = rng.multinomial(n, [p10, p01, 1 - p10 - p01], size=10_000)
    simulated = np.mean(S.mcnemar_exact_p(counts[:, 0], counts[:, 1]) <= level)
    exact = P.mcnemar_power(n, p10, p01, level)
    assert abs(exact - simulated) <= 4 * math.sqrt(exact * (1 - exact) / 10_000) + 1e-9, (exact, simulated)


@pytest.mark.parametrize("n, p10, p01", [(800, 0.08, 0.04), (1500, 0.05, 0.03), (400, 0.2, 0.1)])
def test_exact_power_approaches_connors_normal_approximation_for_many_pairs(n, p10, p01):
    # Reference: Connor (1987), Biometrics 43:207-211, normal approximation (formula recalled from
    # memory); the exact test is a little conservative, so within 0.03 at these sizes.
    assert P.mcnemar_power(n, p10, p01, 0.05) == pytest.approx(P.mcnemar_power_normal(n, p10, p01, 0.05), abs=0.03)


def test_pairs_needed_agrees_with_connors_sample_size_formula():
    # Reference: Connor (1987): n = (z_(a/2) sqrt(psi) + z_b sqrt(psi - delta^2))^2 / delta^2 (recalled
    # from memory); the exact test needs a few per cent more pairs than the normal approximation.
    p10, p01 = 0.15, 0.05
    psi, delta = p10 + p01, p10 - p01
    connor = (st.norm.isf(0.025) * math.sqrt(psi) + st.norm.isf(0.2) * math.sqrt(psi - delta ** 2)) ** 2 / delta ** 2
    exact = P.pairs_needed(delta, 0.05, p01=p01)
    assert connor <= exact <= 1.12 * connor, (connor, exact)
    assert P.mcnemar_power(exact, p10, p01) >= P.POWER > P.mcnemar_power(exact - 1, p10, p01)


def test_fewest_flaggable_and_the_six_pair_cell_that_can_never_be_flagged():
    # Worked by hand: with all d discordant pairs one way the exact p is 2 / 2^d; Holm over 29 rows tests
    # a lone cell at 0.05 / 29, and 2 / 2^10 = 0.00195 > 0.00172 >= 2 / 2^11 = 0.00098.
    assert P.fewest_flaggable(0.05 / 29) == 11 and P.fewest_flaggable(0.05) == 6
    assert math.isnan(P.detectable_drop(6, 0.05 / 29))
    assert P.mcnemar_power(6, 1.0, 0.0, 0.05 / 29) == 0.0  # even 6/6 -> 0/6 cannot be flagged


@pytest.mark.parametrize("n", [11, 20, 44, 200])
def test_detectable_drop_has_exactly_the_planned_power(n):
    level = 0.05 / 29
    drop = P.detectable_drop(n, level)
    assert P.mcnemar_power(n, drop, 0.0, level) == pytest.approx(P.POWER, abs=1e-9)


def test_the_demo_pair_replanned_with_detect_drop_0_3_needs_44_trials_per_cell():
    # 28 cells + the overall row; 44 pairs give a 30-point pure drop 80 % power at 0.05 / 29, 43 do not.
    level = 0.05 / 29
    assert P.pairs_needed(0.3, level) == 44
    assert P.mcnemar_power(44, 0.3, 0.0, level) >= 0.8 > P.mcnemar_power(43, 0.3, 0.0, level)
    # petri-dish draw-in went 5/5 -> 0/5 at 6 trials; at 44 pairs and the same rates the cell is flagged
    assert P.mcnemar_power(44, 1.0, 0.0, level) == 1.0

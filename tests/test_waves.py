"""Offer shares across pooled waves: the summed Pearson statistic against scipy, and its size
and power in seeded simulations with known truth."""

from __future__ import annotations

import numpy as np
import pytest
from scipy import stats

from strativ.estimators.waves import wave_share_test


def _groups(table: dict[str, list[tuple[int, int]]]):
    """Grouped arrays from {stratum: [(not offered, offered) per wave]}."""
    s, w, z, n = [], [], [], []
    for label, waves in table.items():
        for k, (n0, n1) in enumerate(waves):
            for offer, count in ((0, n0), (1, n1)):
                s.append(label)
                w.append(f"wave_{k + 1}")
                z.append(offer)
                n.append(count)
    return np.array(s, dtype=object), np.array(w, dtype=object), np.array(z), np.array(n)


def test_statistic_equals_scipy_per_stratum_summed() -> None:
    table = {"a": [(30, 10), (20, 20), (25, 15)], "b": [(10, 40), (12, 38)],
             "c": [(5, 5)], "d": [(0, 7), (0, 9)]}
    test = wave_share_test(*_groups(table))
    # reference: scipy.stats.chi2_contingency without continuity correction, per stratum
    parts = [stats.chi2_contingency(np.array(table[k]), correction=False) for k in ("a", "b")]
    expected = sum(p.statistic for p in parts)
    assert test.statistic == pytest.approx(expected, rel=1e-12)
    assert test.df == sum(p.dof for p in parts) == 3
    # reference: scipy.stats.chi2 upper tail
    assert test.p_value == pytest.approx(stats.chi2.sf(expected, 3), rel=1e-12)
    # c has one wave and d no one unoffered: they add nothing
    assert [s for s, _, _ in test.strata] == sorted(
        ["a", "b"], key=lambda k: -stats.chi2_contingency(np.array(table[k]),
                                                          correction=False).statistic)


def test_no_stratum_spanning_two_waves_gives_none() -> None:
    test = wave_share_test(*_groups({"a": [(3, 4)], "b": [(5, 5)]}))
    assert test.statistic is None and test.p_value is None and test.df == 0


def _simulate(rng: np.random.Generator, odds: tuple[float, float], strata: int = 20,
              size: int = 60):
    s, w, z = [], [], []
    for k in range(strata):
        for wave, p in enumerate(odds):
            offered = rng.random(size) < p
            s += [k] * size
            w += [wave] * size
            z += offered.astype(int).tolist()
    return np.array(s), np.array(w), np.array(z), np.ones(len(s), dtype=int)


def test_size_and_power_in_seeded_simulations() -> None:
    rng = np.random.default_rng(20261203)
    equal = [wave_share_test(*_simulate(rng, (0.4, 0.4))).p_value for _ in range(400)]
    unequal = [wave_share_test(*_simulate(rng, (0.3, 0.5))).p_value for _ in range(100)]
    size = float(np.mean(np.array(equal) < 0.05))
    power = float(np.mean(np.array(unequal) < 0.05))
    print(f"size {size:.3f}, power {power:.3f}")
    # common practice, no source: a 5 % test rejects 2.5-8 % of 400 true nulls
    assert 0.025 <= size <= 0.08
    # common practice, no source: odds 0.3 against 0.5 in 20 strata of 2 x 60 are detected
    assert power >= 0.95

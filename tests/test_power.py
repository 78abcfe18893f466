"""Planning: the minimum detectable effect against a hand computation (Bloom 1995) and a
seeded simulation at the planned effect; the rows a target needs."""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy import stats

from strativ.estimators import build_cells, fit
from strativ.estimators.power import mde_from_itt, multiplier, plan


def test_mde_equals_the_hand_computation() -> None:
    got = plan(estimator="interacted", standard_error=0.5, rows=1000)
    # source: Bloom (1995), MDE = (z_{1-alpha/2} + z_power) x se; quantiles from the
    # standard normal table: z_0.975 = 1.959963984540054, z_0.8 = 0.8416212335729143
    assert got.mde == pytest.approx((1.959963984540054 + 0.8416212335729143) * 0.5, rel=1e-12)
    # source: Bloom (1995), the multiplier 2.8 for 80 % power at a 5 % two-sided level
    assert round(got.multiplier, 2) == 2.80
    # reference: scipy.stats.t quantiles for the t variant
    t = plan(estimator="x", standard_error=0.5, rows=1000, df=12, level=0.9, power=0.9)
    assert t.multiplier == pytest.approx(stats.t(12).ppf(0.95) + stats.t(12).ppf(0.9),
                                         rel=1e-12)
    assert multiplier(0.95, 0.8, 5) > multiplier(0.95, 0.8, 50) > multiplier(0.95, 0.8)
    assert multiplier(0.95, 0.8, 1e7) == pytest.approx(multiplier(0.95, 0.8), rel=1e-5)


def test_rows_a_target_needs() -> None:
    got = plan(estimator="weighted", standard_error=2.0, rows=2500, target_effect=-4.0)
    mde = (1.959963984540054 + 0.8416212335729143) * 2.0
    # source: se proportional to 1/sqrt(n) at a fixed design: n* = n (MDE / target)^2
    assert got.rows_needed == math.ceil(2500 * (mde / 4.0) ** 2)
    assert got.further_rows == got.rows_needed - 2500
    enough = plan(estimator="weighted", standard_error=2.0, rows=2500, target_effect=100.0)
    assert enough.further_rows == 0 and enough.rows_needed < 2500


def test_the_late_mde_is_the_itt_mde_over_the_complier_share() -> None:
    # source: Bloom (1995): se_LATE = se_ITT / complier share to first order
    itt_se, share = 0.9, 0.6
    assert mde_from_itt(itt_standard_error=itt_se, complier_share=share) == pytest.approx(
        plan(estimator="x", standard_error=itt_se / share, rows=10).mde, rel=1e-12)


def test_undefined_and_refused_inputs() -> None:
    got = plan(estimator="x", standard_error=None, rows=10)
    assert got.mde is None and got.reason == "the estimate has no standard error"
    for bad in ({"level": 1.0}, {"power": 0.0}, {"rows": 0}, {"target_effect": 0.0}):
        args = {"estimator": "x", "standard_error": 1.0, "rows": 10, **bad}
        with pytest.raises(ValueError):
            plan(**args)


def _draw(rng: np.random.Generator, effect: float, n: int):
    """A lottery in 10 strata with offer odds 0.2 to 0.8, 60 % compliers, 10 % always-takers."""
    stratum = np.repeat(np.arange(10), n // 10)
    odds = np.linspace(0.2, 0.8, 10)[stratum]
    z = np.zeros(stratum.size, dtype=int)
    for s in range(10):  # block assignment: a fixed number offered in each stratum
        here = np.flatnonzero(stratum == s)
        z[rng.choice(here, size=round(odds[here[0]] * here.size), replace=False)] = 1
    kind = rng.random(stratum.size)
    d = ((kind < 0.1) | ((kind < 0.7) & (z == 1))).astype(int)
    y = 0.5 * stratum + effect * d + 2.0 * rng.standard_normal(stratum.size)
    return y, d, z, stratum


def test_power_at_the_planned_effect_is_80_percent() -> None:
    n = 2000
    pilot = np.random.default_rng(1)
    ses = [fit(build_cells(*_draw(pilot, 0.0, n)), estimator="interacted").std_error
           for _ in range(40)]
    planned = plan(estimator="interacted", standard_error=float(np.mean(ses)), rows=n)
    rng = np.random.default_rng(20261203)
    rejected = 0
    replications = 400
    for _ in range(replications):
        est = fit(build_cells(*_draw(rng, planned.mde, n)), estimator="interacted")
        low, high = est.interval
        rejected += not low <= 0.0 <= high
    rate = rejected / replications
    print(f"MDE {planned.mde:.3f}; rejected {rate:.3f} of {replications}")
    # source: Bloom (1995): at a true effect equal to the MDE at 80 % power, a 5 % test
    # rejects about 80 % of the time; 75-85 % allows Monte Carlo error (se 2 points)
    assert 0.75 <= rate <= 0.85

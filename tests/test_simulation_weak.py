"""Weak first stage with strong endogeneity: the Fieller set stays honest, the normal
interval does not (METHODS.md §4).

Seeded simulation: seed 20240919, 4,000 replications. Design (`simulate.weak_lottery`):
4 strata of 900 units (3,600 units) with offer probabilities 0.3 to 0.6, block
assignment, fixed sizes (analysed with ``assignment="block"``, ``sampling="fixed"``);
always-takers 30 %, compliers 4 %, never-takers 66 %, so the first stage is 0.04 and the
median first-stage F is about 6. Always-takers' untreated outcomes sit 4 noise standard
deviations above the compliers', never-takers' 4 below: take-up is strongly tied to the
outcome's error. Every complier's mean effect is 1 in every stratum, so the fixed-effects
target and the LATE are both 1.

With 4,000 replications a coverage share near 95 % has a Monte Carlo standard error of
about 0.35 points (0.45 near 91 %); in trial runs with other seeds the normal interval
covered 90.0-91.7 % and the Fieller set 94.8-96.1 %.
"""

from __future__ import annotations

from functools import cache

import numpy as np
import pytest
from simulate import draw, fixed_effects_target, late, weak_lottery

from strativ.estimators import build_cells, fit_all

SEED = 20240919
REPLICATIONS = 4000
ESTIMATORS = ("fixed_effects", "interacted")
POPULATION = weak_lottery(
    size=np.full(4, 900), offer_probability=np.array([0.3, 0.4, 0.5, 0.6]),
    complier=0.04, separation=4.0,
)
TRUTH = 1.0


@cache
def _coverage() -> dict[str, dict[str, float]]:
    rng = np.random.default_rng(SEED)
    draws = draw(POPULATION, rng, replications=REPLICATIONS, assignment="block",
                 sampling="fixed")
    normal = dict.fromkeys(ESTIMATORS, 0)
    fieller = dict.fromkeys(ESTIMATORS, 0)
    f_stats: dict[str, list[float]] = {name: [] for name in ESTIMATORS}
    for outcome, take_up, offer, stratum in draws.rows():
        comparison = fit_all(build_cells(outcome, take_up, offer, stratum),
                             estimators=ESTIMATORS, assignment="block", sampling="fixed",
                             constant_effect_draws=0)
        for est in comparison.estimates:
            low, high = est.interval
            normal[est.estimator] += low <= TRUTH <= high
            fieller[est.estimator] += est.confidence_set.contains(TRUTH)
            f_stats[est.estimator].append(est.first_stage_f)
    return {
        name: {
            "normal": normal[name] / REPLICATIONS,
            "fieller": fieller[name] / REPLICATIONS,
            "median_f": float(np.median(f_stats[name])),
        }
        for name in ESTIMATORS
    }


def test_design_has_one_true_effect_and_a_weak_first_stage():
    assert late(POPULATION) == pytest.approx(TRUTH)
    assert fixed_effects_target(POPULATION) == pytest.approx(TRUTH)
    # common practice, no source: a weak design, complier share 3-5 %
    assert 0.03 <= float(POPULATION.complier.min()) <= 0.05
    for name, result in _coverage().items():
        if name == "interacted":
            # source: METHODS.md §4, its F is the joint F of one instrument per stratum,
            # which spreads the same first stage over K instruments: weak by the rule of thumb
            assert result["median_f"] < 10.0, (name, result)
            continue
        # common practice, no source for the 5-12 band around the rule of thumb that F below
        # 10 is weak (Staiger & Stock 1997)
        assert 5.0 <= result["median_f"] <= 12.0, (name, result)


@pytest.mark.parametrize("estimator", ESTIMATORS)
def test_fieller_set_covers_93_to_97_percent_while_the_normal_interval_under_covers(estimator):
    result = _coverage()[estimator]
    # source: METHODS.md §4.7 (the Fieller / Anderson-Rubin set is exact under a weak
    # first stage; Staiger & Stock 1997);
    # common practice, no source for the 93-97 % band (about +/- 4 Monte Carlo se)
    assert 0.93 <= result["fieller"] <= 0.97, result
    # source: METHODS.md §4.7 (the normal interval is not honest when the first stage is
    # weak and take-up is endogenous);
    # common practice, no source for the bound (the band's lower edge)
    assert result["normal"] < 0.93, result

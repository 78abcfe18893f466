"""Offers by whole class: the `cluster` flavour covers, the unclustered analysis does not
(METHODS.md §4, cluster).

Seeded simulation: seed 20261207 (design d, sampling m use ``default_rng([SEED, d, m])``;
the fixed class sizes of design d come from ``default_rng([SEED, d])``), 500 replications
in each of the four configurations {one offered class per stratum, two classes per
(stratum, offer) cell} x {fixed, random} class sizes, analysed with the matching
``sampling=``. Designs (`simulate_designs.class_lottery`): 40 strata; one offered class
among 3-5 per stratum, or 2 offered among 4; classes of 8-20 pupils; a class random effect
of sd 0.6 on the untreated outcome (noise sd 1, intra-class correlation about 0.26);
complier effects 1 to 3 across strata, complier shares 0.85 to 0.55, always-takers 5 %,
endogenous take-up. The truth is the population LATE from the parameters.

With 500 replications a coverage share near 95 % has a Monte Carlo standard error of about
1 point. Robust (cluster-robust with clustered cells) coverage is measured here and
reported in the project notes; it has no threshold of its own.
"""

from __future__ import annotations

from functools import cache

import numpy as np
import pytest
from simulate import coverage_se
from simulate_designs import Tally, class_lottery, cluster_study, draw_classes

SEED = 20261207
REPLICATIONS = 500
DESIGNS = {
    "one_offered_class": (np.resize([3, 4, 5], 40), np.ones(40, dtype=np.int64)),
    "two_classes_per_cell": (np.full(40, 4), np.full(40, 2)),
}
SAMPLINGS = ("fixed", "random")
CONFIGURATIONS = [(d, m) for d in DESIGNS for m in SAMPLINGS]


def _design(name: str):
    classes, offered = DESIGNS[name]
    index = list(DESIGNS).index(name)
    return class_lottery(classes, offered, np.random.default_rng([SEED, index]))


@cache
def _study(name: str, sampling: str) -> Tally:
    rng = np.random.default_rng([SEED, list(DESIGNS).index(name), SAMPLINGS.index(sampling)])
    return cluster_study(_design(name), rng, replications=REPLICATIONS, sampling=sampling)


@pytest.mark.parametrize("name", list(DESIGNS))
def test_class_design_offers_whole_classes_the_stated_number_per_stratum(name):
    design = _design(name)
    draws = draw_classes(design, np.random.default_rng(SEED), replications=3, sampling="random")
    for _, _, offer, stratum, cluster in draws.rows():
        classes_offered = np.zeros(design.n_strata, dtype=np.int64)
        for c in np.unique(cluster):
            inside = cluster == c
            # by construction: a class lies in one stratum and is offered as a whole
            assert np.unique(stratum[inside]).size == 1
            assert np.unique(offer[inside]).size == 1
            classes_offered[stratum[inside][0]] += offer[inside][0]
        assert np.array_equal(classes_offered, design.offered)


@pytest.mark.parametrize(("name", "sampling"), CONFIGURATIONS)
def test_cluster_intervals_cover_the_late_93_to_97_percent(name, sampling):
    study = _study(name, sampling)
    # source: METHODS.md §4.4 (per-cell G/(G-1) cluster form, design-consistent); common
    # practice, no source for the 93-97 % band (about +/- 2 Monte Carlo se at 500).
    # With one offered class per stratum the offered arm has no cell of two clusters, so
    # each stratum counts as one draw, which METHODS.md §4 calls conservative under effect
    # heterogeneity (effects 1-3 here): 96.4 % (fixed) and 97.2 % (random) at this seed,
    # 97.2-97.4 % over 3,000 replications; the upper edge is 98 % for that design alone
    upper = 0.98 if name == "one_offered_class" else 0.97
    assert 0.93 <= study.share("cluster") <= upper, study.counts


@pytest.mark.parametrize(("name", "sampling"), CONFIGURATIONS)
def test_the_same_data_analysed_without_clusters_under_covers(name, sampling):
    study = _study(name, sampling)
    # source: METHODS.md §4.4 (unit-level variances ignore the within-class correlation,
    # Moulton's problem); common practice, no source for the bound 0.90 and the distance of
    # more than four Monte Carlo se below the clustered interval
    assert study.share("unclustered") < 0.90, study.counts
    assert study.share("cluster") - study.share("unclustered") > 4 * coverage_se(
        0.95, REPLICATIONS)


@pytest.mark.parametrize(("name", "sampling"), CONFIGURATIONS)
def test_fit_all_reports_the_one_cluster_cells_and_matches_fit(name, sampling):
    study = _study(name, sampling)
    # by construction: one offered class per stratum makes every offered cell a
    # one-cluster cell (40); two classes per cell leave none
    expected = 40 if name == "one_offered_class" else 0
    assert study.seen["single_cluster_cells"] == {expected}
    # common practice, no source: fit and fit_all read one engine, so they agree to rounding
    assert max(study.seen["fit_all_minus_fit"]) < 1e-12
    # source: METHODS.md §3 (weighted and interacted share one point estimate without
    # design probabilities); common practice, no source for the rounding tolerance
    assert max(study.seen["weighted_minus_interacted"]) < 1e-12

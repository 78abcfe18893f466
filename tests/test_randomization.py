"""Randomization inference: offers re-drawn within strata (METHODS.md §5).

References: full enumeration of every within-stratum assignment, written independently in
the test, on small designs (units and whole clusters); the uniform distribution of
p-values under a true sharp null (Kolmogorov-Smirnov, scipy.stats.kstest) over 300 seeded
replications; the test inversion's defining property at the interval's ends.
"""

from __future__ import annotations

import itertools

import numpy as np
import pandas as pd
import pytest
from scipy import stats

from strativ.estimators.errors import InputError
from strativ.estimators.randomization import randomization_draws, randomization_test

SEED = 20261209


def _statistic(y, d, z, s, theta):
    frame = pd.DataFrame({"u": y - theta * d, "z": z, "s": s})
    total = 0.0
    for _, part in frame.groupby("s"):
        if part.z.nunique() < 2:
            continue
        total += len(part) / len(frame) * (part[part.z == 1].u.mean() - part[part.z == 0].u.mean())
    return total


def _enumerated_p(y, d, z, s, theta, cluster=None):
    units = np.arange(len(y)) if cluster is None else np.asarray(cluster)
    labels = sorted(set(units))
    offer_of = {u: z[np.flatnonzero(units == u)[0]] for u in labels}
    stratum_of = {u: s[np.flatnonzero(units == u)[0]] for u in labels}
    per_stratum = []
    for stratum in sorted(set(s)):
        members = [u for u in labels if stratum_of[u] == stratum]
        k = sum(offer_of[u] for u in members)
        per_stratum.append([set(c) for c in itertools.combinations(members, k)])
    observed = abs(_statistic(y, d, z, s, theta))
    reach = total = 0
    for picks in itertools.product(*per_stratum):
        chosen = set().union(*picks)
        z_new = np.array([1 if u in chosen else 0 for u in units])
        total += 1
        reach += abs(_statistic(y, d, z_new, s, theta)) >= observed - 1e-12
    return reach / total


def _small(rng):
    s = np.array([0] * 6 + [1] * 5)
    z = np.array([1, 1, 1, 0, 0, 0, 1, 1, 0, 0, 0])
    d = np.where(rng.random(11) < 0.7, z, 1 - z)
    y = rng.normal(0, 1, 11) + 1.5 * d
    return y, d, z, s


@pytest.mark.parametrize("theta", [0.0, 1.5, -2.0])
def test_small_designs_are_enumerated_and_equal_the_brute_force(theta) -> None:
    y, d, z, s = _small(np.random.default_rng(SEED))
    draws = randomization_draws(y, d, z, s, draws=2000)
    # by construction: C(6, 3) * C(5, 2) = 200 assignments, fewer than 2,000 draws
    assert draws.exact and draws.a.size == 200
    got = randomization_test(draws, null_effect=theta).p_value
    # reference: every within-stratum assignment enumerated by the test's own code
    assert got == pytest.approx(_enumerated_p(y, d, z, s, theta), abs=1e-12)


def test_whole_clusters_are_redrawn() -> None:
    rng = np.random.default_rng(SEED + 1)
    cluster = np.repeat(np.arange(9), 3)
    s = np.where(cluster < 5, 0, 1)
    offered_clusters = {0, 1, 5, 6}
    z = np.array([1 if c in offered_clusters else 0 for c in cluster])
    d = np.where(rng.random(27) < 0.8, z, 1 - z)
    y = rng.normal(0, 1, 27) + d + 0.5 * cluster
    draws = randomization_draws(y, d, z, s, cluster=cluster, draws=2000)
    # by construction: C(5, 2) * C(4, 2) = 60 cluster assignments
    assert draws.exact and draws.a.size == 60
    # reference: every within-stratum assignment of whole clusters, enumerated
    assert randomization_test(draws).p_value == pytest.approx(
        _enumerated_p(y, d, z, s, 0.0, cluster=cluster), abs=1e-12)


def test_p_values_are_uniform_under_a_true_sharp_null() -> None:
    rng = np.random.default_rng(SEED + 2)
    p = []
    for _ in range(300):
        s = np.repeat(np.arange(4), [30, 50, 40, 60])
        z = np.zeros(s.size, dtype=int)
        for k, share in enumerate((0.3, 0.5, 0.6, 0.25)):
            members = np.flatnonzero(s == k)
            z[rng.choice(members, int(round(share * members.size)), replace=False)] = 1
        complier = rng.random(s.size) < 0.6
        d = np.where(complier, z, (rng.random(s.size) < 0.2).astype(int))
        y = rng.normal(0, 1, s.size) + 2.0 * d + s  # every unit's effect is 2
        draws = randomization_draws(y, d, z, s, draws=199, seed=int(rng.integers(1 << 30)))
        p.append(randomization_test(draws, null_effect=2.0).p_value)
    # reference: scipy.stats.kstest against the uniform distribution
    assert stats.kstest(p, "uniform").pvalue > 0.01


def test_the_interval_ends_are_where_the_p_value_crosses_the_level() -> None:
    rng = np.random.default_rng(SEED + 3)
    s = np.repeat(np.arange(3), 200)
    z = np.tile(np.r_[np.ones(80, int), np.zeros(120, int)], 3)
    d = np.where(rng.random(600) < 0.7, z, 0)
    y = rng.normal(0, 1, 600) + 1.0 * d
    draws = randomization_draws(y, d, z, s, draws=999, seed=7)
    result = randomization_test(draws, level=0.9)
    low, high = result.interval
    assert result.interval_reason is None and not draws.exact and result.seed == 7
    # by construction of test inversion: just inside the ends the effect is not rejected at
    # 10 %, just outside it is
    width = high - low
    for inside, outside in ((low + 1e-6 * width, low - 1e-3 * width),
                            (high - 1e-6 * width, high + 1e-3 * width)):
        assert randomization_test(draws, null_effect=inside).p_value > 0.1
        assert randomization_test(draws, null_effect=outside).p_value <= 0.1
    # by construction: the true effect is 1
    assert low < 1.0 < high


def test_the_draws_are_reproducible_from_the_seed() -> None:
    rng = np.random.default_rng(SEED + 4)
    s = np.repeat(np.arange(2), 100)
    z = np.tile(np.r_[np.ones(50, int), np.zeros(50, int)], 2)
    y, d = rng.normal(0, 1, 200), z.copy()
    first = randomization_draws(y, d, z, s, draws=500, seed=11)
    again = randomization_draws(y, d, z, s, draws=500, seed=11)
    assert np.array_equal(first.a, again.a) and np.array_equal(first.b, again.b)


def test_a_cluster_spanning_arms_is_refused() -> None:
    with pytest.raises(InputError, match="one stratum and one offer arm"):
        randomization_draws([1.0, 2.0, 3.0, 4.0], [1, 0, 1, 0], [1, 0, 1, 0], [0, 0, 0, 0],
                            cluster=[0, 0, 1, 1])


def _two_outcomes(rng):
    y, d, z, s = _small(rng)
    second = 0.4 * y + rng.normal(0, 1, y.size)
    return np.column_stack([y, second]), d, z, s


def test_westfall_young_equals_its_definition_on_an_enumerated_design() -> None:
    from strativ.estimators.randomization import randomization_family, westfall_young

    Y, d, z, s = _two_outcomes(np.random.default_rng(SEED + 5))
    family = randomization_family(Y, d, z, s, draws=2000)
    assert all(f.exact for f in family)
    got = westfall_young(family)
    # reference: Westfall & Young (1993) step-down minP written out over every assignment
    # enumerated by the test's own code
    per_stratum = []
    for stratum in sorted(set(s)):
        members = [i for i in range(len(s)) if s[i] == stratum]
        per_stratum.append([set(c) for c in itertools.combinations(
            members, int(sum(z[i] for i in members)))])
    stats_all = []
    for picks in itertools.product(*per_stratum):
        chosen = set().union(*picks)
        z_new = np.array([1 if i in chosen else 0 for i in range(len(s))])
        stats_all.append([abs(_statistic(Y[:, k], d, z_new, s, 0.0)) for k in range(2)])
    T = np.array(stats_all)  # (assignments, outcomes)
    observed = np.array([abs(_statistic(Y[:, k], d, z, s, 0.0)) for k in range(2)])
    raw = [(T[:, k] >= observed[k] - 1e-12).mean() for k in range(2)]
    star = np.array([[(T[:, k] >= T[b, k] - 1e-12).mean() for k in range(2)]
                     for b in range(len(T))])
    order = np.argsort(raw, kind="stable")
    want, running = [0.0, 0.0], 0.0
    for i, k in enumerate(order):
        running = max(running, (star[:, order[i:]].min(axis=1) <= raw[k] + 1e-12).mean())
        want[k] = running
    assert got == pytest.approx(tuple(want), abs=1e-12)
    assert all(g >= r - 1e-12 for g, r in zip(got, raw, strict=True))


def test_identical_outcomes_are_not_penalised() -> None:
    from strativ.estimators.randomization import randomization_family, westfall_young

    rng = np.random.default_rng(SEED + 6)
    s = np.repeat(np.arange(3), 60)
    z = np.tile(np.r_[np.ones(25, int), np.zeros(35, int)], 3)
    d = np.where(rng.random(180) < 0.7, z, 0)
    y = rng.normal(0, 1, 180) + 0.3 * d
    family = randomization_family(np.column_stack([y, y]), d, z, s, draws=499, seed=3)
    raw = randomization_test(family[0]).p_value
    # by construction: two copies of one outcome carry no extra chance of a false finding
    assert westfall_young(family) == pytest.approx((raw, raw), abs=1e-12)

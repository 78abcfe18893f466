"""Seeded generators of the designs beyond `simulate.heterogeneous_lottery`: offers by whole
class, matched pairs, small strata whose design probabilities are rounded, one-sided
non-compliance for the constant-effect test, and widely spread offer shares for the gap.

Everything is vectorised over replications and units, as in `simulate.draw`; truths come
from the parameters, never from a sample.

Offers by whole class (`ClassLottery`, `draw_classes`): each stratum holds several classes;
in every replication a fixed number of its classes, picked at random, is offered (block
assignment of clusters). A class random effect shifts every pupil's untreated outcome, so
outcomes are correlated within a class. With ``sampling="fixed"`` the class sizes are those
of the design in every replication; with ``sampling="random"`` each class size is drawn
uniformly from ``size_range`` in every replication, so stratum sizes are random with a
variance close to their mean (as for units sampled from a population).

The ``*_study`` functions run one design through `build_cells` and `fit` / `fit_all` per
replication and return a `Tally` of counts (intervals that cover, rejections, exceptions)
for the tests in tests/test_simulation_*.py to check.
"""

from __future__ import annotations

from collections import defaultdict
from collections.abc import Iterator
from dataclasses import dataclass, replace

import numpy as np
from simulate import (
    ALWAYS,
    COMPLIER,
    NEVER,
    Population,
    draw,
    fixed_effects_target,
    heterogeneous_lottery,
    late,
)

from strativ.estimators import build_cells, fit, fit_all
from strativ.estimators.errors import EstimatorError

__all__ = [
    "PAIR_FLAVOURS",
    "ClassLottery",
    "ClusteredDraws",
    "Tally",
    "class_late",
    "class_lottery",
    "cluster_study",
    "constant_effect_study",
    "covers",
    "distant_level_lottery",
    "draw_classes",
    "gap_study",
    "independent_offer_study",
    "matched_pairs",
    "one_sided_lottery",
    "pairs_study",
    "rounded_lottery",
    "rounded_share_study",
    "spread_share_lottery",
]


@dataclass(frozen=True, eq=False)
class ClassLottery:
    """Offers by whole class within strata; per-stratum arrays have one entry per stratum."""

    classes: np.ndarray
    """Classes per stratum."""
    offered: np.ndarray
    """Offered classes per stratum (block assignment of whole classes)."""
    class_size: np.ndarray
    """Size of every class under fixed sampling, classes laid out stratum by stratum."""
    size_range: tuple[int, int]
    """Smallest and largest class size drawn under random sampling (uniform, inclusive)."""
    always_taker: np.ndarray
    """Share of always-takers."""
    never_taker: np.ndarray
    """Share of never-takers; compliers are the rest."""
    effect: np.ndarray
    """Compliers' mean effect ``beta_s``."""
    level: np.ndarray
    """Untreated outcome mean by compliance type (always, never, complier) and stratum, (3, K)."""
    class_sd: float = 0.6
    """Standard deviation of the class random effect on the untreated outcome."""
    noise_sd: float = 1.0
    """Standard deviation of a pupil's untreated outcome around type mean plus class effect."""
    effect_sd: float = 0.5
    """Standard deviation of pupils' effects around the stratum mean."""

    @property
    def n_strata(self) -> int:
        """Number of strata K."""
        return int(self.classes.shape[0])

    @property
    def class_stratum(self) -> np.ndarray:
        """Stratum code of every class."""
        return np.repeat(np.arange(self.n_strata), self.classes)

    @property
    def complier(self) -> np.ndarray:
        """Complier share ``pi_s``."""
        return 1.0 - self.always_taker - self.never_taker


def class_lottery(
    classes: np.ndarray, offered: np.ndarray, rng: np.random.Generator,
    *, size_range: tuple[int, int] = (8, 20), class_sd: float = 0.6,
) -> ClassLottery:
    """Classes of 8-20 pupils, heterogeneous complier effects and endogenous take-up.

    The fixed-sampling class sizes are drawn once from ``rng`` (part of the design).
    Stratum s of K has complier effect ``1 + 2 s / (K - 1)`` (1 to 3), complier share
    falling from 0.85 to 0.55, always-takers 5 %; always-takers' untreated outcomes sit 1
    above the compliers', never-takers' 1 below, and stratum levels rise with s.
    """
    classes = np.asarray(classes, dtype=np.int64)
    k = classes.shape[0]
    x = np.linspace(0.0, 1.0, k)
    low, high = size_range
    return ClassLottery(
        classes=classes,
        offered=np.asarray(offered, dtype=np.int64),
        class_size=rng.integers(low, high + 1, size=int(classes.sum())),
        size_range=size_range,
        always_taker=np.full(k, 0.05),
        never_taker=0.1 + 0.3 * x,
        effect=1.0 + 2.0 * x,
        level=np.vstack([2.0 * x + 1.0, 2.0 * x - 1.0, 2.0 * x]),
        class_sd=class_sd,
    )


def class_late(design: ClassLottery, sampling: str) -> float:
    """Population LATE ``sum_s q_s pi_s beta_s / sum_s q_s pi_s`` with ``q_s`` the expected
    stratum size: the design's class sizes (fixed) or classes times the mean size (random)."""
    if sampling == "fixed":
        size = np.bincount(design.class_stratum, weights=design.class_size,
                           minlength=design.n_strata)
    else:
        size = design.classes * (design.size_range[0] + design.size_range[1]) / 2.0
    weight = size * design.complier
    return float(weight @ design.effect / weight.sum())


@dataclass(frozen=True, eq=False)
class ClusteredDraws:
    """Replications of a clustered design, stored flat; ``bounds`` splits them."""

    outcome: np.ndarray
    take_up: np.ndarray
    offer: np.ndarray
    stratum: np.ndarray
    cluster: np.ndarray
    bounds: np.ndarray
    """Start of each replication in the flat arrays, plus the total length."""

    def __len__(self) -> int:
        return int(self.bounds.shape[0] - 1)

    def rows(self) -> Iterator[tuple[np.ndarray, ...]]:
        """Yield ``(outcome, take_up, offer, stratum, cluster)`` of each replication."""
        for r in range(len(self)):
            part = slice(int(self.bounds[r]), int(self.bounds[r + 1]))
            yield (self.outcome[part], self.take_up[part], self.offer[part],
                   self.stratum[part], self.cluster[part])


def draw_classes(
    design: ClassLottery, rng: np.random.Generator, *, replications: int, sampling: str
) -> ClusteredDraws:
    """Draw ``replications`` samples of the class design.

    Parameters
    ----------
    design : ClassLottery
        The design.
    rng : numpy.random.Generator
        Source of randomness (seeded by the caller).
    replications : int
        Number of samples.
    sampling : {"fixed", "random"}
        Fixed: the design's class sizes. Random: every class size drawn anew, uniform on
        ``design.size_range``.

    Returns
    -------
    ClusteredDraws
        Outcome, take-up, offer, stratum code and class id (unique within a replication).
    """
    class_stratum = design.class_stratum
    n_classes = class_stratum.shape[0]
    if sampling == "fixed":
        sizes = np.broadcast_to(design.class_size, (replications, n_classes))
    elif sampling == "random":
        low, high = design.size_range
        sizes = rng.integers(low, high + 1, size=(replications, n_classes))
    else:
        raise ValueError(f"unknown sampling {sampling!r}")
    # offer the classes whose random key ranks below the stratum's offered count
    order = np.argsort(class_stratum[None, :] + rng.random((replications, n_classes)), axis=1)
    rank = np.empty_like(order)
    np.put_along_axis(rank, order, np.arange(n_classes)[None, :], axis=1)
    first = np.cumsum(design.classes) - design.classes
    offered = (rank - first[class_stratum]) < design.offered[class_stratum]
    class_effect = design.class_sd * rng.standard_normal((replications, n_classes))
    unit = np.repeat(np.arange(replications * n_classes), sizes.ravel())
    cluster = unit % n_classes
    stratum = class_stratum[cluster]
    offer = offered.ravel()[unit].astype(np.int8)
    m = unit.shape[0]
    u = rng.random(m)
    kind = np.where(
        u < design.always_taker[stratum],
        ALWAYS,
        np.where(u < (design.always_taker + design.never_taker)[stratum], NEVER, COMPLIER),
    )
    take_up = ((kind == ALWAYS) | ((kind == COMPLIER) & (offer == 1))).astype(np.int8)
    untreated = (design.level[kind, stratum] + class_effect.ravel()[unit]
                 + design.noise_sd * rng.standard_normal(m))
    gain = design.effect[stratum] + design.effect_sd * rng.standard_normal(m)
    bounds = np.concatenate([[0], np.cumsum(sizes.sum(axis=1))])
    return ClusteredDraws(outcome=untreated + take_up * gain, take_up=take_up, offer=offer,
                          stratum=stratum, cluster=cluster, bounds=bounds)


def matched_pairs(n_pairs: int) -> Population:
    """Strata of two units, one offered: complier share 0.8, always- and never-takers 10 %.

    Complier effects vary mildly across pairs (1.5 to 2.5) so that treating each pair as one
    draw stays close to exact; always-takers' untreated outcomes sit 1 above the
    compliers', never-takers' 1 below, and pair levels spread from 0 to 3.
    """
    x = np.linspace(0.0, 1.0, n_pairs)
    return Population(
        size=np.full(n_pairs, 2),
        offer_probability=np.full(n_pairs, 0.5),
        always_taker=np.full(n_pairs, 0.1),
        never_taker=np.full(n_pairs, 0.1),
        effect=1.5 + x,
        level=np.vstack([3.0 * x + 1.0, 3.0 * x - 1.0, 3.0 * x]),
    )


def rounded_lottery(n_strata: int) -> Population:
    """Strata of 7 to 13 units whose design probability times size is rarely a whole number.

    Sizes cycle through 7..13 and design probabilities through 0.15, 0.25, ..., 0.85, so
    block assignment offers ``round(p_s n_s)`` units and the realized share misses ``p_s``
    by up to ``1 / (2 n_s)``. Complier effects ``10 (p_s - 0.4)`` rise with ``p_s``, and so
    do stratum levels, steeply (``20 p_s``): weights that use ``p_s`` instead of the realized
    share leave level differences between strata in the estimate. Complier share 0.8,
    always-takers 5 %.
    """
    size = 7 + np.arange(n_strata) % 7
    p = 0.15 + 0.1 * (np.arange(n_strata) % 8)
    return Population(
        size=size,
        offer_probability=p,
        always_taker=np.full(n_strata, 0.05),
        never_taker=np.full(n_strata, 0.15),
        effect=10.0 * (p - 0.4),
        level=np.vstack([20.0 * p + 1.0, 20.0 * p - 1.0, 20.0 * p]),
    )


def distant_level_lottery(size: np.ndarray, offer_probability: np.ndarray) -> Population:
    """`simulate.heterogeneous_lottery` with stratum outcome levels 0 to 20 apart (sites whose
    outcomes differ strongly), so that offer counts that move the design weights move the
    weighted estimate."""
    pop = heterogeneous_lottery(size, offer_probability)
    spread = 20.0 * np.linspace(0.0, 1.0, pop.n_strata)
    return replace(pop, level=pop.level + spread[None, :])


def one_sided_lottery(cell_size: int, effect: np.ndarray) -> Population:
    """One-sided non-compliance: nobody takes up without an offer.

    One stratum per entry of ``effect``, each of ``2 * cell_size`` units with half offered;
    no always-takers, never-takers 20 % to 40 % across strata; never-takers' untreated
    outcomes sit 1 below the compliers' (take-up is endogenous) and stratum levels spread
    from 0 to 2.
    """
    effect = np.asarray(effect, dtype=float)
    k = effect.shape[0]
    x = np.linspace(0.0, 1.0, k)
    return Population(
        size=np.full(k, 2 * cell_size),
        offer_probability=np.full(k, 0.5),
        always_taker=np.zeros(k),
        never_taker=0.2 + 0.2 * x,
        effect=effect,
        level=np.vstack([2.0 * x, 2.0 * x - 1.0, 2.0 * x]),
    )


def spread_share_lottery(size: int, offer_probability: np.ndarray) -> Population:
    """Strata of ``size`` units with offer shares spread widely and effects that move with them.

    Complier effects ``10 (p_s - 0.3)``, complier share 0.75 (always-takers 5 %), so the
    fixed-effects target (weights ``p (1 - p)``) lies above the LATE; unit effects spread
    with sd 2 around the stratum mean, so small offered cells are noisy; stratum levels rise
    with ``p_s``.
    """
    p = np.asarray(offer_probability, dtype=float)
    k = p.shape[0]
    return Population(
        size=np.full(k, size),
        offer_probability=p,
        always_taker=np.full(k, 0.05),
        never_taker=np.full(k, 0.2),
        effect=10.0 * (p - 0.3),
        level=np.vstack([3.0 * p + 1.0, 3.0 * p - 1.0, 3.0 * p]),
        effect_sd=2.0,
    )


@dataclass(frozen=True, eq=False)
class Tally:
    """Counts over the replications of one study."""

    replications: int
    counts: dict[str, int]
    """Replications with a property (an interval that covers, a rejection, ...), by name."""
    seen: dict[str, set]
    """Distinct values met over the replications, by name (counts, labels, reasons)."""

    def share(self, name: str) -> float:
        """Share of replications counted under ``name``."""
        return self.counts.get(name, 0) / self.replications


def covers(interval: tuple[float, float] | None, truth: float) -> bool:
    """Whether a (possibly missing) interval contains ``truth``."""
    return interval is not None and interval[0] <= truth <= interval[1]


def _tally() -> tuple[dict[str, int], dict[str, set]]:
    return defaultdict(int), defaultdict(set)


def cluster_study(
    design: ClassLottery, rng: np.random.Generator, *, replications: int, sampling: str
) -> Tally:
    """Coverage of the LATE in the class design, clustered and not.

    Per replication, on cells built with the class ids: the interacted estimator under
    ``variance="cluster"`` and the weighted one under ``robust`` and ``robust_scaled``; on
    cells built without them, the interacted estimator under ``variance="stratified"`` (the
    same data analysed as if pupils were independent). Counts are named ``cluster``,
    ``robust``, ``robust_scaled`` and ``unclustered``. The first replication also runs
    `fit_all` (both complier-weighted estimators, cluster flavour): ``seen`` holds the
    count of one-cluster cells it reported (``single_cluster_cells``), the largest absolute
    difference of its interacted estimate and interval bounds from the `fit` ones
    (``fit_all_minus_fit``) and the absolute difference of its two estimates
    (``weighted_minus_interacted``).
    """
    truth = class_late(design, sampling)
    counts, seen = _tally()
    draws = draw_classes(design, rng, replications=replications, sampling=sampling)
    for r, (outcome, take_up, offer, stratum, cluster) in enumerate(draws.rows()):
        cells = build_cells(outcome, take_up, offer, stratum, cluster=cluster)
        est = fit(cells, estimator="interacted", variance="cluster", sampling=sampling)
        counts["cluster"] += covers(est.interval, truth)
        if r == 0:
            comparison = fit_all(cells, estimators=("weighted", "interacted"),
                                 variance="cluster", sampling=sampling)
            seen["single_cluster_cells"].add(comparison.single_cluster_cells)
            weighted, interacted = comparison.estimates
            seen["fit_all_minus_fit"].add(max(
                abs(a - b) for a, b in zip((interacted.estimate, *interacted.interval),
                                           (est.estimate, *est.interval), strict=True)))
            seen["weighted_minus_interacted"].add(abs(weighted.estimate - interacted.estimate))
        plain = fit(build_cells(outcome, take_up, offer, stratum), estimator="interacted",
                    variance="stratified", sampling=sampling)
        counts["unclustered"] += covers(plain.interval, truth)
        for variance in ("robust", "robust_scaled"):
            est = fit(cells, estimator="weighted", variance=variance)
            counts[variance] += covers(est.interval, truth)
    return Tally(replications, dict(counts), dict(seen))


PAIR_FLAVOURS = ("stratified", "robust", "robust_scaled")
"""Variance flavours run on matched pairs."""


def _zero_errors(comparison) -> set[str]:
    """Where a standard error is exactly 0 (an estimate, the gap, a stratum effect) or an
    estimate's interval has zero width."""
    where = {f"estimate {e.estimator}" for e in comparison.estimates if e.std_error == 0.0}
    where |= {f"interval {e.estimator}" for e in comparison.estimates
              if e.interval is not None and e.interval[0] == e.interval[1]}
    if any(row.effect_std_error == 0.0 for row in comparison.strata.rows):
        where.add("stratum effect")
    if comparison.gap is not None and comparison.gap.std_error == 0.0:
        where.add("gap")
    return where


def pairs_study(
    pop: Population, rng: np.random.Generator, *, replications: int, every_flavour: int
) -> Tally:
    """Matched pairs: coverage under ``stratified`` and what every flavour reports.

    Every replication fits the interacted estimator under ``stratified`` (block assignment,
    fixed sizes): counts ``covered``, ``zero_std_error``. The first ``every_flavour``
    replications also run `fit_all` under each of `PAIR_FLAVOURS`: counts
    ``covered_<estimator>`` (stratified), ``exception_<flavour>``, ``zero_std_error`` (an
    estimate, the gap or a stratum effect with a standard error of exactly 0, or an interval
    of zero width), ``none_without_reason`` (an estimate without standard error and without
    ``std_error_reason``). ``seen`` holds exception texts, where zero standard errors
    occurred, the (flavour, variance rule) pairs reported and the (flavour, estimator) pairs
    whose standard error was None.
    """
    truth = late(pop)
    counts, seen = _tally()
    draws = draw(pop, rng, replications=replications, assignment="block", sampling="fixed")
    for r, (outcome, take_up, offer, stratum) in enumerate(draws.rows()):
        cells = build_cells(outcome, take_up, offer, stratum)
        try:
            est = fit(cells, estimator="interacted", sampling="fixed")
        except Exception as err:  # the study counts every failure, whatever its type
            counts["exception_stratified"] += 1
            seen["exception"].add(f"stratified: {type(err).__name__}: {err}")
            continue
        counts["covered"] += covers(est.interval, truth)
        counts["zero_std_error"] += est.std_error == 0.0
        for variance in PAIR_FLAVOURS if r < every_flavour else ():
            try:
                comparison = fit_all(cells, variance=variance, sampling="fixed")
            except Exception as err:  # the study counts every failure, whatever its type
                counts[f"exception_{variance}"] += 1
                seen["exception"].add(f"{variance}: {type(err).__name__}: {err}")
                continue
            seen["variance_rule"].add((variance, comparison.variance_rule))
            zero = _zero_errors(comparison)
            counts["zero_std_error"] += bool(zero)
            seen["zero_std_error"].update(f"{variance}: {z}" for z in zero)
            for e in comparison.estimates:
                if variance == "stratified":
                    counts[f"covered_{e.estimator}"] += covers(e.interval, truth)
                if e.std_error is None:
                    seen["no_std_error"].add((variance, e.estimator))
                    counts["none_without_reason"] += e.estimate is not None and not (
                        e.std_error_reason)
    return Tally(replications, dict(counts), dict(seen))


def _probability_map(cells, probability: np.ndarray) -> dict:
    return {label: float(probability[label]) for label in cells.labels}


def independent_offer_study(
    pop: Population, rng: np.random.Generator, *, replications: int, checked: int
) -> Tally:
    """Unit-by-unit (Bernoulli) offers with the correct design probabilities, analysed with
    the options left at their defaults (``assignment="block"``, ``sampling="random"``).

    Every replication fits the weighted estimator: counts ``refused`` (an `EstimatorError`;
    texts in ``seen["refusal"]``) and ``covered`` (the interval contains the LATE). The first
    ``checked`` replications also run `fit_all`: counts ``switched`` (the run reported that
    it switched to independent assignment), ``rejected_strata`` (strata the binomial check
    listed, summed) and ``strata`` (strata checked, summed); ``seen["assignment_used"]``.
    """
    truth = late(pop)
    counts, seen = _tally()
    draws = draw(pop, rng, replications=replications, assignment="independent",
                 sampling="random")
    for r, (outcome, take_up, offer, stratum) in enumerate(draws.rows()):
        cells = build_cells(outcome, take_up, offer, stratum)
        probability = _probability_map(cells, pop.offer_probability)
        try:
            est = fit(cells, estimator="weighted", offer_probability=probability)
        except EstimatorError as err:
            counts["refused"] += 1
            seen["refusal"].add(str(err))
            continue
        counts["covered"] += covers(est.interval, truth)
        if r < checked:
            checks = fit_all(cells, estimators=("weighted",),
                             offer_probability=probability).offer_counts
            counts["switched"] += checks.switched
            seen["assignment_used"].add(checks.assignment_used)
            counts["rejected_strata"] += len(checks.rejected)
            counts["strata"] += len(checks.rows)
    return Tally(replications, dict(counts), dict(seen))


def rounded_share_study(
    pop: Population, rng: np.random.Generator, *, replications: int, checked: int
) -> Tally:
    """Block offers of ``round(p_s n_s)`` units with the design ``p_s`` passed as
    ``offer_probability``, analysed with ``assignment="block"``, ``sampling="fixed"``.

    Every replication fits the weighted estimator: counts ``covered`` (the interval contains
    the LATE) and ``off_share`` (strata whose realized share differs from ``p_s``, summed).
    The first ``checked`` replications also run `fit_all`: counts ``switched`` and
    ``all_within_rounding`` (every stratum's check row says so).
    """
    truth = late(pop)
    counts, seen = _tally()
    draws = draw(pop, rng, replications=replications, assignment="block", sampling="fixed")
    for r, (outcome, take_up, offer, stratum) in enumerate(draws.rows()):
        cells = build_cells(outcome, take_up, offer, stratum)
        probability = _probability_map(cells, pop.offer_probability)
        est = fit(cells, estimator="weighted", sampling="fixed", offer_probability=probability)
        counts["covered"] += covers(est.interval, truth)
        share = cells.n[:, 1] / cells.n.sum(axis=1)
        counts["off_share"] += int(np.sum(share != pop.offer_probability[list(cells.labels)]))
        if r < checked:
            checks = fit_all(cells, estimators=("weighted",), sampling="fixed",
                             offer_probability=probability).offer_counts
            counts["switched"] += checks.switched
            counts["all_within_rounding"] += all(row.within_rounding for row in checks.rows)
    return Tally(replications, dict(counts), dict(seen))


def constant_effect_study(
    pop: Population, rng: np.random.Generator, *, replications: int
) -> Tally:
    """The constant-effect test (calibrated ``p_value``) over replications of ``pop``
    (block assignment, fixed sizes). Counts: ``defined`` (a p-value was reported),
    ``rejected`` (p-value below 0.05); ``seen["reason"]`` holds the reasons of undefined
    tests and ``seen["df"]`` the degrees of freedom."""
    counts, seen = _tally()
    draws = draw(pop, rng, replications=replications, assignment="block", sampling="fixed")
    for outcome, take_up, offer, stratum in draws.rows():
        test = fit_all(build_cells(outcome, take_up, offer, stratum), estimators=("interacted",),
                       sampling="fixed").constant_effect
        seen["df"].add(test.df)
        if test.p_value is None:
            seen["reason"].add(test.reason)
            continue
        counts["defined"] += 1
        counts["rejected"] += test.p_value < 0.05
    return Tally(replications, dict(counts), dict(seen))


def gap_study(pop: Population, rng: np.random.Generator, *, replications: int) -> Tally:
    """Coverage of the fixed-effects target minus the LATE by the gap interval of `fit_all`
    (all estimators, block assignment, fixed sizes, no design probabilities). Counts:
    ``covered``; ``seen["complier_estimator"]`` holds the complier estimators reported."""
    truth = fixed_effects_target(pop) - late(pop)
    counts, seen = _tally()
    draws = draw(pop, rng, replications=replications, assignment="block", sampling="fixed")
    for outcome, take_up, offer, stratum in draws.rows():
        gap = fit_all(build_cells(outcome, take_up, offer, stratum), sampling="fixed",
                      constant_effect_draws=0).gap
        counts["covered"] += covers(gap.interval, truth)
        seen["complier_estimator"].add(gap.complier_estimator)
    return Tally(replications, dict(counts), dict(seen))

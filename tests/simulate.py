"""Seeded data generators and the coverage loop shared by the simulation tests and
benchmarks/coverage_large.py.

A `Population` describes offer lotteries run within strata (METHODS.md §1): per stratum a
population share, a design offer probability, shares of always-takers, never-takers and
compliers, the compliers' mean effect and the untreated outcome level of each compliance
type. `draw` produces many replications at once, vectorised over replications and units,
under block or independent (Bernoulli) assignment and with fixed or random stratum sizes.
The estimands are computed from the parameters, never from a sample:

- `late`: the complier average effect ``sum_s q_s pi_s beta_s / sum_s q_s pi_s``;
- `fixed_effects_target`: the Angrist & Imbens (1995) value that 2SLS with stratum dummies
  converges to, ``sum_s q_s p_s (1 - p_s) pi_s beta_s / sum_s q_s p_s (1 - p_s) pi_s``.

`coverage_study` runs one design through `build_cells` and `fit_all` per replication and
counts the 95 % intervals that cover these truths.

Row order carries no information: units of a replication are laid out stratum by stratum,
and units within a stratum are independent draws, so offering the first ``n_s1`` units of
each stratum is a block (complete) randomization.
"""

from __future__ import annotations

import math
from collections.abc import Iterator
from dataclasses import dataclass, field

import numpy as np

from strativ.estimators import build_cells, fit, fit_all

__all__ = [
    "CONTROLS",
    "QUANTITIES",
    "Coverage",
    "Draws",
    "coverage_study",
    "Population",
    "coverage_se",
    "draw",
    "fixed_effects_target",
    "heterogeneous_lottery",
    "late",
    "offered_counts",
    "weak_lottery",
]

ALWAYS, NEVER, COMPLIER = 0, 1, 2


@dataclass(frozen=True, eq=False)
class Population:
    """Parameters of a stratified offer lottery; arrays have one entry per stratum."""

    size: np.ndarray
    """Units per stratum with fixed sizes; its shares ``q_s`` are the population shares."""
    offer_probability: np.ndarray
    """Design offer probability ``p_s``."""
    always_taker: np.ndarray
    """Share of always-takers."""
    never_taker: np.ndarray
    """Share of never-takers; compliers are the rest (no defiers)."""
    effect: np.ndarray
    """Compliers' mean effect ``beta_s``."""
    level: np.ndarray
    """Untreated outcome mean by compliance type (always, never, complier) and stratum, (3, K)."""
    noise_sd: float = 1.0
    """Standard deviation of the untreated outcome around its type mean."""
    effect_sd: float = 0.5
    """Standard deviation of unit effects around the type mean."""
    always_taker_effect: float = 0.0
    """Always-takers' effect, added to ``beta_s`` (never identified, only shifts levels)."""

    def __post_init__(self) -> None:
        k = self.size.shape[0]
        for name in ("offer_probability", "always_taker", "never_taker", "effect"):
            if getattr(self, name).shape != (k,):
                raise ValueError(f"{name} must have one entry per stratum ({k})")
        if self.level.shape != (3, k):
            raise ValueError(f"level must have shape (3, {k})")
        if np.any(self.complier <= 0):
            raise ValueError("every stratum needs a positive complier share")

    @property
    def n_strata(self) -> int:
        """Number of strata K."""
        return int(self.size.shape[0])

    @property
    def n_units(self) -> int:
        """Units per replication N."""
        return int(self.size.sum())

    @property
    def share(self) -> np.ndarray:
        """Population share ``q_s`` of each stratum."""
        return self.size / self.size.sum()

    @property
    def complier(self) -> np.ndarray:
        """Complier share ``pi_s``."""
        return 1.0 - self.always_taker - self.never_taker


@dataclass(frozen=True, eq=False)
class Draws:
    """Replications of one design; arrays are (replications, units)."""

    outcome: np.ndarray
    take_up: np.ndarray
    offer: np.ndarray
    stratum: np.ndarray

    def __len__(self) -> int:
        return int(self.outcome.shape[0])

    def rows(self) -> Iterator[tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]]:
        """Yield ``(outcome, take_up, offer, stratum)`` of each replication."""
        for r in range(len(self)):
            yield self.outcome[r], self.take_up[r], self.offer[r], self.stratum[r]


def late(pop: Population) -> float:
    """Population complier average effect (METHODS.md §1)."""
    weight = pop.share * pop.complier
    return float(weight @ pop.effect / weight.sum())


def fixed_effects_target(pop: Population) -> float:
    """Probability limit of 2SLS with stratum dummies (Angrist & Imbens 1995 weights)."""
    p = pop.offer_probability
    weight = pop.share * p * (1.0 - p) * pop.complier
    return float(weight @ pop.effect / weight.sum())


def offered_counts(sizes: np.ndarray, probability: np.ndarray) -> np.ndarray:
    """Offers per stratum under block assignment: ``round(p_s n_s)``, kept in [1, n_s - 1]."""
    counts = np.rint(sizes * probability).astype(np.int64)
    return np.clip(counts, np.minimum(1, sizes - 1), np.maximum(sizes - 1, 0))


def draw(
    pop: Population,
    rng: np.random.Generator,
    *,
    replications: int,
    assignment: str,
    sampling: str,
) -> Draws:
    """Draw ``replications`` independent samples of ``pop.n_units`` units.

    Parameters
    ----------
    pop : Population
        The design.
    rng : numpy.random.Generator
        Source of randomness (seeded by the caller).
    replications : int
        Number of samples.
    assignment : {"block", "independent"}
        Block: exactly ``round(p_s n_s)`` units offered per stratum. Independent: each unit
        offered with probability ``p_s``.
    sampling : {"fixed", "random"}
        Fixed: stratum sizes ``pop.size`` in every replication. Random: units drawn from the
        population, so stratum sizes are multinomial with shares ``q_s``.

    Returns
    -------
    Draws
        Outcome (float), take-up, offer and stratum code (integers) per replication.
    """
    k, n = pop.n_strata, pop.n_units
    if sampling == "fixed":
        sizes = np.broadcast_to(pop.size.astype(np.int64), (replications, k))
    elif sampling == "random":
        sizes = rng.multinomial(n, pop.share, size=replications)
    else:
        raise ValueError(f"unknown sampling {sampling!r}")
    stratum = np.repeat(np.tile(np.arange(k), replications), sizes.ravel()).reshape(replications, n)
    rows = np.arange(replications)[:, None]
    if assignment == "block":
        start = np.cumsum(sizes, axis=1) - sizes
        position = np.arange(n)[None, :] - start[rows, stratum]
        offered = offered_counts(sizes, pop.offer_probability[None, :])
        offer = (position < offered[rows, stratum]).astype(np.int8)
    elif assignment == "independent":
        offer = (rng.random((replications, n)) < pop.offer_probability[stratum]).astype(np.int8)
    else:
        raise ValueError(f"unknown assignment {assignment!r}")
    u = rng.random((replications, n))
    kind = np.where(
        u < pop.always_taker[stratum],
        ALWAYS,
        np.where(u < (pop.always_taker + pop.never_taker)[stratum], NEVER, COMPLIER),
    )
    take_up = ((kind == ALWAYS) | ((kind == COMPLIER) & (offer == 1))).astype(np.int8)
    untreated = pop.level[kind, stratum] + pop.noise_sd * rng.standard_normal((replications, n))
    gain = pop.effect[stratum] + pop.effect_sd * rng.standard_normal((replications, n))
    gain = gain + np.where(kind == ALWAYS, pop.always_taker_effect, 0.0)
    outcome = untreated + take_up * gain
    return Draws(outcome=outcome, take_up=take_up, offer=offer, stratum=stratum)


def heterogeneous_lottery(size: np.ndarray, offer_probability: np.ndarray) -> Population:
    """Strata whose complier effects and complier shares both move with the offer share.

    ``beta_s = 20 (p_s - 0.4)`` (from -5 at p = 0.15 to 9 at p = 0.85); complier share
    falls from 0.9 to 0.5 as ``p_s`` rises (always-takers 5 %, never-takers the rest).
    Always-takers' untreated outcomes sit 1.5 above the compliers', never-takers' 1 below,
    so take-up is endogenous; stratum levels rise with ``p_s``.
    """
    p = np.asarray(offer_probability, dtype=float)
    base = 3.0 * p
    return Population(
        size=np.asarray(size, dtype=np.int64),
        offer_probability=p,
        always_taker=np.full(p.shape, 0.05),
        never_taker=0.05 + 0.4 * (p - 0.15) / 0.7,
        effect=20.0 * (p - 0.4),
        level=np.vstack([base + 1.5, base - 1.0, base]),
    )


def weak_lottery(size: np.ndarray, offer_probability: np.ndarray, complier: float,
                 separation: float) -> Population:
    """A weak first stage with strong endogeneity and one common complier effect of 1.

    Always-takers 30 %, compliers ``complier``, never-takers the rest; always-takers'
    untreated outcomes sit ``separation`` above the compliers', never-takers' the same
    distance below (noise sd 1), so take-up is strongly tied to the outcome's error.
    """
    p = np.asarray(offer_probability, dtype=float)
    k = p.shape[0]
    return Population(
        size=np.asarray(size, dtype=np.int64),
        offer_probability=p,
        always_taker=np.full(k, 0.3),
        never_taker=np.full(k, 0.7 - complier),
        effect=np.ones(k),
        level=np.vstack([np.full(k, separation), np.full(k, -separation), np.zeros(k)]),
    )


def coverage_se(coverage: float, replications: int) -> float:
    """Monte Carlo standard error of a coverage share over ``replications`` draws."""
    return math.sqrt(coverage * (1.0 - coverage) / replications)


QUANTITIES = ("fixed_effects", "weighted", "interacted", "gap")
"""Interval checked by `coverage_study`: each estimator, and fixed effects minus LATE."""

CONTROLS = ("fixed_effects_without_assignment_term", "interacted_without_between_term")
"""Deliberately mis-specified intervals: independent offers analysed as block (drops
V_assign), random stratum sizes analysed as fixed (drops V_between)."""


@dataclass(frozen=True, eq=False)
class Coverage:
    """Counts from a coverage study of one design and one (assignment, sampling) pair."""

    replications: int
    covered: dict[str, int]
    """Replications whose 95 % interval covered the truth, per name in QUANTITIES."""
    error_sum: dict[str, float]
    """Sum over replications of estimate minus truth, per name in QUANTITIES."""
    controls: dict[str, int] = field(default_factory=dict)
    """Covering replications of the applicable names in CONTROLS."""
    excluded_strata: int = 0
    """Strata excluded (offer share 0 or 1) summed over replications."""

    def share(self, name: str) -> float:
        """Coverage share of a name in QUANTITIES or CONTROLS."""
        count = self.covered[name] if name in self.covered else self.controls[name]
        return count / self.replications

    def mean_error(self, name: str) -> float:
        """Mean of estimate minus truth (Monte Carlo bias) of a name in QUANTITIES."""
        return self.error_sum[name] / self.replications


def _covers(interval: tuple[float, float] | None, truth: float) -> bool:
    return interval is not None and interval[0] <= truth <= interval[1]


def coverage_study(
    pop: Population,
    rng: np.random.Generator,
    *,
    replications: int,
    assignment: str,
    sampling: str,
    chunk: int = 500,
) -> Coverage:
    """Coverage of the 95 % `stratified` intervals with matching assignment and sampling.

    The truth is computed from the parameters: `fixed_effects_target` for fixed effects,
    `late` for the weighted and interacted estimators, their difference for the gap. One
    `build_cells` and one `fit_all` per replication; the controls refit one estimator with
    a term left out.
    """
    late_truth = late(pop)
    truth = {
        "fixed_effects": fixed_effects_target(pop),
        "weighted": late_truth,
        "interacted": late_truth,
    }
    truth["gap"] = truth["fixed_effects"] - late_truth
    covered = dict.fromkeys(QUANTITIES, 0)
    error_sum = dict.fromkeys(QUANTITIES, 0.0)
    controls = {}
    if assignment == "independent":
        controls[CONTROLS[0]] = 0
    if sampling == "random":
        controls[CONTROLS[1]] = 0
    excluded = 0
    done = 0
    while done < replications:
        batch = draw(pop, rng, replications=min(chunk, replications - done),
                     assignment=assignment, sampling=sampling)
        done += len(batch)
        for outcome, take_up, offer, stratum in batch.rows():
            cells = build_cells(outcome, take_up, offer, stratum)
            comparison = fit_all(cells, assignment=assignment, sampling=sampling,
                                 constant_effect_draws=0)
            excluded += len(comparison.strata.excluded)
            for est in comparison.estimates:
                covered[est.estimator] += _covers(est.interval, truth[est.estimator])
                error_sum[est.estimator] += est.estimate - truth[est.estimator]
            covered["gap"] += _covers(comparison.gap.interval, truth["gap"])
            error_sum["gap"] += comparison.gap.estimate - truth["gap"]
            if CONTROLS[0] in controls:
                est = fit(cells, estimator="fixed_effects", assignment="block", sampling=sampling)
                controls[CONTROLS[0]] += _covers(est.interval, truth["fixed_effects"])
            if CONTROLS[1] in controls:
                est = fit(cells, estimator="interacted", assignment=assignment, sampling="fixed")
                controls[CONTROLS[1]] += _covers(est.interval, truth["interacted"])
    return Coverage(replications=replications, covered=covered, error_sum=error_sum,
                    controls=controls, excluded_strata=excluded)

"""Result types: frozen dataclasses holding numbers only, each with a JSON-ready `to_dict`.

An undefined number is ``None`` with a reason beside it, never NaN or inf.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, fields
from typing import Any

from .rebuild import rebuildable

__all__ = [
    "ConfidenceSet",
    "Estimate",
    "ExcludedStratum",
    "StratumRow",
    "StratumTable",
    "Gap",
    "SizeWeighted",
    "Comparison",
    "ConstantEffectTest",
    "NegativeFirstStage",
    "OfferCountCheck",
    "OfferCounts",
    "clean",
]


def clean(value: Any) -> Any:
    """Turn a value into JSON-ready data: numpy scalars to Python, NaN/inf to None, -0.0 to
    0.0."""
    if hasattr(value, "to_dict"):
        return value.to_dict()
    if isinstance(value, (list, tuple)):
        return [clean(v) for v in value]
    if isinstance(value, dict):
        return {str(k): clean(v) for k, v in value.items()}
    if hasattr(value, "item") and not isinstance(value, (str, bytes)):
        value = value.item()
    if isinstance(value, float) and not math.isfinite(value):
        return None
    if isinstance(value, float) and value == 0:
        return 0.0  # a negative zero reads as a sign that is not there
    return value


def _as_dict(obj: Any) -> dict[str, Any]:
    return {f.name: clean(getattr(obj, f.name)) for f in fields(obj)}


@rebuildable
@dataclass(frozen=True, slots=True)
class ConfidenceSet:
    """A Fieller / Anderson-Rubin confidence set for the effect."""

    shape: str
    """``bounded`` ([lower, upper]), ``two_rays`` ((-inf, left_ray_end] and
    [right_ray_start, inf)) or ``whole_line``."""
    lower: float | None = None
    """Lower end of a bounded set; None for the other shapes."""
    upper: float | None = None
    """Upper end of a bounded set; None for the other shapes."""
    left_ray_end: float | None = None
    """Two rays: the set contains every value up to and including this one."""
    right_ray_start: float | None = None
    """Two rays: the set contains every value from this one on."""

    def contains(self, value: float) -> bool:
        """Whether the set contains ``value``."""
        if self.shape == "whole_line":
            return True
        if self.shape == "bounded":
            return self.lower <= value <= self.upper
        return value <= self.left_ray_end or value >= self.right_ray_start

    def to_dict(self) -> dict[str, Any]:
        """JSON-ready form."""
        return _as_dict(self)


@rebuildable
@dataclass(frozen=True, slots=True)
class Estimate:
    """One estimator's effect estimate with its inference."""

    estimator: str
    """``fixed_effects``, ``weighted`` or ``interacted``."""
    estimand: str
    """What the estimator targets, in plain words."""
    estimate: float | None
    """Effect of take-up; None when the overall first stage is zero."""
    std_error: float | None
    """Delta-method standard error in the chosen flavour; never zero (None with a reason)."""
    interval: tuple[float, float] | None
    """Confidence interval at `level`: estimate -/+ the t (or normal) critical value times
    `std_error`."""
    degrees_of_freedom: float | None
    """Welch-Satterthwaite degrees of freedom of the t reference of `interval` and
    `confidence_set` (K - 1 under the pairs rule); None for the normal reference."""
    p_value: float | None
    """Two-sided p-value of a zero effect, from the interval's reference (Student t on
    `degrees_of_freedom`, or normal); None without a standard error."""
    confidence_set: ConfidenceSet
    """Fieller / Anderson-Rubin set at `level`; honest under a weak first stage."""
    first_stage_f: float | None
    """Wald statistic of the excluded instruments in this estimator's first-stage regression
    divided by their number, with the run's variance flavour (METHODS.md §4)."""
    first_stage_f_unadjusted: float | None
    """The textbook homoskedastic first-stage F (residual variance with divisor n - k)."""
    first_stage_f_null: float | None
    """``D^2 / Var(D)`` with the variance imposed under the null that the Fieller set uses;
    the set is bounded exactly when it exceeds the squared critical value."""
    first_stage_instruments: int
    """Excluded instruments of the first stage: 1, or the number of strata (interacted)."""
    first_stage_f_reason: str | None
    """Why `first_stage_f` is None, in words (for example strata whose take-up is constant
    within each offer arm); None when it is a number."""
    weak_first_stage: bool
    """First-stage F below 10 (or undefined): read the confidence set, not the interval."""
    itt: float
    """Intention-to-treat effect under this estimator's weighting."""
    itt_std_error: float | None
    """Standard error of `itt`."""
    first_stage: float
    """First stage (complier share) under this estimator's weighting."""
    first_stage_std_error: float | None
    """Standard error of `first_stage`."""
    n_units: int
    """Units in the analysis sample."""
    n_strata: int
    """Strata used."""
    variance: str
    """Variance flavour."""
    assignment: str | None
    """Offer assignment the variance assumes; None for flavours that do not read it."""
    sampling: str | None
    """Stratum sampling the variance assumes; None for flavours that do not read it."""
    level: float
    """Confidence level."""
    undefined_reason: str | None = None
    """Why `estimate` is None, when it is."""
    std_error_reason: str | None = None
    """Why `std_error` is None while `estimate` is defined."""
    notes: tuple[str, ...] = ()
    """Remarks a reader needs (for example, a conservative variance)."""

    def to_dict(self) -> dict[str, Any]:
        """JSON-ready form."""
        return _as_dict(self)


@rebuildable
@dataclass(frozen=True, slots=True)
class ExcludedStratum:
    """A stratum left out of every estimator."""

    label: Any
    """Stratum label."""
    n: int
    """Units in the stratum."""
    reason: str
    """Why it carries no information about an effect."""

    def to_dict(self) -> dict[str, Any]:
        """JSON-ready form."""
        return _as_dict(self)


@rebuildable
@dataclass(frozen=True, slots=True)
class StratumRow:
    """One stratum of the analysis sample."""

    label: Any
    """Stratum label."""
    n: int
    """Units."""
    n_offered: int
    """Units offered."""
    n_not_offered: int
    """Units not offered."""
    offer_share: float
    """Realized offer share."""
    mean_outcome_offered: float
    """Mean outcome, offered arm."""
    mean_outcome_not_offered: float
    """Mean outcome, not-offered arm."""
    take_up_offered: float
    """Take-up rate, offered arm."""
    take_up_not_offered: float
    """Take-up rate, not-offered arm (always-takers)."""
    itt: float
    """Intention-to-treat effect."""
    first_stage: float
    """First stage (complier share)."""
    effect: float | None
    """Stratum LATE ``itt / first_stage``; None when the first stage is zero."""
    effect_std_error: float | None
    """Standard error of `effect` in the chosen flavour."""
    effect_reason: str | None
    """Why `effect` is None, when it is."""
    weight_fixed_effects: float
    """Implied weight of this stratum's effect in the fixed-effects estimate."""
    weight_complier: float
    """Implied complier weight (weighted and interacted estimators)."""
    always_takers: float
    """Share taking up without an offer."""
    never_takers: float
    """Share not taking up despite an offer."""
    compliers: float
    """Complier share (equals the first stage)."""
    gap_contribution: float
    """This stratum's part of fixed effects minus complier-weighted."""

    def to_dict(self) -> dict[str, Any]:
        """JSON-ready form."""
        return _as_dict(self)


@rebuildable
@dataclass(frozen=True, slots=True)
class StratumTable:
    """Per-stratum table and the strata left out."""

    rows: tuple[StratumRow, ...]
    """Strata used, in label order."""
    excluded: tuple[ExcludedStratum, ...]
    """Strata left out, with reasons."""
    single_unit_cells: int = 0
    """Cells of one unit that borrowed the pooled within-arm variance."""

    def to_dict(self) -> dict[str, Any]:
        """JSON-ready form."""
        return _as_dict(self)


@rebuildable
@dataclass(frozen=True, slots=True)
class Gap:
    """Fixed-effects estimate minus the complier-weighted estimate that is reported."""

    estimate: float | None
    """``fixed_effects_estimate - complier_estimate``; None when either is undefined."""
    std_error: float | None
    """Its standard error from the joint covariance of both estimators."""
    interval: tuple[float, float] | None
    """Interval at the comparison's level with the t reference on `df` degrees of freedom."""
    t: float | None
    """``estimate / std_error``: how many standard errors apart the two are."""
    df: float | None
    """Effective degrees of freedom of the t reference (Welch-Satterthwaite)."""
    p_value: float | None
    """Two-sided p-value of no difference, from the t reference."""
    fixed_effects_estimate: float | None
    """The fixed-effects estimate."""
    complier_estimate: float | None
    """The complier-weighted estimate it is compared with."""
    complier_estimator: str
    """``weighted`` (design probabilities given) or ``interacted``."""
    reason: str | None = None
    """Why the standard error or t is None, when it is."""

    def to_dict(self) -> dict[str, Any]:
        """JSON-ready form."""
        return _as_dict(self)


@rebuildable
@dataclass(frozen=True, slots=True)
class SizeWeighted:
    """The stratum-size-weighted average of stratum effects ``sum_s q_s beta_s``."""

    estimate: float | None
    """The average; None when a stratum's first stage is zero."""
    std_error: float | None
    """Its standard error (strata independent)."""
    fragile: bool
    """True when a stratum's first stage is within two standard errors of zero."""
    reason: str | None
    """Why it is None or fragile."""

    def to_dict(self) -> dict[str, Any]:
        """JSON-ready form."""
        return _as_dict(self)


@rebuildable
@dataclass(frozen=True, slots=True)
class ConstantEffectTest:
    """Over-identification test of one effect in every stratum (METHODS.md §5)."""

    statistic: float | None
    """``J``, minimized over the common effect; None with a reason when undefined."""
    df: int
    """Degrees of freedom, strata used minus one."""
    p_value: float | None
    """Calibrated p-value: share of ``J`` drawn under the fitted null, with the noise of the
    variances inside it, at or above `statistic` (the chi-squared one when every variance
    rests on many degrees of freedom; then `draws` is 0)."""
    p_value_asymptotic: float | None
    """Chi-squared upper tail probability of `statistic` (over-rejects with small cells)."""
    fitted_common_effect: float | None
    """The common effect at which ``J`` is smallest (the null's fitted effect)."""
    draws: int
    """Draws of the simulated null distribution (0 when undefined)."""
    seed: int
    """Seed of those draws."""
    reason: str | None
    """Why the test is undefined, when it is."""

    def to_dict(self) -> dict[str, Any]:
        """JSON-ready form."""
        return _as_dict(self)


@rebuildable
@dataclass(frozen=True, slots=True)
class OfferCountCheck:
    """Realized against design offer counts in one stratum."""

    label: Any
    """Stratum label."""
    n: int
    """Units in the stratum."""
    n_offered: int
    """Units offered."""
    design_probability: float
    """Design offer probability."""
    expected_offered: float
    """``n * design_probability``."""
    within_rounding: bool
    """Whether the offered count is less than one unit from `expected_offered`, as block
    assignment at this probability requires."""
    p_value: float | None
    """Exact two-sided binomial p-value of the offered count under independent assignment;
    None under block assignment."""

    def to_dict(self) -> dict[str, Any]:
        """JSON-ready form."""
        return _as_dict(self)


@rebuildable
@dataclass(frozen=True, slots=True)
class OfferCounts:
    """How the realized offer counts fit the declared design (design probabilities given)."""

    assignment_declared: str
    """Assignment the caller declared."""
    assignment_used: str
    """Assignment the variance used."""
    switched: bool
    """True when block was declared but some offered count is not within rounding of
    ``n * probability``, so the independent form was used."""
    realized_shares_used: bool
    """True under block assignment within rounding: the realized shares are the exact
    assignment probabilities and replace the rounded design ones."""
    rows: tuple[OfferCountCheck, ...]
    """One per stratum of the analysis sample."""
    rejected: tuple[Any, ...]
    """Strata whose binomial p-value is below one minus the level."""

    def to_dict(self) -> dict[str, Any]:
        """JSON-ready form."""
        return _as_dict(self)


@rebuildable
@dataclass(frozen=True, slots=True)
class NegativeFirstStage:
    """A stratum whose first stage is negative beyond noise: monotonicity is in question."""

    label: Any
    """Stratum label."""
    first_stage: float
    """Its first stage."""
    z: float | None
    """First stage over its standard error (None when that error is zero)."""

    def to_dict(self) -> dict[str, Any]:
        """JSON-ready form."""
        return _as_dict(self)


@rebuildable
@dataclass(frozen=True, slots=True)
class Comparison:
    """Several estimators fitted on one analysis sample, side by side."""

    estimates: tuple[Estimate, ...]
    """One per estimator, in the order asked for."""
    strata: StratumTable
    """Per-stratum table with implied weights."""
    gap: Gap | None
    """Fixed effects minus complier-weighted, with its standard error."""
    size_weighted: SizeWeighted
    """Secondary estimand: stratum-size-weighted average of stratum effects."""
    notes: tuple[str, ...] = ()
    """Remarks on how the estimators relate on this sample."""
    constant_effect: ConstantEffectTest | None = None
    """Test that the effect is the same in every stratum (when it holds, the estimators
    agree in large samples)."""
    negative_first_stage: tuple[NegativeFirstStage, ...] = ()
    """Strata whose first stage is negative beyond noise."""
    offer_counts: OfferCounts | None = None
    """Realized against design offer counts (only with design probabilities)."""
    variance_rule: str = "within"
    """``within`` (cell variances) or ``pairs`` (no cell has two units or clusters: each
    stratum is one independent draw, METHODS.md §4)."""
    single_cluster_cells: int = 0
    """Cells of one cluster that borrowed the pooled cluster variance."""

    def get(self, estimator: str) -> Estimate:
        """The estimate of the named estimator.

        Raises
        ------
        KeyError
            When that estimator was not fitted.
        """
        for estimate in self.estimates:
            if estimate.estimator == estimator:
                return estimate
        raise KeyError(estimator)

    def to_dict(self) -> dict[str, Any]:
        """JSON-ready form."""
        return _as_dict(self)

"""Public entry points: `fit` one estimator, `fit_all` side by side (METHODS.md §3-§4)."""

from __future__ import annotations

import difflib
import math
from collections.abc import Mapping, Sequence
from typing import Any

import numpy as np
from scipy.special import ndtr, stdtr, stdtrit

from .cells import CellTable
from .design import Design, analysis_design
from .diagnostics import NULL_DRAWS, constant_effect_test, negative_first_stages
from .engine import covariance, ratio_variance, rule, within_degrees_of_freedom
from .errors import InputError
from .first_stage import first_stage_statistics
from .forms import LinearForm, complier_form, design_weighted_form, fixed_effects_form
from .intervals import critical_value, fieller_set, normal_interval
from .offer_counts import offer_counts
from .options import (
    ASSIGNMENTS,
    ESTIMATORS,
    SAMPLINGS,
    USES_ASSIGNMENT,
    USES_SAMPLING,
    VARIANCES,
    WEAK_FIRST_STAGE_F,
)
from .results import Comparison, ConfidenceSet, Estimate, OfferCounts
from .strata import contrast, size_weighted, stratum_table

__all__ = ["ESTIMATORS", "fit", "fit_all"]

ESTIMANDS = {
    "fixed_effects": "stratum effects weighted by n*p(1-p)*first stage; the LATE only if "
    "effects or offer shares are equal across strata",
    "weighted": "LATE: complier average effect (complier weights n*first stage)",
    "interacted": "LATE: complier average effect (stratum effects, complier weights)",
}


def _choice(value: Any, allowed: Sequence[str], argument: str) -> str:
    if value in allowed:
        return value
    near = difflib.get_close_matches(str(value), allowed, n=1)
    hint = f" Did you mean {near[0]!r}?" if near else ""
    raise InputError(argument, f"unknown value {value!r}; use one of {list(allowed)}.{hint}")


def _check_options(
    cells: CellTable, variance: str, assignment: str, sampling: str, level: float
) -> str:
    """Validate the options; return the flavour."""
    if not isinstance(cells, CellTable):
        raise InputError("cells", "expected a CellTable from build_cells or cells_from_frame.")
    _choice(variance, VARIANCES, "variance")
    _choice(assignment, ASSIGNMENTS, "assignment")
    _choice(sampling, SAMPLINGS, "sampling")
    if not isinstance(level, (int, float)) or not 0.0 < float(level) < 1.0:
        raise InputError("level", f"expected a confidence level between 0 and 1, got {level!r}.")
    if variance == "cluster" and cells.clusters is None:
        raise InputError(
            "variance", "'cluster' needs cells built with cluster=...; pass the cluster ids."
        )
    if variance == "cluster" and assignment == "independent":
        raise InputError(
            "assignment",
            "'independent' is not supported with variance='cluster': clusters are offered as "
            "blocks; use assignment='block'.",
        )
    return variance


def _probabilities(design: Design, offer_probability: Mapping[Any, float] | None):
    if offer_probability is None:
        return None
    if not isinstance(offer_probability, Mapping):
        raise InputError("offer_probability", "expected a mapping {stratum label: probability}.")
    known = set(design.labels) | {e.label for e in design.exclusions}
    unknown = [k for k in offer_probability if k not in known]
    if unknown:
        raise InputError(
            "offer_probability", f"labels {unknown[:5]} are not strata of the data; check them."
        )
    missing = [label for label in design.labels if label not in offer_probability]
    if missing:
        raise InputError(
            "offer_probability", f"no probability for strata {missing[:5]}; give every stratum."
        )
    values = np.array([float(offer_probability[label]) for label in design.labels])
    bad = ~((values > 0.0) & (values < 1.0))
    if bad.any():
        label = design.labels[int(np.flatnonzero(bad)[0])]
        raise InputError(
            "offer_probability",
            f"stratum {label!r} has probability {offer_probability[label]!r}; use a value "
            "strictly between 0 and 1.",
        )
    return values


def _form(design: Design, estimator: str, probability: np.ndarray | None) -> LinearForm:
    if estimator == "fixed_effects":
        return fixed_effects_form(design)
    if estimator == "weighted":
        if probability is not None:
            return design_weighted_form(design, probability)
        return complier_form(design, saturated=False)
    return complier_form(design, saturated=True)


def _notes(estimator: str, variance: str, probability: np.ndarray | None,
           counts: OfferCounts | None) -> tuple[str, ...]:
    notes = []
    if estimator == "weighted" and variance in ("robust", "robust_scaled"):
        notes.append(
            "robust variance of the weighted regression treats offer probabilities as known "
            "and counts level differences between strata as noise: conservative"
        )
    if estimator == "weighted" and probability is not None:
        notes.append("weights use the design offer probabilities (ratio means per arm)")
    if estimator == "weighted" and counts is not None and counts.realized_shares_used:
        notes.append("offered counts match block assignment at the design probabilities, so "
                     "the realized offer shares (the exact assignment probabilities) are used")
    if estimator == "interacted" and variance in ("robust", "robust_scaled"):
        notes.append("robust variance: delta method on the saturated regression's sandwich")
    return tuple(notes)


def _reference(design: Design, form: LinearForm, omega: np.ndarray, variance: str,
               level: float) -> tuple[float, float | None]:
    """Critical value and degrees of freedom of the interval and the Fieller set.

    Student t on the Welch-Satterthwaite degrees of freedom of ``Var(N - theta D)``: each
    cell's within part rests on ``n_sz - 1`` (clusters: ``G_sz - 1``) degrees of freedom,
    and a few small cells (two clusters per cell, five offered units) dominate the variance
    in the designs where a normal reference under-covers; under the pairs rule, ``K - 1``.
    Normal (None) when the first stage is zero or the variance has no within part.
    """
    d = form.denominator
    if d == 0:
        return critical_value(level), None
    theta = form.numerator / d
    total = float(omega[0, 0] - 2.0 * theta * omega[0, 1] + theta * theta * omega[1, 1])
    projection = np.array([[[1.0], [-theta]]])
    df = within_degrees_of_freedom(design, [form], projection, variance=variance, total=total)
    if df is None:
        return critical_value(level), None
    return float(stdtrit(df, 0.5 + level / 2.0)), df


def _std_error_problem(design: Design, form: LinearForm, variance: str) -> str | None:
    if variance in ("robust", "robust_scaled"):
        if design.n_units <= form.n_regressors:
            return (f"the regression has {form.n_regressors} regressors for {design.n_units} "
                    "units, so its residuals are all zero; use the stratified variance")
        if design.clustered and design.n_clusters < 2:
            return "a single cluster: no cluster-robust variance exists"
    if rule(design, variance) == "pairs" and len(design.labels) < 2:
        return ("one stratum with one unit (or cluster) in an arm: no variance can be "
                "estimated")
    return None


def _estimate(
    design: Design,
    form: LinearForm,
    estimator: str,
    *,
    variance: str,
    assignment: str,
    sampling: str,
    level: float,
    notes: tuple[str, ...],
) -> Estimate:
    options = {"variance": variance, "assignment": assignment, "sampling": sampling}
    omega = covariance(design, [form], **options)
    spread = covariance(design, [form], centred=True, **options)
    n, d = form.numerator, form.denominator
    z, df = _reference(design, form, omega, variance, level)
    a, b, c = float(omega[0, 0]), float(omega[0, 1]), float(omega[1, 1])
    problem = _std_error_problem(design, form, variance)
    strength = first_stage_statistics(design, form, estimator, **options)
    finite = math.isfinite(a + b + c) and problem is None
    conf = fieller_set(n, d, a, b, c, z) if finite else ConfidenceSet(shape="whole_line")
    f_null = d * d / c if finite and c > 0 else None
    estimate = std_error = interval = p_value = None
    reason = None
    if d == 0:
        reason = "the overall first stage is zero: offer did not change take-up"
    else:
        estimate = n / d
        var = ratio_variance(omega, estimate, d) if finite else math.nan
        if problem is None and not var > 0.0:
            problem = "the estimate has no estimated sampling variance in this flavour"
        if problem is None:
            std_error = math.sqrt(var)
            interval = normal_interval(estimate, std_error, z)
            t = abs(estimate) / std_error
            p_value = float(2.0 * (stdtr(df, -t) if df is not None else ndtr(-t)))
    # an F of None with a non-zero first stage means a first stage measured without noise
    weak = d == 0 if strength.f is None else strength.f < WEAK_FIRST_STAGE_F
    return Estimate(
        estimator=estimator,
        estimand=ESTIMANDS[estimator],
        estimate=estimate,
        std_error=std_error,
        interval=interval,
        degrees_of_freedom=df if interval is not None else None,
        p_value=p_value,
        confidence_set=conf,
        first_stage_f=strength.f,
        first_stage_f_unadjusted=strength.f_unadjusted,
        first_stage_f_null=f_null,
        first_stage_instruments=strength.instruments,
        first_stage_f_reason=strength.f_reason,
        weak_first_stage=weak,
        itt=n,
        itt_std_error=_root(spread[0, 0]),
        first_stage=d,
        first_stage_std_error=_root(spread[1, 1]),
        n_units=design.n_units,
        n_strata=len(design.labels),
        variance=variance,
        assignment=assignment if variance in USES_ASSIGNMENT else None,
        sampling=sampling if variance in USES_SAMPLING else None,
        level=float(level),
        undefined_reason=reason,
        std_error_reason=problem if estimate is not None else None,
        notes=notes,
    )


def _root(value: float) -> float | None:
    value = float(value)
    return math.sqrt(max(value, 0.0)) if math.isfinite(value) else None


def _prepare(cells: CellTable, variance: str, assignment: str, sampling: str, level: float,
             offer_probability: Mapping[Any, float] | None):
    """Validate, build the design, and apply the offer-count rule."""
    variance = _check_options(cells, variance, assignment, sampling, level)
    design = analysis_design(cells)
    probability = _probabilities(design, offer_probability)
    counts = None
    if probability is not None and not design.clustered:
        counts = offer_counts(design, probability, assignment=assignment, level=level)
        assignment = counts.assignment_used
        if counts.realized_shares_used:
            probability = None
    return design, variance, assignment, probability, counts


def fit(
    cells: CellTable,
    *,
    estimator: str = "fixed_effects",
    variance: str = "stratified",
    assignment: str = "block",
    sampling: str = "random",
    level: float = 0.95,
    offer_probability: Mapping[Any, float] | None = None,
) -> Estimate:
    """Fit one IV estimator of the effect of take-up, with its inference.

    Parameters
    ----------
    cells : CellTable
        From `build_cells` or `cells_from_frame`.
    estimator : {"fixed_effects", "weighted", "interacted"}, default="fixed_effects"
        Fixed effects: 2SLS with stratum dummies. Weighted: inverse-probability weighted 2SLS.
        Interacted: stratum effects combined with complier weights.
    variance : {"stratified", "robust", "robust_scaled", "cluster"}, default="stratified"
        Stratified is design-based and allows heterogeneous effects; robust is the
        regression sandwich (HC0), robust_scaled adds ``n / (n - k)``; cluster sums
        deviations within clusters.
    assignment : {"block", "independent"}, default="block"
        Block: the offer count per stratum was fixed. Independent: each unit was offered
        independently, so the count is random (adds the assignment term for fixed effects).
    sampling : {"fixed", "random"}, default="random"
        Random: units were sampled from a population, stratum sizes are random (adds the
        between-strata term). Fixed: sizes fixed by design.
    level : float, default=0.95
        Confidence level of the normal interval and the Fieller set.
    offer_probability : mapping of stratum label to float, optional
        Design offer probabilities; used by the weighted estimator instead of the realized
        offer shares.

    Returns
    -------
    Estimate
        The estimate, standard error, normal interval, Fieller / Anderson-Rubin set,
        first-stage F, and the ITT and first stage under the estimator's weighting.

    Raises
    ------
    InputError
        An unknown option value, a level outside (0, 1), cluster variance without clusters,
        or design probabilities that miss a stratum or fall outside (0, 1).
    DegenerateDesignError
        When no stratum has both offered and not-offered units.

    Notes
    -----
    Every estimator is ``N / D`` with ``N = sum_s a_s ITT_s`` and ``D = sum_s a_s FS_s``
    (METHODS.md §3); its variance is ``(A - 2 theta B + theta^2 C) / D^2`` from one engine
    (METHODS.md §4). Strata with offer share 0 or 1 are excluded.

    Examples
    --------
    >>> cells = build_cells(y, d, z, site)  # doctest: +SKIP
    >>> fit(cells, estimator="weighted").interval  # doctest: +SKIP
    """
    estimator = _choice(estimator, ESTIMATORS, "estimator")
    design, variance, assignment, probability, counts = _prepare(
        cells, variance, assignment, sampling, level, offer_probability)
    form = _form(design, estimator, probability)
    return _estimate(
        design,
        form,
        estimator,
        variance=variance,
        assignment=assignment,
        sampling=sampling,
        level=level,
        notes=_notes(estimator, variance, probability, counts),
    )


def fit_all(
    cells: CellTable,
    *,
    estimators: Sequence[str] = ESTIMATORS,
    variance: str = "stratified",
    assignment: str = "block",
    sampling: str = "random",
    level: float = 0.95,
    offer_probability: Mapping[Any, float] | None = None,
    constant_effect_draws: int = NULL_DRAWS,
) -> Comparison:
    """Fit several estimators on one analysis sample, with the contrast and stratum table.

    Parameters
    ----------
    cells : CellTable
        From `build_cells` or `cells_from_frame`.
    estimators : sequence of str, default=("fixed_effects", "weighted", "interacted")
        Which estimators, in the order to report them; no repeats.
    variance, assignment, sampling, level, offer_probability
        As in `fit`.
    constant_effect_draws : int, default=NULL_DRAWS
        Draws of the simulated null distribution that calibrates the constant-effect test;
        0 keeps the chi-squared reference (for loops that do not read the test).

    Returns
    -------
    Comparison
        The estimates, the per-stratum table with implied weights, fixed effects minus the
        complier-weighted estimate with its standard error and per-stratum decomposition,
        the stratum-size-weighted average, the constant-effect test and the strata whose
        first stage is negative beyond noise.

    Raises
    ------
    InputError
        As in `fit`, and for an empty or repeated estimator list.
    DegenerateDesignError
        When no stratum has both offered and not-offered units.

    Notes
    -----
    The contrast reads the joint covariance of both estimators from the same engine:
    ``theta_FE - theta_LATE = sum_s (w_s^FE - w_s^LATE) beta_s`` (METHODS.md §3).
    """
    names = [_choice(e, ESTIMATORS, "estimators") for e in estimators]
    if not names or len(set(names)) != len(names):
        raise InputError("estimators", f"expected distinct estimator names, got {list(names)}.")
    if not isinstance(constant_effect_draws, int) or constant_effect_draws < 0:
        raise InputError("constant_effect_draws",
                         f"expected a whole number of draws >= 0, got {constant_effect_draws!r}.")
    design, variance, assignment, probability, counts = _prepare(
        cells, variance, assignment, sampling, level, offer_probability)
    options = {"variance": variance, "assignment": assignment, "sampling": sampling}
    forms = {name: _form(design, name, probability) for name in names}
    estimates = tuple(
        _estimate(design, forms[name], name, level=level,
                  notes=_notes(name, variance, probability, counts), **options)
        for name in names
    )
    fe = forms.get("fixed_effects") or fixed_effects_form(design)
    late = complier_form(design, saturated=True)
    complier_name = "interacted"
    reference = forms.get("interacted") or late
    if "weighted" in forms and (probability is not None or "interacted" not in forms):
        complier_name, reference = "weighted", forms["weighted"]
    notes = []
    if probability is None and {"weighted", "interacted"} <= set(names) and late.denominator:
        notes.append(
            "weighted and interacted share one point estimate here: with estimated offer "
            "shares and no covariates both weight strata by n*first stage"
        )
    if counts is not None and counts.switched:
        notes.append(
            "offered counts are not within rounding of n*probability in every stratum, so "
            "offers were not drawn as fixed blocks at these probabilities: the independent "
            "assignment form is used"
        )
    if design.single_unit_cells and rule(design, variance) == "within":
        notes.append(
            f"{design.single_unit_cells} one-unit cell(s) borrowed the pooled within-arm "
            "variance of their arm"
        )
    if design.single_cluster_cells and variance == "cluster" and design.cluster_rule == "within":
        notes.append(
            f"{design.single_cluster_cells} one-cluster cell(s) borrowed the pooled cluster "
            "variance of their arm"
        )
    variance_rule = rule(design, variance)
    if variance_rule == "pairs":
        unit = "cluster" if variance == "cluster" else "unit"
        notes.append(
            f"an offer arm has no cell of two or more {unit}s, so no within-cell variance "
            "exists: each stratum is treated as one independent draw (conservative when "
            "effects differ across strata), with a t reference on strata - 1 degrees of "
            "freedom"
        )
    pooled = late.numerator / late.denominator if late.denominator != 0 else None
    return Comparison(
        estimates=estimates,
        strata=stratum_table(design, fe, reference, variance=variance),
        gap=contrast(design, fe, reference, complier_name, level=level, **options),
        size_weighted=size_weighted(design, variance=variance, sampling=sampling),
        notes=tuple(notes),
        constant_effect=constant_effect_test(design, theta=pooled, scale=None,
                                             draws=constant_effect_draws),
        negative_first_stage=negative_first_stages(design, level=level),
        offer_counts=counts,
        variance_rule=variance_rule,
        single_cluster_cells=design.single_cluster_cells,
    )

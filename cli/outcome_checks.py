"""The checks a run adds to each outcome's comparison: every estimator with the covariates,
a direct effect of the offer, and randomization inference. Each hands the run's data to the
core (`strativ.estimators.adjust`, `adjust_robust`, `sensitivity`, `randomization`) and
locates the core's refusals; nothing is computed here.
"""

from __future__ import annotations

from dataclasses import replace
from typing import Any

import pandas as pd

from strativ.estimators import Comparison, Estimate, EstimatorError, cells_from_moments, fit
from strativ.estimators.adjust import AdjustedEstimate, fit_adjusted
from strativ.estimators.adjust_robust import robust_adjusted
from strativ.estimators.randomization import (
    RandomizationFamily,
    RandomizationTest,
    randomization_draws,
    randomization_family,
    randomization_test,
    westfall_young,
)
from strativ.estimators.sensitivity import (
    DirectEffectSensitivity,
    defier_table,
    direct_effect_sensitivity,
    shift_by_offer,
)

from .cautions import variance_used
from .covariate_data import ADJUSTED_VARIANCES, adjustment_inputs
from .errors import DataError
from .grouped import GroupedData
from .spec import Spec
from .unit_rows import outcome_rows

__all__ = ["adjusted_fits", "direct_effect", "randomization", "randomization_family_test"]


def randomization(spec: Spec, data: GroupedData, name: str,
                   progress: Any = None) -> RandomizationTest | None:
    """Randomization inference on the rows of outcome `name` (None when not asked for)."""
    if spec.randomization is None:
        return None
    draws, seed, null_effect = spec.randomization
    rows = outcome_rows(data, name)
    try:
        found = randomization_draws(rows.outcome, rows.take_up, rows.offer, rows.stratum,
                                    cluster=rows.cluster, draws=draws, seed=seed,
                                    progress=progress)
    except EstimatorError as exc:
        raise DataError(None, name, (), f"randomization inference: "
                        f"{getattr(exc, 'message', exc)}") from None
    return randomization_test(found, null_effect=null_effect, level=spec.level)


def direct_effect(spec: Spec, data: GroupedData, name: str, comparison: Comparison,
                 mapping: dict[Any, float] | None) -> DirectEffectSensitivity | None:
    """The reported complier estimator refitted on ``y − δ Z`` (METHODS.md §7)."""
    fitted = [e.estimator for e in comparison.estimates]
    estimator = comparison.gap.complier_estimator if comparison.gap is not None else \
        next((e for e in ("weighted", "interacted") if e in fitted), fitted[0])
    frame = data.moment_frame(name)

    def fit_at(delta: float) -> Estimate:
        return fit(cells_from_moments(shift_by_offer(frame, delta)), estimator=estimator,
                   variance=variance_used(spec), assignment=spec.assignment,
                   sampling=spec.sampling, level=spec.level, offer_probability=mapping)

    found = direct_effect_sensitivity(fit_at, estimator, spec.direct_effect)
    first_stage = next(e.first_stage for e in comparison.estimates if e.estimator == estimator)
    return replace(found, defiers=defier_table(first_stage, spec.defier_shares))


def adjusted_fits(spec: Spec, data: GroupedData, name: str, comparison: Any,
              mapping: dict[Any, float] | None) -> tuple[AdjustedEstimate, ...]:
    """Every estimator of `comparison` refitted with the spec's covariates, on the same
    strata; () without covariates. The robust flavours read the rows a second time for the
    sandwich (`strativ.estimators.adjust_robust`)."""
    variance = variance_used(spec)
    labels = [r.label for r in comparison.strata.rows]
    inputs = adjustment_inputs(data, name, labels)
    if inputs is None or (data.from_moments and variance not in ADJUSTED_VARIANCES):
        return ()  # a moment table has no rows for the robust sandwich (`cautions` says so)
    rows = keep = covariates = None
    if variance not in ADJUSTED_VARIANCES:
        rows = outcome_rows(data, name, f"variance '{variance}' with covariates needs the "
                            "regression's sandwich from the unit rows (or use variance "
                            "'stratified')")
        keep = pd.Series(rows.stratum, dtype=object).isin(labels).to_numpy()
        covariates = inputs.rows(rows.stratum[keep], rows.covariates[keep])
    out = []
    for estimate in comparison.estimates:
        try:
            robust = None
            if rows is not None:
                robust = robust_adjusted(
                    rows.outcome[keep], rows.take_up[keep], rows.offer[keep], rows.stratum[keep],
                    covariates, estimator=estimate.estimator,
                    scaled=variance == "robust_scaled",
                    cluster=None if rows.cluster is None else rows.cluster[keep],
                    probability=mapping)
            out.append(fit_adjusted(
                inputs.moments, estimate.estimator, inputs.names, variance=variance,
                assignment=spec.assignment, sampling=spec.sampling, level=spec.level,
                offer_probability=mapping, unadjusted_std_error=estimate.std_error,
                robust=robust))
        except EstimatorError as exc:
            raise DataError(None, ", ".join(spec.columns.covariates), (),
                            f"outcome '{name}': {getattr(exc, 'message', exc)}",
                            "the covariates are named under 'columns: covariates:' in "
                            f"{spec.path.name}") from None
    return tuple(out)


def randomization_family_test(spec: Spec, data: GroupedData,
                              progress: Any = None) -> RandomizationFamily | None:
    """Westfall-Young adjusted randomization p-values across the outcomes, from one set of
    re-draws over the rows that have every outcome (None with one outcome, when
    randomization inference is off, or when no rows have every outcome in both arms)."""
    if spec.randomization is None or len(data.outcomes) < 2:
        return None
    draws, seed, null_effect = spec.randomization
    rows = outcome_rows(data, list(data.outcomes))
    if rows.outcome.shape[0] == 0 or len(set(rows.offer.tolist())) < 2:
        return None  # no row has every outcome in both arms: each outcome keeps its own test
    try:
        family = randomization_family(rows.outcome, rows.take_up, rows.offer, rows.stratum,
                                      cluster=rows.cluster, draws=draws, seed=seed,
                                      progress=progress)
    except EstimatorError as exc:
        raise DataError(None, None, (), f"randomization inference across outcomes: "
                        f"{getattr(exc, 'message', exc)}") from None
    nulls = (null_effect,) * len(family)
    raw = tuple(randomization_test(f, null_effect=null_effect).p_value for f in family)
    return RandomizationFamily(tuple(data.outcomes), int(rows.outcome.shape[0]), raw,
                               westfall_young(family, nulls), family[0].a.size,
                               family[0].exact, None if family[0].exact else seed,
                               null_effect)

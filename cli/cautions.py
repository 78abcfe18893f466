"""Plain-language warnings of a run, worded from the spec, the data and the core's results.

Nothing is computed here: the offer-count check, the first-stage F and its weak flag, and
every reason come from `strativ.estimators`; this module only names the strata, counts and
columns a reader needs.
"""

from __future__ import annotations

from collections.abc import Iterable, Sequence
from typing import TYPE_CHECKING, Any

from strativ.estimators import Comparison
from strativ.estimators.options import WEAK_FIRST_STAGE_F
from strativ.estimators.profile import CovariateProfile

from .counting import count
from .covariate_data import ADJUSTED_VARIANCES
from .grouped import GroupedData
from .spec import Spec
from .waves import pooled_share_warnings

if TYPE_CHECKING:
    from .runner import OutcomeResult

__all__ = ["balance_warnings", "cluster_form", "variance_used", "data_warnings",
           "fit_warnings", "offer_count_warnings"]

_LISTED = 5
"""Strata named in one warning before "and N more"."""



def fit_spec(cells: Any, spec: Spec, probabilities: dict[Any, float] | None) -> Any:
    """`fit_all` on `cells` with the spec's options, the design probabilities restricted to
    the strata the cells hold; the one call every fit of a run makes.

    Raises
    ------
    strativ.estimators.EstimatorError
        As `fit_all`.
    """
    from strativ.estimators import fit_all

    present = set(cells.labels)
    mapping = None if probabilities is None else \
        {k: v for k, v in probabilities.items() if k in present}
    return fit_all(cells, estimators=spec.estimators, variance=variance_used(spec),
                   assignment=spec.assignment, sampling=spec.sampling, level=spec.level,
                   offer_probability=mapping)

def variance_used(spec: Spec) -> str:
    """Return the variance flavour the core applies for `spec`: with a cluster column,
    ``stratified`` is the ``cluster`` form; every other flavour keeps its name."""
    if spec.columns.cluster is not None and spec.variance == "stratified":
        return "cluster"
    return spec.variance


def cluster_form(spec: Spec) -> str | None:
    """Return how the named cluster column enters the variance, or None without one.

    Parameters
    ----------
    spec : Spec
        The validated spec.

    Returns
    -------
    str or None
        One clause naming the clustered form of the spec's variance flavour.
    """
    column = spec.columns.cluster
    if column is None:
        return None
    return {
        "robust": "the cluster-robust sandwich over its clusters, without a small-sample "
        "scale",
        "robust_scaled": "the cluster-robust sandwich over its clusters, with the "
        "G(n-1)/((G-1)(n-k)) small-sample scale",
        "stratified": "the cluster form of the stratified variance (deviations summed within "
        "clusters, per-cell G/(G-1) scale), recorded as variance 'cluster'",
        "cluster": "the cluster form of the stratified variance (deviations summed within "
        "clusters, per-cell G/(G-1) scale)",
    }[spec.variance]


def _listed(items: Sequence[str]) -> str:
    text = ", ".join(items[:_LISTED])
    return text + (f" and {len(items) - _LISTED} more" if len(items) > _LISTED else "")


def data_warnings(spec: Spec, dataset: GroupedData) -> list[str]:
    """Return the warnings known before fitting: unused covariates, the clustered variance
    form, dropped rows.

    Parameters
    ----------
    spec : Spec
        The validated spec.
    dataset : GroupedData
        The run's data.

    Returns
    -------
    list of str
        Plain-language warnings.
    """
    out = []
    cols = spec.columns
    if cols.covariates and not dataset.roles.covariates:
        out.append("covariates " + ", ".join(cols.covariates) + " are not in the moment table "
                   "and were not used: no balance check, and every estimate is unadjusted")
    if cols.covariates and dataset.roles.covariates and dataset.from_moments and \
            variance_used(spec) not in ADJUSTED_VARIANCES:
        out.append("covariates " + ", ".join(cols.covariates) + " are used for balance and "
                   f"complier means but not for adjustment: variance '{spec.variance}' with "
                   "covariates needs the regression's sandwich from the unit rows, which a "
                   "moment table does not hold; run on the rows, or use variance 'stratified'")
    if cols.covariates and dataset.roles.covariates:
        g = dataset.groups
        for name, role in zip(cols.covariates, dataset.roles.covariates, strict=True):
            gaps = int((g["n"] - g[f"n_{role}"]).sum())
            if gaps:
                out.append(f"covariate '{name}' is missing in {gaps:,} of {dataset.n_rows:,} "
                           "rows: balance and complier means leave those rows out; the "
                           "adjusted estimates keep them, with the stratum's mean in place of "
                           "the gap and a missing indicator among the covariates")
    form = cluster_form(spec)
    if form is not None and spec.variance != "cluster":
        out.append(f"cluster column '{cols.cluster}' is used: variance '{spec.variance}' "
                   f"is {form}")
    if dataset.n_dropped:
        arms = {a[0]: a[1:] for a in dataset.dropped_by_arm}
        parts = ", ".join(
            f"{name}: {count}" + (f" ({arms[name][0]} offered, {arms[name][1]} not offered)"
                                  if name in arms else "")
            for name, count in dataset.dropped)
        out.append(f"{dataset.n_dropped:,} of {count(dataset.n_read, 'row')} "
                   f"{'was' if dataset.n_dropped == 1 else 'were'} dropped because a value "
                   f"was missing ({parts})")
    if not dataset.from_moments:
        out += pooled_share_warnings(spec, dataset)
    return out


def _count(row: Any) -> str:
    return f"'{row.label}' {row.n_offered} of {row.n} offered (expected " \
        f"{row.n} × {row.design_probability:g} = {row.expected_offered:.4g})"


def offer_count_warnings(outcome: str, comparison: Comparison) -> list[str]:
    """Return the offer-count warnings of one outcome, each naming it (see `_offer_counts`)."""
    return [f"'{outcome}': {body}" for body in _offer_counts(comparison)]


def _offer_counts(comparison: Comparison) -> list[str]:
    """Return the warnings of the core's offer-count check for one outcome.

    Parameters
    ----------
    comparison : Comparison
        The core's result; its `offer_counts` is None without design probabilities.

    Returns
    -------
    list of str
        The switch from block to independent assignment, naming the strata whose offered
        count is not within rounding of n x probability; and the strata whose binomial test
        rejects the design probability at the run's level.
    """
    counts = comparison.offer_counts
    if counts is None:
        return []
    out = []
    if counts.switched:
        off = [_count(r) for r in counts.rows if not r.within_rounding]
        verb = "is" if len(off) == 1 else "are"
        out.append(f"assignment '{counts.assignment_declared}' needs every "
                   "stratum's offered count within rounding of n × design probability, but "
                   f"{_listed(off)} {verb} not; the variance uses assignment "
                   f"'{counts.assignment_used}' (offers drawn unit by unit) instead; if offers "
                   "were drawn as fixed counts, check design.offer_probability")
    if counts.rejected:
        level = comparison.estimates[0].level if comparison.estimates else 0.95
        rejected = set(counts.rejected)
        named = [f"{_count(r)}, binomial p = {r.p_value:.2g}" for r in counts.rows
                 if r.label in rejected and r.p_value is not None]
        out.append("offered counts unlikely under the design probabilities "
                   f"(exact binomial test, p < {1 - level:.2g}) in {_listed(named)}; check "
                   "design.offer_probability against the randomization protocol")
    return out


def _weak(estimates: Iterable[Any]) -> list[str]:
    return [f"{e.estimator} F = {e.first_stage_f:.3g}" if e.first_stage_f is not None
            else f"{e.estimator} F undefined"
            for e in estimates if e.estimate is not None and e.weak_first_stage]


def fit_warnings(outcomes: Sequence[OutcomeResult]) -> list[str]:
    """Return the warnings that need the fits: attrition, undefined estimates and standard
    errors, weak first stages, the offer-count check.

    Parameters
    ----------
    outcomes : sequence of OutcomeResult
        One result per outcome.

    Returns
    -------
    list of str
        Plain-language warnings, naming the outcome each concerns.
    """
    out = []
    shared: dict[str, list[str]] = {}  # offer-count warnings, said once for equal outcomes
    for result in outcomes:
        name = result.outcome
        if result.missing:
            offered = sum(a.missing for a in result.attrition if a.arm == "offered")
            out.append(f"outcome '{name}' is missing in {count(result.missing, 'row')} "
                       f"({offered:,} offered, {result.missing - offered:,} not offered); "
                       f"{'it is' if result.missing == 1 else 'they are'} left out for this "
                       "outcome (attrition by stratum and arm in results.json)")
        test = result.attrition_test
        if test is not None and test.p_value is not None and test.p_value < ATTRITION_LEVEL:
            more = "offered" if (test.difference or 0.0) > 0 else "not offered"
            out.append(f"outcome '{name}' goes missing more often among the {more} "
                       f"(within strata {100 * (test.difference or 0.0):+.1f} points; "
                       f"Mantel-Haenszel p = {test.p_value:.3g}): attrition that differs by "
                       "arm can bias every estimate of this outcome; bound or model it "
                       "before relying on them")
        estimates = result.comparison.estimates
        undefined: dict[str, list[str]] = {}
        no_error: dict[str, list[str]] = {}
        for est in estimates:
            if est.estimate is None:
                undefined.setdefault(est.undefined_reason or "undefined", []).append(
                    est.estimator)
            elif est.std_error is None:
                no_error.setdefault(est.std_error_reason or "undefined", []).append(
                    est.estimator)
        for reason, names in undefined.items():
            out.append(f"'{name}': no estimate from {', '.join(names)}: {reason}; "
                       "only the weak-IV robust confidence set is reported")
        for reason, names in no_error.items():
            out.append(f"'{name}': no standard error for {', '.join(names)}: {reason}")
        for est in estimates:
            if est.estimate is not None and est.first_stage_f is None and \
                    est.first_stage_f_reason:
                out.append(f"'{name}': no first-stage F in this flavour for {est.estimator}: "
                           f"{est.first_stage_f_reason}")
        weak = _weak(estimates)
        if weak:
            out.append(f"'{name}': the first stage is weak ({', '.join(weak)}; below "
                       f"{WEAK_FIRST_STAGE_F:g}); read the weak-IV robust set rather than the "
                       "normal interval")
        for body in _offer_counts(result.comparison):
            shared.setdefault(body, []).append(name)
    out.extend(", ".join(f"'{n}'" for n in names) + f": {body}"
               for body, names in shared.items())
    return out


ATTRITION_LEVEL = 0.05
"""The differential-attrition test's p-value below which a warning is given."""
BALANCE_LEVEL = 0.05
"""The joint balance test's p-value below which a warning is given."""


def balance_warnings(profile: CovariateProfile | None) -> list[str]:
    """Return the warnings of the balance check: each covariate whose standardized difference
    between offer arms exceeds the flag, and a joint test that rejects balance."""
    if profile is None:
        return []
    out = []
    for row in profile.rows:
        if row.flagged:
            shown = ", ".join(f"{name} {value:+.2f}" for name, value in
                              (("within strata", row.smd_within),
                               ("weighted", row.smd_weighted)) if value is not None)
            out.append(f"covariate '{row.covariate}' differs between offer arms beyond the "
                       f"usual flag (|standardized difference| > {profile.flag:g}): {shown}; "
                       "check the randomization and consider adjusting for it")
    joint = profile.joint
    if joint.p_value is not None and joint.p_value < BALANCE_LEVEL:
        out.append(f"the joint balance test rejects equal covariate means between offer arms "
                   f"within strata (chi-squared {joint.statistic:.2f} on {joint.df} df, "
                   f"p = {joint.p_value:.3g}); chance imbalance happens in 1 of 20 trials, "
                   "but check how offers were assigned")
    return out

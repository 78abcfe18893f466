"""A short plain-language reading of a comparison, generated from its numbers.

Nothing is estimated here: the sentences quote the core's estimates (with the weak-IV robust
set when the first stage is weak), `Comparison.gap` (fixed effects minus the complier-weighted
estimate that is reported, with its t reference and p-value), each
`StratumRow.gap_contribution` (which strata pull it) and the diagnostics, plus fixed texts
for the assumptions behind a LATE and the limits of the numbers. Every word of direction
("above", "below") or of difference ("differs", "does not differ") is chosen from the sign and
the p-value it describes.
"""

from __future__ import annotations

import math
from typing import Any

from strativ.estimators import Comparison, Estimate, StratumRow
from strativ.estimators.options import WEAK_FIRST_STAGE_F

__all__ = [
    "ASSUMPTIONS",
    "REVIEW",
    "ESTIMATOR_NAMES",
    "format_number",
    "format_interval",
    "format_set",
    "format_f",
    "gap_differs",
    "negative_shares",
    "pulling_strata",
    "reading",
]

ASSUMPTIONS = (
    "Reading these as effects of take-up (a LATE) assumes: the offer was random within "
    "strata; the offer changes outcomes only through take-up; no one takes up because they "
    "were not offered; and one unit's offer does not change another's outcome."
)
"""The LATE assumptions, in one line (METHODS.md §1)."""
REVIEW = "These numbers support, not replace, expert review of the design and the data."
"""The caution printed with every report."""
ESTIMATOR_NAMES = {
    "fixed_effects": "fixed effects",
    "weighted": "weighted (IPW)",
    "interacted": "interacted",
}
"""Display name of each estimator."""
_COMPLIER_WEIGHTED = ("interacted", "weighted")
_PULLING = 3
_LISTED = 5


def format_number(value: float | None, *, digits: int = 4) -> str:
    """Return `value` with about `digits` significant digits ("undefined" for None).

    Parameters
    ----------
    value : float or None
        The number.
    digits : int, default=4
        Significant digits kept before the decimal point runs out.

    Returns
    -------
    str
        The formatted number, using a true minus sign in front (an exponent's sign stays
        ASCII: ``−1.218e-06``).
    """
    if value is None or not math.isfinite(value):
        return "undefined"
    if value == 0:
        return "0"
    size = abs(value)
    if size >= 1e7 or size < 1e-4:
        text = f"{value:.{digits - 1}e}"
    else:
        decimals = max(0, digits - 1 - math.floor(math.log10(size)))
        text = f"{value:,.{decimals}f}"
    # a true minus for the sign only: an exponent keeps the ASCII one, so that a copied
    # number parses once its leading sign is made ASCII
    return "\u2212" + text[1:] if text.startswith("-") else text


def format_interval(interval: Any) -> str:
    """Return ``[low, high]`` for a two-number interval, "undefined" for None."""
    if interval is None:
        return "undefined"
    low, high = interval
    return f"[{format_number(low)}, {format_number(high)}]"


def format_set(confidence_set: Any) -> str:
    """Return a confidence set so that its shape cannot be misread.

    Parameters
    ----------
    confidence_set : ConfidenceSet
        The core's Fieller / Anderson-Rubin set.

    Returns
    -------
    str
        ``[a, b]`` for a bounded set, ``(−∞, a] ∪ [b, ∞)`` for two rays (a = `left_ray_end`,
        b = `right_ray_start`), ``(−∞, ∞)`` for the whole line.
    """
    shape = confidence_set.shape
    if shape == "bounded":
        return f"[{format_number(confidence_set.lower)}, {format_number(confidence_set.upper)}]"
    if shape == "two_rays":
        return f"(\u2212\u221e, {format_number(confidence_set.left_ray_end)}] \u222a " \
            f"[{format_number(confidence_set.right_ray_start)}, \u221e)"
    return "(\u2212\u221e, \u221e)"


def format_f(estimate: Estimate) -> str:
    """Return the first-stage F of `estimate`, flagged ``weak`` when the core calls it weak."""
    text = format_number(estimate.first_stage_f, digits=3)
    return f"{text} weak" if estimate.weak_first_stage else text


def gap_differs(comparison: Comparison) -> bool | None:
    """Whether the gap's p-value is below one minus the level; None when it is undefined."""
    gap = comparison.gap
    if gap is None or gap.p_value is None or not comparison.estimates:
        return None
    return gap.p_value < 1.0 - comparison.estimates[0].level


def pulling_strata(rows: tuple[StratumRow, ...], count: int = _PULLING) -> list[StratumRow]:
    """Return the `count` strata with the largest absolute gap contribution, largest first."""
    usable = [r for r in rows if r.gap_contribution is not None]
    return sorted(usable, key=lambda r: abs(r.gap_contribution), reverse=True)[:count]


def negative_shares(rows: tuple[StratumRow, ...]) -> list[str]:
    """Return one line per kind of negative implied weight or compliance share, naming the
    strata where it occurs and why (a negative first stage), or an empty list.

    Parameters
    ----------
    rows : tuple of StratumRow
        The per-stratum table.

    Returns
    -------
    list of str
        Plain-language explanations for the per-stratum table.
    """
    negative = [r for r in rows if r.first_stage is not None and r.first_stage < 0]
    if not negative:
        return []
    names = ", ".join(f"{r.label} ({format_number(r.first_stage, digits=3)})"
                      for r in negative[:_LISTED])
    more = f" and {len(negative) - _LISTED} more" if len(negative) > _LISTED else ""
    return [f"Negative first stage in {names}{more}: there the offered took the programme up "
            "less often than the not offered, so the complier share is negative and the "
            "stratum enters the fixed-effects and complier weights with a negative weight "
            "(it pulls the estimates away from its own effect)."]


def _signed(value: float) -> str:
    text = format_number(value, digits=3)
    return text if text.startswith("\u2212") else "+" + text


def _p_text(p: float) -> str:
    return "p < 0.001" if p < 0.001 else f"p = {format_number(p, digits=2)}"


def _complier_shown(comparison: Comparison) -> str:
    """The estimator the gap is named after: the core's `complier_estimator`, or, when that
    one was not fitted, the fitted complier-weighted estimator with the same estimate (with
    realized offer shares the two coincide)."""
    gap = comparison.gap
    fitted = {e.estimator: e.estimate for e in comparison.estimates}
    if gap.complier_estimator in fitted:
        return gap.complier_estimator
    for name in _COMPLIER_WEIGHTED:
        value = fitted.get(name)
        if value is not None and gap.complier_estimate is not None and \
                abs(value - gap.complier_estimate) <= 1e-12 * max(1.0, abs(value)):
            return name
    return gap.complier_estimator


def _headline(comparison: Comparison, level: float) -> list[str]:
    """The effect a reader should quote: the complier-weighted estimate (else fixed
    effects), with its normal interval, or its weak-IV robust set when the first stage is
    weak or no standard error exists; then any other estimator whose first stage is weak."""
    gap = comparison.gap
    names = [e.estimator for e in comparison.estimates]
    main_name = _complier_shown(comparison) if gap is not None else \
        next((n for n in _COMPLIER_WEIGHTED if n in names), names[0])
    if main_name not in names:
        main_name = next((n for n in _COMPLIER_WEIGHTED if n in names), names[0])
    out = []
    ordered = sorted(comparison.estimates, key=lambda e: e.estimator != main_name)
    for est in ordered:
        if est.estimate is None:
            continue
        main = est.estimator == main_name
        name = ESTIMATOR_NAMES[est.estimator]
        what = f"The LATE from the {name} estimator" \
            if main and est.estimator in _COMPLIER_WEIGHTED else \
            f"The {name.replace('fixed effects', 'fixed-effects')} estimate"
        value = format_number(est.estimate)
        robust = f"its {level:.0%} weak-IV robust set {format_set(est.confidence_set)}"
        if est.weak_first_stage:
            out.append(f"{what} is {value}, but its first stage is weak (F = "
                       f"{format_number(est.first_stage_f, digits=3)}, below "
                       f"{WEAK_FIRST_STAGE_F:g}): read {robust} rather than the normal "
                       "interval.")
        elif est.std_error is None:
            out.append(f"{what} is {value} without a standard error "
                       f"({est.std_error_reason or 'undefined'}); {robust}.")
        elif main:
            out.append(f"{what} is {value} ({level:.0%} interval "
                       f"{format_interval(est.interval)}).")
    return out


def _gap_sentences(comparison: Comparison, level: float) -> list[str]:
    """How the fixed-effects estimate relates to the complier-weighted one that is reported:
    every word of direction and of difference is read off the numbers."""
    gap = comparison.gap
    other = ESTIMATOR_NAMES[_complier_shown(comparison)]
    if gap.estimate is None:
        return [f"The fixed-effects and {other} estimates are not compared here: "
                f"{gap.reason or 'one of them is undefined'}."]
    direction = "above" if gap.estimate > 0 else "below" if gap.estimate < 0 else "equal to"
    where = f"The fixed-effects estimate ({format_number(gap.fixed_effects_estimate)}) lies " \
        f"{direction} the LATE from the {other} estimator " \
        f"({format_number(gap.complier_estimate)}): fixed effects minus {other} is " \
        f"{format_number(gap.estimate)}"
    differs = gap_differs(comparison)
    if differs is None:
        reason = gap.reason or "its standard error is undefined"
        if gap.estimate == 0:
            return [f"The fixed-effects estimate equals the LATE from the {other} estimator "
                    f"({format_number(gap.complier_estimate)}); they are not compared in "
                    f"standard errors here: {reason}."]
        return [f"{where}; they are not compared in standard errors here: {reason}."]
    df = "" if gap.df is None else f" on {format_number(gap.df, digits=3)} degrees of freedom"
    stats = f"t = {format_number(gap.t, digits=3)}{df}, {_p_text(gap.p_value)}, " \
        f"{level:.0%} interval {format_interval(gap.interval)}"
    if differs:
        out = [f"{where} ({stats}), so it differs beyond noise at the {level:.0%} level: "
               "fixed effects does not estimate the LATE here."]
        pulling = pulling_strata(comparison.strata.rows)
        if pulling:
            parts = ", ".join(f"{r.label} ({_signed(r.gap_contribution)})" for r in pulling)
            top = pulling[0]
            out.append(
                f"Strata that pull it most: {parts}. For example, {top.label} (offer share "
                f"{format_number(top.offer_share, digits=2)}) gets weight "
                f"{format_number(top.weight_fixed_effects, digits=2)} under fixed effects but "
                f"{format_number(top.weight_complier, digits=2)} under complier weights; fixed "
                "effects favour strata whose offer share is near one half.")
        return out
    return [f"{where} ({stats}), so it does not differ beyond noise at the {level:.0%} level: "
            "the two weightings agree here."]


def _diagnostics(comparison: Comparison, level: float) -> list[str]:
    """Sentences for the constant-effect test and first stages negative beyond noise."""
    out = []
    test = comparison.constant_effect
    if test is not None and test.statistic is not None:
        p = test.p_value if test.p_value is not None else test.p_value_asymptotic
        stat = f"J = {format_number(test.statistic, digits=3)} on {test.df} degrees of " \
            f"freedom, "
        if test.p_value is not None and test.draws:
            stat += f"{_p_text(test.p_value)} calibrated from {test.draws:,} draws under the " \
                f"fitted common effect {format_number(test.fitted_common_effect)} " \
                f"(seed {test.seed})"
            if test.p_value_asymptotic is not None:
                stat += f"; chi-squared {_p_text(test.p_value_asymptotic)}"
        elif test.p_value is not None:
            stat += f"{_p_text(test.p_value)} at the fitted common effect " \
                f"{format_number(test.fitted_common_effect)}"
        else:
            stat += f"chi-squared {_p_text(p)}"
        if p is not None and p < 1.0 - level:
            out.append(f"The test that every stratum has the same effect rejects it ({stat}): "
                       "effects differ across strata, which is when the weightings matter.")
        elif p is not None:
            out.append(f"The test that every stratum has the same effect does not reject it "
                       f"({stat}); with equal effects every weighting targets the same number.")
    elif test is not None and test.reason:
        out.append(f"The test that every stratum has the same effect is undefined here: "
                   f"{test.reason}.")
    negative = comparison.negative_first_stage
    if negative:
        names = ", ".join(str(n.label) for n in negative[:_LISTED])
        more = f" and {len(negative) - _LISTED} more" if len(negative) > _LISTED else ""
        out.append(f"The first stage is negative beyond noise in {names}{more}: there the "
                   "offer lowered take-up, so some units may take up because they were not "
                   "offered, which the LATE assumptions rule out.")
    return out


def reading(comparison: Comparison) -> list[str]:
    """Return the plain-language reading of one comparison, one sentence per item.

    Parameters
    ----------
    comparison : Comparison
        The core's result for one outcome.

    Returns
    -------
    list of str
        The effect to quote (with its normal interval, or its weak-IV robust set when the
        first stage is weak); whether the fixed-effects estimate lies above or below the
        complier-weighted one that is reported (from the sign of the gap) and whether it
        differs beyond noise (from the gap's p-value against one minus the level), or why
        they are not compared; which strata pull it; the constant-effect test; strata
        whose first stage is negative beyond noise; and the stratum-size average when it is
        fragile. When no estimator gives a number, one sentence saying why.
    """
    out: list[str] = []
    if comparison.estimates and all(e.estimate is None for e in comparison.estimates):
        reason = comparison.estimates[0].undefined_reason or "every estimate is undefined"
        return [f"No estimator gives a number here: {reason}. The weak-IV robust sets above "
                "show which effects the data do not rule out."]
    names = {e.estimator for e in comparison.estimates}
    level = comparison.estimates[0].level if comparison.estimates else 0.95
    out.extend(_headline(comparison, level))
    if comparison.gap is not None and "fixed_effects" in names:
        out.extend(_gap_sentences(comparison, level))
    else:
        out.append("Fit both fixed_effects and a complier-weighted estimator (weighted or "
                   "interacted) to see how far apart they are.")
    out.extend(_diagnostics(comparison, level))
    size = comparison.size_weighted
    if size.estimate is not None and size.fragile:
        out.append(f"The stratum-size average of stratum effects "
                   f"({format_number(size.estimate)}) is fragile: {size.reason}.")
    return out

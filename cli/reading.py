"""A short plain-language reading of a comparison, generated from its numbers.

Nothing is estimated here: the sentences quote the core's `Comparison.gap` (how far the
fixed-effects estimate lies from the complier-weighted one, in standard errors of the
difference) and each `StratumRow.gap_contribution` (which strata pull it), plus fixed texts
for the assumptions behind a LATE and the limits of the numbers.
"""

from __future__ import annotations

import math
from typing import Any

from strativ.estimators import Comparison, Estimate, StratumRow

__all__ = [
    "ASSUMPTIONS",
    "REVIEW",
    "ESTIMATOR_NAMES",
    "format_number",
    "format_interval",
    "format_set",
    "gap_differs",
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
        The formatted number, using a true minus sign.
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
    return text.replace("-", "\u2212")


def format_interval(interval: Any) -> str:
    """Return ``[low, high]`` for a two-number interval, "undefined" for None."""
    if interval is None:
        return "undefined"
    low, high = interval
    return f"[{format_number(low)}, {format_number(high)}]"


def format_set(shape: str, lower: float | None, upper: float | None) -> str:
    """Return a confidence set of the given shape in words and brackets."""
    if shape == "bounded":
        return f"[{format_number(lower)}, {format_number(upper)}]"
    if shape == "two_rays":
        return f"outside ({format_number(lower)}, {format_number(upper)})"
    return "every value"


def gap_differs(comparison: Comparison) -> bool | None:
    """Whether the gap's interval excludes zero; None when the gap is undefined."""
    gap = comparison.gap
    if gap is None or gap.interval is None:
        return None
    low, high = gap.interval
    return not low <= 0.0 <= high


def pulling_strata(rows: tuple[StratumRow, ...], count: int = _PULLING) -> list[StratumRow]:
    """Return the `count` strata with the largest absolute gap contribution, largest first."""
    usable = [r for r in rows if r.gap_contribution is not None]
    return sorted(usable, key=lambda r: abs(r.gap_contribution), reverse=True)[:count]


def _signed(value: float) -> str:
    text = format_number(value, digits=3)
    return text if text.startswith("\u2212") else "+" + text


def _complier_estimate(comparison: Comparison) -> Estimate | None:
    for name in _COMPLIER_WEIGHTED:
        for estimate in comparison.estimates:
            if estimate.estimator == name:
                return estimate
    return None


def _p_text(p: float) -> str:
    return "p < 0.001" if p < 0.001 else f"p = {format_number(p, digits=2)}"


def _diagnostics(comparison: Comparison, level: float) -> list[str]:
    """Sentences for the constant-effect test and first stages negative beyond noise."""
    out = []
    test = comparison.constant_effect
    if test is not None and test.statistic is not None:
        stat = f"J = {format_number(test.statistic, digits=3)} on {test.df} degrees of " \
            f"freedom, {_p_text(test.p_value)}"
        if test.p_value < 1.0 - level:
            out.append(f"The test that every stratum has the same effect rejects it ({stat}): "
                       "effects differ across strata, which is when the weightings matter.")
        else:
            out.append(f"The test that every stratum has the same effect does not reject it "
                       f"({stat}); with equal effects every weighting targets the same number.")
    negative = comparison.negative_first_stage
    if negative:
        names = ", ".join(str(n.label) for n in negative[:5])
        more = f" and {len(negative) - 5} more" if len(negative) > 5 else ""
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
        How far the fixed-effects estimate lies from the complier-weighted one (in standard
        errors of the difference) and whether that exceeds the noise at the comparison's
        level, or why they are not compared; which strata pull it and why; the
        constant-effect test; strata whose first stage is negative beyond noise; and the
        stratum-size average when it is fragile. When no estimator gives a number, one
        sentence saying why.
    """
    out: list[str] = []
    if comparison.estimates and all(e.estimate is None for e in comparison.estimates):
        reason = comparison.estimates[0].undefined_reason or "every estimate is undefined"
        return [f"No estimator gives a number here: {reason}. The weak-IV robust sets above "
                "show which effects the data do not rule out."]
    gap = comparison.gap
    names = {e.estimator for e in comparison.estimates}
    level = comparison.estimates[0].level if comparison.estimates else 0.95
    complier = _complier_estimate(comparison)
    if gap is not None and gap.z is not None and "fixed_effects" in names and complier:
        fe = comparison.get("fixed_effects")
        differs = gap_differs(comparison)
        where = f"The fixed-effects estimate ({format_number(fe.estimate)}) lies " \
            f"{format_number(abs(gap.z), digits=2)} standard errors of the difference " \
            f"{'above' if gap.z > 0 else 'below'} the complier-weighted LATE " \
            f"({format_number(complier.estimate)})"
        if differs:
            out.append(f"{where}: it differs beyond noise at the {level:.0%} level "
                       f"(gap {format_number(gap.estimate)}, interval "
                       f"{format_interval(gap.interval)}), so it does not estimate the LATE "
                       "here.")
        else:
            out.append(f"{where}: within noise at the {level:.0%} level (gap interval "
                       f"{format_interval(gap.interval)}), so the two weightings agree here.")
        pulling = pulling_strata(comparison.strata.rows)
        if differs and pulling:
            parts = ", ".join(f"{r.label} ({_signed(r.gap_contribution)})" for r in pulling)
            top = pulling[0]
            out.append(
                f"Strata that pull it most: {parts}. For example, {top.label} (offer share "
                f"{format_number(top.offer_share, digits=2)}) gets weight "
                f"{format_number(top.weight_fixed_effects, digits=2)} under fixed effects but "
                f"{format_number(top.weight_complier, digits=2)} under complier weights; fixed "
                "effects favour strata whose offer share is near one half.")
    elif "fixed_effects" not in names or complier is None:
        out.append("Fit both fixed_effects and a complier-weighted estimator (weighted or "
                   "interacted) to see how far apart they are.")
    elif gap is not None and gap.reason:
        out.append(f"The fixed-effects and complier-weighted estimates are not compared in "
                   f"standard errors here: {gap.reason}.")
    out.extend(_diagnostics(comparison, level))
    size = comparison.size_weighted
    if size.estimate is not None and size.fragile:
        out.append(f"The stratum-size average of stratum effects "
                   f"({format_number(size.estimate)}) is fragile: {size.reason}.")
    return out

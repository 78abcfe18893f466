"""The report's sentences beyond the comparison's reading, each generated from the numbers.

`cli.reading.reading` reads the comparison (the effect to quote, the gap between the
weightings, the constant-effect test). This module adds what a report shows next to it:
where the two weightings put their weight (`weight_sentence`), and one or two sentences per
diagnostic panel. Every word of size or direction is chosen from the number it describes.
"""

from __future__ import annotations

from typing import Any

from .counting import count
from .reading import format_interval, format_number
from .results_read import OutcomeReport, ResultsFile

__all__ = ["NEAR_HALF", "diagnostic_sentences", "near_half_weights", "weight_sentence"]

NEAR_HALF = (0.35, 0.65)
"""Offer shares counted as near one half in `weight_sentence`."""


def _p(p: float | None) -> str:
    return "p undefined" if p is None else ("p < 0.001" if p < 0.001 else f"p = {p:.3f}")


def near_half_weights(report: OutcomeReport) -> tuple[int, float, float]:
    """(strata with offer share in `NEAR_HALF`, their share of the fixed-effects weight,
    their share of the complier weight); weights as absolute values."""
    rows = report.comparison.strata.rows
    near = [r for r in rows if NEAR_HALF[0] <= r.offer_share <= NEAR_HALF[1]]
    fe = sum(abs(r.weight_fixed_effects) for r in rows)
    cw = sum(abs(r.weight_complier) for r in rows)
    fe_near = sum(abs(r.weight_fixed_effects) for r in near) / fe if fe > 0 else 0.0
    cw_near = sum(abs(r.weight_complier) for r in near) / cw if cw > 0 else 0.0
    return len(near), fe_near, cw_near


def weight_sentence(report: OutcomeReport) -> str:
    """Where the two weightings put their weight: the share held by strata whose offer share
    is near one half under each, compared."""
    n_near, fe, cw = near_half_weights(report)
    total = len(report.comparison.strata.rows)
    if n_near == 0 or n_near == total:
        which = "none" if n_near == 0 else "all"
        return (f"In {which} of the {count(total, 'stratum', 'strata')} is the offer share "
                f"between {NEAR_HALF[0]:.0%} and {NEAR_HALF[1]:.0%}, so offer shares do not "
                "separate the two weightings here; the figure shows each stratum's weights.")
    if abs(fe - cw) < 0.02:
        relation, why = "about as much as", ("so here the offer shares barely separate the "
                                             "two weightings")
    elif fe > cw:
        relation, why = "more than", ("fixed effects weight a stratum by how close its offer "
                                      "share is to one half, complier weights by its share of "
                                      "the compliers")
    else:
        relation, why = "less than", ("so here the strata's sizes and complier shares, not "
                                      "their offer shares, separate the two weightings")
    return (f"The {count(n_near, 'stratum', 'strata')} with an offer share between "
            f"{NEAR_HALF[0]:.0%} and {NEAR_HALF[1]:.0%} hold {fe:.0%} of the fixed-effects "
            f"weight, {relation} the {cw:.0%} they hold under complier weights: {why}.")


def _attrition(report: OutcomeReport) -> list[str]:
    test = report.attrition_test
    if test is None:
        return []
    counts = (f"{test.missing_offered:,} of {test.offered:,} offered and "
              f"{test.missing_not_offered:,} of {test.not_offered:,} not offered lack it")
    if test.missing_offered + test.missing_not_offered == 0:
        return [f"No row lacks the outcome {report.outcome} in either arm."]
    if test.difference is None:
        return [f"Missing {report.outcome} by arm: {counts}; no stratum has both arms to "
                "compare them within."]
    p = test.p_value
    verdict = "" if p is None else (" beyond noise" if p < 0.05 else ", within noise")
    if round(abs(test.difference), 3) == 0:
        return [f"Within strata, the offered and the not offered lack {report.outcome} "
                f"equally often ({_p(p)}); {counts}."]
    more = "offered" if test.difference > 0 else "not offered"
    return [f"Within strata, {abs(test.difference):.1%} more of the {more} lack the outcome "
            f"{report.outcome}{verdict} ({_p(p)}); {counts}."]


def _randomization(report: OutcomeReport) -> list[str]:
    test = report.randomization
    if test is None:
        return []
    how = "every assignment" if test.exact else f"{test.draws:,} re-drawn assignments"
    seed = "" if test.seed is None else f", seed {test.seed}"
    interval = format_interval(test.interval) if test.interval is not None else \
        f"undefined ({test.interval_reason})"
    return [f"Re-drawing the offers within strata ({how}{seed}), the effect "
            f"{format_number(test.null_effect)} is rejected with {_p(test.p_value)}; the "
            f"{test.level:.0%} randomization interval is {interval}."]


def _planning(report: OutcomeReport) -> list[str]:
    plan = report.planning
    if plan is None:
        return []
    if plan.mde is None:
        return [f"No minimum detectable effect: {plan.reason or 'undefined'}."]
    out = [f"At {count(plan.rows, 'row')} the smallest effect detected with {plan.power:.0%} "
           f"power at the {plan.level:.0%} level is {format_number(plan.mde)}."]
    if plan.target_effect is not None and plan.rows_needed is not None:
        further = plan.further_rows or 0
        out.append(f"An effect of {format_number(plan.target_effect)} needs about "
                   f"{count(plan.rows_needed, 'row')} at today's complier share and variance"
                   + (f", {further:,} more than today." if further > 0
                      else ", which today's rows already reach."))
    return out


def _sensitivity(report: OutcomeReport) -> list[str]:
    s = report.sensitivity
    if s is None:
        return []
    out = []
    if s.rows:
        low, high = s.rows[0], s.rows[-1]
        out.append(f"If the offer itself moved {report.outcome} by {format_number(low.delta)} "
                   f"to {format_number(high.delta)}, the LATE would range from "
                   f"{format_number(low.estimate)} to {format_number(high.estimate)}.")
    if s.delta_to_zero is not None:
        out.append(f"A direct effect of the offer of {format_number(s.delta_to_zero)} would "
                   "bring the interval to zero.")
    return out


def _balance(results: ResultsFile) -> list[str]:
    profile = results.covariates
    if profile is None:
        return []
    flagged = [r.covariate for r in profile.rows if r.flagged]
    p = profile.joint.p_value
    if p is None:
        joint = f"The joint test of balance is undefined ({profile.joint.reason or 'no test'})."
    else:
        verdict = "rejects" if p < 0.05 else "does not reject"
        joint = f"The joint test of balance {verdict} balance ({_p(p)})."
    total = count(len(profile.rows), "covariate", "covariates")
    if not flagged:
        return [f"No standardized mean difference exceeds {profile.flag:g} in absolute value "
                f"({total}).", joint]
    verb = "exceeds" if len(flagged) == 1 else "exceed"
    return [f"{len(flagged)} of {total} {verb} |SMD| {profile.flag:g}: {', '.join(flagged)}.",
            joint]


def _waves(results: ResultsFile) -> list[str]:
    waves = results.waves
    if waves is None:
        return []
    source = f"values of {waves.column}" if waves.column else "input files"
    rule = "each (stratum × wave) is its own stratum" if waves.strata == "separate" \
        else "strata pool their rows across waves"
    out = [f"{count(len(waves.names), 'wave', 'waves')} ({source}); {rule}."]
    test = waves.share_test
    if test is not None and test.p_value is not None:
        verdict = "differ beyond noise" if test.p_value < 0.05 else "do not differ beyond noise"
        out.append(f"Offer shares of pooled strata {verdict} between waves "
                   f"(chi-squared {test.statistic:.1f} on {test.df} df, {_p(test.p_value)}).")
    return out


def diagnostic_sentences(results: ResultsFile, report: OutcomeReport | None,
                         panel: str) -> list[str]:
    """The sentences of one diagnostic panel.

    Parameters
    ----------
    results : ResultsFile
        The rebuilt results file.
    report : OutcomeReport or None
        The outcome the panel belongs to (None for run-wide panels).
    panel : str
        ``attrition``, ``randomization``, ``planning``, ``sensitivity`` (per outcome) or
        ``balance``, ``waves`` (run-wide).

    Returns
    -------
    list of str
        Empty when the run has nothing for the panel.
    """
    per_outcome: dict[str, Any] = {"attrition": _attrition, "randomization": _randomization,
                                   "planning": _planning, "sensitivity": _sensitivity}
    if panel in per_outcome:
        return per_outcome[panel](report) if report is not None else []
    return {"balance": _balance, "waves": _waves}[panel](results)

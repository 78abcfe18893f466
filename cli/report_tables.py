"""The report's tables, built once from a results file and written as Markdown, LaTeX or HTML.

A `ReportTable` holds the caption, column heads, rows of text and a note; `comparison_table`
and `strata_table` fill it from one outcome's rebuilt results, and `to_markdown` / `to_latex`
write it (the HTML template reads the same object). Numbers are written so that they parse
when copied: an ASCII minus, no thousands separators, an exponent for very large or small
values (LaTeX gets it as a power of ten in math mode).
"""

from __future__ import annotations

import math
import re
from dataclasses import dataclass
from typing import Any

from .counting import count
from .reading import ESTIMATOR_NAMES
from .results_read import OutcomeReport, ResultsFile

__all__ = ["ReportTable", "balance_table", "comparison_table", "families_table",
           "offer_counts_table", "plain_number", "strata_table", "tex_text", "to_latex",
           "to_markdown", "waves_table"]

MISSING = "\u2013"
"""Shown for an undefined number."""


def plain_number(value: float | None, *, digits: int = 4) -> str:
    """`value` with about `digits` significant digits, ASCII minus, no grouping (`MISSING`
    for None or a non-finite value)."""
    if value is None or not math.isfinite(value):
        return MISSING
    if value == 0:
        return "0"
    size = abs(value)
    if size >= 1e7 or size < 1e-4:
        return f"{value:.{digits - 1}e}"
    decimals = max(0, digits - 1 - math.floor(math.log10(size)))
    text = f"{value:.{decimals}f}"
    return "0" if float(text) == 0 else text


def _share(value: float | None) -> str:
    return MISSING if value is None or not math.isfinite(value) else f"{100 * value:.1f}%"


def _count(value: int | None) -> str:
    return MISSING if value is None else str(int(value))


@dataclass(frozen=True, slots=True)
class ReportTable:
    """One table of the report, as text cells."""

    key: str
    """Short identifier (``comparison``, ``strata``), used in file and anchor names."""
    caption: str
    """What the table shows."""
    columns: tuple[str, ...]
    """Column heads."""
    rows: tuple[tuple[str, ...], ...]
    """Cells, row by row (the first column names the row)."""
    note: str
    """How the numbers were obtained, in one line."""


def _interval(interval: Any) -> str:
    if interval is None:
        return MISSING
    return f"[{plain_number(interval[0])}, {plain_number(interval[1])}]"


def _note(results: ResultsFile, report: OutcomeReport) -> str:
    comparison = report.comparison
    first = comparison.estimates[0] if comparison.estimates else None
    level = f"{first.level:.0%}" if first else ""
    excluded = len(comparison.strata.excluded)
    parts = [f"Variance: {first.variance}" if first else "",
             f"{level} intervals" if first else "",
             f"N = {count(report.rows_used, 'row')} in "
             f"{count(len(comparison.strata.rows), 'stratum', 'strata')}",
             f"{count(excluded, 'stratum', 'strata')} excluded"]
    if results.blinded is not None:
        parts.append(f"BLINDED rehearsal (seed {results.blinded}): no estimate is a result")
    parts.append("a LATE assumes the offer random within strata, affecting outcomes only "
                 "through take-up, no defiers and no interference")
    return "; ".join(p for p in parts if p) + "."


def comparison_table(results: ResultsFile, report: OutcomeReport) -> ReportTable:
    """The estimators side by side for one outcome (with covariate-adjusted rows, if any)."""
    level = report.comparison.estimates[0].level if report.comparison.estimates else 0.95
    rows = []
    for e in report.comparison.estimates:
        rows.append((ESTIMATOR_NAMES.get(e.estimator, e.estimator), plain_number(e.estimate),
                     plain_number(e.std_error), _interval(e.interval),
                     plain_number(e.first_stage_f, digits=3), _count(e.n_strata),
                     _count(e.n_units)))
    for a in report.adjusted:
        e = a.fit
        rows.append((f"{ESTIMATOR_NAMES.get(a.estimator, a.estimator)}, with covariates",
                     plain_number(e.estimate), plain_number(e.std_error), _interval(e.interval),
                     plain_number(e.first_stage_f, digits=3), _count(e.n_strata),
                     _count(e.n_units)))
    gap = report.comparison.gap
    if gap is not None and gap.estimate is not None:
        rows.append(("fixed effects minus complier-weighted", plain_number(gap.estimate),
                     plain_number(gap.std_error), _interval(gap.interval), MISSING, MISSING,
                     MISSING))
    return ReportTable(
        key="comparison",
        caption=f"Effect of take-up on {report.outcome}: each estimator on the same sample",
        columns=("estimator", "estimate", "std. error", f"{level:.0%} interval",
                 "first-stage F", "strata", "rows"),
        rows=tuple(rows), note=_note(results, report))


def strata_table(results: ResultsFile, report: OutcomeReport) -> ReportTable:
    """Per stratum: size, offer share, take-up, first stage, ITT, effect and both weights."""
    rows = tuple(
        (str(r.label), str(r.n), _share(r.offer_share), _share(r.take_up_offered),
         _share(r.take_up_not_offered), plain_number(r.first_stage), plain_number(r.itt),
         plain_number(r.effect), plain_number(r.effect_std_error),
         plain_number(r.weight_fixed_effects, digits=3),
         plain_number(r.weight_complier, digits=3))
        for r in report.comparison.strata.rows)
    return ReportTable(
        key="strata",
        caption=f"{report.outcome} by stratum: the weight each estimator gives every stratum",
        columns=("stratum", "rows", "offer share", "take-up offered", "take-up not offered",
                 "first stage", "ITT", "effect", "std. error", "fixed-effects weight",
                 "complier weight"),
        rows=rows, note=_note(results, report))


def _md_cell(text: str) -> str:
    return text.replace("|", "\\|").replace("\n", " ")


def to_markdown(table: ReportTable) -> str:
    """The table as a Markdown pipe table with its caption above and note below."""
    head = "| " + " | ".join(map(_md_cell, table.columns)) + " |"
    rule = "|" + "|".join(":---" if i == 0 else "---:" for i in range(len(table.columns))) + "|"
    body = ["| " + " | ".join(map(_md_cell, row)) + " |" for row in table.rows]
    return "\n".join([f"**{_md_cell(table.caption)}**", "", head, rule, *body, "",
                      f"*{_md_cell(table.note)}*", ""])


_TEX_SPECIAL = {"\\": r"\textbackslash{}", "&": r"\&", "%": r"\%", "$": r"\$", "#": r"\#",
                "_": r"\_", "{": r"\{", "}": r"\}", "~": r"\textasciitilde{}",
                "^": r"\textasciicircum{}", "\u2013": "--"}
_NUMBER = re.compile(r"^-?\d+(\.\d+)?(e[+-]\d+)?%?$")


def tex_text(text: str) -> str:
    return "".join(_TEX_SPECIAL.get(ch, ch) for ch in text)


def _tex_number(text: str) -> str:
    share = text.endswith("%")
    core = text[:-1] if share else text
    mantissa, _, exponent = core.partition("e")
    out = mantissa if not exponent else f"{mantissa}\\times 10^{{{int(exponent)}}}"
    return f"${out}$" + (r"\%" if share else "")


def _tex_cell(text: str) -> str:
    if _NUMBER.match(text):
        return _tex_number(text)
    if text.startswith("[") and text.endswith("]") and ", " in text:
        low, high = text[1:-1].split(", ")
        return f"[{_tex_cell(low)}, {_tex_cell(high)}]"
    return tex_text(text)


def to_latex(table: ReportTable) -> str:
    """The table as a LaTeX ``table`` with booktabs rules, caption and note."""
    spec = "l" + "r" * (len(table.columns) - 1)
    lines = [r"\begin{table}[htbp]", r"\centering", r"\small",
             rf"\caption{{{tex_text(table.caption)}}}",
             rf"\label{{tab:{table.key}}}", rf"\begin{{tabular}}{{{spec}}}", r"\toprule",
             " & ".join(tex_text(c) for c in table.columns) + r" \\", r"\midrule"]
    lines += [" & ".join(_tex_cell(c) for c in row) + r" \\" for row in table.rows]
    lines += [r"\bottomrule", r"\end{tabular}",
              rf"\par\smallskip\footnotesize {tex_text(table.note)}", r"\end{table}", ""]
    return "\n".join(lines)


def _p_cell(p: float | None) -> str:
    return MISSING if p is None else ("<0.001" if p < 0.001 else f"{p:.3f}")


def balance_table(results: ResultsFile) -> ReportTable | None:
    """Covariate means by arm, standardized differences and the compliers' means."""
    profile = results.covariates
    if profile is None:
        return None
    rows = tuple(
        (r.covariate, plain_number(r.mean_offered), plain_number(r.mean_not_offered),
         plain_number(r.smd_raw, digits=2), plain_number(r.smd_within, digits=2),
         plain_number(r.smd_weighted, digits=2), "yes" if r.flagged else "no",
         plain_number(r.mean_all), plain_number(r.mean_compliers))
        for r in profile.rows)
    joint = profile.joint
    return ReportTable(
        key="balance", caption="Baseline covariates: balance between offer arms and the "
        "compliers' profile",
        columns=("covariate", "mean offered", "mean not offered", "SMD raw", "SMD within strata",
                 "SMD weighted", f"|SMD| > {profile.flag:g}", "mean, all", "mean, compliers"),
        rows=rows,
        note=f"Joint test of balance: statistic {plain_number(joint.statistic)} on {joint.df} "
             f"df, p {_p_cell(joint.p_value)}; offer probabilities {profile.probabilities}.")


def waves_table(results: ResultsFile) -> ReportTable | None:
    """Each wave fitted alone: rows and each estimator's estimate and standard error."""
    waves = results.waves
    if waves is None or not waves.fits:
        return None
    names = list(dict.fromkeys(e["estimator"] for f in waves.fits for e in f.estimates))
    rows = []
    for fit in waves.fits:
        by = {e["estimator"]: e for e in fit.estimates}
        cells = []
        for name in names:
            e = by.get(name)
            cells.append(MISSING if e is None or e["estimate"] is None else
                         f"{plain_number(e['estimate'])} ({plain_number(e['std_error'])})")
        rows.append((fit.wave, fit.outcome, str(fit.rows), *cells))
    return ReportTable(
        key="waves", caption="Each wave fitted alone (standard errors in brackets)",
        columns=("wave", "outcome", "rows", *(ESTIMATOR_NAMES.get(n, n) for n in names)),
        rows=tuple(rows),
        note="Each (stratum x wave) is its own stratum." if waves.strata == "separate"
        else "Strata pool their rows across waves.")


def families_table(results: ResultsFile) -> ReportTable | None:
    """p-values of a zero effect across outcomes, unadjusted, Holm and Benjamini-Hochberg."""
    if not results.families:
        return None
    rows = []
    for family in results.families:
        label = ESTIMATOR_NAMES.get(family.estimator, family.estimator) + (
            ", with covariates" if family.with_covariates else "")
        p = family.p_values
        for i, outcome in enumerate(family.outcomes):
            rows.append((label, outcome, _p_cell(p.p_value[i]), _p_cell(p.holm[i]),
                         _p_cell(p.benjamini_hochberg[i])))
    return ReportTable(
        key="outcomes", caption="Several outcomes: p-values adjusted for multiplicity",
        columns=("estimator", "outcome", "p", "Holm", "Benjamini-Hochberg"), rows=tuple(rows),
        note=f"{count(len(results.families[0].outcomes), 'outcome')} per "
             "family; Holm controls the family-wise error, Benjamini-Hochberg the false "
             "discovery rate.")


def offer_counts_table(report: OutcomeReport) -> ReportTable | None:
    """Realized against design offer counts per stratum (design probabilities given)."""
    counts = report.comparison.offer_counts
    if counts is None:
        return None
    rows = tuple((str(r.label), str(r.n), str(r.n_offered), plain_number(r.design_probability),
                  plain_number(r.expected_offered), "yes" if r.within_rounding else "no",
                  _p_cell(r.p_value)) for r in counts.rows)
    used = counts.assignment_used
    return ReportTable(
        key="offer-counts", caption=f"{report.outcome}: offered counts against the design",
        columns=("stratum", "rows", "offered", "design probability", "expected offered",
                 "within rounding", "binomial p"), rows=rows,
        note=f"Assignment declared {counts.assignment_declared}, used {used}"
             + ("; switched because some counts are off the design." if counts.switched
                else "."))

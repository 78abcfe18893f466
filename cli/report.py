"""Reports people read, built from a results file alone: HTML, Markdown and LaTeX.

`report_texts` turns a `ResultsFile` (results.json rebuilt by `results_read`) into the text of
each asked format: a self-contained HTML page (figures inline as SVG, styles inline, a
content policy that forbids any request), a Markdown and a LaTeX (booktabs) document of the
tables with the reading. The same `ReportTable` objects feed all three; every sentence comes
from `reading.reading` or `report_words`, generated from the numbers. `figure_files` gives the
figures as separate SVG or PNG files on request.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any

from .counting import count
from .reading import ASSUMPTIONS, REVIEW, reading
from .report_tables import (
    ReportTable,
    balance_table,
    comparison_table,
    families_table,
    offer_counts_table,
    strata_table,
    to_latex,
    to_markdown,
    waves_table,
)
from .report_words import diagnostic_sentences, weight_sentence
from .results_read import OutcomeReport, ResultsFile

__all__ = ["REPORT_FILES", "REPORT_FORMATS", "figure_files", "report_texts"]

REPORT_FORMATS = ("html", "md", "tex")
"""Report formats, written next to results.json."""
REPORT_FILES = {"html": "report.html", "md": "report.md", "tex": "report.tex"}
"""File name of each report format."""
_OUTCOME_PANELS = (("randomization", "Randomization inference"),
                   ("attrition", "Missing outcomes"),
                   ("sensitivity", "Sensitivity"), ("planning", "Planning the next wave"))
_RUN_PANELS = (("balance", "Covariate balance"), ("waves", "Waves"))


@dataclass(frozen=True, slots=True)
class Panel:
    """A diagnostic panel: a title and its sentences."""

    title: str
    sentences: tuple[str, ...]


@dataclass(frozen=True, slots=True)
class OutcomeSection:
    """What the report shows for one outcome."""

    outcome: str
    reading: tuple[str, ...]
    weights: str
    comparison: ReportTable
    strata: ReportTable
    excluded: tuple[str, ...]
    panels: tuple[Panel, ...]
    figures: dict[str, str]
    figure_note: str
    more: tuple[ReportTable, ...]


def _excluded(report: OutcomeReport) -> tuple[str, ...]:
    return tuple(f"{e.label} ({count(e.n, 'row')}): {e.reason}"
                 for e in report.comparison.strata.excluded)


def _section(results: ResultsFile, report: OutcomeReport, figures: bool) -> OutcomeSection:
    panels = []
    for key, title in _OUTCOME_PANELS:
        sentences = diagnostic_sentences(results, report, key)
        if sentences:
            panels.append(Panel(title, tuple(sentences)))
    drawn: dict[str, str] = {}
    if figures and report.comparison.strata.rows:
        from .report_figures import first_stage_figure, weight_figure

        drawn = {"weights": str(weight_figure(report)),
                 "first_stage": str(first_stage_figure(report))}
    from .report_figures import MAX_STRATA

    total = len(report.comparison.strata.rows)
    shown = (f"the {MAX_STRATA} of {total} strata with the largest weight under either "
             "estimator" if total > MAX_STRATA else f"all {total} strata" if total != 1
             else "the one stratum")
    counts = offer_counts_table(report)
    return OutcomeSection(
        figure_note=f"Drawn: {shown}, ordered by offer share.",
        more=() if counts is None else (counts,),
        outcome=report.outcome, reading=tuple(reading(report.comparison)),
        weights=weight_sentence(report), comparison=comparison_table(results, report),
        strata=strata_table(results, report), excluded=_excluded(report),
        panels=tuple(panels), figures=drawn)


def _context(results: ResultsFile, figures: bool) -> dict[str, Any]:
    run_panels = []
    for key, title in _RUN_PANELS:
        sentences = diagnostic_sentences(results, None, key)
        if sentences:
            run_panels.append(Panel(title, tuple(sentences)))
    if results.plan is not None:
        deviations = results.plan.deviations
        run_panels.append(Panel("Locked plan", (
            f"Checked against {results.plan.lock} (locked {results.plan.locked}): "
            + (f"{len(deviations)} deviation{'s' if len(deviations) != 1 else ''}: "
               + "; ".join(deviations) + "." if deviations else "no deviation."),)))
    rows = results.rows
    return {
        "title": results.title, "created": results.created, "version": results.tool_version,
        "blinded": results.blinded,
        "rows_line": f"{count(rows['read'], 'row')} read, {rows['kept']:,} kept, "
                     f"{rows['dropped_incomplete']:,} dropped as incomplete",
        "sections": [_section(results, r, figures) for r in results.outcomes],
        "run_panels": run_panels, "warnings": list(results.warnings),
        "run_tables": [t for t in (balance_table(results), families_table(results),
                                   waves_table(results)) if t is not None],
        "assumptions": ASSUMPTIONS, "review": REVIEW,
        "inputs": [(f.path.name, f"{f.rows:,}", f.sha256) for f in results.inputs],
    }


def _html(results: ResultsFile) -> str:
    import jinja2

    environment = jinja2.Environment(
        loader=jinja2.PackageLoader("strativ.cli", "templates"),
        autoescape=jinja2.select_autoescape(("html", "j2")), trim_blocks=True,
        lstrip_blocks=True, undefined=jinja2.StrictUndefined)
    page = environment.get_template("report.html.j2").render(**_context(results, True))
    return "\n".join(line.rstrip() for line in page.splitlines()) + "\n"


def _banner(results: ResultsFile) -> list[str]:
    if results.blinded is None:
        return []
    return [f"BLINDED rehearsal (seed {results.blinded}): each outcome was permuted within "
            "strata, so every estimate targets zero and none is a result."]


def _markdown(results: ResultsFile) -> str:
    context = _context(results, False)
    out = [f"# {results.title}", ""]
    out += [f"**{line}**\n" for line in _banner(results)]
    out += [f"{context['rows_line']}. Written by strativ {results.tool_version} on "
            f"{results.created}.", ""]
    for section in context["sections"]:
        out += [f"## {section.outcome}", "", *[f"- {s}" for s in section.reading],
                f"- {section.weights}", "", to_markdown(section.comparison),
                to_markdown(section.strata)]
        out += [f"- excluded: {e}" for e in section.excluded]
        out += [to_markdown(t) for t in section.more]
        for panel in section.panels:
            out += [f"### {panel.title}", "", *panel.sentences, ""]
    for panel in context["run_panels"]:
        out += [f"## {panel.title}", "", *panel.sentences, ""]
    out += [to_markdown(t) for t in context["run_tables"]]
    out += ["## Assumptions", "", ASSUMPTIONS, "", REVIEW, ""]
    return "\n".join(line.rstrip() for line in "\n".join(out).splitlines()).rstrip() + "\n"


def _latex(results: ResultsFile) -> str:
    from .report_tables import tex_text

    context = _context(results, False)
    out = [r"\documentclass{article}", r"\usepackage[T1]{fontenc}",
           r"\usepackage[utf8]{inputenc}", r"\usepackage{booktabs}",
           r"\usepackage[margin=2cm,landscape]{geometry}", r"\begin{document}",
           rf"\section*{{{tex_text(results.title)}}}"]
    out += [rf"\textbf{{{tex_text(line)}}}\par" for line in _banner(results)]
    for section in context["sections"]:
        out += [rf"\subsection*{{{tex_text(section.outcome)}}}"]
        out += [tex_text(s) + r"\par" for s in [*section.reading, section.weights]]
        out += [to_latex(section.comparison), to_latex(section.strata),
                *(to_latex(t) for t in section.more)]
    out += [to_latex(t) for t in context["run_tables"]]
    out += [r"\paragraph{Assumptions}" + " " + tex_text(ASSUMPTIONS) + " "
            + tex_text(REVIEW), r"\end{document}", ""]
    text = "\n".join(out)
    for plain, tex in (("\u2212", "-"), ("\u00d7", r"$\times$"), ("\u221e", r"$\infty$"),
                       ("\u222a", r"$\cup$"), ("\u2265", r"$\geq$"), ("\u2264", r"$\leq$"),
                       ("\u2248", r"$\approx$"), ("\u03c7", r"$\chi$")):
        text = text.replace(plain, tex)
    return text


def report_texts(results: ResultsFile, formats: tuple[str, ...]) -> dict[str, str]:
    """The text of each report format asked for.

    Parameters
    ----------
    results : ResultsFile
        The rebuilt results file.
    formats : tuple of str
        Any of `REPORT_FORMATS`; other names are ignored.

    Returns
    -------
    dict
        Format -> file text.
    """
    makers = {"html": _html, "md": _markdown, "tex": _latex}
    return {fmt: makers[fmt](results) for fmt in formats if fmt in makers}


def figure_files(results: ResultsFile, kind: str) -> dict[str, bytes]:
    """The figures as separate files: name -> bytes (``weights_<outcome>.svg``, ...).

    Parameters
    ----------
    results : ResultsFile
        The rebuilt results file.
    kind : {"svg", "png"}
        Image format.

    Returns
    -------
    dict
        File name -> content.
    """
    import re

    from .report_figures import first_stage_figure, weight_figure

    out = {}
    for report in results.outcomes:
        if not report.comparison.strata.rows:
            continue
        stem = re.sub(r"[^A-Za-z0-9_.-]+", "_", report.outcome)
        for name, draw in (("weights", weight_figure), ("first_stage", first_stage_figure)):
            data = draw(report, kind)
            out[f"{name}_{stem}.{kind}"] = data.encode("utf-8") if isinstance(data, str) \
                else data
    return out

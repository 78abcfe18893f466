"""Terminal output: the run report, the check summary, warnings and errors.

Results go to a stdout console, warnings and errors to a stderr console. Every user-supplied
string (titles, paths, column names, stratum labels) enters rich as `Text`, never as markup.
"""

from __future__ import annotations

from collections.abc import Iterable
from typing import Any

from rich import box
from rich.console import Console, RenderableType
from rich.padding import Padding
from rich.table import Table
from rich.text import Text

from .errors import CliError
from .loading import Dataset
from .reading import (
    ASSUMPTIONS,
    ESTIMATOR_NAMES,
    REVIEW,
    format_interval,
    format_number,
    format_set,
    pulling_strata,
    reading,
)
from .runner import DesignSummary, OutcomeResult, Run
from .spec import Spec

__all__ = ["FULL_STRATA", "make_console", "render_run", "render_check", "render_warnings",
           "render_error"]

FULL_STRATA = 30
"""Up to this many strata the per-stratum table is shown in full."""
_SHOWN_WHEN_MANY = 15


def make_console(*, stderr: bool = False) -> Console:
    """Return a console on stdout (or stderr) without syntax highlighting.

    Width and colour follow the terminal; ``COLUMNS`` and ``NO_COLOR`` override them. The
    stderr console does not hard-wrap, so that each message stays one line in a log.
    """
    return Console(stderr=stderr, highlight=False, soft_wrap=stderr)


def _t(value: Any, style: str = "") -> Text:
    return Text(str(value), style=style)


def _indented(*parts: str | Text, indent: int = 2) -> RenderableType:
    return Padding(Text.assemble(*parts), (0, 0, 0, indent), expand=False)


def _share(value: float | None) -> str:
    return "\u2013" if value is None else f"{value:.0%}" if value in (0.0, 1.0) \
        else f"{value * 100:.1f}%"


def _header(console: Console, spec: Spec, dataset: Dataset) -> None:
    console.print(_t(spec.title, "bold"))
    files = ", ".join(f"{f.path.name} ({f.rows:,} rows)" for f in dataset.files)
    console.print(Text.assemble("data      ", _t(files)))
    rows = f"{dataset.n_rows:,} rows used"
    if dataset.n_dropped:
        rows += f" ({dataset.n_dropped:,} incomplete rows dropped of {dataset.n_read:,})"
    console.print(Text.assemble("rows      ", rows))
    source = spec.offer_probability
    probs = {"estimated": "estimated from the data",
             "column": f"design, column '{source.column}'",
             "mapping": "design, given in the spec"}[source.source]
    console.print(Text.assemble(
        "inference ", f"variance {spec.variance}, {spec.level:.0%} level, assignment "
        f"{spec.assignment}, sampling {spec.sampling}; offer probabilities ", _t(probs)))


def _comparison_table(result: OutcomeResult) -> Table:
    comp = result.comparison
    level = comp.estimates[0].level
    table = Table(box=box.SIMPLE_HEAD, show_edge=False, pad_edge=False)
    table.add_column("estimator")
    table.add_column("estimate", justify="right")
    table.add_column("std. error", justify="right")
    table.add_column(f"{level:.0%} interval", justify="right")
    table.add_column("weak-IV robust set", justify="right")
    table.add_column("first-stage F", justify="right")
    for est in comp.estimates:
        cs = est.confidence_set
        table.add_row(_t(ESTIMATOR_NAMES[est.estimator]), _t(format_number(est.estimate)),
                      _t(format_number(est.std_error)), _t(format_interval(est.interval)),
                      _t(format_set(cs.shape, cs.lower, cs.upper)),
                      _t(format_number(est.first_stage_f, digits=3)))
    return table


def _strata_table(result: OutcomeResult) -> tuple[Table, str | None]:
    rows = result.comparison.strata.rows
    shown = rows
    caption = None
    if len(rows) > FULL_STRATA:
        shown = tuple(pulling_strata(rows, _SHOWN_WHEN_MANY))
        rest = len(rows) - len(shown)
        hidden = sum(r.n for r in rows) - sum(r.n for r in shown)
        caption = (f"{len(shown)} of {len(rows)} strata shown: those that move the "
                   f"fixed-effects estimate most; {rest} more ({hidden:,} rows) are in strata.csv")
    table = Table(box=box.SIMPLE_HEAD, show_edge=False, pad_edge=False)
    for name in ("stratum", "n", "offer\nshare", "take-up\noffered", "take-up\nnot offered",
                 "ITT", "first\nstage", "stratum\neffect", "weight\nFE", "weight\ncomplier"):
        table.add_column(name, justify="left" if name == "stratum" else "right",
                         no_wrap=name == "stratum")
    for r in shown:
        table.add_row(_t(r.label), _t(f"{r.n:,}"), _t(_share(r.offer_share)),
                      _t(_share(r.take_up_offered)), _t(_share(r.take_up_not_offered)),
                      _t(format_number(r.itt)), _t(format_number(r.first_stage, digits=3)),
                      _t(format_number(r.effect)),
                      _t(format_number(r.weight_fixed_effects, digits=3)),
                      _t(format_number(r.weight_complier, digits=3)))
    return table, caption


def _excluded(console: Console, result: OutcomeResult) -> None:
    excluded = result.comparison.strata.excluded
    if not excluded:
        return
    console.print(f"excluded strata ({len(excluded)}):")
    for e in excluded[:10]:
        console.print(Text.assemble("  ", _t(e.label), f" (n = {e.n:,}): ", _t(e.reason)))
    if len(excluded) > 10:
        console.print(f"  ... and {len(excluded) - 10} more (listed in results.json)")


def _outcome(console: Console, result: OutcomeResult) -> None:
    comp = result.comparison
    first = comp.estimates[0]
    n_excluded = len(comp.strata.excluded)
    console.print()
    console.rule(Text.assemble("outcome ", _t(result.outcome, "bold")), align="left")
    console.print(f"{first.n_units:,} rows, {first.n_strata} strata used, {n_excluded} excluded"
                  + (f"; {result.missing:,} rows without this outcome left out"
                     if result.missing else ""))
    console.print(_comparison_table(result))
    console.print("what each targets:")
    for est in comp.estimates:
        console.print(_indented(ESTIMATOR_NAMES[est.estimator], ": ", _t(est.estimand)))
        if est.undefined_reason:
            console.print(_indented("undefined: ", _t(est.undefined_reason), indent=4))
    table, caption = _strata_table(result)
    console.print()
    console.print("per stratum:")
    console.print(table)
    if caption:
        console.print(_t(caption))
    _excluded(console, result)
    console.print()
    console.print("reading:")
    for sentence in reading(comp):
        console.print(_indented(_t(sentence)))
    notes = list(comp.notes) + [f"{ESTIMATOR_NAMES[e.estimator]}: {n}"
                                for e in comp.estimates for n in e.notes]
    for note in notes:
        console.print(_indented("note: ", _t(note)))


def render_run(console: Console, run: Run) -> None:
    """Print the report of a run: header, then per outcome the comparison, the per-stratum
    table, exclusions and the reading; then the assumptions and the caution.

    Parameters
    ----------
    console : Console
        The stdout console.
    run : Run
        The fitted run.
    """
    _header(console, run.spec, run.dataset)
    for result in run.outcomes:
        _outcome(console, result)
    console.print()
    console.print(_t(ASSUMPTIONS))
    console.print(_t(REVIEW))


def render_check(console: Console, spec: Spec, dataset: Dataset, summary: DesignSummary,
                 probabilities: dict[Any, float] | None) -> None:
    """Print the design summary of `strativ check`.

    Parameters
    ----------
    console : Console
        The stdout console.
    spec : Spec
        The validated spec.
    dataset : Dataset
        The loaded rows.
    summary : DesignSummary
        Strata, offer shares and take-up by arm.
    probabilities : dict or None
        Resolved design probabilities, when the spec gives them.
    """
    _header(console, spec, dataset)
    used = [s for s in summary.strata if s.excluded_reason is None]
    shares = [s.n_offered / s.n for s in used]
    console.print(f"strata    {len(summary.strata)} ({len(used)} with both arms); offer share "
                  f"{_share(min(shares))} to {_share(max(shares))}")
    console.print(f"take-up   {_share(summary.take_up_offered)} of the offered, "
                  f"{_share(summary.take_up_not_offered)} of the not offered")
    for name, missing in summary.missing_outcomes:
        console.print(Text.assemble("outcome   ", _t(name), f": {missing:,} rows missing"
                                    if missing else ": complete"))
    table = Table(box=box.SIMPLE_HEAD, show_edge=False, pad_edge=False)
    for name in ("stratum", "n", "offer\nshare", "take-up\noffered", "take-up\nnot offered"):
        table.add_column(name, justify="left" if name == "stratum" else "right",
                         no_wrap=name == "stratum")
    if probabilities is not None:
        table.add_column("design\nprobability", justify="right")
    for s in summary.strata[:FULL_STRATA] if len(summary.strata) > FULL_STRATA \
            else summary.strata:
        cells = [_t(s.label), _t(f"{s.n:,}"), _t(_share(s.n_offered / s.n)),
                 _t(_share(s.take_up_offered)), _t(_share(s.take_up_not_offered))]
        if probabilities is not None:
            p = probabilities.get(s.label)
            cells.append(_t("\u2013" if p is None else f"{p:g}"))
        table.add_row(*cells)
    console.print(table)
    if len(summary.strata) > FULL_STRATA:
        console.print(f"... {len(summary.strata) - FULL_STRATA} more strata")
    excluded = [s for s in summary.strata if s.excluded_reason]
    if excluded:
        console.print(f"excluded strata ({len(excluded)}):")
        for s in excluded[:10]:
            console.print(Text.assemble("  ", _t(s.label), f" (n = {s.n:,}): ",
                                        _t(s.excluded_reason)))
    console.print(Text.assemble("runnable: ", _t(", ".join(spec.estimators)), " on ",
                                _t(", ".join(spec.columns.outcome))))


def render_warnings(console: Console, warnings: Iterable[str]) -> None:
    """Print each warning on the stderr console."""
    for warning in warnings:
        console.print(Text.assemble(Text("warning: ", style="yellow"), _t(warning)))


def render_error(console: Console, error: CliError) -> None:
    """Print a typed error on the stderr console."""
    console.print(Text.assemble(Text("error: ", style="bold red"), _t(error.render())))

"""Rendering of `strativ compare`: the comparison of two results files on the terminal."""

from __future__ import annotations

from typing import Any

from rich import box
from rich.cells import cell_len
from rich.console import Console
from rich.padding import Padding
from rich.table import Table
from rich.text import Text

from .compare import (
    CountChange,
    EstimateOnly,
    EstimateShift,
    InputChanges,
    ResultsComparison,
)
from .reading import ESTIMATOR_NAMES, format_interval, format_number

__all__ = ["render_comparison"]

_GAP = 3
_KEY_MIN = 12
_DASH = "\u2013"


def _fmt(value: float | None, *, digits: int = 4, signed: bool = False) -> str:
    """A shift: signed, or a dash when it does not apply."""
    if value is None:
        return _DASH
    text = format_number(value, digits=digits)
    return "+" + text if signed and value > 0 else text


def _count(value: int | None, *, signed: bool = False) -> str:
    return _DASH if value is None else f"{value:+,}" if signed and value else f"{value:,}"


def _print_table(console: Console, key: tuple[str, list[Text]],
                 columns: list[tuple[str, list[Text]]]) -> None:
    """A borderless table whose number columns never wrap: the key column folds first, and
    columns that still do not fit go to a further table that repeats the key."""
    def width(header: str, cells: list[Text]) -> int:
        return max(cell_len(x) for x in [*header.split("\n"), *(c.plain for c in cells)])

    natural = width(*key)
    least = min(natural, max(_KEY_MIN, console.width // 4))
    groups: list[list[tuple[str, list[Text]]]] = [[]]
    used = 0
    for column in columns:
        size = _GAP + width(*column)
        if groups[-1] and used + size > console.width - least:
            groups.append([])
            used = 0
        groups[-1].append(column)
        used += size
    for i, group in enumerate(groups):
        if i:
            console.print()
        spare = console.width - sum(_GAP + width(*c) for c in group)
        table = Table(box=box.SIMPLE_HEAD, show_edge=False, pad_edge=False)
        table.add_column(key[0], justify="left", overflow="fold",
                         max_width=max(least, min(natural, spare)))
        for header, _ in group:
            table.add_column(header, justify="right", no_wrap=True)
        for row, label in enumerate(key[1]):
            table.add_row(label, *(cells[row] for _, cells in group))
        console.print(table)


def _indented(console: Console, *parts: str | Text) -> None:
    """Print a line two cells in, its continuation lines too."""
    console.print(Padding(Text.assemble(*parts), (0, 0, 0, 2), expand=False))


def _name(estimate: EstimateShift | EstimateOnly, *, outcome: bool = False) -> Text:
    return Text.assemble((estimate.outcome + ", ") if outcome else "",
                         ESTIMATOR_NAMES.get(estimate.estimator, estimate.estimator),
                         " with covariates" if estimate.adjusted else "")


def _header(console: Console, report: ResultsComparison) -> None:
    console.print(Text("two strativ results compared", "bold"))
    for role, file in (("old", report.old), ("new", report.new)):
        console.print(Text.assemble(f"{role}   ", file.path))
        console.print(Text.assemble("      written ", file.created or "at an unknown time",
                                    f" by strativ {file.tool_version}"))
    versions = f"strativ {report.old.tool_version} \u2192 {report.new.tool_version}" \
        if report.tool_changed else f"strativ {report.new.tool_version} wrote both"
    console.print(Text.assemble("tool  ", versions))
    spec = report.spec
    parts = [f"{label} {', '.join(keys)}" for label, keys in
             (("changed", spec.changed), ("only old", spec.removed), ("only new", spec.added))
             if keys]
    console.print(Text.assemble("spec  ", "; ".join(parts) if parts else "the same"))


def _inputs(console: Console, inputs: InputChanges) -> None:
    console.print()
    console.print(Text(f"input files: {len(inputs.added)} added, {len(inputs.removed)} removed, "
                       f"{len(inputs.changed)} changed, {inputs.unchanged} unchanged"))
    for label, files in (("added  ", inputs.added), ("removed", inputs.removed)):
        for f in files:
            _indented(console, f"{label}  ", f.name,
                      f" ({_count(f.rows)} {'row' if f.rows == 1 else 'rows'})")
    for before, after in inputs.changed:
        _indented(console, "changed  ", before.name, f" (sha256 {before.sha256[:8]} \u2192 "
                  f"{after.sha256[:8]}, {_count(before.rows)} \u2192 {_count(after.rows)} "
                  f"{'row' if after.rows == 1 else 'rows'})")


def _counts(console: Console, counts: tuple[CountChange, ...]) -> None:
    console.print()
    labels = [Text.assemble(*((c.outcome, ": ") if c.outcome else ()), c.what) for c in counts]
    _print_table(console, ("rows and strata", labels), [
        ("old", [Text(_count(c.old)) for c in counts]),
        ("new", [Text(_count(c.new)) for c in counts]),
        ("change", [Text(_count(c.difference, signed=True)) for c in counts])])


def _outcome(console: Console, shown: list[EstimateShift], flagged: set[EstimateShift]) -> None:
    console.print()
    console.rule(Text.assemble("outcome ", (shown[0].outcome, "bold")), align="left")
    rows: list[EstimateShift | None] = [e for e in shown if not e.adjusted]
    if len(rows) < len(shown):  # the fits with covariates under a label row of their own
        rows += [None, *(e for e in shown if e.adjusted)]
    key = ("estimator", [Text("with covariates:", "italic") if e is None else
                         Text(ESTIMATOR_NAMES.get(e.estimator, e.estimator)) for e in rows])

    def cells(cell: Any) -> list[Text]:
        return [Text("" if e is None else cell(e)) for e in rows]

    _print_table(console, key, [
        ("old", cells(lambda e: format_number(e.old))),
        ("new", cells(lambda e: format_number(e.new))),
        ("shift", cells(lambda e: _fmt(e.shift, signed=True))),
        ("shift in\nold SEs", cells(lambda e: _fmt(e.shift_in_std_errors, digits=3, signed=True)
                                    + (" !" if e in flagged else "  ")))])
    console.print()
    _print_table(console, key, [("old interval", cells(lambda e: format_interval(e.old_interval))),
                                ("new interval", cells(lambda e: format_interval(e.new_interval)))])
    for e in shown:
        if e.reason:
            _indented(console, _name(e), ": no shift in standard errors, ", e.reason)


def _estimates(console: Console, report: ResultsComparison, threshold: float | None) -> None:
    flagged = set(report.beyond(threshold)) if threshold is not None else set()
    for outcome in dict.fromkeys(e.outcome for e in report.estimates):
        _outcome(console, [e for e in report.estimates if e.outcome == outcome], flagged)
    if flagged:
        console.print(Text(f"! moved more than {threshold:g} old standard errors"))
    for label, only in (("only in the old file", report.removed_estimates),
                        ("only in the new file", report.added_estimates)):
        if only:
            console.print()
            console.print(Text(f"{label}:"))
            for e in only:
                _indented(console, _name(e, outcome=True), ": ", format_number(e.estimate), " ",
                          format_interval(e.interval))


def render_comparison(console: Console, report: ResultsComparison, *,
                      fail_beyond: float | None = None) -> None:
    """Print a comparison: the two files, tool and spec, input files, rows and strata, then
    per outcome each estimate's shift and both intervals, and the estimates in one file only.

    Parameters
    ----------
    console : Console
        The stdout console.
    report : ResultsComparison
        The comparison.
    fail_beyond : float, optional
        Mark the shifts of more than this many old standard errors with ``!``.
    """
    _header(console, report)
    _inputs(console, report.inputs)
    _counts(console, report.counts)
    _estimates(console, report, fail_beyond)

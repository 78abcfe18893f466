"""Terminal output: the run report, the check summary, warnings and errors.

Results go to a stdout console, warnings and errors to a stderr console (both made by
`console.make_console`, which also prints the error line; re-exported here). Every user-supplied
string (titles, paths, column names, stratum labels) enters rich as `Text`, never as markup.
"""

from __future__ import annotations

from collections.abc import Iterable, Sequence
from dataclasses import dataclass
from typing import Any

from rich import box
from rich.cells import cell_len
from rich.console import Console, RenderableType
from rich.padding import Padding
from rich.table import Table
from rich.text import Text

from strativ.estimators.options import USES_ASSIGNMENT, USES_SAMPLING, WEAK_FIRST_STAGE_F
from strativ.estimators.profile import CovariateProfile

from .cautions import variance_used
from .console import make_console, render_error
from .counting import count
from .grouped import GroupedData
from .reading import (
    ASSUMPTIONS,
    ESTIMATOR_NAMES,
    REVIEW,
    format_f,
    format_interval,
    format_number,
    format_set,
    negative_shares,
    pulling_strata,
    reading,
)
from .runner import BLINDED, DesignSummary, OutcomeResult, Run
from .spec import Spec

__all__ = ["FULL_STRATA", "make_console", "render_run", "render_check", "render_warnings",
           "render_error"]

FULL_STRATA = 30
"""Up to this many strata the per-stratum table is shown in full."""
_SHOWN_WHEN_MANY = 15
_GAP = 3
"""Cells between two columns of a borderless SIMPLE_HEAD table (padding, divider, padding)."""
_KEY_MIN = 12


@dataclass(frozen=True, slots=True)
class _Column:
    """One table column: its header (lines separated by newlines) and its cells."""

    header: str
    cells: Sequence[Text]

    def width(self) -> int:
        lines = self.header.split("\n") + [c.plain for c in self.cells]
        return max(cell_len(line) for line in lines)


def _col(header: str, cells: Iterable[Any]) -> _Column:
    return _Column(header, [_t(c) for c in cells])


def _table(key: _Column, columns: Sequence[_Column], key_width: int | None) -> Table:
    table = Table(box=box.SIMPLE_HEAD, show_edge=False, pad_edge=False)
    table.add_column(key.header, justify="left", overflow="fold", max_width=key_width)
    for column in columns:
        table.add_column(column.header, justify="right", no_wrap=True)
    for i, label in enumerate(key.cells):
        table.add_row(label, *(column.cells[i] for column in columns))
    return table


def _print_table(console: Console, key: _Column, blocks: Sequence[Sequence[_Column]]) -> None:
    """Print a table whose first column names the rows, without ever wrapping or cutting a
    number: the key column wraps first; when the numbers still do not fit the console, the
    table is printed as several stacked tables (split between `blocks` where possible), each
    repeating the key column and giving it the room left over."""
    columns = [c for block in blocks for c in block]
    natural = key.width()
    least = min(natural, max(_KEY_MIN, console.width // 4))
    room = console.width - least
    groups: list[list[_Column]] = [[]]
    used = 0
    for block in blocks if sum(_GAP + c.width() for c in columns) > room else [columns]:
        if groups[-1] and used + sum(_GAP + c.width() for c in block) > room:
            groups.append([])
            used = 0
        for column in block:  # a block wider than the room is split by column
            if groups[-1] and used + _GAP + column.width() > room:
                groups.append([])
                used = 0
            groups[-1].append(column)
            used += _GAP + column.width()
    for i, group in enumerate(groups):
        if i:
            console.print()
        spare = console.width - sum(_GAP + c.width() for c in group)
        console.print(_table(key, group, max(least, min(natural, spare))))


def _t(value: Any, style: str = "") -> Text:
    return Text(str(value), style=style)


def _indented(*parts: str | Text, indent: int = 2) -> RenderableType:
    return Padding(Text.assemble(*parts), (0, 0, 0, indent), expand=False)


def _share(value: float | None) -> str:
    return "\u2013" if value is None else f"{value:.0%}" if value in (0.0, 1.0) \
        else f"{value * 100:.1f}%"


def _header(console: Console, spec: Spec, dataset: GroupedData) -> None:
    console.print(_t(spec.title, "bold"))
    files = ", ".join(f"{f.path.name} ({count(f.rows, 'row')})" for f in dataset.files)
    console.print(Text.assemble("data      ", _t(files)))
    rows = f"{count(dataset.n_rows, 'row')} kept"
    if dataset.n_dropped:
        rows += f" ({count(dataset.n_dropped, 'incomplete row')} dropped of " \
            f"{dataset.n_read:,})"
    console.print(Text.assemble("rows      ", rows))
    source = spec.offer_probability
    probs = {"estimated": "estimated from the data",
             "column": f"design, column '{source.column}'",
             "mapping": "design, given in the spec"}[source.source]
    used = variance_used(spec)
    variance = f"variance {used}" if used == spec.variance else \
        f"variance {spec.variance} (as {used})"
    clusters = () if spec.columns.cluster is None else \
        (" by cluster column '", _t(spec.columns.cluster), "'")
    design = "".join([f", assignment {spec.assignment}" if used in USES_ASSIGNMENT else "",
                      f", sampling {spec.sampling}" if used in USES_SAMPLING else ""])
    console.print(Text.assemble(
        "inference ", variance, *clusters, f", {spec.level:.0%} level{design}; offer "
        "probabilities ", _t(probs)))


def _comparison_table(console: Console, result: OutcomeResult) -> None:
    estimates = result.comparison.estimates
    level = estimates[0].level
    key = _col("estimator", (ESTIMATOR_NAMES[e.estimator] for e in estimates))
    _print_table(console, key, [
        [_col("estimate", (format_number(e.estimate) for e in estimates)),
         _col("std. error", (format_number(e.std_error) for e in estimates)),
         _col(f"{level:.0%} interval", (format_interval(e.interval) for e in estimates))],
        [_col("weak-IV robust set", (format_set(e.confidence_set) for e in estimates)),
         _col(f"first-stage F\n{estimates[0].variance}", (format_f(e) for e in estimates))],
    ])
    adjusted = result.adjusted
    if adjusted:
        console.print()
        console.print("with covariates (" + ", ".join(adjusted[0].covariates) + "):")
        fits = [a.fit for a in adjusted]
        _print_table(console, _col("estimator", (ESTIMATOR_NAMES[a.estimator] for a in adjusted)),
                     [[_col("estimate", (format_number(f.estimate) for f in fits)),
                       _col("std. error", (format_number(f.std_error) for f in fits)),
                       _col(f"{level:.0%} interval", (format_interval(f.interval) for f in fits)),
                       _col("std. error\nratio", (format_number(a.std_error_ratio, digits=3)
                                                   for a in adjusted))]])
    if any(e.weak_first_stage for e in estimates):
        console.print(_indented(f"weak: first-stage F below {WEAK_FIRST_STAGE_F:g}; the normal "
                                "interval is not to be trusted, read the weak-IV robust set"))


def _strata_table(console: Console, result: OutcomeResult) -> str | None:
    rows = result.comparison.strata.rows
    shown = rows
    caption = None
    if len(rows) > FULL_STRATA:
        shown = tuple(pulling_strata(rows, _SHOWN_WHEN_MANY))
        rest = len(rows) - len(shown)
        hidden = sum(r.n for r in rows) - sum(r.n for r in shown)
        caption = (f"{len(shown)} of {len(rows)} strata shown: those that move the "
                   f"fixed-effects estimate most; {rest} more ({count(hidden, 'row')}) are in "
                   "strata.csv")
    _print_table(console, _col("stratum", (r.label for r in shown)), [
        [_col("n", (f"{r.n:,}" for r in shown)),
         _col("offer\nshare", (_share(r.offer_share) for r in shown)),
         _col("take-up\noffered", (_share(r.take_up_offered) for r in shown)),
         _col("take-up\nnot offered", (_share(r.take_up_not_offered) for r in shown))],
        [_col("ITT", (format_number(r.itt) for r in shown)),
         _col("first\nstage", (format_number(r.first_stage, digits=3) for r in shown)),
         _col("stratum\neffect", (format_number(r.effect) for r in shown)),
         _col("weight\nFE", (format_number(r.weight_fixed_effects, digits=3) for r in shown)),
         _col("weight\ncomplier", (format_number(r.weight_complier, digits=3) for r in shown))],
    ])
    return caption


def _sensitivity(console: Console, result: OutcomeResult) -> None:
    sens = result.sensitivity
    if sens is None:
        return
    name = ESTIMATOR_NAMES[sens.estimator]
    if sens.delta_to_zero is not None and sens.delta_to_zero != 0.0:
        console.print(_indented(
            f"Sensitivity: if the offer moved {result.outcome} by itself (not through take-up) "
            f"by {format_number(sens.delta_to_zero)} per offered unit, the {name} interval "
            "would reach zero."))
    if sens.union is not None:
        low, high = sens.rows[0].delta, sens.rows[-1].delta
        console.print(_indented(
            f"With such a direct effect anywhere from {format_number(low)} to "
            f"{format_number(high)}, the {name} intervals together span "
            f"{format_interval(sens.union)}."))
    for row in sens.defiers:
        console.print(_indented(
            f"If {row.defier_share:.1%} of units were defiers, the {name} estimate would "
            f"describe {row.comvivor_share:.0%} of the compliers at best, or equal their "
            f"effect plus {format_number(row.bias_factor, digits=3)} × (their effect minus "
            "the defiers')."))


def _randomization(console: Console, result: OutcomeResult) -> None:
    test = result.randomization
    if test is None:
        return
    how = f"all {test.draws:,} assignments" if test.exact else \
        f"{test.draws:,} re-drawn offer assignments (seed {test.seed})"
    span = format_interval(test.interval) if test.interval is not None else \
        f"none ({test.interval_reason})"
    console.print(_indented(
        f"Randomization inference over {how}: p = {format_number(test.p_value, digits=3)} "
        + ("for no effect of take-up on any unit" if test.null_effect == 0 else
           f"for an effect of exactly {format_number(test.null_effect)} on every unit")
        + f"; {test.level:.0%} randomization interval {span}."))


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
    from .results import excluded_rows

    gone = excluded_rows(comp)
    console.print(f"{count(result.cells.n_units - gone, 'row')} used in "
                  f"{count(first.n_strata, 'stratum', 'strata')}; "
                  f"{count(n_excluded, 'stratum', 'strata')} excluded ({count(gone, 'row')})"
                  + (f"; {count(result.missing, 'row')} without this outcome left out"
                     if result.missing else ""))
    test = result.attrition_test
    if not result.missing:
        console.print("missing: no row lacks this outcome (no attrition to test)")
    elif test is not None and test.offered and test.not_offered:
        p = "no test" if test.p_value is None else \
            f"Mantel-Haenszel p = {format_number(test.p_value, digits=3)}"
        console.print(f"missing: {_share(test.missing_offered / test.offered)} of offered, "
                      f"{_share(test.missing_not_offered / test.not_offered)} of not offered "
                      f"rows (within strata {100 * (test.difference or 0.0):+.1f} points; {p})")
    _comparison_table(console, result)
    console.print("what each targets:")
    for est in comp.estimates:
        console.print(_indented(ESTIMATOR_NAMES[est.estimator], ": ", _t(est.estimand)))
        if est.undefined_reason:
            console.print(_indented("undefined: ", _t(est.undefined_reason), indent=4))
        elif est.std_error is None:
            console.print(_indented("no standard error: ",
                                    _t(est.std_error_reason or "undefined"), indent=4))
    console.print()
    console.print("per stratum:")
    caption = _strata_table(console, result)
    if caption:
        console.print(_t(caption))
    for line in negative_shares(comp.strata.rows):
        console.print(_indented(_t(line)))
    _excluded(console, result)
    console.print()
    console.print("reading:")
    for sentence in reading(comp):
        console.print(_indented(_t(sentence)))
    _sensitivity(console, result)
    _randomization(console, result)
    _planning(console, result)
    notes = list(comp.notes) + [f"{ESTIMATOR_NAMES[e.estimator]}: {n}"
                                for e in comp.estimates for n in e.notes]
    for note in notes:
        console.print(_indented("note: ", _t(note)))


def _planning(console: Console, result: OutcomeResult) -> None:
    p = result.plan
    if p is None or p.mde is None:
        return
    text = (f"planning: {ESTIMATOR_NAMES[p.estimator]} detects an effect of "
            f"{format_number(p.mde)} or more with {p.power:.0%} power at the "
            f"{p.level:.0%} level ({format_number(p.multiplier, digits=3)} standard errors)")
    if p.target_effect is not None:
        text += (f"; an effect of {format_number(p.target_effect)} needs about "
                 f"{count(p.rows_needed, 'row')} at today's complier share and variance ("
                 + (f"{p.further_rows:,} more" if p.further_rows else "today's suffice")
                 + ")")
    console.print(_indented(_t(text)))


def _smd_text(value: float | None, flag: float) -> str:
    if value is None:
        return "\u2013"
    return format_number(value, digits=3) + (" !" if abs(value) > flag else "  ")


def _covariates(console: Console, profile: CovariateProfile) -> None:
    rows = profile.rows
    console.print()
    console.rule(Text("covariates", "bold"), align="left")
    console.print("balance between offer arms (standardized differences) and means among "
                  "compliers:")
    _print_table(console, _col("covariate", (r.covariate for r in rows)), [
        [_col("mean\noffered", (format_number(r.mean_offered) for r in rows)),
         _col("mean not\noffered", (format_number(r.mean_not_offered) for r in rows)),
         _col("SMD\nwithin", (_smd_text(r.smd_within, profile.flag) for r in rows)),
         _col("SMD\nweighted", (_smd_text(r.smd_weighted, profile.flag) for r in rows))],
        [_col("mean\nall units", (format_number(r.mean_all) for r in rows)),
         _col("mean\ncompliers", (format_number(r.mean_compliers) for r in rows))],
    ])
    if any(r.flagged for r in rows):
        console.print(_indented(f"! |standardized difference| above {profile.flag:g}"))
    joint = profile.joint
    if joint.statistic is None:
        console.print(_indented("joint balance test: undefined (", _t(joint.reason or ""), ")"))
    else:
        console.print(_indented(f"joint balance test: chi-squared {joint.statistic:.2f} on "
                                f"{joint.df} df, p = {format_number(joint.p_value, digits=3)}"))
    if profile.probabilities == "design":
        console.print(_indented("weighted differences and complier weights use the design "
                                "probabilities"))


def _p_text(value: float | None) -> str:
    if value is None:
        return "\u2013"
    return "< 0.0001" if value < 1e-4 else format_number(value, digits=3)


def _families(console: Console, run: Run) -> None:
    console.print()
    console.rule(Text("several outcomes", "bold"), align="left")
    console.print("p-values of a zero effect, and adjusted across the "
                  f"{len(run.families[0].outcomes)} outcomes: Holm (family-wise error) and "
                  "Benjamini-Hochberg (false discovery rate):")
    blocks = []
    for family in run.families:
        name = ESTIMATOR_NAMES[family.estimator] + (",\nwith covariates" if family.with_covariates
                                                    else "\n")
        values = family.p_values
        blocks.append([_col(f"{name}\np", map(_p_text, values.p_value)),
                       _col("\n\nHolm", map(_p_text, values.holm)),
                       _col("\n\nBH", map(_p_text, values.benjamini_hochberg))])
    _print_table(console, _col("outcome", run.families[0].outcomes), blocks)
    ri = run.randomization_family
    if ri is not None:
        console.print()
        console.print(f"randomization p-values on the {count(ri.rows, 'row')} with every "
                      "outcome, "
                      "and Westfall-Young adjusted from the same re-draws:")
        _print_table(console, _col("outcome", ri.outcomes), [
            [_col("p", map(_p_text, ri.p_value)),
             _col("Westfall-\nYoung", map(_p_text, ri.westfall_young))]])


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
    if run.blinded is not None:
        console.print(Text(BLINDED.format(seed=run.blinded), style="bold reverse"))
        console.print()
    _header(console, run.spec, run.dataset)
    for result in run.outcomes:
        _outcome(console, result)
    if run.profile is not None:
        _covariates(console, run.profile)
    if run.families:
        _families(console, run)
    from .render_waves import render_waves

    render_waves(console, run)
    console.print()
    console.print(_t(ASSUMPTIONS))
    console.print(_t(REVIEW))
    if run.blinded is not None:
        console.print(Text(BLINDED.format(seed=run.blinded), style="bold reverse"))


def render_check(console: Console, spec: Spec, dataset: GroupedData, summary: DesignSummary,
                 probabilities: dict[Any, float] | None) -> None:
    """Print the design summary of `strativ check`.

    Parameters
    ----------
    console : Console
        The stdout console.
    spec : Spec
        The validated spec.
    dataset : GroupedData
        The run's data.
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
        console.print(Text.assemble("outcome   ", _t(name), f": {count(missing, 'row')} missing"
                                    if missing else ": complete"))
    shown = summary.strata[:FULL_STRATA]
    columns = [_col("n", (f"{s.n:,}" for s in shown)),
               _col("offer\nshare", (_share(s.n_offered / s.n) for s in shown)),
               _col("take-up\noffered", (_share(s.take_up_offered) for s in shown)),
               _col("take-up\nnot offered", (_share(s.take_up_not_offered) for s in shown))]
    if probabilities is not None:
        columns.append(_col("design\nprobability", (
            "\u2013" if probabilities.get(s.label) is None else f"{probabilities[s.label]:g}"
            for s in shown)))
    _print_table(console, _col("stratum", (s.label for s in shown)), [columns])
    if len(summary.strata) > FULL_STRATA:
        console.print(f"... {len(summary.strata) - FULL_STRATA} more strata")
    excluded = [s for s in summary.strata if s.excluded_reason]
    if excluded:
        console.print(f"excluded strata ({len(excluded)}):")
        for s in excluded[:10]:
            console.print(Text.assemble("  ", _t(s.label), f" (n = {s.n:,}): ",
                                        _t(s.excluded_reason)))
        if len(excluded) > 10:
            console.print(f"  ... and {len(excluded) - 10} more")
    console.print(Text.assemble("runnable: ", _t(", ".join(spec.estimators)), " on ",
                                _t(", ".join(spec.columns.outcome))))


def render_warnings(console: Console, warnings: Iterable[str]) -> None:
    """Print each warning on the stderr console."""
    for warning in warnings:
        console.print(Text.assemble(Text("warning: ", style="yellow"), _t(warning)))

"""The report's wave section: each input file's wave fitted alone, next to the pooled fit."""

from __future__ import annotations

from rich.console import Console
from rich.text import Text

from .counting import count
from .reading import ESTIMATOR_NAMES, format_number
from .render import _col, _print_table
from .runner import Run

__all__ = ["render_waves"]


def _cell(estimate: dict | None) -> str:
    if estimate is None or estimate["estimate"] is None:
        return "\u2013"
    se = estimate["std_error"]
    return format_number(estimate["estimate"]) + ("" if se is None
                                                  else f" ({format_number(se)})")


def render_waves(console: Console, run: Run) -> None:
    """Print, per outcome, each wave's estimates (standard errors in brackets) and rows.

    Parameters
    ----------
    console : Console
        The stdout console.
    run : Run
        The fitted run; nothing is printed when it has one input file.
    """
    waves = run.waves
    if waves is None:
        return
    console.print()
    console.rule(Text("waves", "bold"), align="left")
    rule = "each wave's part of a stratum is its own stratum" if waves.strata == "separate" \
        else "strata pool their rows across waves (waves.pool)"
    n = len(waves.names)
    if waves.column:
        source = f"the {n} values of column {waves.column} are" if n != 1 \
            else f"the one value of column {waves.column} is"
    else:
        source = f"{n} input files are"
    console.print(f"{source} {count(n, 'wave')}; {rule}. "
                  "Each wave fitted alone, standard errors in brackets:")
    for outcome in run.spec.columns.outcome:
        fits = [f for f in waves.fits if f.outcome == outcome]
        console.print()
        console.print(Text(f"outcome {outcome}", "bold"))
        columns = [_col("rows", (f"{f.rows:,}" for f in fits))]
        for name in run.spec.estimators:
            cells = [_cell(next((e for e in f.estimates if e["estimator"] == name), None))
                     for f in fits]
            columns.append(_col(ESTIMATOR_NAMES[name], cells))
        _print_table(console, _col("wave", (f.wave for f in fits)), [columns])
        for f in fits:
            if f.reason:
                console.print(f"  {f.wave}: no estimates ({f.reason})")

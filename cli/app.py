"""The `strativ` command: run, check, cells, report, compare, lock, init, --version.

Command functions are thin: they convert arguments, call the library, render and write. One
boundary (`_boundary`) turns every error into a message on stderr and an exit code, so no
traceback reaches the user:

- 0: success;
- 1: unexpected internal error (a bug; the message asks for a report);
- 2: usage or spec error (unknown key, bad value, missing file, refused output path; also
  command-line mistakes reported by the argument parser);
- 3: data error (missing column, bad codes, missing values, empty or unreadable file);
- 4: a gate held: a `run --fail-on` condition, or a `compare --fail-beyond` shift (the
  results are written and the report printed first);
- 130: interrupted (Ctrl-C).

This module imports only typer, rich and the error types. Each command imports the spec
parser, the data loader and the estimators (numpy, pandas, scipy, numba, pyarrow) inside its
function, so `strativ --help` and `strativ --version` start fast.
"""

from __future__ import annotations

import sys
from collections.abc import Iterator
from contextlib import contextmanager
from enum import Enum
from pathlib import Path
from typing import TYPE_CHECKING, Annotated

import typer
from rich.text import Text
from typer.core import TyperCommand

from .console import make_console, render_error
from .entry import EXIT_INTERRUPTED
from .errors import EXIT_INTERNAL, CliError, UsageError

if TYPE_CHECKING:
    from rich.console import Console

__all__ = ["app", "main"]


app = typer.Typer(
    name="strativ",
    help="Side-by-side IV estimates for offer lotteries run separately within strata.\n\n"
    "Example:  strativ run specs/demo.yaml",
    add_completion=False,
    no_args_is_help=True,
    pretty_exceptions_enable=False,
    context_settings={"help_option_names": ["-h", "--help"]},
)


RUN_FORMATS = ("json", "csv", "html", "md", "tex")
"""Result files `run --format` names (as the spec's output.formats)."""
REPORT_FORMATS = ("html", "md", "tex")
"""Reports `report --format` names."""


def _formats(values: list[str] | None, allowed: tuple[str, ...]) -> tuple[str, ...] | None:
    """The formats of repeated and/or comma-separated ``--format`` values, in order, once
    each; None when none was given.

    Raises
    ------
    UsageError
        Naming the unknown format and the known ones (exit 2).
    """
    if not values:
        return None
    out: list[str] = []
    for value in values:
        for name in (part.strip().lower() for part in value.split(",")):
            if name not in allowed:
                raise UsageError(f"--format names an unknown format {name!r}",
                                 "choose from " + ", ".join(allowed)
                                 + " (comma-separated, e.g. json,csv, or repeated)")
            if name not in out:
                out.append(name)
    return tuple(out)


@contextmanager
def _boundary() -> Iterator[Console]:
    """Yield the stderr console; turn every error into a message and an exit code."""
    err = make_console(stderr=True)
    try:
        yield err
    except CliError as exc:
        render_error(err, exc)
        raise typer.Exit(exc.exit_code) from None
    except (typer.Exit, typer.Abort):
        raise
    except KeyboardInterrupt:
        err.print("interrupted")
        raise typer.Exit(EXIT_INTERRUPTED) from None

    except Exception as exc:  # the last gate: never show a traceback
        err.print(Text.assemble(
            Text("internal error: ", style="bold red"),
            f"{type(exc).__name__}: {exc}\n  This is a bug in strativ; please report it with "
            "the command and the spec you ran."))
        raise typer.Exit(EXIT_INTERNAL) from None


def _version(value: bool) -> None:
    if value:
        from . import __version__

        print(f"strativ {__version__}")
        raise typer.Exit()


@app.callback()
def _root(
    version: Annotated[bool, typer.Option("--version", callback=_version, is_eager=True,
                                          help="Print the version and exit.")] = False,
) -> None:
    """Side-by-side IV estimates for offer lotteries run separately within strata.

    Example:  strativ run specs/demo.yaml
    """


def _options_help() -> str:
    """The spec's option values with their defaults, from the one option vocabulary."""
    from strativ.estimators.options import DEFAULTS, DESCRIPTIONS

    lines = []
    for option, values in DESCRIPTIONS.items():
        default = DEFAULTS[option]
        shown = ", ".join(default) if isinstance(default, tuple) else default
        lines.append(f"{option} (default: {shown}): " + "; ".join(
            f"{value} = {text}" for value, text in values.items()) + ".")
    return "\n\n".join(lines)


class _RunCommand(TyperCommand):
    """The `run` command, whose help epilog lists the spec options.

    The epilog is built when help is shown, not when the app is defined: the option
    vocabulary lives in `strativ.estimators`, whose import loads the numerical stack.
    """

    @property
    def epilog(self) -> str:  # type: ignore[override]
        return "Spec options:\n\n" + _options_help()

    @epilog.setter
    def epilog(self, value: str | None) -> None:
        """Ignore the epilog given at construction; the property builds it."""


SpecArg = Annotated[Path, typer.Argument(exists=True, dir_okay=False, readable=True,
                                         show_default=False, metavar="SPEC",
                                         help="The YAML spec file.")]


@app.command(cls=_RunCommand)
def run(
    spec: SpecArg,
    out: Annotated[Path | None, typer.Option(
        "--out", "-o", file_okay=False, show_default=False,
        help="Output directory (overrides output.dir of the spec).")] = None,
    quiet: Annotated[bool, typer.Option(
        "--quiet", "-q", help="Print no report, only warnings and errors (on stderr); still "
        "write the result files.")] = False,
    formats: Annotated[list[str] | None, typer.Option(
        "--format", "-f", show_default=False, metavar="FORMATS",
        help="Result files to write: json (results.json), csv (strata.csv), or a report: "
        "html, md, tex (report.*); comma-separated or repeated, e.g. json,csv. Default: "
        "output.formats of the spec.")] = None,
    if_changed: Annotated[bool, typer.Option(
        "--if-changed", help="Do nothing (exit 0) when the inputs, the spec and the strativ "
        "version equal those of the last run recorded in the output folder.")] = False,
    blind: Annotated[bool, typer.Option(
        "--blind", help="Blinded rehearsal: permute each outcome within strata before "
        "fitting, so the whole pipeline runs without showing the effect; every screen and "
        "file says BLINDED.")] = False,
    blind_seed: Annotated[int, typer.Option(
        "--blind-seed", help="Seed of the permutation of --blind.")] = 1,
    fail_on: Annotated[list[str] | None, typer.Option(
        "--fail-on", show_default=False, metavar="CONDITION",
        help="Exit 4 after writing the results when CONDITION holds; repeatable. "
        "Conditions: first-stage-f<X, gap>X (standard errors), excluded-strata, "
        "balance, deviation (from the spec's locked plan).")] = None,
) -> None:
    """Fit the estimators of SPEC, print the comparison and write the result files.

    Every run appends a record to history.jsonl in the output folder.

    Example:  strativ run specs/demo.yaml --out results/ --format json
    """
    with _boundary() as err:
        from .gates import parse_gates
        from .runs import run_command

        gates = parse_gates(fail_on or [])
        code = run_command(spec, out=out, quiet=quiet,
                           formats=_formats(formats, RUN_FORMATS),
                           if_changed=if_changed, gates=gates, err=err,
                           blind_seed=blind_seed if blind else None,
                           console=None if quiet else make_console())
        if code:
            raise typer.Exit(code)


@app.command()
def check(
    spec: SpecArg,
    quiet: Annotated[bool, typer.Option(
        "--quiet", "-q", help="Print only problems: warnings and errors (on stderr).")] = False,
) -> None:
    """Validate SPEC and its data and print the design summary, without printing estimates.

    The estimators' own checks run too, so it exits 0 exactly when `strativ run` can fit the
    spec.

    Example:  strativ check specs/demo.yaml
    """
    with _boundary() as err:
        from .grouped import group_data
        from .output_guard import check_output_paths, check_writable
        from .probabilities import design_probabilities
        from .render import render_check, render_warnings
        from .runner import (
            check_with_core,
            data_warnings,
            require_outcome_values,
            summarize_design,
        )
        from .spec import load_spec

        loaded = load_spec(spec)
        check_output_paths(loaded, loaded.output_dir, loaded.formats)
        check_writable(loaded.output_dir)
        dataset = group_data(loaded)
        for name in dataset.outcomes:  # as run refuses it, before any design rule
            require_outcome_values(dataset, name)
        probabilities = design_probabilities(loaded, dataset)
        summary = summarize_design(loaded, dataset)
        design_notes = check_with_core(loaded, dataset, probabilities)
        if not quiet:
            render_check(make_console(), loaded, dataset, summary, probabilities)
        render_warnings(err, data_warnings(loaded, dataset) + design_notes)


@app.command()
def cells(
    spec: SpecArg,
    out: Annotated[Path | None, typer.Option(
        "--out", "-o", dir_okay=False, show_default=False,
        help="Write the moment table here (.csv, or .parquet/.pq).")] = None,
    sql: Annotated[bool, typer.Option(
        "--sql", help="Print the query that makes the table on your own SQL engine.")] = False,
    table: Annotated[str, typer.Option(
        "--table", help="Table or view of unit rows the printed query reads.")] = "units",
) -> None:
    """Write the moment table of SPEC's rows (the only summary the estimators read), or print
    the SQL that makes it, so that only aggregates need leave a secure room.

    Example:  strativ cells specs/demo.yaml --out cells.csv
    """
    with _boundary() as err:
        from .counting import count
        from .moment_table import moment_sql, write_moment_table
        from .spec import load_spec

        loaded = load_spec(spec)
        if loaded.data_kind == "moments":
            raise UsageError(f"{loaded.path.name} reads moment tables already",
                             "run 'strativ cells' on a spec whose 'data' names unit rows")
        if sql:
            typer.echo(moment_sql(loaded, table), nl=False)
            return
        if out is None:
            raise UsageError("say where to write the table with --out FILE, or print the "
                             "query with --sql", "strativ cells SPEC --out cells.csv")
        from .grouped import group_data

        target = out.expanduser().resolve()
        if target in loaded.data:
            raise UsageError(f"{target.name} is an input of the spec",
                             "write the moment table to a new file")
        data = group_data(loaded)
        try:
            write_moment_table(data, target)
        except OSError as exc:
            raise UsageError(f"cannot write {target} ({exc.strerror})",
                             "choose a writable folder") from None
        err.print(Text.assemble("wrote ", Text(str(target)),
                                f" ({count(len(data.groups), 'group')} of "
                                f"{count(data.n_rows, 'row')}); small groups can reveal single "
                                "units: apply your disclosure rules before sharing it"))


@app.command()
def compare(
    old: Annotated[Path, typer.Argument(show_default=False, metavar="OLD",
                                        help="An earlier results.json (or its folder).")],
    new: Annotated[Path, typer.Argument(show_default=False, metavar="NEW",
                                        help="A later results.json (or its folder).")],
    fail_beyond: Annotated[float | None, typer.Option(
        "--fail-beyond", show_default=False, metavar="K",
        help="Exit 4 when any estimate moved by more than K of its earlier standard "
        "errors.")] = None,
) -> None:
    """Say what changed between two runs: input files, rows, strata, and each estimate and
    interval with its shift in standard errors.

    Example:  strativ compare last/results.json results/results.json --fail-beyond 2
    """
    with _boundary():
        from .compare import compare_files
        from .compare_render import render_comparison

        report = compare_files(old, new)
        code = report.exit_code(fail_beyond=fail_beyond)
        render_comparison(make_console(), report, fail_beyond=fail_beyond)
        if code:
            raise typer.Exit(code)


class FigureFormat(str, Enum):
    """An image format for separate figure files."""

    svg = "svg"
    png = "png"


@app.command()
def report(
    results: Annotated[Path, typer.Argument(
        show_default=False, metavar="RESULTS",
        help="A results.json written by 'strativ run' (or its folder).")],
    formats: Annotated[list[str] | None, typer.Option(
        "--format", "-f", show_default=False, metavar="FORMATS",
        help="Reports to write: html (report.html, self-contained), md (report.md), tex "
        "(report.tex, booktabs tables); comma-separated or repeated. Default: html.")] = None,
    out: Annotated[Path | None, typer.Option(
        "--out", "-o", file_okay=False, show_default=False,
        help="Folder for the reports (default: the folder of RESULTS).")] = None,
    figures: Annotated[FigureFormat | None, typer.Option(
        "--figures", show_default=False,
        help="Also write each figure as a separate file: svg or png.")] = None,
) -> None:
    """Write reports from a results file alone (the data are not read).

    Example:  strativ report strativ_out/results.json --format html --format tex
    """
    with _boundary() as err:
        from .report_files import write_reports

        chosen = _formats(formats, REPORT_FORMATS) or ("html",)
        written = write_reports(results, chosen, out=out,
                                figures=None if figures is None else figures.value)
        err.print(Text.assemble("wrote ", Text(", ".join(str(p) for p in written))))


@app.command()
def lock(spec: SpecArg) -> None:
    """Lock the analysis plan of SPEC before outcomes are seen: its options, the strativ
    version and the fingerprints of the data files present now go to <spec>.lock.json, and
    every later run of SPEC reports each deviation from them.

    Example:  strativ lock specs/trial.yaml
    """
    with _boundary() as err:
        from .fingerprints import distinct_digests
        from .plan_lock import write_lock
        from .results import tool_version
        from .spec import load_spec

        loaded = load_spec(spec)
        if loaded.data_kind != "rows":
            raise UsageError("a plan is locked on the unit rows' files, and this spec reads "
                             "a moment table", "lock the spec that reads the rows")
        digests = distinct_digests(loaded)
        inputs = [(p, p.stat().st_size, d) for p, d in zip(loaded.data, digests, strict=True)]
        target = write_lock(loaded, inputs, tool_version())
        err.print(Text.assemble("locked the plan of ", Text(loaded.path.name), " in ",
                                Text(str(target)), f" with {len(inputs)} baseline "
                                f"{'file' if len(inputs) == 1 else 'files'}; every run of "
                                "the spec now reports its deviations from it"))


@app.command()
def init(
    data: Annotated[list[str], typer.Argument(
        show_default=False, metavar="DATA...",
        help="Data files to inspect, or a quoted glob such as 'data/round_*.csv'; several "
        "files are the trial's waves.")],
    output: Annotated[Path, typer.Option(
        "--output", "-o", dir_okay=False,
        help="Where to write the starter spec; an existing file is never overwritten.")]
    = Path("strativ.yaml"),
) -> None:
    """Inspect DATA and write a starter spec, filling in only the roles the data make clear.

    Example:  strativ init 'demo_data/round_*.csv' --output my_study.yaml
    """
    with _boundary() as err:
        from .starter import data_files, starter_spec, write_new_file

        files = data_files(data)
        target = output.expanduser()
        text = starter_spec(files, target)
        write_new_file(target, text)
        missing = [line.split(":")[0].strip(" #") for line in text.splitlines()
                   if line.startswith("  # ") and ": <column>   # candidates" in line]
        todo = ("; every required role is filled: read the comments, then run: strativ "
                "check " if not missing else
                f"; fill in the commented {'role' if len(missing) == 1 else 'roles'} "
                f"({', '.join(missing)}), then run: strativ check ")
        err.print(Text.assemble("wrote ", Text(str(target)), todo, Text(str(target))))


def main() -> None:
    """Console entry point of `strativ`; the outermost guard against a traceback."""
    try:
        app(prog_name="strativ")
    except SystemExit:
        raise
    except BaseException as exc:  # noqa: BLE001 - the user must never see a traceback
        if isinstance(exc, KeyboardInterrupt):
            sys.stderr.write("interrupted\n")
            sys.exit(EXIT_INTERRUPTED)

        sys.stderr.write(f"internal error: {type(exc).__name__}: {exc}\n"
                         "  This is a bug in strativ; please report it.\n")
        sys.exit(EXIT_INTERNAL)

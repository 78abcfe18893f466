"""One `strativ run`: skip when nothing changed, fit, show, write, record, apply the gates.

The command in `app.py` parses arguments; this module does the steps in order:

1. read the spec and resolve the output folder and formats;
2. with ``--if-changed``, compare the inputs' fingerprints, the resolved spec's hash and the
   tool version with the last record of the folder's history; when all are equal and the
   result files are still there, say so in one line and stop (exit 0);
3. group the data (with ``--blind``: read the rows and permute each outcome within strata)
   and fit; print the report (unless quiet);
4. write the result files atomically, then append the run's record to the history;
5. print the warnings (always, on stderr: ``--quiet`` drops the report, never a warning);
6. check the ``--fail-on`` gates on the written results; a failing gate gives exit 4.
"""

from __future__ import annotations

from pathlib import Path
from typing import TYPE_CHECKING, Any

from rich.text import Text

from .errors import UsageError
from .gates import EXIT_GATE, Gate, failed_gates

if TYPE_CHECKING:
    from rich.console import Console

    from .history import History
    from .spec import Spec

__all__ = ["run_command"]


def _unchanged(spec: Spec, out_dir: Path, formats: tuple[str, ...],
               history: History, blinded: int | None) -> dict | None:
    """The last record when a rerun could change nothing, else None."""
    from .fingerprints import distinct_digests
    from .history import state_of
    from .output_guard import output_paths
    from .results import resolved_spec, tool_version

    last = history.last
    if last is None or history.damaged:
        return None
    if not all(p.is_file() for p in output_paths(out_dir, formats)):
        return None
    digests = distinct_digests(spec)
    now = state_of(resolved_spec(spec, out_dir=out_dir, formats=formats),
                   [(p.name, d) for p, d in zip(spec.data, digests, strict=True)],
                   tool_version(), blinded=blinded)
    same = all(last.get(k) == v for k, v in now.items())
    return last if same else None


def _blinded(spec: Spec, seed: int) -> Any:
    """The run's data with each outcome permuted within strata (read row by row)."""
    from dataclasses import replace

    from strativ.estimators.blinding import blind_outcomes

    from .grouped import from_rows
    from .loading import load_data

    if spec.data_kind != "rows":
        raise UsageError("a blinded rehearsal permutes unit rows, and this spec reads a "
                         "moment table", "run --blind on the spec that reads the rows")
    rows = load_data(spec)
    return from_rows(spec, replace(rows, outcomes=blind_outcomes(rows.stratum, rows.outcomes,
                                                                 seed=seed)))


def _history_notes(history: History) -> list[str]:
    """Warnings about damaged lines of the history (kept in the file, reported here)."""
    return [f"{history.path.name}, line {line}: {why}; the line is kept as it is and this "
            "run's record starts on a new line" for line, why in history.damaged]


def run_command(spec_path: Path, *, out: Path | None, quiet: bool,
                formats: tuple[str, ...] | None, if_changed: bool, gates: tuple[Gate, ...],
                err: Console, console: Console | None, blind_seed: int | None = None) -> int:
    """Run the spec at `spec_path` as `strativ run` does; return the exit code.

    Parameters
    ----------
    spec_path : Path
        The YAML spec.
    out : Path or None
        Output folder from the command line (None: the spec's).
    quiet : bool
        Print no report and no file list; warnings still go to `err`.
    formats : tuple of str or None
        Formats from the command line (None: the spec's).
    if_changed : bool
        Skip the run when nothing changed since the folder's last recorded run.
    gates : tuple of Gate
        ``--fail-on`` conditions, checked after the files are written.
    err : Console
        Standard error.
    console : Console or None
        Standard output for the report (None when quiet).
    blind_seed : int, optional
        Run a blinded rehearsal: the outcomes permuted within strata with this seed.

    Returns
    -------
    int
        0, or `gates.EXIT_GATE` when a gate failed.

    Raises
    ------
    CliError
        Spec, data and usage errors, as the other commands.
    """
    from .console import draw_progress
    from .grouped import group_data
    from .history import append_record, read_history, run_record
    from .output_guard import check_output_paths, remove_stale_outputs
    from .plan_lock import check_plan
    from .render import render_run, render_warnings
    from .results import results_document, tool_version, write_outputs
    from .runner import run_spec
    from .spec import load_spec

    loaded = load_spec(spec_path)
    out_dir = loaded.output_dir if out is None else out.expanduser().resolve()
    chosen = formats or loaded.formats
    check_output_paths(loaded, out_dir, chosen)
    try:
        history = read_history(out_dir)
    except OSError as exc:
        raise UsageError(f"cannot read the run history in {out_dir} ({exc.strerror})",
                         "make the output folder readable, or choose another with --out") \
            from None
    if if_changed:
        last = _unchanged(loaded, out_dir, chosen, history, blind_seed)
        if last is not None:
            err.print(f"unchanged since the run of {last.get('created', '?')}: same inputs, "
                      f"spec and strativ version; {out_dir} left as it is")
            return 0
    data = group_data(loaded) if blind_seed is None else _blinded(loaded, blind_seed)
    with draw_progress(err, enabled=not quiet and loaded.randomization is not None) as bar:
        result = run_spec(loaded, data, progress=bar, blinded=blind_seed)
    if console is not None:
        render_run(console, result)
    plan = check_plan(loaded, [(f.path.name, f.sha256) for f in result.dataset.files],
                      tool_version())
    document = results_document(result, out_dir=out_dir, formats=chosen,
                                plan=None if plan is None else plan.to_dict())
    written = write_outputs(result, out_dir, chosen, document=document)
    stale = remove_stale_outputs(out_dir, chosen)
    notes = _history_notes(history)
    if plan is not None:
        notes += [f"deviation from the plan locked in {plan.lock} on {plan.locked}: {d}"
                  for d in plan.deviations]
    try:
        append_record(out_dir, run_record(document), ends_cleanly=history.ends_cleanly)
    except OSError as exc:
        notes.append(f"the run's record could not be added to {history.path} "
                     f"({exc.strerror}); the result files are written")
    render_warnings(err, [*result.warnings, *notes])
    if not quiet:
        err.print(Text.assemble("wrote ", Text(", ".join(str(p) for p in written))))
    if stale:  # said even with --quiet: files disappeared from the folder
        err.print(Text.assemble("removed ", Text(", ".join(p.name for p in stale)),
                                " left from an earlier run (not among this run's formats)"))
    failed = failed_gates(gates, document)
    for gate, findings in failed:
        err.print(Text.assemble(Text("gate failed: ", style="bold red"), gate.text, ": ",
                                "; ".join(findings[:5])
                                + (f"; and {len(findings) - 5} more" if len(findings) > 5
                                   else "")))
    return EXIT_GATE if failed else 0

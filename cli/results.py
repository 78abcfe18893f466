"""Result files: results.json and strata.csv, written atomically, never over an input.

Every number in these files is copied from the estimator results' ``to_dict()``; nothing is
recomputed here. A JSON Schema for results.json ships as ``results.schema.json`` beside this
module.
"""

from __future__ import annotations

import csv
import io
import json
import os
from datetime import datetime, timezone
from importlib import resources
from pathlib import Path
from typing import Any

from .errors import UsageError
from .files import forget_temporary, remove_stale_temporaries, temporary_file
from .output_guard import FILE_NAMES, check_output_paths
from .runner import Run
from .spec import Spec
from .waves import part_names

__all__ = [
    "SCHEMA_VERSION",
    "STRATA_COLUMNS",
    "resolved_spec",
    "results_document",
    "strata_table",
    "strata_csv_columns",
    "stratum_columns",
    "write_outputs",
    "load_schema",
]

SCHEMA_VERSION = "2.1"
"""Version of the results.json layout; bumped when a field changes meaning or is removed."""
STRATA_COLUMNS = (
    "outcome", "stratum", "used", "exclusion_reason", "n", "n_offered", "n_not_offered",
    "offer_share", "mean_outcome_offered", "mean_outcome_not_offered", "take_up_offered",
    "take_up_not_offered", "itt", "first_stage", "effect", "effect_std_error", "effect_reason",
    "weight_fixed_effects", "weight_complier", "always_takers", "never_takers", "compliers",
    "gap_contribution",
)
"""Columns of strata.csv, in order."""


def stratum_columns(run: Run, label: Any) -> dict[str, Any]:
    """Return ``{"stratum_columns": {column: value}}`` for a stratum built from several
    columns, or ``{}`` for a stratum from one column (its label is then the value itself).

    Parameters
    ----------
    run : Run
        The fitted run.
    label : str or int
        The stratum's combined label.

    Returns
    -------
    dict
        Empty, or one key holding the value of each stratum column in the spec's order.
    """
    parts = run.dataset.stratum_parts.get(label)
    if parts is None:
        return {}
    return {"stratum_columns": dict(zip(part_names(run.spec, run.dataset), parts, strict=True))}


def strata_csv_columns(run: Run) -> tuple[str, ...]:
    """Return the header of strata.csv: `STRATA_COLUMNS`, with one column per stratum column
    after ``stratum`` when the stratum is built from several columns.

    A stratum column whose name is already a column of strata.csv is written as
    ``stratum.<name>``.

    Parameters
    ----------
    run : Run
        The fitted run.

    Returns
    -------
    tuple of str
        The column names, in order.
    """
    tail = ("blinded",) if run.blinded is not None else ()
    if not run.dataset.stratum_parts:
        return STRATA_COLUMNS + tail
    parts = tuple(f"stratum.{name}" if name in STRATA_COLUMNS else name
                  for name in part_names(run.spec, run.dataset))
    at = STRATA_COLUMNS.index("stratum") + 1
    return STRATA_COLUMNS[:at] + parts + STRATA_COLUMNS[at:] + tail


def tool_version() -> str:
    """Return the strativ version (installed, else from the source tree, else "unknown")."""
    from . import __version__

    return __version__


def load_schema() -> dict[str, Any]:
    """Return the JSON Schema of results.json shipped with the package."""
    text = resources.files("strativ.cli").joinpath("results.schema.json").read_text("utf-8")
    return json.loads(text)


def resolved_spec(spec: Spec, *, out_dir: Path | None = None,
                  formats: tuple[str, ...] | None = None) -> dict[str, Any]:
    """The spec as results.json records it: the output folder and formats actually used.

    Parameters
    ----------
    spec : Spec
        The validated spec.
    out_dir : Path, optional
        Output directory used, when the command line overrode output.dir.
    formats : tuple of str, optional
        Output formats written, when the command line overrode output.formats.

    Returns
    -------
    dict
        JSON-ready spec.
    """
    out = spec.to_dict()
    if out_dir is not None:
        out["output"]["dir"] = str(out_dir)
    if formats is not None:
        out["output"]["formats"] = list(formats)
    return out


def excluded_rows(comparison: Any) -> int:
    """Rows with the outcome in strata the estimators left out (no both arms, ...)."""
    return sum(int(e.n) for e in comparison.strata.excluded)


def _now() -> str:
    return datetime.now(timezone.utc).isoformat(timespec="seconds")


def results_document(run: Run, *, created: str | None = None, out_dir: Path | None = None,
                     formats: tuple[str, ...] | None = None,
                     plan: dict[str, Any] | None = None) -> dict[str, Any]:
    """Assemble the contents of results.json.

    Parameters
    ----------
    run : Run
        The fitted run.
    created : str, optional
        ISO 8601 timestamp to record (default: now, UTC).
    out_dir : Path, optional
        Output directory actually used (recorded in the resolved spec instead of output.dir
        when the command line overrode it).
    formats : tuple of str, optional
        Output formats actually written (likewise).
    plan : dict, optional
        The run checked against the spec's locked plan (`plan_lock.PlanCheck.to_dict`).

    Returns
    -------
    dict
        JSON-ready data; see results.schema.json for the layout.
    """
    data = run.dataset
    estimates, strata, exclusions, comparisons = [], [], [], []
    for result in run.outcomes:
        comp = result.comparison.to_dict()
        for estimate in comp["estimates"]:
            estimates.append({"outcome": result.outcome, **estimate})
        for row in comp["strata"]["rows"]:
            strata.append({"outcome": result.outcome, **row,
                           **stratum_columns(run, row["label"])})
        for excluded in comp["strata"]["excluded"]:
            exclusions.append({"outcome": result.outcome, **excluded,
                               **stratum_columns(run, excluded["label"])})
        comparisons.append({
            "outcome": result.outcome,
            "rows_used": result.cells.n_units - excluded_rows(result.comparison),
            "rows_in_excluded_strata": excluded_rows(result.comparison),
            "rows_missing_outcome": result.missing,
            "attrition_test": None if result.attrition_test is None
            else result.attrition_test.to_dict(),
            "sensitivity": None if result.sensitivity is None else result.sensitivity.to_dict(),
            "randomization": None if result.randomization is None
            else result.randomization.to_dict(),
            "planning": None if result.plan is None else result.plan.to_dict(),
            "gap": comp["gap"],
            "size_weighted": comp["size_weighted"],
            "single_unit_cells": comp["strata"]["single_unit_cells"],
            "single_cluster_cells": comp["single_cluster_cells"],
            "variance_rule": comp["variance_rule"],
            "constant_effect": comp["constant_effect"],
            "negative_first_stage": comp["negative_first_stage"],
            "offer_counts": comp["offer_counts"],
            "notes": comp["notes"],
        })
    spec = resolved_spec(run.spec, out_dir=out_dir, formats=formats)
    probabilities = None if run.offer_probability is None else [
        {"stratum": label, "probability": prob, **stratum_columns(run, label)}
        for label, prob in run.offer_probability.items()]
    return {
        "schema_version": SCHEMA_VERSION,
        "tool": {"name": "strativ", "version": tool_version()},
        "created": created or _now(),
        "title": run.spec.title,
        "spec": spec,
        "inputs": [f.to_dict() for f in data.files],
        "rows": {
            "read": data.n_read,
            "kept": data.n_rows,
            "dropped_incomplete": data.n_dropped,
            "dropped_by_column": [
                {"column": c, "rows": n,
                 **dict(zip(("offered", "not_offered"),
                            next((a[1:] for a in data.dropped_by_arm if a[0] == c),
                                 (None, None)), strict=True))}
                for c, n in data.dropped],
        },
        "offer_probability": probabilities,
        "estimates": estimates,
        "comparisons": comparisons,
        "strata": strata,
        "exclusions": exclusions,
        "attrition": [{**a.to_dict(), **stratum_columns(run, a.stratum)}
                      for r in run.outcomes for a in r.attrition],
        "covariates": None if run.profile is None else run.profile.to_dict(),
        "adjusted_estimates": [
            {"outcome": r.outcome, **a.to_dict(), "fit": {"outcome": r.outcome,
                                                          **a.fit.to_dict()}}
            for r in run.outcomes for a in r.adjusted],
        "multiple_outcomes": [f.to_dict() for f in run.families],
        "randomization_outcomes": None if run.randomization_family is None
        else run.randomization_family.to_dict(),
        "plan": plan,
        "blinded": None if run.blinded is None else {
            "seed": run.blinded,
            "note": "BLINDED rehearsal: each outcome permuted within strata; every estimate "
                    "targets zero and none is a result"},
        "waves": None if run.waves is None else run.waves.to_dict(),
        "warnings": list(run.warnings),
    }


def _cell(value: Any) -> str:
    if value is None:
        return ""
    if isinstance(value, bool):
        return "true" if value else "false"
    if isinstance(value, float) and value == 0:
        return "0.0"  # never "-0.0"
    if isinstance(value, str):
        return _inert(value)
    return str(value)


_FORMULA_START = ("=", "+", "-", "@", "\t", "\r")
"""First characters that make a spreadsheet run a cell as a formula."""


def _inert(text: str) -> str:
    """`text` as a spreadsheet shows it but never runs it: a text cell that starts like a
    formula gets a leading apostrophe (common practice for CSV exports); a number such as
    -3.5 is left alone."""
    if not text.startswith(_FORMULA_START):
        return text
    try:
        float(text)
    except ValueError:
        return "'" + text
    return text


def strata_table(run: Run) -> str:
    """Return strata.csv: one line per (outcome, stratum), excluded strata included.

    Parameters
    ----------
    run : Run
        The fitted run.

    Returns
    -------
    str
        CSV text with the header `strata_csv_columns(run)`; numbers are the core's, in full
        precision.
    """
    buffer = io.StringIO()
    writer = csv.writer(buffer, lineterminator="\n")
    header = strata_csv_columns(run)
    writer.writerow([_inert(h) for h in header])
    at = STRATA_COLUMNS.index("stratum") + 1
    names = header[at:at + len(run.dataset.stratum_parts and part_names(run.spec, run.dataset))]
    mark = {"blinded": True} if run.blinded is not None else {}

    def parts(label: Any) -> dict[str, Any]:
        values = run.dataset.stratum_parts.get(label, ())
        return dict(zip(names, values, strict=False))

    for result in run.outcomes:
        table = result.comparison.strata.to_dict()
        for row in table["rows"]:
            record = {"outcome": result.outcome, "stratum": row["label"], "used": True,
                      "exclusion_reason": None, **row, **parts(row["label"]), **mark}
            writer.writerow([_cell(record.get(c)) for c in header])
        for row in table["excluded"]:
            record = {"outcome": result.outcome, "stratum": row["label"], "used": False,
                      "exclusion_reason": row["reason"], "n": row["n"], **parts(row["label"]),
                      **mark}
            writer.writerow([_cell(record.get(c)) for c in header])
    return buffer.getvalue()


def write_outputs(run: Run, out_dir: Path, formats: tuple[str, ...], *,
                  created: str | None = None,
                  document: dict[str, Any] | None = None) -> list[Path]:
    """Write the result files atomically (temporary file in `out_dir`, then rename).

    The files get the permissions of any new file under the current umask (0644 under
    umask 022).

    Parameters
    ----------
    run : Run
        The fitted run.
    out_dir : Path
        Output directory; created when missing.
    formats : tuple of str
        Any of ``"json"``, ``"csv"`` and the report formats ``"html"``, ``"md"``, ``"tex"``
        (built from the results.json document, as `strativ report` builds them).
    created : str, optional
        Timestamp for results.json.
    document : dict, optional
        The results.json content already assembled for this run, folder and formats
        (`results_document`); assembled here when not given.

    Returns
    -------
    list of Path
        The files written.

    Raises
    ------
    UsageError
        When the output would overwrite an input, or the directory cannot be written.
    """
    check_output_paths(run.spec, out_dir, formats)
    texts = {}
    reports = [f for f in formats if f not in ("json", "csv")]
    if "json" in formats or reports:
        if document is None:
            document = results_document(run, created=created, out_dir=out_dir,
                                        formats=formats)
        texts["json"] = json.dumps(document, indent=2, ensure_ascii=False, allow_nan=False) + "\n"
    if "csv" in formats:
        texts["csv"] = strata_table(run)
    if reports:  # from the document, as `strativ report` reads it back from results.json
        from .report import report_texts
        from .results_read import results_from_document

        texts.update(report_texts(results_from_document(json.loads(texts["json"])),
                                  tuple(reports)))
    made_dir = not out_dir.exists()
    temps: list[tuple[Path, Path]] = []
    try:
        out_dir.mkdir(parents=True, exist_ok=True)
        remove_stale_temporaries(out_dir)  # left by a run that was killed while writing
        for fmt in formats:
            fd, tmp = temporary_file(out_dir)
            temps.append((tmp, out_dir / FILE_NAMES[fmt]))
            with os.fdopen(fd, "w", encoding="utf-8", newline="") as handle:
                handle.write(texts[fmt])
                handle.flush()
                os.fsync(handle.fileno())
        for tmp, target in temps:
            os.replace(tmp, target)
            forget_temporary(tmp)
    except BaseException as exc:  # also Ctrl-C and SIGTERM: no temporary file is left
        for tmp, _ in temps:
            tmp.unlink(missing_ok=True)
            forget_temporary(tmp)
        if made_dir and out_dir.is_dir() and not any(out_dir.iterdir()):
            out_dir.rmdir()
        if not isinstance(exc, OSError):
            raise
        raise UsageError(f"cannot write the results into {out_dir} ({exc.strerror})",
                         "choose a writable directory with --out or output.dir") from None
    return [target for _, target in temps]

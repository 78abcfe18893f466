"""Where results may be written: the output folder checked before a run, and cleared after.

`check_output_paths` refuses a folder that would write over an input or where a data glob of
the spec would read the results as data on the next run (`reading_pattern` matches globs as
the reader finds files); `check_writable` asks whether the folder can be created and written
(so `check` finds out before a run); `remove_stale_outputs` removes the result files of
formats a run no longer writes, so the folder never mixes two runs.
"""

from __future__ import annotations

import fnmatch
import glob
import os
from pathlib import Path, PurePath
from typing import TYPE_CHECKING

from .errors import UsageError

if TYPE_CHECKING:
    from .spec import Spec

__all__ = ["FILE_NAMES", "check_output_paths", "check_writable", "output_paths",
           "reading_pattern", "remove_stale_outputs"]

FILE_NAMES = {"json": "results.json", "csv": "strata.csv", "html": "report.html",
              "md": "report.md", "tex": "report.tex"}
"""File written for each output format."""

def output_paths(out_dir: Path, formats: tuple[str, ...]) -> list[Path]:
    """Return the files a run writes into `out_dir` for `formats`."""
    return [out_dir / FILE_NAMES[f] for f in formats]


def check_output_paths(spec: Spec, out_dir: Path, formats: tuple[str, ...]) -> None:
    """Refuse an output directory that would write into or over an input file.

    Parameters
    ----------
    spec : Spec
        The spec (its file and its data files are the inputs).
    out_dir : Path
        The resolved output directory.
    formats : tuple of str
        Output formats to write.

    Raises
    ------
    UsageError
        When the output directory is an existing file, when an output file would replace the
        spec or a data file, or when a data glob of the spec would match an output file (so
        that a later run would read results as data).
    """
    inputs = {p.resolve() for p in (spec.path, *spec.data)}
    if out_dir.resolve() in inputs or (out_dir.exists() and not out_dir.is_dir()):
        raise UsageError(f"the output directory {out_dir} is a file",
                         "choose a directory with --out or output.dir")
    for target in [*output_paths(out_dir, formats), out_dir / "history.jsonl"]:
        resolved = target.resolve()
        if resolved in inputs:
            raise UsageError(f"writing {target} would overwrite an input file",
                             "choose another output directory with --out or output.dir")
    for target in [out_dir / name for name in (*FILE_NAMES.values(), "history.jsonl")]:
        entry = reading_pattern(spec, target)
        if entry is not None:
            raise UsageError(f"{target} would match the data pattern '{entry}', so a "
                             "later run would read the results as data",
                             "choose another output directory with --out or output.dir")


def reading_pattern(spec: Spec, target: Path) -> str | None:
    """The `data` glob of `spec` that would read `target` on a later run, or None.

    Both sides are compared as the reader finds files: relative entries below the spec's
    folder, ``..`` and symbolic links resolved, ``*``, ``?`` and ``[...]`` within one
    path part and ``**`` across folders (`glob.glob` with ``recursive=True``).
    """
    resolved = Path(os.path.realpath(target))
    for entry in spec.data_entries:
        parts = Path(entry).expanduser().parts
        magic = [i for i, part in enumerate(parts) if set("*?[") & set(part)]
        if not magic:
            continue
        literal = Path(*parts[:magic[0]]) if magic[0] else Path()
        if not literal.is_absolute():
            literal = spec.path.parent / literal
        rest = parts[magic[0]:]
        prefix = Path(os.path.realpath(literal))
        if "**" in rest:  # any depth: the part after the prefix, matched across folders
            pattern = str(Path(glob.escape(str(prefix)), *rest))
            if any(fnmatch.fnmatchcase(str(resolved), p)  # "**/" also matches no folder
                   for p in (pattern, pattern.replace("**/", ""))):
                return entry
        elif PurePath(resolved).match(str(Path(glob.escape(str(prefix)), *rest))):
            return entry
    return None


def check_writable(out_dir: Path) -> None:
    """Refuse an output folder that cannot be created or written, as a run would find out
    only after fitting (`check` asks the same question first). Nothing is left behind.

    Raises
    ------
    UsageError
        With the reason and how to fix it.
    """
    existing = out_dir
    while not existing.exists() and existing != existing.parent:
        existing = existing.parent
    if not existing.is_dir():
        raise UsageError(f"the output directory {out_dir} cannot be created: {existing} is a "
                         "file", "choose a directory with --out or output.dir")
    if not os.access(existing, os.W_OK | os.X_OK):
        raise UsageError(f"cannot write the results into {out_dir} (permission denied on "
                         f"{existing})", "choose a writable directory with --out or "
                         "output.dir")


def remove_stale_outputs(out_dir: Path, formats: tuple[str, ...]) -> list[Path]:
    """Remove the result files of formats this run did not write, left by an earlier run in
    `out_dir` (only the tool's own file names: results.json, strata.csv, report.*), so that
    the folder never mixes two runs.

    Parameters
    ----------
    out_dir : Path
        The run's output folder.
    formats : tuple of str
        The formats this run wrote.

    Returns
    -------
    list of Path
        The files removed (those that could not be removed are left and not listed).
    """
    removed = []
    for fmt, name in FILE_NAMES.items():
        target = out_dir / name
        if fmt in formats or not target.is_file():
            continue
        try:
            target.unlink()
        except OSError:
            continue
        removed.append(target)
    return removed

"""The spec's `data` (or `moments`) entries resolved to files, as the reader will find them.

Relative entries are taken below the spec's folder; an entry with glob characters is a
pattern (``**`` crosses folders) unless a file of that very name exists. Every file must be a
regular file strativ reads, named once; a pipe or a device is refused before anything opens
it.
"""

from __future__ import annotations

import glob
from pathlib import Path
from typing import TYPE_CHECKING, Any

from .files import special_file
from .suggest import suggest
from .tables import DATA_SUFFIXES, FORMATS_TEXT

if TYPE_CHECKING:
    from .spec import _Checker

__all__ = ["data_files", "glob_pattern"]

_GLOB_CHARS = set("*?[")
"""Characters that make a data entry a pattern."""


def data_files(check: _Checker, value: Any, base: Path,
                key: str = "data") -> tuple[tuple[str, ...], tuple[Path, ...]]:
    entries = check.names(value, (key,), "a data file, a list of files or a glob")
    found: list[Path] = []
    for i, entry in enumerate(entries):
        keys = (key, i) if isinstance(value, list) else (key,)
        target = Path(entry).expanduser()
        target = target if target.is_absolute() else base / target
        pattern = bool(_GLOB_CHARS & set(entry)) and not target.is_file()  # "a[1].csv" is a file
        if pattern:
            matches = sorted(Path(m) for m in glob.glob(glob_pattern(entry, base),
                                                        recursive=True))
            matches = [m for m in matches if not m.is_dir()]
            if not matches:
                raise check.error(keys, f"the pattern '{entry}' matches no file "
                                  f"(looked in {target.parent})",
                                  "paths are relative to the spec file's directory")
        else:
            if not target.exists():
                siblings = [p.name for p in target.parent.iterdir()] \
                    if target.parent.is_dir() else []
                hint = suggest(target.name, siblings) or \
                    "paths are relative to the spec file's directory"
                raise check.error(keys, f"data file '{entry}' does not exist "
                                  f"(looked for {target})", hint)
            if target.is_dir():
                raise check.error(keys, f"'{entry}' is a directory",
                                  f"name the files, or a glob such as '{entry}/*.csv'")
            matches = [target]
        for match in matches:
            kind = special_file(match)
            if kind is not None:  # a pipe waits forever, a device never ends
                raise check.error(keys, f"'{match.name}' is not a regular file but {kind}",
                                  "name data files saved on disk")
            resolved = match.resolve()
            if not resolved.name.lower().endswith(DATA_SUFFIXES):
                hint = f"the pattern '{entry}' matched it; narrow the pattern, for example " \
                    "to end in .csv" if pattern else \
                    f"strativ reads files ending in {FORMATS_TEXT}"
                raise check.error(keys, f"'{match.name}' is not a data file strativ reads", hint)
            if resolved in found:
                raise check.error(keys, f"'{match.name}' is named twice in '{key}'",
                                  "list each file once, or its rows are counted twice")
            found.append(resolved)
    return entries, tuple(found)


def glob_pattern(entry: str, base: Path) -> str:
    """Return the glob pattern of a `data` entry: relative entries are taken below `base`,
    whose own characters are escaped (a spec in a directory named "[2024]" still works).

    Parameters
    ----------
    entry : str
        The `data` entry as written in the spec.
    base : Path
        The spec file's directory.

    Returns
    -------
    str
        A pattern for `glob.glob` or `fnmatch.fnmatch`.
    """
    target = Path(entry).expanduser()
    if target.is_absolute():
        return str(target)
    return str(Path(glob.escape(str(base))) / target)

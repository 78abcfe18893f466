"""Typed errors of the command line, and the exit code each one maps to.

Every error a user can cause is one of these; `strativ.cli.app` turns them into a message on
stderr and an exit code at one boundary. Exit codes: 0 success, 1 unexpected internal error,
2 usage or spec error, 3 data error.
"""

from __future__ import annotations

import re
from typing import TYPE_CHECKING

if TYPE_CHECKING:  # the entry point imports this module first: it stays light
    from collections.abc import Sequence
    from pathlib import Path

__all__ = [
    "EXIT_OK",
    "EXIT_INTERNAL",
    "EXIT_USAGE",
    "EXIT_DATA",
    "CliError",
    "SpecError",
    "DataError",
    "UsageError",
    "safe_text",
]

EXIT_OK = 0
"""The command did what was asked."""
EXIT_INTERNAL = 1
"""An unexpected internal error (a bug in strativ); the message asks for a report."""
EXIT_USAGE = 2
"""The command line or the spec is wrong (unknown key, bad value, refused output path)."""
EXIT_DATA = 3
"""The data cannot be used as the spec describes (missing column, bad codes, empty file)."""


_CONTROL = re.compile("[\x00-\x08\x0b-\x1f\x7f-\x9f\u202a-\u202e\u2066-\u2069]")
"""Characters a terminal or a log could act on: C0 and C1 controls except tab and newline,
DEL, and the bidirectional overrides (which reorder what a reader sees)."""
MESSAGE_LIMIT = 600
"""Characters of a message or hint shown at most; a longer one is cut with a note."""


def _escape(match: re.Match[str]) -> str:
    code = ord(match.group())
    return f"\\x{code:02x}" if code < 0x100 else f"\\u{code:04x}"


def safe_text(text: str, limit: int | None = None) -> str:
    """`text` with control characters escaped (``\\x1b``, ``\\u202e``) and, past `limit`
    characters, cut with a note of how much was left out.

    Parameters
    ----------
    text : str
        Any text that may hold a user's value (a label, a column name, a file name).
    limit : int, optional
        Largest length kept (default: no cut).

    Returns
    -------
    str
        Text safe to print on a terminal or write to a log line.
    """
    text = _CONTROL.sub(_escape, str(text))
    if limit is not None and len(text) > limit:
        return f"{text[:limit]}... ({len(text) - limit:,} more characters)"
    return text


def _shown_path(path: Path) -> str:
    """Return `path` relative to the working directory when it lies below it."""
    try:
        return str(path.resolve().relative_to(path.cwd().resolve()))
    except (ValueError, OSError):
        return str(path)


class CliError(Exception):
    """Base class of the errors that the command line reports without a traceback."""

    exit_code: int = EXIT_INTERNAL

    def __init__(self, message: str, hint: str | None = None) -> None:
        message = safe_text(message, MESSAGE_LIMIT)
        super().__init__(message)
        self.message = message
        self.hint = None if hint is None else safe_text(hint, MESSAGE_LIMIT)

    def where(self) -> str | None:
        """Return the location prefix of the message (file, line, row), or None."""
        return None

    def render(self) -> str:
        """Return the full message: location, what is wrong, and how to fix it."""
        where = self.where()
        text = f"{where}: {self.message}" if where else self.message
        if self.hint:
            text = f"{text}\n  hint: {self.hint}"
        return text

    def __str__(self) -> str:
        return self.render()


class SpecError(CliError):
    """The spec file is malformed or names an invalid option.

    Parameters
    ----------
    path : Path or None
        The spec file.
    line : int or None
        1-based line of the offending key or value in the spec file.
    key : str or None
        Dotted key path (``"columns.stratum"``) of the offending entry.
    message : str
        What is wrong, including the value found.
    hint : str, optional
        How to fix it ("did you mean ...").
    """

    exit_code = EXIT_USAGE

    def __init__(
        self,
        path: Path | None,
        line: int | None,
        key: str | None,
        message: str,
        hint: str | None = None,
    ) -> None:
        super().__init__(message, hint)
        self.path = path
        self.line = line
        self.key = key

    def where(self) -> str | None:
        parts = []
        if self.path is not None:
            parts.append(safe_text(_shown_path(self.path), 200))
        if self.line is not None:
            parts.append(f"line {self.line}")
        return ", ".join(parts) or None


class DataError(CliError):
    """A data file cannot be used as the spec describes it.

    Parameters
    ----------
    file : Path or None
        The data file (None when the problem spans all files).
    column : str or None
        The offending column.
    rows : sequence of int, default=()
        1-based data rows (the first row after the header is row 1) that show the problem.
    message : str
        What is wrong, including the values found.
    hint : str, optional
        How to fix it.
    """

    exit_code = EXIT_DATA

    def __init__(
        self,
        file: Path | None,
        column: str | None,
        rows: Sequence[int],
        message: str,
        hint: str | None = None,
    ) -> None:
        super().__init__(message, hint)
        self.file = file
        self.column = column
        self.rows = tuple(rows)

    def where(self) -> str | None:
        parts = []
        if self.file is not None:
            parts.append(safe_text(self.file.name, 120))
        if self.column is not None:
            parts.append(f"column '{safe_text(self.column, 80)}'")
        return ", ".join(parts) or None


class UsageError(CliError):
    """The command line asks for something strativ refuses to do (for example, to write over
    an input file or an existing spec).

    Parameters
    ----------
    message : str
        What was refused and why.
    hint : str, optional
        How to get what was meant.
    """

    exit_code = EXIT_USAGE

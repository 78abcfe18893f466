"""Parse the cells of one data column for its role: binary code, number or label.

Values come either as text (CSV) or as typed Python values (Parquet). Each parser returns
the parsed array plus the positions of missing and of invalid entries; the loader turns
those positions into row numbers in its messages.
"""

from __future__ import annotations

import math
import re
from collections.abc import Callable, Sequence
from dataclasses import dataclass
from decimal import Decimal
from numbers import Integral, Real
from typing import Any

import numpy as np

__all__ = [
    "MISSING_TOKENS",
    "Parsed",
    "decimal_point",
    "is_missing",
    "parse_binary",
    "parse_number",
    "parse_label",
    "recode",
    "decimal_label",
]

MISSING_TOKENS = frozenset({"", "na", "n/a", "nan", "null", "none"})
"""Text read as a missing value (compared after trimming spaces, ignoring case)."""

_BINARY_TEXT = {"false": 0, "true": 1}
_PLAIN_NUMBER = r"[-+]?(?:[0-9]+\.?[0-9]*|\.[0-9]+)(?:[eE][-+]?[0-9]+)?"
_PLAIN_NUMBER_CELL = re.compile(_PLAIN_NUMBER)


@dataclass(frozen=True, slots=True, eq=False)
class Parsed:
    """One column parsed for its role."""

    values: np.ndarray
    """Parsed values; entries at `missing` or `invalid` positions are placeholders."""
    missing: np.ndarray
    """Boolean mask of missing entries."""
    invalid: np.ndarray
    """Indices of entries that are neither missing nor valid, in row order."""


def is_missing(value: Any) -> bool:
    """Return True when `value` counts as missing (None, NaN or a missing token).

    Parameters
    ----------
    value : object
        A cell as read from a CSV (text) or a Parquet file (typed).

    Returns
    -------
    bool
        Whether the cell is missing.
    """
    if value is None:
        return True
    if isinstance(value, str):
        return value.strip().lower() in MISSING_TOKENS
    if isinstance(value, Real) and not isinstance(value, Integral):
        return math.isnan(float(value))
    return False


def _binary(value: Any) -> int | None:
    if isinstance(value, str):
        text = value.strip().lower()
        if text in _BINARY_TEXT:
            return _BINARY_TEXT[text]
        # any plain decimal number equal to 0 or 1: a 0/1 column holding a missing value is
        # written by many tools as 1.0/0.0
        if _PLAIN_NUMBER_CELL.fullmatch(text) and Decimal(text) in (0, 1):
            return int(Decimal(text))
        return None
    if isinstance(value, (bool, np.bool_)):
        return int(value)
    if isinstance(value, Real) and float(value) in (0.0, 1.0):
        return int(value)
    return None


_MISSING = object()


def _parse(cells: Sequence[Any], convert: Callable[[Any], Any], values: np.ndarray) -> Parsed:
    """Fill `values` with `convert` of each cell; None from `convert` marks it invalid.

    Conversions are remembered per distinct cell value, since code and label columns repeat
    a handful of values over many rows.
    """
    missing = np.zeros(len(cells), dtype=bool)
    invalid: list[int] = []
    seen: dict[Any, Any] = {}
    for i, cell in enumerate(cells):
        try:
            result = seen[cell]
        except (KeyError, TypeError):
            result = _MISSING if is_missing(cell) else convert(cell)
            try:
                seen[cell] = result
            except TypeError:
                pass
        if result is _MISSING:
            missing[i] = True
        elif result is None:
            invalid.append(i)
        else:
            values[i] = result
    return Parsed(values, missing, np.asarray(invalid, dtype=np.int64))


# Fast paths for text columns (CSV). Each handles only cells whose result is certain without
# the per-cell rules above and sends every other cell through those rules, so results agree.
_ODD_NUMBER = re.compile(rf"^(?!{_PLAIN_NUMBER}$)", re.MULTILINE)
"""Start of each line that is not a plain decimal number (no spaces, underscores, words)."""
_ODD_LABEL = re.compile(r"^(?:$|[^\S\n]|.*[^\S\n]$|(?:[nN][aA]|[nN]/[aA]|[nN][aA][nN]|"
                        r"[nN][uU][lL][lL]|[nN][oO][nN][eE])$)", re.MULTILINE)
"""Start of each line a label may not keep as it is (blank, padded, or a missing token)."""


def _joined(cells: Sequence[Any]) -> str | None:
    """Cells joined by newlines when all are text without newlines, else None."""
    if len(cells) == 0 or set(map(type, cells)) != {str}:
        return None
    text = "\n".join(cells)
    return text if text.count("\n") == len(cells) - 1 else None


def _odd_lines(text: str, pattern: re.Pattern[str]) -> np.ndarray:
    """Indices of the lines of `text` where `pattern` matches at the line start."""
    found: list[int] = []
    line = pos = 0
    for match in pattern.finditer(text):
        start = match.start()
        line += text.count("\n", pos, start)
        pos = start
        if not found or found[-1] != line:
            found.append(line)
    return np.asarray(found, dtype=np.int64)


def _fast_binary(cells: Sequence[Any]) -> Parsed | None:
    if _joined(cells) is None:
        return None
    codes = {}
    for cell in set(cells):
        code = -1 if is_missing(cell) else _binary(cell)
        codes[cell] = -2 if code is None else code
    out = np.fromiter(map(codes.__getitem__, cells), dtype=np.int8, count=len(cells))
    values = np.where(out >= 0, out, 0).astype(np.int8)
    return Parsed(values, out == -1, np.flatnonzero(out == -2).astype(np.int64))


def _fast_number(cells: Sequence[Any]) -> Parsed | None:
    text = _joined(cells)
    if text is None:
        return None
    odd = _odd_lines(text, _ODD_NUMBER)
    plain = list(cells)
    for i in odd:
        plain[i] = "nan"
    values = np.fromiter(map(float, plain), dtype=np.float64, count=len(plain))
    values[odd] = np.nan
    # a plain number can still overflow to infinity; those take the per-cell rules too
    odd = np.union1d(odd, np.flatnonzero(np.isinf(values))).astype(np.int64)
    values[odd] = np.nan
    rest = _parse([cells[i] for i in odd], _number, np.full(odd.size, np.nan))
    values[odd] = rest.values
    missing = np.zeros(len(cells), dtype=bool)
    missing[odd[rest.missing]] = True
    return Parsed(values, missing, odd[rest.invalid])


def _fast_label(cells: Sequence[Any]) -> Parsed | None:
    text = _joined(cells)
    if text is None:
        return None
    odd = _odd_lines(text, _ODD_LABEL)
    values = np.empty(len(cells), dtype=object)
    values[:] = list(cells)
    missing = np.zeros(len(cells), dtype=bool)
    for i in odd:
        cell = cells[i]
        if is_missing(cell):
            missing[i] = True
            values[i] = ""
        else:
            values[i] = _label(cell)
    return Parsed(values, missing, np.zeros(0, dtype=np.int64))


def parse_binary(cells: Sequence[Any]) -> Parsed:
    """Parse a 0/1 column: any number equal to 0 or 1 (0, 1.0, 1.00) or true/false (any case).

    Other codes (yes/no, 1/2) are invalid.

    Parameters
    ----------
    cells : sequence
        Text or typed cells.

    Returns
    -------
    Parsed
        int8 values.
    """
    fast = _fast_binary(cells)
    return fast if fast is not None else _slow_binary(cells)


def _slow_binary(cells: Sequence[Any]) -> Parsed:
    return _parse(cells, _binary, np.zeros(len(cells), dtype=np.int8))


def _number(value: Any) -> float | None:
    if isinstance(value, str):
        text = value.strip()
        low = text.lower()
        if low in ("true", "false"):
            return float(low == "true")
        if "_" in text:
            return None
        try:
            number = float(text)
        except ValueError:
            return None
    elif isinstance(value, (bool, np.bool_)):
        number = float(value)
    elif isinstance(value, Real):
        number = float(value)
    else:
        return None
    return number if math.isfinite(number) else None


def parse_number(cells: Sequence[Any]) -> Parsed:
    """Parse a numeric column (true/false read as 1/0); infinities are invalid.

    Parameters
    ----------
    cells : sequence
        Text or typed cells.

    Returns
    -------
    Parsed
        float64 values, NaN where missing or invalid.
    """
    fast = _fast_number(cells)
    return fast if fast is not None else _slow_number(cells)


def _slow_number(cells: Sequence[Any]) -> Parsed:
    return _parse(cells, _number, np.full(len(cells), np.nan))


def _label(value: Any) -> str:
    if isinstance(value, str):
        return value.strip()
    if isinstance(value, (bool, np.bool_)):
        return "true" if value else "false"
    if isinstance(value, Real) and float(value).is_integer():
        return str(int(value))
    return str(value)


def parse_label(cells: Sequence[Any]) -> Parsed:
    """Parse a label column (stratum, cluster) into trimmed text; integral numbers lose ".0".

    A typed number loses ".0" on its own. Text loses its decimal zeros only when every
    non-missing label of the column is an integer, written with or without them ("63.0",
    "63"): a float column written as text then gives the labels it gives from a typed file.

    Parameters
    ----------
    cells : sequence
        Text or typed cells.

    Returns
    -------
    Parsed
        object array of str; `invalid` is always empty.
    """
    fast = _fast_label(cells)
    return _integral_text(fast if fast is not None else _slow_label(cells))


_NOT_INTEGRAL = re.compile(r"^(?!-?(?:0|[1-9][0-9]*)(?:\.0+)?$)", re.MULTILINE)
"""Start of each line that is not an integer, with or without decimal zeros (63, 63.0)."""


def _integral_text(parsed: Parsed) -> Parsed:
    """Drop the decimal zeros of text labels when every label is an integer written so."""
    kept = parsed.values[~parsed.missing].tolist()
    if not kept or set(map(type, kept)) != {str}:
        return parsed
    text = "\n".join(kept)
    if "." not in text or text.count("\n") != len(kept) - 1 or _NOT_INTEGRAL.search(text):
        return parsed
    plain = {label: str(int(label.partition(".")[0])) for label in set(kept)}
    values = parsed.values.copy()
    values[~parsed.missing] = [plain[label] for label in kept]
    return Parsed(values, parsed.missing, parsed.invalid)


def _slow_label(cells: Sequence[Any]) -> Parsed:
    values = np.empty(len(cells), dtype=object)
    missing = np.zeros(len(cells), dtype=bool)
    for i, cell in enumerate(cells):
        if is_missing(cell):
            missing[i] = True
            values[i] = ""
        else:
            values[i] = _label(cell)
    return Parsed(values, missing, np.zeros(0, dtype=np.int64))


_REFUSED = object()
"""A cell outside the spec's codes: every parser refuses it."""


def recode(cells: Sequence[Any], codes: dict[str, int]) -> list[Any]:
    """Replace each cell by its 0/1 meaning under the spec's codes of an offer or take-up column.

    Parameters
    ----------
    cells : sequence
        Text or typed cells.
    codes : dict
        Code (lower case, as `spec_reading.ReadOptions.codes_of` gives) -> 0 or 1.

    Returns
    -------
    list
        Per cell: unchanged when missing; the code's 0 or 1 when its text (trimmed, any case)
        or, for a typed number, its value equals a code; otherwise a marker that
        `parse_binary` refuses, so the caller's message quotes the cell as written.
    """
    numeric: dict[float, int] = {}
    for code, meaning in codes.items():
        try:
            numeric[float(code)] = meaning
        except ValueError:
            pass
    out: list[Any] = []
    for cell in cells:
        if is_missing(cell):
            out.append(cell)
        elif isinstance(cell, (bool, np.bool_)):
            out.append(codes.get(str(bool(cell)).lower(), _REFUSED))
        elif isinstance(cell, str):
            out.append(codes.get(cell.strip().lower(), _REFUSED))
        elif isinstance(cell, Real):
            out.append(numeric.get(float(cell), _REFUSED))
        else:
            out.append(_REFUSED)
    return out


def decimal_point(cells: Sequence[Any], decimal: str) -> Sequence[Any]:
    """Text cells with a decimal comma written with a point (``decimal`` ``","``); else as given.

    A cell with both marks (``1.234,5``) becomes ``1.234.5``, which no parser reads as a number:
    thousands separators stay refused.
    """
    if decimal == ".":
        return cells
    return [c.replace(",", ".") if isinstance(c, str) else c for c in cells]


_COMMA_NUMBER = re.compile(r"[-+]?[0-9]+,[0-9]+")
"""A label written as a number with a decimal comma (``109,0``)."""
COMMA_NUMBER = "^[-+]?[0-9]+,[0-9]+$"
"""The same pattern for the engines' SQL (`units_sql`)."""


def decimal_label(cells: Sequence[Any], decimal: str) -> Sequence[Any]:
    """Label cells written as a number with a decimal comma (``109,0``) with a point instead
    (``decimal`` ``","``), so a numeric id reads as the same number in every format; other
    cells (``Smith, J``) as given."""
    if decimal == ".":
        return cells
    return [c.strip().replace(",", ".") if isinstance(c, str) and _COMMA_NUMBER.fullmatch(
        c.strip()) else c for c in cells]

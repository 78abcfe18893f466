"""Read Stata (.dta), SPSS (.sav) and Excel (.xlsx) files into Arrow tables of raw values.

`read_foreign` is the one reader of these formats for both data paths: DuckDB registers its
table, and the row reader (`tables.read_table`) turns the same table into raw cells, so both
see the same values. The rules:

- Stata and SPSS (through pyreadstat): value labels are ignored, so a labelled column keeps
  its codes; system missing, Stata's extended missing values (``.a`` to ``.z``) and SPSS
  user-missing values become nulls, and so does an empty string. A Stata ``float`` (single
  precision) becomes the double of the decimal it shows: a stored 854.8 is read as 854.8,
  as a CSV export would write it, not as 854.7999877929688.
- Excel (through openpyxl): the first worksheet, the cached values of formulas. Blank rows
  are skipped and the first non-blank row is the header, as in a CSV file; empty cells
  become nulls; a column without a header and without values is dropped. A column of whole
  numbers stays integer, a column of numbers becomes double, and a column mixing numbers
  and text becomes text (whole numbers without ".0", others as Python writes them), so that
  a stray word is reported with its row. Error cells (``#N/A``, ``#DIV/0!``) keep their text.
"""

from __future__ import annotations

import datetime as dt
import warnings
from collections.abc import Sequence
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import numpy as np

from .errors import DataError

__all__ = ["FOREIGN_SUFFIXES", "ForeignTable", "read_foreign", "read_foreign_table"]

FOREIGN_SUFFIXES = (".dta", ".sav", ".xlsx")
"""Name endings of the files read here (compared in lower case)."""

_KINDS = {".dta": "Stata", ".sav": "SPSS", ".xlsx": "Excel"}
_ARTICLE = {"Stata": "a", "SPSS": "an", "Excel": "an"}


@dataclass(frozen=True, slots=True, eq=False)
class ForeignTable:
    """One file's wanted columns, with its full header and the sheet row of each data row."""

    header: list[str]
    """Every column name of the file, in file order."""
    table: Any
    """`pyarrow.Table` of the wanted columns that the file has, in file order."""
    lines: np.ndarray | None
    """Excel: the worksheet row number of each data row; None for Stata and SPSS."""


def read_foreign(path: Path, wanted: Sequence[str] | None = None) -> Any:
    """Read a Stata, SPSS or Excel file into an Arrow table.

    Parameters
    ----------
    path : Path
        A ``.dta``, ``.sav`` or ``.xlsx`` file (the ending picks the reader).
    wanted : sequence of str, optional
        Columns to keep (default all). Absent names are skipped; the caller checks them.

    Returns
    -------
    pyarrow.Table
        The kept columns in file order, nulls where a value is missing.

    Raises
    ------
    DataError
        When the file is empty, unreadable, not of its format, or has no data rows.
    """
    return read_foreign_table(path, wanted).table


def read_foreign_table(path: Path, wanted: Sequence[str] | None = None) -> ForeignTable:
    """Read a Stata, SPSS or Excel file, keeping its header and Excel row numbers.

    Parameters
    ----------
    path : Path
        A ``.dta``, ``.sav`` or ``.xlsx`` file.
    wanted : sequence of str, optional
        Columns to keep (default all).

    Returns
    -------
    ForeignTable
        Header, Arrow table of the kept columns, and worksheet rows (Excel).

    Raises
    ------
    DataError
        As `read_foreign`.
    """
    ending = path.suffix.lower()
    if ending not in _KINDS:
        raise DataError(path, None, (), "is not a Stata, SPSS or Excel file",
                        "name it .dta (Stata), .sav (SPSS) or .xlsx (Excel)")
    try:
        size = path.stat().st_size
    except OSError as exc:
        raise DataError(path, None, (), f"cannot read the file ({exc.strerror})") from None
    if size == 0:
        kind = _KINDS[ending]
        raise DataError(path, None, (), "the file is empty",
                        f"export the data again as {_ARTICLE[kind]} {kind} file")
    got = _read_excel(path, wanted) if ending == ".xlsx" else _read_stat(path, wanted, ending)
    if got.table.num_rows == 0:
        raise DataError(path, None, (), "the file has no data rows",
                        "export the data again with its rows, or remove the file from 'data'")
    return got


# --- Stata and SPSS ------------------------------------------------------------------------


def _read_stat(path: Path, wanted: Sequence[str] | None, ending: str) -> ForeignTable:
    import pyarrow as pa
    import pyreadstat

    kind = _KINDS[ending]
    reader = pyreadstat.read_dta if ending == ".dta" else pyreadstat.read_sav
    try:
        _, meta = reader(str(path), metadataonly=True)
        header = [str(name) for name in meta.column_names]
        names = [n for n in header if wanted is None or n in wanted]
        # at least one column is read, so that the row count is known
        frame, meta = reader(str(path), apply_value_formats=False, user_missing=False,
                             usecols=names or header[:1])
    except Exception as exc:  # pyreadstat raises its own and OS errors for a damaged file
        raise DataError(path, None, (), f"cannot be read as {_ARTICLE[kind]} {kind} file "
                        f"({_reason(exc)})",
                        f"check that the file is complete and really {kind} data "
                        f"(saved by {kind} as {ending})") from None
    stored = getattr(meta, "readstat_variable_types", None) or {}
    arrays = []
    for name in names:
        values = frame[name]
        if stored.get(name) == "float":
            values = _shown_double(values.to_numpy(dtype=np.float64, na_value=np.nan))
        array = pa.array(values, from_pandas=True)
        if pa.types.is_string(array.type) or pa.types.is_large_string(array.type):
            array = _blank_to_null(array)
        arrays.append(array)
    table = pa.Table.from_arrays(arrays, names=names) if names else \
        pa.table({"__rows": pa.nulls(len(frame))}).select([])
    return ForeignTable(header, table, None)


def _reason(exc: Exception) -> str:
    text = " ".join(str(exc).split())
    return text or type(exc).__name__


def _shown_double(values: np.ndarray) -> np.ndarray:
    """Single-precision values as the doubles of their shortest decimals (854.8, not
    854.7999877929688): the number Stata shows and a CSV export writes."""
    return values.astype(np.float32).astype(str).astype(np.float64)


def _blank_to_null(array: Any) -> Any:
    """Empty strings become nulls: the missing value of a Stata or SPSS string column."""
    import pyarrow.compute as pc

    return pc.if_else(pc.equal(array, ""), None, array)


# --- Excel ---------------------------------------------------------------------------------


def _read_excel(path: Path, wanted: Sequence[str] | None) -> ForeignTable:
    import pyarrow as pa

    header_cells, records, lines = _sheet_rows(path)
    width = max([len(header_cells), *(len(r) for r in records)])
    header: list[str] = []
    arrays = []
    names: list[str] = []
    for j in range(width):
        name = _header_name(header_cells[j] if j < len(header_cells) else None)
        cells = [rec[j] if j < len(rec) else None for rec in records]
        if not name and all(_blank(v) for v in cells):
            continue  # a formatted but empty column
        header.append(name)
        if wanted is None or name in wanted:
            names.append(name)
            arrays.append(_excel_array(cells))
    table = pa.Table.from_arrays(arrays, names=names) if names else \
        pa.table({"__rows": pa.nulls(len(records))}).select([])
    return ForeignTable(header, table, np.asarray(lines, dtype=np.int64))


def _sheet_rows(path: Path) -> tuple[tuple[Any, ...], list[tuple[Any, ...]], list[int]]:
    """Header cells, data rows and their worksheet row numbers of the first worksheet."""
    import openpyxl

    header: tuple[Any, ...] | None = None
    records: list[tuple[Any, ...]] = []
    lines: list[int] = []
    hint = "check that the file is complete and saved as an Excel Workbook (.xlsx)"
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")  # openpyxl warns about styles and extensions it skips
        try:
            book = openpyxl.load_workbook(path, read_only=True, data_only=True)
        except Exception as exc:  # a damaged or mislabelled file raises several types
            raise DataError(path, None, (), f"cannot be read as an Excel workbook "
                            f"({_reason(exc)})", hint) from None
        try:
            if not book.worksheets:
                raise DataError(path, None, (), "the workbook has no worksheet",
                                "put the data on the first worksheet")
            sheet = book.worksheets[0]
            sheet.reset_dimensions()  # some writers record a wrong sheet size; read every cell
            for number, row in enumerate(sheet.iter_rows(values_only=True), start=1):
                if all(_blank(cell) for cell in row):
                    continue
                if header is None:
                    header = row
                else:
                    records.append(row)
                    lines.append(number)
        except DataError:
            raise
        except Exception as exc:
            raise DataError(path, None, (), f"cannot be read as an Excel workbook "
                            f"({_reason(exc)})", hint) from None
        finally:
            book.close()
    if header is None:
        raise DataError(path, None, (), f"the first worksheet ('{sheet.title}') is empty",
                        "put the data on the first worksheet, with a header row naming the "
                        "columns")
    return header, records, lines


def _blank(value: Any) -> bool:
    return value is None or (isinstance(value, str) and not value.strip())


def _header_name(value: Any) -> str:
    if value is None:
        return ""
    if isinstance(value, str):
        return value.strip()
    return _text(value)


def _text(value: Any) -> str:
    """A cell as text: true/false, whole numbers without ".0", other numbers as Python
    writes them (they read back as the same double), dates in ISO form."""
    if isinstance(value, bool):
        return "true" if value else "false"
    if isinstance(value, int):
        return str(value)
    if isinstance(value, float):
        return str(int(value)) if value.is_integer() else repr(value)
    if isinstance(value, (dt.date, dt.time)):
        return value.isoformat()
    return str(value)


def _excel_array(values: list[Any]) -> Any:
    """One column as an Arrow array: bool, int64, double or text by the cells' types."""
    import pyarrow as pa

    types = {type(v) for v in values if v is not None}
    if not types or types == {str}:
        return pa.array(values, type=pa.string())
    if types == {bool}:
        return pa.array(values, type=pa.bool_())
    if types == {int}:
        try:
            return pa.array(values, type=pa.int64())
        except OverflowError:
            types = {float}
    if types <= {int, float}:
        return pa.array([None if v is None else float(v) for v in values], type=pa.float64())
    return pa.array([v if v is None or isinstance(v, str) else _text(v) for v in values],
                    type=pa.string())

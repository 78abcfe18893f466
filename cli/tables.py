"""Read one data file into columns of raw cells: CSV or TSV (plain or gzip-compressed, with
exact line numbers), Parquet, and Stata, SPSS or Excel files (`foreign.read_foreign`).

CSV files without quotes take a vectorised reader; anything it cannot read exactly as the
standard library's csv reader would goes to that reader, so messages stay the same. A file's
name ending picks its reader (`DATA_SUFFIXES`); any other ending is refused.
"""

from __future__ import annotations

import csv
import functools
import gzip
import io
import zlib
from collections.abc import Sequence
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import numpy as np

from .errors import DataError

__all__ = ["DATA_SUFFIXES", "FORMATS_TEXT", "OTHER_DELIMITERS", "Table", "data_format",
           "read_table"]

OTHER_DELIMITERS = {";": "semicolons", "\t": "tabs", "|": "vertical bars"}
"""Delimiters a file named .csv may have been saved with by mistake."""

_READERS = (
    (".csv", "csv"), (".tsv", "tsv"), (".csv.gz", "csv"), (".tsv.gz", "tsv"),
    (".parquet", "parquet"), (".pq", "parquet"),
    (".dta", "foreign"), (".sav", "foreign"), (".xlsx", "foreign"),
)
DATA_SUFFIXES = tuple(ending for ending, _ in _READERS)
"""Name endings of the data files strativ reads (compared in lower case)."""
FORMATS_TEXT = (".csv, .tsv, .csv.gz, .tsv.gz (comma- or tab-separated text, plain or gzip), "
                ".parquet, .pq, .dta (Stata), .sav (SPSS) or .xlsx (Excel)")
"""The accepted endings, as a message states them."""
_DELIMITER_NAMES = {",": "commas", "\t": "tabs", ";": "semicolons", "|": "vertical bars"}


@dataclass(frozen=True, slots=True, eq=False)
class Table:
    """One file as columns of raw cells, with the data-row and file-line number of each row."""

    header: list[str]
    columns: dict[str, list[Any]]
    rows: np.ndarray
    lines: np.ndarray
    header_line: str


def data_format(path: Path) -> str | None:
    """Return the reader of `path` by its name ending: ``"csv"``, ``"tsv"``, ``"parquet"``,
    ``"foreign"`` (Stata, SPSS, Excel), or None for an ending strativ does not read."""
    name = path.name.lower()
    for ending, reader in _READERS:
        if name.endswith(ending):
            return reader
    return None


def read_table(path: Path, wanted: Sequence[str] | None = None,
               delimiter: str | None = None) -> Table:
    """Read a data file into columns of raw cells.

    Parameters
    ----------
    path : Path
        The file; its name ending picks the reader (`DATA_SUFFIXES`).
    wanted : sequence of str, optional
        Columns to keep (default all). Absent names are skipped; the caller checks them.
    delimiter : str, optional
        Field separator of CSV and TSV files (the spec's ``reading.delimiter``); default a
        comma, a tab for files ending in .tsv or .tsv.gz.

    Returns
    -------
    Table
        Header, raw cells per kept column, data row and line numbers (CSV and TSV: the line
        in the decompressed text; Excel: the worksheet row; Parquet, Stata, SPSS: 0).

    Raises
    ------
    DataError
        When the ending is not one strativ reads, or the file is empty, unreadable, not
        UTF-8, has ragged rows, or no data rows.
    """
    reader = data_format(path)
    if reader in ("csv", "tsv"):
        return _read_csv(path, wanted, delimiter or ("," if reader == "csv" else "\t"))
    if reader == "parquet":
        return _read_parquet(path, wanted)
    if reader == "foreign":
        return _read_foreign(path, wanted)
    raise DataError(path, None, (), "is not a data file strativ reads (its name ending "
                    "picks the format)", f"strativ reads files ending in {FORMATS_TEXT}")


def _read_bytes(path: Path) -> bytes:
    """The file's bytes, decompressed when its name ends in .gz."""
    try:
        raw = path.read_bytes()
    except OSError as exc:
        raise DataError(path, None, (), f"cannot read the file ({exc.strerror})") from None
    if not path.name.lower().endswith(".gz") or not raw:
        return raw
    try:
        return gzip.decompress(raw)
    except (OSError, EOFError, zlib.error) as exc:
        raise DataError(path, None, (), f"cannot be decompressed as gzip ({exc})",
                        "check that the file is complete; if it is not compressed, remove "
                        "'.gz' from its name") from None


def _read_csv(path: Path, wanted: Sequence[str] | None, delimiter: str) -> Table:
    raw = _read_bytes(path)
    kind = "TSV" if delimiter == "\t" else "CSV"
    if not raw.strip():
        raise DataError(path, None, (), "the file is empty",
                        f"export the data again; a {kind} needs a header line and data rows")
    if raw.startswith((b"\xff\xfe", b"\xfe\xff")):
        raise DataError(path, None, (), "the file is UTF-16 text; strativ reads UTF-8",
                        f"save it as {kind} UTF-8")
    if raw.startswith(b"PAR1"):
        raise DataError(path, None, (), f"the file is Parquet data with a .{kind.lower()} name",
                        "rename it to end in .parquet")
    if raw.startswith(b"\x1f\x8b"):
        raise DataError(path, None, (), "the file is gzip-compressed",
                        f"name it to end in .{kind.lower()}.gz")
    if b"\x00" in raw[:65536]:
        hint = "if it is an Excel workbook, name it to end in .xlsx; otherwise save it as " \
            f"{kind} first" if raw.startswith(b"PK\x03\x04") else \
            f"if it is a spreadsheet, save it as {kind} first"
        at = raw.index(b"\x00")
        line = raw[:at].count(b"\n") + 1
        raise DataError(path, None, (line - 1,) if line > 1 else (),
                        f"the file is not text (it holds binary data: a NUL byte on line "
                        f"{line})", hint)
    try:
        text = raw.decode("utf-8-sig")
    except UnicodeDecodeError as exc:
        line = raw[:exc.start].count(b"\n") + 1
        raise DataError(path, None, (), f"the file is not UTF-8 text: byte "
                        f"0x{raw[exc.start]:02x} on line {line} (Latin-1 or Windows-1252?)",
                        f"save it as {kind} UTF-8") from None
    fast = _read_plain_csv(raw, text, wanted, delimiter)
    if fast is not None:
        return fast
    # a long note or free-text field (even one the spec does not use) is data, not an error:
    # the reader's default limit of 128 KiB per field would call it a quoting problem
    csv.field_size_limit(max(csv.field_size_limit(), len(text) + 1))
    reader = csv.reader(io.StringIO(text, newline=""), delimiter=delimiter)
    header: list[str] | None = None
    header_line = ""
    records: list[list[str]] = []
    lines: list[int] = []
    last = 0
    try:
        for record in reader:
            start, last = last + 1, reader.line_num
            if not record or all(not field.strip() for field in record):
                continue
            if header is None:
                header = [field.strip() for field in record]
                header_line = delimiter.join(record)
                _check_delimiter(path, header, header_line, delimiter)
                continue
            if len(record) != len(header):
                one = _DELIMITER_NAMES[delimiter][:-1]
                raise DataError(path, None, (len(records) + 1,),
                                f"line {start} has {len(record)} fields but the header has "
                                f"{len(header)}", f"check for a stray {one} or an unclosed "
                                f"quote on that line; values with {one}s must be quoted")
            records.append(record)
            lines.append(start)
    except csv.Error as exc:
        raise DataError(path, None, (), f"cannot parse the file near line {reader.line_num} "
                        f"({exc})", "check the quoting on that line") from None
    if header is None:
        raise DataError(path, None, (), "the file has only blank lines, no header",
                        "export the data again with a header line naming the columns")
    if not records:
        raise DataError(path, None, (), "the file has a header but no data rows",
                        "export the data again with its rows, or remove the file from 'data'")
    keep = [(name, j) for j, name in enumerate(header) if wanted is None or name in wanted]
    columns = {name: [rec[j] for rec in records] for name, j in keep}
    return Table(header, columns, np.arange(1, len(records) + 1), np.asarray(lines),
                  header_line)


@functools.cache
def _solid(delimiter: str) -> np.ndarray:
    """The bytes that make a line non-blank for certain (ASCII, neither space nor the
    delimiter)."""
    solid = np.ones(256, dtype=bool)
    solid[[c for c in range(128) if chr(c).isspace()] + [ord(delimiter)] +
          list(range(128, 256))] = False
    return solid




_FAST_FIELD_LIMIT = 131072
"""Longest line the plain fast path reads; longer lines go to the csv reader."""


def _read_plain_csv(raw: bytes, text: str, wanted: Sequence[str] | None,
                    delimiter: str = ",") -> Table | None:
    """Read a CSV (or TSV) without quotes by splitting lines and delimiters, or None to use the
    csv reader.

    Gives what the csv reader gives on such a file; anything it cannot vouch for (quotes,
    NUL bytes, lone carriage returns, very long lines, a one-column header, ragged rows, no
    data rows) returns None so that the csv reader reads the file and words any error.
    """
    data = raw[3:] if raw.startswith(b"\xef\xbb\xbf") else raw
    if b'"' in data or b"\x00" in data:
        return None
    if b"\r" in data:
        if data.count(b"\r") != data.count(b"\r\n"):
            return None
        data, text = data.replace(b"\r\n", b"\n"), text.replace("\r\n", "\n")
    lines = text.split("\n")
    if data.endswith(b"\n"):
        data, lines = data[:-1], lines[:-1]
    codes = np.frombuffer(data, dtype=np.uint8)
    breaks = np.flatnonzero(codes == ord("\n"))
    starts = np.concatenate(([0], breaks + 1))
    ends = np.concatenate((breaks, [codes.size]))
    if len(lines) != starts.size or (ends - starts).max() >= _FAST_FIELD_LIMIT:
        return None
    commas = np.flatnonzero(codes == ord(delimiter))
    n_commas = np.searchsorted(commas, ends) - np.searchsorted(commas, starts)
    solid = np.zeros(starts.size, dtype=bool)
    if codes.size:
        solid = np.logical_or.reduceat(_solid(delimiter)[codes],
                                       np.minimum(starts, codes.size - 1)) & (ends > starts)
    kept = solid
    for k in np.flatnonzero(~solid):
        kept[k] = not all(not field.strip() for field in lines[k].split(delimiter))
    index = np.flatnonzero(kept)
    if index.size < 2:
        return None
    header_line = lines[index[0]]
    header = [field.strip() for field in header_line.split(delimiter)]
    body = index[1:]
    if len(header) < 2 or np.any(n_commas[body] != len(header) - 1):
        return None
    first, last = int(body[0]), int(body[-1])
    rows = lines[first:last + 1] if body.size == last - first + 1 else [lines[k] for k in body]
    fields = delimiter.join(rows).split(delimiter)
    width = len(header)
    columns = {name: fields[j::width] for j, name in enumerate(header)
               if wanted is None or name in wanted}
    return Table(header, columns, np.arange(1, body.size + 1), body + 1, header_line)


def _check_delimiter(path: Path, header: list[str], header_line: str,
                     delimiter: str = ",") -> None:
    if len(header) > 1:
        return
    own = _DELIMITER_NAMES[delimiter]
    fix = {",": "save the file as comma-separated CSV", "\t": "save the file tab-separated"
           }.get(delimiter, f"save the file separated by {own}")
    for delim, plural in _DELIMITER_NAMES.items():
        if delim != delimiter and delim in header_line:
            other = {",": "; or name it to end in .csv", "\t": "; or name it to end in .tsv",
                     ";": "; or add  reading: {delimiter: ';'}  to the spec",
                     "|": "; or add  reading: {delimiter: '|'}  to the spec"}
            raise DataError(path, None, (), f"the fields seem to be separated by {plural}, not "
                            f"{own} (the header reads as one column)", fix + other.get(delim, ""))
    raise DataError(path, None, (), "the header has a single column; strativ needs at least "
                    f"offer, take-up, stratum and outcome columns separated by {own}", fix)


def _read_parquet(path: Path, wanted: Sequence[str] | None) -> Table:
    import pyarrow.parquet as pq

    if path.stat().st_size == 0:
        raise DataError(path, None, (), "the file is empty")
    try:
        header = list(pq.read_schema(path).names)
        names = [n for n in header if wanted is None or n in wanted]
        table = pq.read_table(path, columns=names)
    except Exception as exc:  # pyarrow raises several types for a damaged file
        raise DataError(path, None, (), f"cannot be read as Parquet ({exc})",
                        "check that the file is complete and really Parquet") from None
    if table.num_rows == 0:
        raise DataError(path, None, (), "the file has no data rows",
                        "export the data again with its rows, or remove the file from 'data'")
    columns = {name: table.column(name).to_pylist() for name in names}
    return Table(header, columns, np.arange(1, table.num_rows + 1),
                  np.zeros(table.num_rows, dtype=np.int64), "")


def _read_foreign(path: Path, wanted: Sequence[str] | None) -> Table:
    """A Stata, SPSS or Excel file as raw cells; Excel rows carry their worksheet row."""
    from .foreign import read_foreign_table

    got = read_foreign_table(path, wanted)
    n = got.table.num_rows
    columns = {name: got.table.column(j).to_pylist()
               for j, name in enumerate(got.table.column_names)}
    lines = got.lines if got.lines is not None else np.zeros(n, dtype=np.int64)
    return Table(got.header, columns, np.arange(1, n + 1), lines, "")

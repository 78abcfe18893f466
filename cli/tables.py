"""Read one data file into columns of raw cells: CSV (exact line numbers) or Parquet.

CSV files without quotes take a vectorised reader; anything it cannot read exactly as the
standard library's csv reader would goes to that reader, so messages stay the same.
"""

from __future__ import annotations

import csv
import io
from collections.abc import Sequence
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import numpy as np

from .errors import DataError

__all__ = ["OTHER_DELIMITERS", "Table", "read_table"]

OTHER_DELIMITERS = {";": "semicolons", "\t": "tabs", "|": "vertical bars"}


@dataclass(frozen=True, slots=True, eq=False)
class Table:
    """One file as columns of raw cells, with the data-row and file-line number of each row."""

    header: list[str]
    columns: dict[str, list[Any]]
    rows: np.ndarray
    lines: np.ndarray
    header_line: str


def read_table(path: Path, wanted: Sequence[str] | None = None) -> Table:
    """Read a CSV or Parquet file into columns of raw cells.

    Parameters
    ----------
    path : Path
        The file; its suffix picks the reader.
    wanted : sequence of str, optional
        Columns to keep (default all). Absent names are skipped; the caller checks them.

    Returns
    -------
    Table
        Header, raw cells per kept column, data row and line numbers.

    Raises
    ------
    DataError
        When the file is empty, unreadable, not UTF-8, has ragged rows, or no data rows.
    """
    if path.suffix.lower() == ".csv":
        return _read_csv(path, wanted)
    return _read_parquet(path, wanted)


def _read_csv(path: Path, wanted: Sequence[str] | None) -> Table:
    try:
        raw = path.read_bytes()
    except OSError as exc:
        raise DataError(path, None, (), f"cannot read the file ({exc.strerror})") from None
    if not raw.strip():
        raise DataError(path, None, (), "the file is empty",
                        "export the data again; a CSV needs a header line and data rows")
    if raw.startswith((b"\xff\xfe", b"\xfe\xff")):
        raise DataError(path, None, (), "the file is UTF-16 text; strativ reads UTF-8",
                        "save it as CSV UTF-8")
    if raw.startswith(b"PAR1"):
        raise DataError(path, None, (), "the file is Parquet data with a .csv name",
                        "rename it to end in .parquet")
    if b"\x00" in raw[:65536]:
        raise DataError(path, None, (), "the file is not text (it holds binary data)",
                        "if it is a spreadsheet, save it as CSV (comma-separated) first")
    try:
        text = raw.decode("utf-8-sig")
    except UnicodeDecodeError as exc:
        line = raw[:exc.start].count(b"\n") + 1
        raise DataError(path, None, (), f"the file is not UTF-8 text: byte "
                        f"0x{raw[exc.start]:02x} on line {line} (Latin-1 or Windows-1252?)",
                        "save it as CSV UTF-8") from None
    fast = _read_plain_csv(raw, text, wanted)
    if fast is not None:
        return fast
    reader = csv.reader(io.StringIO(text, newline=""))
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
                header_line = ",".join(record)
                _check_delimiter(path, header, header_line)
                continue
            if len(record) != len(header):
                raise DataError(path, None, (len(records) + 1,),
                                f"line {start} has {len(record)} fields but the header has "
                                f"{len(header)}", "check for a stray comma or an unclosed quote "
                                "on that line; values with commas must be quoted")
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


_SOLID = np.ones(256, dtype=bool)
_SOLID[[c for c in range(128) if chr(c).isspace()] + [ord(",")] + list(range(128, 256))] = False
"""Bytes that make a CSV line non-blank for certain (ASCII, neither space nor comma)."""


def _read_plain_csv(raw: bytes, text: str, wanted: Sequence[str] | None) -> Table | None:
    """Read a CSV without quotes by splitting lines and commas, or None to use the csv reader.

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
    if len(lines) != starts.size or (ends - starts).max() >= csv.field_size_limit():
        return None
    commas = np.flatnonzero(codes == ord(","))
    n_commas = np.searchsorted(commas, ends) - np.searchsorted(commas, starts)
    solid = np.zeros(starts.size, dtype=bool)
    if codes.size:
        solid = np.logical_or.reduceat(_SOLID[codes], np.minimum(starts, codes.size - 1)) & \
            (ends > starts)
    kept = solid
    for k in np.flatnonzero(~solid):
        kept[k] = not all(not field.strip() for field in lines[k].split(","))
    index = np.flatnonzero(kept)
    if index.size < 2:
        return None
    header_line = lines[index[0]]
    header = [field.strip() for field in header_line.split(",")]
    body = index[1:]
    if len(header) < 2 or np.any(n_commas[body] != len(header) - 1):
        return None
    first, last = int(body[0]), int(body[-1])
    rows = lines[first:last + 1] if body.size == last - first + 1 else [lines[k] for k in body]
    fields = ",".join(rows).split(",")
    width = len(header)
    columns = {name: fields[j::width] for j, name in enumerate(header)
               if wanted is None or name in wanted}
    return Table(header, columns, np.arange(1, body.size + 1), body + 1, header_line)


def _check_delimiter(path: Path, header: list[str], header_line: str) -> None:
    if len(header) > 1:
        return
    for delim, plural in OTHER_DELIMITERS.items():
        if delim in header_line:
            raise DataError(path, None, (), f"the fields seem to be separated by {plural}, not "
                            "commas (the header reads as one column)",
                            "save the file as comma-separated CSV")
    raise DataError(path, None, (), "the header has a single column; strativ needs at least "
                    "offer, take-up, stratum and outcome columns separated by commas",
                    "save the file as comma-separated CSV")


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

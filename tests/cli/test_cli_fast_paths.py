"""The vectorised text paths agree with the per-cell rules and with the csv module reader."""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pytest

from strativ.cli import tables
from strativ.cli import values as cell_values
from strativ.cli.errors import DataError
from strativ.cli.values import Parsed

MIXED = ["1", " 1 ", "TRUE", "false", "0", "1.0", "1e3", "inf", "-Infinity", "1_0", "",
         "NA", " na ", "n/A", "NaN", "NULL", "None", " none", "1e400", "-2.5", ".5", "7.",
         "+3", "x", "\u00a012", "٣", "Na", "NAN"]


def _same(fast: Parsed, slow: Parsed) -> None:
    assert fast.values.dtype == slow.values.dtype
    assert fast.missing.dtype == slow.missing.dtype == np.dtype(bool)
    assert fast.invalid.dtype == slow.invalid.dtype == np.dtype(np.int64)
    assert fast.missing.tolist() == slow.missing.tolist()
    assert fast.invalid.tolist() == slow.invalid.tolist()
    if fast.values.dtype == object:
        assert fast.values.tolist() == slow.values.tolist()
    else:
        np.testing.assert_array_equal(fast.values, slow.values)


@pytest.mark.parametrize(("fast", "slow"), [
    (cell_values._fast_binary, cell_values._slow_binary),
    (cell_values._fast_number, cell_values._slow_number),
    (cell_values._fast_label, cell_values._slow_label),
])
def test_fast_and_per_cell_parsers_agree_on_a_mixed_column(fast, slow) -> None:
    for cells in (MIXED, MIXED[::-1], MIXED * 3, ["1", "0", "1"], ["NA"], [""]):
        parsed = fast(cells)
        assert parsed is not None, "the fast path must handle plain text cells"
        # common practice, no source: the fast path must reproduce the per-cell rules exactly
        _same(parsed, slow(cells))


def test_fast_number_path_keeps_the_per_cell_verdicts() -> None:
    parsed = cell_values.parse_number(MIXED)
    # common practice, no source: float() of accepted text; true/false as 1/0; _ and inf invalid
    assert parsed.values[[0, 1, 2, 3, 5, 6, 19, 20, 21, 22]].tolist() == \
        [1.0, 1.0, 1.0, 0.0, 1.0, 1000.0, -2.5, 0.5, 7.0, 3.0]
    # common practice, no source: 'inf', '-Infinity', '1_0', '1e400' and 'x' are not numbers
    assert parsed.invalid.tolist() == [7, 8, 9, 18, 23]
    # common practice, no source: missing tokens in any case, trimmed, plus the empty cell
    assert np.flatnonzero(parsed.missing).tolist() == [10, 11, 12, 13, 14, 15, 16, 17, 26, 27]


def test_typed_cells_skip_the_fast_path() -> None:
    assert cell_values._fast_number([1.5, "2"]) is None
    assert cell_values._fast_binary([True, 0]) is None
    # common practice, no source: typed cells keep the per-cell rules (True reads as 1)
    assert cell_values.parse_binary([True, 0]).values.tolist() == [1, 0]


def _read(path: Path, fast: bool, monkeypatch: pytest.MonkeyPatch):
    if not fast:
        monkeypatch.setattr(tables, "_read_plain_csv", lambda *args: None)
    try:
        table = tables.read_table(path)
    except DataError as exc:
        return str(exc)
    finally:
        monkeypatch.undo()
    return (table.header, table.columns, table.rows.tolist(), table.lines.tolist(),
            table.header_line)


@pytest.mark.parametrize("text", [
    "\ufeffsite,y\r\n a ,1\r\n\r\n , \r\nb,NA\r\n",
    "\n\nsite,y\n1,2\n\u00a0\n3, 4 \n\n\n",
    "site,y\n1,2\n3\n",
    "site,y\n1,\"2,5\"\n",
    "site\n1\n",
    "site,y\n",
])
def test_plain_csv_reader_matches_the_csv_module(tmp_path: Path, text: str,
                                                 monkeypatch: pytest.MonkeyPatch) -> None:
    path = tmp_path / "data.csv"
    path.write_bytes(text.encode())
    # common practice, no source: the split-based reader must give what csv.reader gives
    assert _read(path, True, monkeypatch) == _read(path, False, monkeypatch)


def test_plain_csv_reader_keeps_line_numbers(tmp_path: Path) -> None:
    path = tmp_path / "data.csv"
    path.write_bytes(b"\nsite,y\r\n1,2\r\n\r\n , \r\n3,4\r\n")
    raw = path.read_bytes()
    table = tables._read_plain_csv(raw, raw.decode(), None)
    assert table is not None
    # common practice, no source: blank lines are skipped but still counted as lines
    assert table.lines.tolist() == [3, 6]
    assert table.rows.tolist() == [1, 2]
    assert table.columns == {"site": ["1", "3"], "y": ["2", "4"]}

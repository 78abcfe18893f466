"""The spec's `reading` section: a semicolon export with decimal commas and worded or 1/2 codes
reads as the plain CSV does, through the engine and through the row reader, and every wrong
option or value is named.

The households are the demo's first round with gaps (`households` of test_cli_formats).
"""

from __future__ import annotations

import json
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd
import pytest
from cli_support import ENV, assert_clean_failure
from test_cli_formats import RUN_SECTIONS, SPEC, households
from typer.testing import CliRunner

from strativ.cli import grouped
from strativ.cli.app import app
from strativ.cli.loading import load_data
from strativ.cli.spec import load_spec

DATA_ERROR, SPEC_ERROR = 3, 2  # exit codes of cli/errors.py
WORDED = """\
reading:
  delimiter: ';'
  decimal: ','
  codes:
    offer: {won: 1, lost: 0}
    take_up: {'Yes': 1, 'No': 0}
"""
NUMBERED = """\
reading:
  codes:
    take_up: {1: 1, 2: 0}
"""


def _european(frame: pd.DataFrame) -> pd.DataFrame:
    """`frame` as a spreadsheet set to a decimal comma exports it, offer and take-up worded."""
    out = frame.copy()
    out["won_lottery"] = out["won_lottery"].map({1: "won", 0: "lost"})
    out["retrofitted"] = out["retrofitted"].map({1.0: "yes", 0.0: " NO "})
    return out


def _spec(folder: Path, name: str, extra: str = "") -> Path:
    spec = folder / "spec.yaml"
    spec.write_text(SPEC.replace("households.{ext}", name) + extra, encoding="utf-8")
    return spec


def _results(spec: Path) -> dict[str, Any]:
    target = spec.parent / "out"
    result = CliRunner().invoke(app, ["run", str(spec), "--out", str(target)], env=ENV)
    assert result.exit_code == 0, result.stderr
    return json.loads((target / "results.json").read_text(encoding="utf-8"))


@pytest.fixture(scope="module")
def specs(tmp_path_factory: pytest.TempPathFactory) -> dict[str, Path]:
    frame, _ = households()
    root = tmp_path_factory.mktemp("reading")
    out = {}
    plain = root / "plain"
    plain.mkdir()
    frame.to_csv(plain / "households.csv", index=False)
    out["plain"] = _spec(plain, "households.csv")
    worded = root / "worded"
    worded.mkdir()
    _european(frame).to_csv(worded / "households.csv", index=False, sep=";", decimal=",")
    out["worded"] = _spec(worded, "households.csv", WORDED)
    numbered = root / "numbered"
    numbered.mkdir()
    coded = frame.copy()
    coded["retrofitted"] = coded["retrofitted"].map({1.0: 1, 0.0: 2}).astype("Int64")
    coded.to_parquet(numbered / "households.parquet", index=False)
    out["numbered"] = _spec(numbered, "households.parquet", NUMBERED)
    return out


@pytest.mark.parametrize("kind", ["worded", "numbered"])
def test_the_engine_reads_the_options_and_gives_the_plain_results(
        specs: dict[str, Path], kind: str, monkeypatch: pytest.MonkeyPatch) -> None:
    expected = _results(specs["plain"])

    def no_row_reader(spec: Any) -> Any:
        raise AssertionError("the engine refused a clean file")

    monkeypatch.setattr(grouped, "load_data", no_row_reader)
    actual = _results(specs[kind])
    for section in sorted(set(expected) - RUN_SECTIONS):
        # by construction: the same households, written with other separators and codes
        assert json.dumps(actual[section], sort_keys=True) == \
            json.dumps(expected[section], sort_keys=True), (kind, section)
    assert actual["spec"]["reading"]["engine"] == "duckdb"


@pytest.mark.parametrize("kind", ["worded", "numbered"])
def test_the_row_reader_reads_the_options_as_the_engine(specs: dict[str, Path],
                                                        kind: str) -> None:
    expected, actual = load_data(load_spec(specs["plain"])), load_data(load_spec(specs[kind]))
    # by construction: the same households
    assert actual.n_read == expected.n_read and actual.dropped == expected.dropped
    np.testing.assert_array_equal(actual.offer, expected.offer)
    np.testing.assert_array_equal(actual.take_up, expected.take_up)
    assert actual.stratum.tolist() == expected.stratum.tolist()
    for group in ("outcomes", "covariates"):
        for name, values in getattr(expected, group).items():
            np.testing.assert_array_equal(getattr(actual, group)[name], values)


def test_a_value_outside_the_codes_names_its_row_and_the_codes(tmp_path: Path) -> None:
    frame, _ = households()
    data = _european(frame)
    data.loc[7, "won_lottery"] = "1"  # a digit is not one of the spec's codes
    data.to_csv(tmp_path / "households.csv", index=False, sep=";", decimal=",")
    spec = _spec(tmp_path, "households.csv", WORDED)
    result = CliRunner().invoke(app, ["run", str(spec), "--out", str(tmp_path / "out")],
                                env=ENV)
    # by construction: data row 8 is line 9 of the file (one header line)
    assert_clean_failure(result, DATA_ERROR, "won_lottery", "'1'", "row 8",
                         "reading.codes.offer")


def test_a_thousands_separator_stays_refused_under_a_decimal_comma(tmp_path: Path) -> None:
    frame, _ = households()
    data = _european(frame)
    data["gas_therms"] = data["gas_therms"].astype(object)
    data.loc[3, "gas_therms"] = "1.234,5"
    data.to_csv(tmp_path / "households.csv", index=False, sep=";", decimal=",")
    spec = _spec(tmp_path, "households.csv", WORDED)
    result = CliRunner().invoke(app, ["run", str(spec), "--out", str(tmp_path / "out")],
                                env=ENV)
    # common practice, no source: a grouping mark is never guessed away
    assert_clean_failure(result, DATA_ERROR, "gas_therms", "'1.234,5'", "row 4")


def test_a_semicolon_file_without_the_option_points_to_it(tmp_path: Path) -> None:
    frame, _ = households()
    frame.to_csv(tmp_path / "households.csv", index=False, sep=";")
    spec = _spec(tmp_path, "households.csv")
    result = CliRunner().invoke(app, ["run", str(spec), "--out", str(tmp_path / "out")],
                                env=ENV)
    assert_clean_failure(result, DATA_ERROR, "semicolons", "reading: {delimiter: ';'}")


@pytest.mark.parametrize(("extra", "fragments"), [
    ("reading:\n  codes:\n    offer: {yes: 1, no: 0}\n", ("quote the code", "'yes': 1")),
    ("reading:\n  decimal: ','\n", ("decimal comma needs another field separator",)),
    ("reading:\n  delimiter: ':'\n", ("reading.delimiter", "';'")),
    ("reading:\n  codes:\n    offer: {won: 1, lost: 1}\n", ("no code for 0",)),
    ("reading:\n  codes:\n    offered: {won: 1, lost: 0}\n", ("unknown key 'offered'",)),
    ("engine: sparky\n", ("'engine' is 'sparky'", "duckdb, spark")),
    ("engine: {master: 'local[1]'}\n", ("read only by the spark engine",)),
])
def test_a_wrong_reading_option_is_named_with_its_line(tmp_path: Path, extra: str,
                                                       fragments: tuple[str, ...]) -> None:
    frame, _ = households()
    frame.to_csv(tmp_path / "households.csv", index=False)
    spec = _spec(tmp_path, "households.csv", extra)
    result = CliRunner().invoke(app, ["check", str(spec)], env=ENV)
    # by construction: SPEC has 16 lines, so the option starts on line 17
    assert_clean_failure(result, SPEC_ERROR, "spec.yaml", "line 1", *fragments)

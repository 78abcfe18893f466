"""Data files as analysts export them: the same households as CSV, TSV, gzip-compressed CSV,
Parquet, Stata, SPSS and Excel give the same results, and a bad file of each kind is named
with its column and row.

The households are the demo's first round (demo_data/round_1.csv) with gaps made on purpose:
missing gas use and bill arrears in fixed rows, and a missing take-up in three rows (so the
0/1 columns are written 1.0/0.0 by pandas), and a numeric district code that Stata stores as
a double with a value label per district.
"""

from __future__ import annotations

import gzip
import json
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd
import pyarrow as pa
import pyreadstat
import pytest
from cli_support import ENV, REPO, assert_clean_failure
from typer.testing import CliRunner

from strativ.cli.app import app
from strativ.cli.errors import DataError, SpecError
from strativ.cli.foreign import read_foreign, read_foreign_table
from strativ.cli.loading import load_data
from strativ.cli.spec import load_spec
from strativ.cli.tables import DATA_SUFFIXES, read_table

DATA_ERROR, SPEC_ERROR = 3, 2  # exit codes of cli/errors.py
FORMATS = ("csv", "tsv", "csv.gz", "tsv.gz", "parquet", "dta", "sav", "xlsx")
RETROFIT_GAPS = (10, 500, 1200)

SPEC = """\
title: Insulation lottery, round 1 with gaps
data: households.{ext}
columns:
  outcome: [gas_therms, behind_on_bills]
  take_up: retrofitted
  offer: won_lottery
  stratum: district_code
  covariates: [baseline_therms, home_age_years, household_size]
design:
  offer_probability: estimated
  assignment: block
missing:
  drop_incomplete_rows: true
estimators: [fixed_effects, weighted, interacted]
"""


def households() -> tuple[pd.DataFrame, dict[float, str]]:
    """Round 1 of the demo with gaps, and the district code -> name labels."""
    frame = pd.read_csv(REPO / "demo_data" / "round_1.csv")
    names = sorted(frame["district"].unique())
    labels = {100.0 + i: name for i, name in enumerate(names)}
    frame["district_code"] = frame["district"].map({n: c for c, n in labels.items()})
    i = np.arange(len(frame))
    frame["gas_therms"] = frame["gas_therms"].where(i % 13 != 5)
    frame["behind_on_bills"] = frame["behind_on_bills"].where(i % 17 != 3)
    frame["retrofitted"] = frame["retrofitted"].where(~np.isin(i, RETROFIT_GAPS))
    return frame, labels


def write_as(frame: pd.DataFrame, labels: dict[float, str], path: Path) -> Path:
    """Write `frame` in the format its name ends with, as an analyst's tool would."""
    name = path.name
    if name.endswith((".csv", ".csv.gz")):
        frame.to_csv(path, index=False)  # pandas picks gzip from the name
    elif name.endswith((".tsv", ".tsv.gz")):
        frame.to_csv(path, index=False, sep="\t")
    elif name.endswith(".parquet"):
        frame.to_parquet(path, index=False)
    elif name.endswith(".dta"):
        stata = frame.copy()
        # Stata's default storage type is float (single precision): 868.6 is stored as
        # 868.5999755859375 and listed as 868.6
        stata["gas_therms"] = stata["gas_therms"].astype(np.float32)
        stata.to_stata(path, write_index=False, value_labels={"district_code": labels})
    elif name.endswith(".sav"):
        spss = frame.copy()
        spss["gas_therms"] = spss["gas_therms"].fillna(-99.0)  # a declared missing code
        pyreadstat.write_sav(spss, str(path), missing_ranges={"gas_therms": [-99.0]},
                             variable_value_labels={"district_code": labels})
    elif name.endswith(".xlsx"):
        frame.to_excel(path, index=False, engine="openpyxl")
    else:
        raise AssertionError(name)
    return path


@pytest.fixture(scope="module")
def studies(tmp_path_factory: pytest.TempPathFactory) -> dict[str, Path]:
    """Format -> spec path, each format in its own directory with the same spec text."""
    frame, labels = households()
    root = tmp_path_factory.mktemp("formats")
    specs = {}
    for ext in FORMATS:
        folder = root / ext.replace(".", "_")
        folder.mkdir()
        write_as(frame, labels, folder / f"households.{ext}")
        specs[ext] = folder / "spec.yaml"
        specs[ext].write_text(SPEC.format(ext=ext), encoding="utf-8")
    return specs


@pytest.fixture(scope="module")
def results(studies: dict[str, Path]) -> dict[str, dict[str, Any]]:
    """Format -> results.json of `strativ run` on that format's spec."""
    runner = CliRunner()
    out = {}
    for ext, spec in studies.items():
        target = spec.parent / "out"
        result = runner.invoke(app, ["run", str(spec), "--out", str(target)], env=ENV)
        assert result.exit_code == 0, (ext, result.stderr)
        out[ext] = json.loads((target / "results.json").read_text(encoding="utf-8"))
    return out


# --- the same households in every format ---------------------------------------------------

# sections that name the input files and the run, not the data: they differ by design
RUN_SECTIONS = {"created", "spec", "inputs"}


def test_the_csv_run_sees_the_gaps_made(results: dict[str, dict[str, Any]]) -> None:
    doc = results["csv"]
    # by construction: households() blanks take-up in 3 of round 1's 1,840 rows
    # (demo_data/README.md), and 'drop_incomplete_rows' drops them
    assert doc["rows"]["read"] == 1840
    offers = pd.read_csv(REPO / "demo_data" / "round_1.csv")["won_lottery"].to_numpy()
    offered = int(offers[list(RETROFIT_GAPS)].sum())
    assert doc["rows"]["dropped_by_column"] == [{"column": "retrofitted",
                                                 "rows": len(RETROFIT_GAPS),
                                                 "offered": offered,
                                                 "not_offered": len(RETROFIT_GAPS) - offered}]
    # by construction: 2 outcomes x 3 estimators in the spec
    assert len(doc["estimates"]) == 6
    # by construction: the stratum is the district code, 100 to 109, not its value label
    assert sorted({row["label"] for row in doc["strata"]}) == list(range(100, 110))


@pytest.mark.parametrize("ext", [f for f in FORMATS if f != "csv"])
def test_every_format_gives_the_csv_results_byte_for_byte(
        results: dict[str, dict[str, Any]], ext: str) -> None:
    expected, actual = results["csv"], results[ext]
    assert set(actual) == set(expected)
    for section in sorted(set(expected) - RUN_SECTIONS):
        # by construction: the same rows and values, so the same bytes in every section
        # about the data (estimates, comparisons, strata, attrition, warnings, rows)
        assert json.dumps(actual[section], sort_keys=True) == \
            json.dumps(expected[section], sort_keys=True), (ext, section)
    assert actual["inputs"][0]["file"] == f"households.{ext}"  # by construction: the spec


@pytest.mark.parametrize("ext", [f for f in FORMATS if f != "csv"])
def test_the_row_reader_reads_every_format_as_the_csv(studies: dict[str, Path],
                                                      ext: str) -> None:
    # the run above reads clean files through DuckDB; the row reader, which words every
    # message, must see the same rows and values
    expected, actual = load_data(load_spec(studies["csv"])), load_data(load_spec(studies[ext]))
    for name, values in expected.outcomes.items():
        np.testing.assert_array_equal(actual.outcomes[name], values, strict=True)
    for name, values in expected.covariates.items():
        np.testing.assert_array_equal(actual.covariates[name], values)
    np.testing.assert_array_equal(actual.offer, expected.offer, strict=True)
    np.testing.assert_array_equal(actual.take_up, expected.take_up, strict=True)
    np.testing.assert_array_equal(actual.stratum, expected.stratum, strict=True)
    np.testing.assert_array_equal(actual.row, expected.row, strict=True)
    # by construction: header on line / sheet row 1, one data row per line, none blank;
    # Parquet, Stata and SPSS files have no lines
    lines = actual.row + 1 if ext in ("tsv", "csv.gz", "tsv.gz", "xlsx") else 0 * actual.row
    np.testing.assert_array_equal(actual.line, lines)


# --- Stata and SPSS values -----------------------------------------------------------------


def test_stata_missing_codes_and_labels_read_as_nulls_and_codes(tmp_path: Path) -> None:
    frame = pd.DataFrame({"district_code": [101.0, 102.0, 101.0, 103.0],
                          "gas_therms": [650.5, "a", 702.25, np.nan],
                          "won_lottery": np.array([1, 0, 1, 0], dtype=np.int8),
                          "note": ["", "draughty", "", "new roof"]})
    path = tmp_path / "households.dta"
    pyreadstat.write_dta(frame, str(path), missing_user_values={"gas_therms": ["a"]},
                         variable_value_labels={"district_code": {101.0: "Millbrook",
                                                                  102.0: "Riverbend"}})
    table = read_foreign(path)
    # by construction: ".a" (extended missing), "." and "" are missing; labels are ignored
    assert table.column("gas_therms").to_pylist() == [650.5, None, 702.25, None]
    assert table.column("district_code").to_pylist() == [101.0, 102.0, 101.0, 103.0]
    assert table.column("won_lottery").to_pylist() == [1, 0, 1, 0]
    assert table.column("note").to_pylist() == [None, "draughty", None, "new roof"]


def test_a_stata_float_reads_as_the_decimal_it_shows(tmp_path: Path) -> None:
    frame = pd.DataFrame({"gas_therms": np.array([868.6, 0.1, 1e-3, np.nan], dtype=np.float32),
                          "baseline_therms": [868.6, 0.1, 1e-3, 2.0]})
    path = tmp_path / "households.dta"
    frame.to_stata(path, write_index=False)
    # by construction: the decimals written; a double column is read as stored
    assert read_foreign(path).column("gas_therms").to_pylist() == [868.6, 0.1, 1e-3, None]
    assert read_foreign(path, ["baseline_therms"]).column_names == ["baseline_therms"]
    # reference: IEEE 754 single precision, the float nearest 868.6 is 868.5999755859375
    assert float(np.float32(868.6)) == 868.5999755859375


def test_spss_user_missing_values_read_as_nulls(tmp_path: Path) -> None:
    frame = pd.DataFrame({"gas_therms": [650.5, -99.0, 702.25], "district_code": [1.0, 2.0, 1.0]})
    path = tmp_path / "households.sav"
    pyreadstat.write_sav(frame, str(path), missing_ranges={"gas_therms": [-99.0]})
    # by construction: -99 is declared missing
    assert read_foreign(path).column("gas_therms").to_pylist() == [650.5, None, 702.25]


# --- Excel cells ---------------------------------------------------------------------------


def test_excel_cells_keep_their_types_and_sheet_rows(tmp_path: Path) -> None:
    import openpyxl

    book = openpyxl.Workbook()
    sheet = book.active
    sheet["B3"], sheet["C3"], sheet["D3"], sheet["E3"] = "district_code", "gas_therms", \
        "won_lottery", "note"
    rows = [(101, 650.5, 1, "draughty"), (102, None, 0, 7), (None, None, None, None),
            (101, "#N/A", True, None)]
    for r, values in enumerate(rows, start=4):
        for c, value in enumerate(values, start=2):
            sheet.cell(row=r, column=c, value=value)
    sheet["C7"].data_type = "e"  # an error cell, as Excel writes #N/A
    sheet["G10"].number_format = "0.00"  # a formatted cell holding nothing
    path = tmp_path / "households.xlsx"
    book.save(path)
    got = read_foreign_table(path)
    # by construction: header on sheet row 3, blank sheet row 6 skipped, column A and G empty
    assert got.header == ["district_code", "gas_therms", "won_lottery", "note"]
    assert got.lines.tolist() == [4, 5, 7]
    assert got.table.schema.field("district_code").type == pa.int64()
    assert got.table.column("district_code").to_pylist() == [101, 102, 101]
    # numbers mixed with the error cell's text become text, written back exactly
    assert got.table.column("gas_therms").to_pylist() == ["650.5", None, "#N/A"]
    assert got.table.column("won_lottery").to_pylist() == ["1", "0", "true"]
    assert got.table.column("note").to_pylist() == ["draughty", "7", None]
    cells = read_table(path, ["gas_therms"])
    assert list(cells.columns) == ["gas_therms"] and cells.header == got.header
    assert cells.rows.tolist() == [1, 2, 3] and cells.lines.tolist() == [4, 5, 7]


# --- messages ------------------------------------------------------------------------------


def _run_fails(tmp_path: Path, name: str, code: int, *fragments: str) -> None:
    """`strativ run` on a spec naming data file `name` of `tmp_path` fails cleanly."""
    spec = tmp_path / "spec.yaml"
    spec.write_text(SPEC.replace("households.{ext}", name), encoding="utf-8")
    result = CliRunner().invoke(app, ["run", str(spec), "--out", str(tmp_path / "out")],
                                env=ENV)
    assert_clean_failure(result, code, *fragments)
    assert not (tmp_path / "out").exists()


def test_a_bad_code_in_a_stata_file_names_the_file_column_and_row(tmp_path: Path) -> None:
    frame, labels = households()
    frame = frame.head(200).copy()
    frame.loc[6, "won_lottery"] = 2
    write_as(frame, labels, tmp_path / "bad.dta")
    # by construction: row 7 (frame index 6); a Stata file has no lines to name
    _run_fails(tmp_path, "bad.dta", DATA_ERROR,
               "bad.dta, column 'won_lottery': values must be 0/1 or true/false; "
               "found 2 in row 7", "recode the column to 0 and 1")


def test_a_word_in_a_stata_outcome_names_the_row(tmp_path: Path) -> None:
    frame = households()[0].head(200).copy()
    frame["gas_therms"] = frame["gas_therms"].astype(str)  # a string variable in Stata
    frame.loc[4, "gas_therms"] = "lots"
    frame.to_stata(tmp_path / "bad.dta", write_index=False)
    # by construction: row 5 (frame index 4); the other gaps read as missing
    _run_fails(tmp_path, "bad.dta", DATA_ERROR,
               "bad.dta, column 'gas_therms': the outcome column must be numeric; "
               "found 'lots' in row 5")


def test_a_bad_excel_cell_names_its_sheet_row(tmp_path: Path) -> None:
    frame = households()[0].head(200).copy()
    frame["gas_therms"] = frame["gas_therms"].astype(object)
    frame.loc[3, "gas_therms"] = "12,5"
    frame.to_excel(tmp_path / "bad.xlsx", index=False, startrow=2)
    # by construction: header on sheet row 3, data row 4 on sheet row 7
    _run_fails(tmp_path, "bad.xlsx", DATA_ERROR,
               "bad.xlsx, column 'gas_therms': the outcome column must be numeric; "
               "found '12,5' in row 4 (line 7)", "12.5 and 1000, not 12,5")


def test_an_unknown_ending_is_refused_naming_the_formats(tmp_path: Path) -> None:
    households()[0].head(50).to_csv(tmp_path / "households.txt", index=False)
    _run_fails(tmp_path, "households.txt", SPEC_ERROR,
               "'households.txt' is not a data file strativ reads", ".tsv", ".csv.gz",
               ".parquet", ".dta (Stata)", ".sav (SPSS)", ".xlsx (Excel)")
    with pytest.raises(DataError) as err:
        read_table(tmp_path / "households.txt")
    text = err.value.render()
    assert "households.txt: is not a data file strativ reads" in text
    # by construction: every accepted ending is named in the hint
    assert all(ending in text for ending in DATA_SUFFIXES)


def test_the_spec_accepts_every_ending_read_table_reads(studies: dict[str, Path],
                                                        tmp_path: Path) -> None:
    for ext, spec in studies.items():
        assert load_spec(spec).data[0].name == f"households.{ext}"  # by construction
    (tmp_path / "households.csv.bz2").write_bytes(b"BZh")
    spec = tmp_path / "spec.yaml"
    spec.write_text(SPEC.format(ext="csv.bz2"), encoding="utf-8")
    with pytest.raises(SpecError) as err:
        load_spec(spec)
    # by construction: the spec names the file on line 2
    assert "spec.yaml, line 2: 'households.csv.bz2' is not a data file strativ reads" in \
        err.value.render()


def test_a_tsv_saved_with_commas_says_so(tmp_path: Path) -> None:
    households()[0].head(50).to_csv(tmp_path / "households.tsv", index=False)
    _run_fails(tmp_path, "households.tsv", DATA_ERROR,
               "households.tsv: the fields seem to be separated by commas, not tabs",
               "or name it to end in .csv")


def test_a_csv_saved_with_tabs_points_to_tsv(tmp_path: Path) -> None:
    households()[0].head(50).to_csv(tmp_path / "households.csv", index=False, sep="\t")
    _run_fails(tmp_path, "households.csv", DATA_ERROR,
               "households.csv: the fields seem to be separated by tabs, not commas",
               "or name it to end in .tsv")


def test_a_ragged_line_in_a_gzip_tsv_names_its_line(tmp_path: Path) -> None:
    text = households()[0].head(50).to_csv(index=False, sep="\t").splitlines()
    text[8] += "\textra"
    (tmp_path / "households.tsv.gz").write_bytes(gzip.compress(("\n".join(text) + "\n")
                                                               .encode("utf-8")))
    # by construction: text[8] is line 9 of the decompressed text; 10 columns + 1
    _run_fails(tmp_path, "households.tsv.gz", DATA_ERROR,
               "households.tsv.gz: line 9 has 11 fields but the header has 10",
               "stray tab")


@pytest.mark.parametrize(("name", "fragment"), [
    ("households.csv.gz", "households.csv.gz: cannot be decompressed as gzip"),
    ("households.dta", "households.dta: cannot be read as a Stata file"),
    ("households.sav", "households.sav: cannot be read as an SPSS file"),
    ("households.xlsx", "households.xlsx: cannot be read as an Excel workbook"),
])
def test_a_damaged_file_is_named_with_its_format(tmp_path: Path, name: str,
                                                  fragment: str) -> None:
    (tmp_path / name).write_bytes(b"\x1f\x8bnot what the name says")
    _run_fails(tmp_path, name, DATA_ERROR, fragment)

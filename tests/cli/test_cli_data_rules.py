"""Every data rule of issue 4 on the command line: exit code 3 (or success where the rule drops
rows), a message naming file, column and rows, no traceback, and no output after a failure."""

from __future__ import annotations

import pytest
from cli_support import MINIMAL_SPEC, Study, assert_clean_failure, study_rows, write_csv

from strativ.cli.errors import DataError
from strativ.cli.loading import load_data
from strativ.cli.spec import load_spec

# source: issue 4 exit codes (3 = data error)
DATA_ERROR = 3


def _fails(study: Study, invoke, *fragments: str) -> None:
    for command in ("check", "run"):
        result = invoke(command, study.spec, *(["--out", study.out] if command == "run" else []))
        assert_clean_failure(result, DATA_ERROR, *fragments)
    assert not study.out.exists()
    assert not (study.root / "strativ_out").exists()


def test_missing_column_is_named_with_near_matches(study: Study, invoke) -> None:
    study.write_spec(MINIMAL_SPEC.replace("stratum: site", "stratum: sites"))
    _fails(
        study,
        invoke,
        "data.csv, column 'sites': no column 'sites'",
        "named as columns.stratum in spec.yaml, line 6",
        "did you mean 'site'?",
        "Columns in the file: unit, site, offer, take_up, y, age",
    )


def test_offer_outside_0_1_shows_five_values_with_rows(study: Study, invoke) -> None:
    rows = study_rows()
    for i in (2, 4, 6, 8, 10, 12, 14):
        rows[i]["offer"] = "yes"
    write_csv(study.data, rows)
    # source: row i of study_rows is data row i + 1, file line i + 2
    _fails(
        study,
        invoke,
        "data.csv, column 'offer': values must be 0/1 or true/false",
        "'yes' in row 3 (line 4)",
        "'yes' in row 11 (line 12)",
        "(7 rows in all)",
    )
    result = invoke("check", study.spec)
    assert "row 13 (line 14)" not in result.stderr


def test_take_up_coded_2_is_rejected(study: Study, invoke) -> None:
    rows = study_rows()
    rows[5]["take_up"] = 2
    write_csv(study.data, rows)
    _fails(
        study, invoke, "column 'take_up': values must be 0/1 or true/false", "'2' in row 6 (line 7)"
    )


def test_decimal_codes_other_than_0_1_are_not_silently_accepted(study: Study, invoke) -> None:
    rows = study_rows()
    rows[0]["offer"] = "1.5"
    write_csv(study.data, rows)
    _fails(study, invoke, "'1.5' in row 1 (line 2)")


def test_true_false_codes_equal_0_1_codes(study: Study, invoke) -> None:
    assert invoke("run", study.spec, "--out", study.out).exit_code == 0
    plain = study.results()["estimates"]
    rows = study_rows()
    for row in rows:
        row["offer"] = "true" if row["offer"] else "FALSE"
        row["take_up"] = "True" if row["take_up"] else "false"
    write_csv(study.data, rows)
    assert invoke("run", study.spec, "--out", study.out).exit_code == 0
    # reference: the same study coded 0/1, run just above
    assert study.results()["estimates"] == plain


def test_missing_outcome_is_dropped_and_counted_as_attrition(study: Study, invoke) -> None:
    rows = study_rows()
    # rows 0-19 are north (first 6 offered), rows 20-39 south (first 10 offered)
    for i in (0, 1, 7, 25):
        rows[i]["y"] = None
    rows[30]["y"] = "NA"
    write_csv(study.data, rows)
    result = invoke("run", study.spec, "--out", study.out)
    assert result.exit_code == 0, result.stderr
    doc = study.results()
    # source: the five blanked outcomes above, by stratum and arm
    assert doc["attrition"] == [
        {"outcome": "y", "stratum": "north", "arm": "not_offered", "missing": 1, "rows": 14},
        {"outcome": "y", "stratum": "north", "arm": "offered", "missing": 2, "rows": 6},
        {"outcome": "y", "stratum": "south", "arm": "not_offered", "missing": 1, "rows": 10},
        {"outcome": "y", "stratum": "south", "arm": "offered", "missing": 1, "rows": 10},
    ]
    assert doc["comparisons"][0]["rows_missing_outcome"] == 5
    assert doc["estimates"][0]["n_units"] == len(rows) - 5
    assert "outcome 'y' is missing in 5 rows (3 offered, 2 not offered)" in " ".join(
        result.stderr.split()
    )


@pytest.mark.parametrize("column", ["offer", "take_up", "site"])
def test_missing_design_value_is_an_error_naming_the_row(study: Study, invoke, column: str) -> None:
    rows = study_rows()
    rows[9][column] = ""
    write_csv(study.data, rows)
    _fails(
        study,
        invoke,
        f"data.csv, column '{column}': 1 missing value(s), first in row 10 (line 11)",
        "drop_incomplete_rows: true",
    )


def test_drop_incomplete_rows_drops_and_counts(study: Study, invoke) -> None:
    rows = study_rows()
    rows[9]["offer"] = ""
    rows[10]["site"] = "NA"
    rows[11]["offer"] = None
    rows[11]["take_up"] = None
    write_csv(study.data, rows)
    study.write_spec(MINIMAL_SPEC + "missing:\n  drop_incomplete_rows: true\n")
    result = invoke("run", study.spec, "--out", study.out)
    assert result.exit_code == 0, result.stderr
    doc = study.results()
    # source: the four blanked cells above, in three rows
    assert doc["rows"] == {
        "read": len(rows),
        "kept": len(rows) - 3,
        "dropped_incomplete": 3,
        "dropped_by_column": [
            {"column": "offer", "rows": 2, "offered": None, "not_offered": None},
            {"column": "site", "rows": 1, "offered": rows[10]["offer"],
             "not_offered": 1 - rows[10]["offer"]}],
    }
    assert doc["estimates"][0]["n_units"] == len(rows) - 3
    assert "3 of 76 rows were dropped" in " ".join(result.stderr.split())


def test_non_numeric_outcome_names_file_column_and_row(study: Study, invoke) -> None:
    rows = study_rows()
    rows[3]["y"] = "12,5"
    write_csv(study.data, rows, delimiter=";")
    study.data.write_text(study.data.read_text().replace(";", ",").replace("12,5", '"12,5"'))
    _fails(
        study,
        invoke,
        "data.csv, column 'y': the outcome column must be numeric",
        "'12,5' in row 4 (line 5)",
    )


def test_empty_file_is_named(study: Study, invoke) -> None:
    study.data.write_text("")
    _fails(study, invoke, "data.csv: the file is empty")


def test_header_without_rows_is_named(study: Study, invoke) -> None:
    study.data.write_text("unit,site,offer,take_up,y\n")
    _fails(study, invoke, "data.csv: the file has a header but no data rows")


def test_unreadable_binary_file_is_named(study: Study, invoke) -> None:
    study.data.write_bytes(b"PK\x03\x04\x00\x00binary spreadsheet\x00\xff")
    _fails(study, invoke, "data.csv: the file is not text", "save it as CSV")


def test_non_utf8_text_is_named(study: Study, invoke) -> None:
    study.data.write_bytes(study.data.read_bytes().replace(b"north", b"n\xf6rth"))
    _fails(study, invoke, "data.csv: the file is not UTF-8 text", "save it as CSV UTF-8")


def test_wrong_delimiter_is_named(study: Study, invoke) -> None:
    write_csv(study.data, study_rows(), delimiter=";")
    _fails(
        study,
        invoke,
        "data.csv: the fields seem to be separated by semicolons",
        "save the file as comma-separated CSV",
    )


def test_ragged_row_names_the_line(study: Study, invoke) -> None:
    lines = study.data.read_text().splitlines()
    lines[7] += ",extra"
    study.data.write_text("\n".join(lines) + "\n")
    _fails(study, invoke, "data.csv: line 8 has 7 fields but the header has 6")


def test_parquet_damaged_file_is_named(study: Study, invoke) -> None:
    bad = study.root / "data.parquet"
    bad.write_bytes(b"PAR1 not really parquet")
    study.write_spec(MINIMAL_SPEC.replace("data.csv", "data.parquet"))
    _fails(study, invoke, "data.parquet: cannot be read as Parquet")


def test_probability_column_must_be_constant_within_stratum(study: Study, invoke) -> None:
    rows = study_rows()
    share = {
        site: k / n
        for site, n, k in (("north", 20, 6), ("south", 20, 10), ("east", 20, 14), ("west", 16, 8))
    }
    for row in rows:
        row["p"] = share[row["site"]]
    rows[21]["p"] = 0.55
    write_csv(study.data, rows, header=("unit", "site", "offer", "take_up", "y", "p"))
    study.write_spec(MINIMAL_SPEC + "design:\n  offer_probability: p\n")
    # source: rows 20 and 21 are the first two south rows (data rows 21 and 22)
    _fails(
        study,
        invoke,
        "column 'p': the design probability differs within stratum 'south'",
        "0.5 in data.csv, row 21 (line 22)",
        "0.55 in data.csv, row 22 (line 23)",
    )


def test_probability_outside_0_1_names_rows(study: Study, invoke) -> None:
    rows = study_rows()
    for row in rows:
        row["p"] = 1.0
    write_csv(study.data, rows, header=("unit", "site", "offer", "take_up", "y", "p"))
    study.write_spec(MINIMAL_SPEC + "design:\n  offer_probability: p\n")
    # source: the core refuses the first stratum of the analysis sample in label order
    # ('east', data rows 41-60); the command line adds where that stratum starts
    _fails(
        study,
        invoke,
        "column 'p': design offer probability refused: stratum 'east' has probability 1.0; "
        "use a value strictly between 0 and 1",
        "first row of that stratum: data.csv, row 41 (line 42)",
    )


def test_no_stratum_with_both_arms_is_a_data_error(study: Study, invoke) -> None:
    rows = study_rows()
    for row in rows:
        row["offer"] = 1
    write_csv(study.data, rows)
    _fails(study, invoke, "column 'site': no stratum has both offered and not-offered")


def test_duplicated_needed_column_is_refused(study: Study, invoke) -> None:
    text = study.data.read_text().replace("unit,site", "site,site", 1)
    study.data.write_text(text)
    _fails(study, invoke, "data.csv, column 'site': the header has 2 columns named 'site'")


def test_error_in_second_file_names_that_file(study: Study) -> None:
    rows = study_rows()
    write_csv(study.root / "r1.csv", rows[:40])
    rows[50]["take_up"] = "maybe"
    write_csv(study.root / "r2.csv", rows[40:])
    study.write_spec(MINIMAL_SPEC.replace("data: data.csv", "data: r*.csv"))
    # source: rows[50] is the 11th data row of r2.csv
    with pytest.raises(DataError, match=r"'maybe' in row 11 \(line 12\)") as err:
        load_data(load_spec(study.spec))
    assert err.value.file.name == "r2.csv" and err.value.rows == (11,)


def test_cluster_spanning_two_arms_names_both_rows(study: Study, invoke) -> None:
    rows = study_rows()
    for i, row in enumerate(rows):
        row["household"] = f"h{(i + 1) // 2}"
    write_csv(study.data, rows, header=("unit", "site", "household", "offer", "take_up", "y"))
    study.write_spec(MINIMAL_SPEC + "  cluster: household\ninference:\n  variance: cluster\n")
    # source: study_rows, north units 5 (offered) and 6 (not offered) share household h3
    _fails(study, invoke, "column 'household': cluster 'h3' spans more than one (stratum, "
           "offer) cell", "stratum 'north', offer 1 in data.csv, row 6 (line 7)",
           "stratum 'north', offer 0 in data.csv, row 7 (line 8)",
           "hint: clusters must be nested in strata and offered as a whole")


def test_a_cluster_column_is_checked_under_every_variance(study: Study, invoke) -> None:
    rows = study_rows()
    for i, row in enumerate(rows):
        row["household"] = f"h{(i + 1) // 2}"
    write_csv(study.data, rows, header=("unit", "site", "household", "offer", "take_up", "y"))
    study.write_spec(MINIMAL_SPEC + "  cluster: household\ninference:\n  variance: robust\n")
    # source: issue 7, a named cluster column enters every variance flavour, so the core's
    # nesting rule applies under robust too
    _fails(study, invoke, "column 'household': cluster 'h3' spans more than one (stratum, "
           "offer) cell")

"""Hostile and unusual inputs found by trying the command line as a new user: each one fails
with the documented exit code and a message that says where and how to fix it, or runs and
explains itself."""

from __future__ import annotations

import json
from pathlib import Path

import jsonschema
import pandas as pd
import pytest
import yaml
from cli_support import (
    HEADER,
    MINIMAL_SPEC,
    Study,
    assert_clean_failure,
    study_rows,
    write_csv,
)

import strativ.cli.yamlmarks as yaml_marks
from strativ.cli.errors import SpecError
from strativ.cli.results import load_schema
from strativ.cli.spec import load_spec
from strativ.estimators import build_cells, fit_all

# source: issue 4 exit codes (2 = usage or spec error, 3 = data error)
SPEC_ERROR, DATA_ERROR = 2, 3


def _fails(study: Study, invoke, code: int, *fragments: str) -> None:
    result = invoke("run", study.spec, "--out", study.out)
    assert_clean_failure(result, code, *fragments)
    assert not study.out.exists()


def _comparison(rows: list[dict]):
    frame = pd.DataFrame(rows)
    cells = build_cells(frame["y"].to_numpy(float), frame["take_up"].to_numpy(),
                        frame["offer"].to_numpy(), frame["site"].to_numpy(object))
    return fit_all(cells)


# --- the spec file -------------------------------------------------------------------------


def test_nested_yaml_aliases_are_indexed_once(study: Study, monkeypatch) -> None:
    calls = []
    index = yaml_marks._index

    def counting(*args, **kwargs):
        calls.append(1)
        return index(*args, **kwargs)

    monkeypatch.setattr(yaml_marks, "_index", counting)
    ten = ", ".join(["1"] * 10)
    study.write_spec(f"a: &a [{ten}]\n" + "".join(
        f"{k}: &{k} [{', '.join([f'*{prev}'] * 10)}]\n"
        for prev, k in (("a", "b"), ("b", "c"), ("c", "d"))))
    # by construction: a list repeated through an alias is refused at its first repeat (it
    # was walked once and refused later as an unknown key; a message quoting such a value
    # could spell out billions of items)
    with pytest.raises(SpecError, match="repeats a list or mapping through an alias"):
        load_spec(study.spec)
    # source: the spec above has 4 sequences of 10 items (44 nodes) plus the root mapping;
    # walking every alias again would take 10 + 100 + 1,000 + 10,000 visits
    assert len(calls) <= 50


def test_a_second_yaml_document_gets_its_own_hint(study: Study, invoke) -> None:
    study.write_spec(MINIMAL_SPEC + "---\ntitle: again\n")
    # source: spec text above, the second document starts on line 7
    _fails(study, invoke, SPEC_ERROR, "spec.yaml, line 7: not valid YAML",
           "a spec is a single YAML document: remove the '---' or '...' line")


def test_a_yaml_tag_is_refused_with_a_hint(study: Study, invoke) -> None:
    study.write_spec("title: !!python/object:os.system x\n" + MINIMAL_SPEC)
    _fails(study, invoke, SPEC_ERROR, "spec.yaml, line 1: not valid YAML",
           "a spec holds plain values: remove the '!' tag")


def test_a_spec_that_is_not_utf8_names_the_line_and_byte(study: Study, invoke) -> None:
    study.spec.write_bytes(MINIMAL_SPEC.encode() + "title: K\u00f6ln\n".encode("latin-1"))
    # source: Latin-1 encodes o-umlaut as byte 0xf6; the title is line 7
    _fails(study, invoke, SPEC_ERROR, "spec.yaml, line 7: the spec is not UTF-8 text: byte 0xf6",
           "save it as UTF-8 text")


def test_level_above_one_gets_a_percent_hint_only_when_it_reads_as_a_percent(
        study: Study) -> None:
    study.write_spec(MINIMAL_SPEC + "inference:\n  level: 1.5\n")
    with pytest.raises(SpecError, match=r"'inference.level' is 1.5") as err:
        load_spec(study.spec)
    # common practice, no source: a 1.5 % level is never meant; 95 reads as 95 %
    assert "for example 0.95" in err.value.render() and "%" not in err.value.hint
    study.write_spec(MINIMAL_SPEC + "inference:\n  level: 90\n")
    with pytest.raises(SpecError, match=r"'inference.level' is 90") as err:
        load_spec(study.spec)
    assert "write 0.9 for 90 %" in err.value.render()


def test_offer_probability_mapping_naming_a_stratum_twice_is_an_error(study: Study,
                                                                      invoke) -> None:
    study.write_spec(MINIMAL_SPEC + "design:\n  offer_probability:\n    1: 0.3\n    '1': 0.6\n")
    # source: spec text above, the second '1' is on line 10
    _fails(study, invoke, SPEC_ERROR, "spec.yaml, line 10: stratum '1' is given twice in "
           "'design.offer_probability'")


def test_misspelt_estimated_suggests_the_keyword(study: Study, invoke) -> None:
    study.write_spec(MINIMAL_SPEC + "design:\n  offer_probability: Estimated\n")
    _fails(study, invoke, DATA_ERROR, "no column 'Estimated'", "did you mean 'estimated'?")


# --- where the data files are ---------------------------------------------------------------


def test_a_spec_in_a_directory_named_with_brackets_reads_its_own_files(tmp_path: Path,
                                                                       invoke) -> None:
    home, other = tmp_path / "wave[1]", tmp_path / "wave1"
    home.mkdir()
    other.mkdir()
    write_csv(home / "round_a.csv", study_rows())
    write_csv(other / "round_b.csv", study_rows())
    (home / "spec.yaml").write_text(MINIMAL_SPEC.replace("data: data.csv", "data: round_*.csv"))
    result = invoke("run", home / "spec.yaml", "--out", tmp_path / "out")
    assert result.exit_code == 0, result.stderr
    doc = json.loads((tmp_path / "out" / "results.json").read_text())
    # source: the two directories written above; '[1]' must not act as a glob class
    assert [entry["path"] for entry in doc["inputs"]] == [str((home / "round_a.csv").resolve())]


def test_a_data_file_named_with_brackets_is_read_as_that_file(study: Study, invoke) -> None:
    write_csv(study.root / "round[1].csv", study_rows())
    study.write_spec(MINIMAL_SPEC.replace("data: data.csv", "data: 'round[1].csv'"))
    result = invoke("run", study.spec, "--out", study.out)
    assert result.exit_code == 0, result.stderr
    # source: the file written above
    assert [entry["file"] for entry in study.results()["inputs"]] == ["round[1].csv"]


def test_a_glob_matching_a_non_data_file_says_the_pattern_matched_it(study: Study,
                                                                     invoke) -> None:
    (study.root / "data.txt").write_text("notes\n")
    study.write_spec(MINIMAL_SPEC.replace("data: data.csv", "data: 'data.*'"))
    _fails(study, invoke, SPEC_ERROR, "'data.txt' is not a data file strativ reads",
           "the pattern 'data.*' matched it")


# --- the bytes of a data file ---------------------------------------------------------------


def test_latin1_data_names_the_line_and_the_byte(study: Study, invoke) -> None:
    rows = study_rows()
    rows[2]["site"] = "n\u00f6rth"
    text = "\n".join([",".join(HEADER)] + [",".join(str(r[h]) for h in HEADER) for r in rows])
    study.data.write_bytes(text.encode("latin-1"))
    # source: Latin-1 encodes o-umlaut as 0xf6; rows[2] is on line 4 after the header
    _fails(study, invoke, DATA_ERROR, "data.csv: the file is not UTF-8 text: byte 0xf6 on line 4",
           "save it as CSV UTF-8")


def test_utf16_data_is_named_as_utf16_not_as_binary(study: Study, invoke) -> None:
    study.data.write_bytes(study.data.read_text().encode("utf-16"))
    _fails(study, invoke, DATA_ERROR, "data.csv: the file is UTF-16 text; strativ reads UTF-8",
           "save it as CSV UTF-8")


def test_a_header_only_file_says_how_to_fix_it(study: Study, invoke) -> None:
    study.data.write_text(study.data.read_text().splitlines()[0] + "\n")
    _fails(study, invoke, DATA_ERROR, "data.csv: the file has a header but no data rows",
           "hint: export the data again with its rows")


def test_a_decimal_comma_in_the_outcome_gets_a_decimal_point_hint(study: Study,
                                                                  invoke) -> None:
    rows = study_rows()
    rows[3]["y"] = '"12,5"'
    write_csv(study.data, rows)
    # source: row index 3 is data row 4, file line 5
    _fails(study, invoke, DATA_ERROR, "column 'y': the outcome column must be numeric; found "
           "'12,5' in row 4 (line 5)", "write numbers with a decimal point and no separators")


# --- what the values mean -------------------------------------------------------------------


def test_stratum_combinations_that_join_to_one_label_are_an_error(study: Study,
                                                                  invoke) -> None:
    rows = study_rows()
    for row in rows:
        row["wave"] = {"north": "c", "south": "b / c"}.get(row["site"], "1")
        row["site"] = {"north": "a / b", "south": "a"}.get(row["site"], row["site"])
    write_csv(study.data, rows, header=("unit", "site", "wave", "offer", "take_up", "y"))
    study.write_spec(MINIMAL_SPEC.replace("stratum: site", "stratum: [site, wave]"))
    # source: cli/loading.py joins stratum parts with " / "
    _fails(study, invoke, DATA_ERROR, "column 'site + wave': stratum values ('a', 'b / c') and "
           "('a / b', 'c') both read as stratum 'a / b / c'")


def test_an_outcome_too_large_for_double_precision_is_a_data_error(study: Study,
                                                                   invoke) -> None:
    rows = study_rows()
    for row in rows:
        row["y"] = repr(row["y"] * 1e200)
    write_csv(study.data, rows)
    result = invoke("run", study.spec, "--out", study.out)
    # common practice, no source: squares of 1e200 exceed the double range (about 1.8e308)
    assert_clean_failure(result, DATA_ERROR, "column 'y'",
                         "outcome values beyond +/-1e+150 overflow sums of squares",
                         "rescale the outcome")
    assert "RuntimeWarning" not in result.output
    assert not study.out.exists()


def test_a_zero_first_stage_runs_and_says_why_there_is_no_estimate(study: Study,
                                                                   invoke) -> None:
    rows = study_rows()
    seen: dict[tuple[str, int], int] = {}
    for row in rows:  # within every stratum and arm, every second unit takes up
        key = (row["site"], row["offer"])
        row["take_up"] = seen.get(key, 0) % 2
        seen[key] = seen.get(key, 0) + 1
    write_csv(study.data, rows)
    result = invoke("run", study.spec, "--out", study.out)
    assert result.exit_code == 0, result.stderr
    # reference: Estimate.undefined_reason of strativ.estimators.fit_all on the same rows
    reason = _comparison(rows).estimates[0].undefined_reason
    assert reason is not None
    flat_out, flat_err = " ".join(result.stdout.split()), " ".join(result.stderr.split())
    assert f"No estimator gives a number here: {reason}." in flat_out
    assert f"'y': no estimate from fixed_effects, weighted, interacted: {reason}" in flat_err
    assert "first stage is weak" not in flat_err
    jsonschema.Draft202012Validator(load_schema()).validate(study.results())


def test_one_stratum_reading_says_why_the_estimates_are_not_compared(study: Study,
                                                                     invoke) -> None:
    rows = [row for row in study_rows() if row["site"] == "south"]
    write_csv(study.data, rows)
    result = invoke("run", study.spec, "--out", study.out)
    assert result.exit_code == 0, result.stderr
    # reference: Comparison.gap.reason of strativ.estimators.fit_all on the same rows
    reason = _comparison(rows).gap.reason
    assert reason is not None
    assert f"not compared in standard errors here: {reason}" in " ".join(result.stdout.split())
    # reference: Estimate.weak_first_stage of strativ.estimators.fit_all on the same rows;
    # one warning per outcome when any estimator's first stage is weak, none otherwise
    weak = any(e.weak_first_stage for e in _comparison(rows).estimates)
    assert result.stderr.count("the first stage is weak") == int(weak)


# --- strativ init ---------------------------------------------------------------------------


def test_starter_spec_stays_valid_yaml_with_a_newline_in_a_column_name(tmp_path: Path,
                                                                       invoke) -> None:
    data = tmp_path / "d.csv"
    data.write_text('"site: x","take\nup",y\na,1,1.5\na,0,2.5\nb,1,3.5\nb,0,1.5\n')
    target = tmp_path / "starter.yaml"
    assert invoke("init", data, "--output", target).exit_code == 0
    # source: the header above; every commented line of the starter stays a comment
    assert yaml.safe_load(target.read_text()) == {
        "title": "d", "data": "d.csv",
        "columns": {"outcome": "y", "take_up": "take\nup", "stratum": "site: x"},
        "design": {"assignment": "block", "sampling": "random"}}
    assert '#   "take\\nup"' in target.read_text()


def test_a_csv_of_blank_lines_only_is_a_data_error(study: Study, invoke) -> None:
    study.data.write_text(",,\n\n , ,\n", encoding="utf-8")
    result = invoke("run", study.spec, "--out", study.out)
    # common practice, no source: a table without a header names no column
    assert_clean_failure(result, DATA_ERROR, "data.csv", "only blank lines, no header")
    assert not study.out.exists()

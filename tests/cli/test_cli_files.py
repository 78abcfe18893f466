"""Files in and out: result files follow the umask, an input repeated under another name is
refused, and a stratum built from several columns keeps each column in the result files."""

from __future__ import annotations

import csv
import io
import os
import shutil
import stat
from collections.abc import Iterator
from contextlib import contextmanager
from pathlib import Path

import jsonschema
from cli_support import MINIMAL_SPEC, Study, assert_clean_failure, study_rows, write_csv

from strativ.cli.results import STRATA_COLUMNS, load_schema

DATA_ERROR = 3


@contextmanager
def _umask(mask: int) -> Iterator[None]:
    previous = os.umask(mask)
    try:
        yield
    finally:
        os.umask(previous)


def _mode(path: Path) -> int:
    return stat.S_IMODE(path.stat().st_mode)


def _strata_csv(study: Study) -> list[dict[str, str]]:
    text = (study.out / "strata.csv").read_text(encoding="utf-8")
    return list(csv.DictReader(io.StringIO(text)))


def test_result_files_are_readable_by_others_under_umask_022(study: Study, invoke) -> None:
    with _umask(0o022):
        result = invoke("run", study.spec, "--out", study.out)
    assert result.exit_code == 0, result.stderr
    for name in ("results.json", "strata.csv"):
        # common practice, no source: umask 022 leaves read access for group and others
        assert _mode(study.out / name) & 0o044 == 0o044, (name, oct(_mode(study.out / name)))
    assert _mode(study.out / "history.jsonl") & 0o044 == 0o044
    assert sorted(p.name for p in study.out.iterdir()) == [
        "history.jsonl", "results.json", "strata.csv"]


def test_result_files_follow_a_stricter_umask_too(study: Study, invoke) -> None:
    with _umask(0o077):
        result = invoke("run", study.spec, "--out", study.out)
    assert result.exit_code == 0, result.stderr
    for name in ("results.json", "strata.csv"):
        # common practice, no source: umask 077 keeps a new file to its owner (0600)
        assert _mode(study.out / name) == 0o600, (name, oct(_mode(study.out / name)))


def test_starter_spec_follows_the_umask(study: Study, invoke) -> None:
    target = study.root / "starter.yaml"
    with _umask(0o022):
        result = invoke("init", study.data, "--output", target)
    assert result.exit_code == 0, result.stderr
    # common practice, no source: 0666 less umask 022
    assert _mode(target) == 0o644
    assert [p.name for p in study.root.iterdir() if p.name.startswith(".strativ-")] == []


def test_an_input_with_the_same_content_as_another_is_refused(study: Study, invoke) -> None:
    shutil.copyfile(study.data, study.root / "data_resent.csv")
    study.write_spec(MINIMAL_SPEC.replace("data: data.csv", "data: [data.csv, data_resent.csv]"))
    result = invoke("run", study.spec, "--out", study.out)
    # source: issue 8, a resent wave (identical SHA-256) is refused naming both files
    assert_clean_failure(result, DATA_ERROR,
                         "error: data_resent.csv: the same content as data.csv (SHA-256 ",
                         "so its rows would be counted twice",
                         "hint: list each file once in 'data' of spec.yaml")
    assert not study.out.exists()
    assert_clean_failure(invoke("check", study.spec), DATA_ERROR, "data_resent.csv: the same "
                         "content as data.csv")


def test_a_repeated_input_with_the_same_name_is_named_by_its_path(study: Study, invoke) -> None:
    (study.root / "resent").mkdir()
    shutil.copyfile(study.data, study.root / "resent" / "data.csv")
    study.write_spec(MINIMAL_SPEC.replace("data: data.csv", "data: [data.csv, resent/data.csv]"))
    result = invoke("run", study.spec, "--out", study.out)
    assert_clean_failure(result, DATA_ERROR,
                         f"this file ({study.root / 'resent' / 'data.csv'}) has the same "
                         f"content as {study.root / 'data.csv'}")


def test_files_that_differ_are_stacked(study: Study, invoke) -> None:
    rows = study_rows()
    write_csv(study.data, rows[:40])
    write_csv(study.root / "more.csv", rows[40:])
    study.write_spec(MINIMAL_SPEC.replace("data: data.csv", "data: [data.csv, more.csv]"))
    result = invoke("run", study.spec, "--out", study.out)
    assert result.exit_code == 0, result.stderr
    # source: study_rows, 76 rows split 40 + 36
    assert [f["rows"] for f in study.results()["inputs"]] == [40, 36]


def _two_column_study(study: Study, second: str = "wave") -> None:
    rows = study_rows()
    for i, row in enumerate(rows):
        row[second] = i % 2
        if row["site"] == "west":
            row["offer"] = 0
    header = ("unit", "site", second, "offer", "take_up", "y", "age")
    write_csv(study.data, rows, header=header)
    study.write_spec(MINIMAL_SPEC.replace("stratum: site", f"stratum: [site, {second}]"))


def test_a_stratum_from_several_columns_keeps_each_column_in_results_json(study: Study,
                                                                          invoke) -> None:
    _two_column_study(study)
    result = invoke("run", study.spec, "--out", study.out)
    assert result.exit_code == 0, result.stderr
    doc = study.results()
    jsonschema.Draft202012Validator(load_schema()).validate(doc)
    # source: study_rows, four sites by two waves; west offered to no one, so excluded
    assert len(doc["strata"]) == 6 and len(doc["exclusions"]) == 2
    for row in doc["strata"] + doc["exclusions"]:
        site, wave = row["label"].split(" / ")
        assert row["stratum_columns"] == {"site": site, "wave": int(wave)}, row
        assert list(row["stratum_columns"]) == ["site", "wave"]
    assert {r["stratum_columns"]["site"] for r in doc["exclusions"]} == {"west"}


def test_a_stratum_from_several_columns_keeps_each_column_in_strata_csv(study: Study,
                                                                        invoke) -> None:
    _two_column_study(study)
    assert invoke("run", study.spec, "--out", study.out).exit_code == 0
    table = _strata_csv(study)
    header = list(table[0])
    # source: cli/results.py, the stratum columns follow the combined label
    assert header == [*STRATA_COLUMNS[:2], "site", "wave", *STRATA_COLUMNS[2:]]
    assert len(table) == 8
    for row in table:
        assert row["stratum"] == f"{row['site']} / {row['wave']}", row
    assert [(r["site"], r["used"]) for r in table if r["used"] == "false"] == [
        ("west", "false"), ("west", "false")]


def test_a_stratum_column_named_like_a_strata_csv_column_gets_a_prefix(study: Study,
                                                                       invoke) -> None:
    _two_column_study(study, second="n")
    assert invoke("run", study.spec, "--out", study.out).exit_code == 0
    table = _strata_csv(study)
    assert list(table[0])[:4] == ["outcome", "stratum", "site", "stratum.n"]
    assert all(r["stratum"] == f"{r['site']} / {r['stratum.n']}" for r in table)
    # the count column keeps its meaning
    assert all(int(r["n"]) > 1 for r in table)
    assert study.results()["strata"][0]["stratum_columns"]["n"] in (0, 1)


def test_a_stratum_from_one_column_adds_no_columns(study: Study, invoke) -> None:
    assert invoke("run", study.spec, "--out", study.out).exit_code == 0
    assert tuple(_strata_csv(study)[0]) == STRATA_COLUMNS
    doc = study.results()
    assert all("stratum_columns" not in r for r in doc["strata"] + doc["exclusions"])

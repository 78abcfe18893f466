"""Run history, `--if-changed`, `--fail-on` gates and quiet runs that keep their warnings."""

from __future__ import annotations

import json
import os

import pytest
from cli_support import MINIMAL_SPEC, Study, study_rows, write_csv

from strativ.cli.gates import EXIT_GATE, Gate, failed_gates, parse_gates
from strativ.cli.history import HISTORY_NAME, append_record, read_history


def _records(study: Study) -> list[dict]:
    lines = (study.out / HISTORY_NAME).read_text().splitlines()
    return [json.loads(line) for line in lines]


def test_every_run_appends_one_record_with_fingerprints_and_estimates(study: Study,
                                                                       invoke) -> None:
    for _ in range(2):
        assert invoke("run", study.spec, "--out", study.out, "-q").exit_code == 0
    records = _records(study)
    assert len(records) == 2
    doc = study.results()
    last = records[-1]
    # reference: the same run's results.json (the record copies its numbers)
    assert last["created"] == doc["created"]
    assert last["files"][0]["sha256"] == doc["inputs"][0]["sha256"]
    assert last["rows_kept"] == doc["rows"]["kept"]
    assert [e["estimate"] for e in last["estimates"]] == [e["estimate"] for e in doc["estimates"]]
    assert [e["interval"] for e in last["estimates"]] == [e["interval"] for e in doc["estimates"]]
    assert last["tool_version"] == doc["tool"]["version"]
    assert len(last["spec_sha256"]) == 64


def test_if_changed_skips_an_unchanged_run_and_reruns_after_a_change(study: Study,
                                                                     invoke) -> None:
    assert invoke("run", study.spec, "--out", study.out, "-q").exit_code == 0
    before = (study.out / "results.json").read_bytes()
    skipped = invoke("run", study.spec, "--out", study.out, "--if-changed")
    assert skipped.exit_code == 0
    assert "unchanged since the run of" in skipped.stderr and skipped.stdout == ""
    assert (study.out / "results.json").read_bytes() == before
    assert len(_records(study)) == 1
    # a changed input: one outcome value differs
    rows = study_rows()
    rows[0]["y"] = rows[0]["y"] + 1
    write_csv(study.data, rows)
    rerun = invoke("run", study.spec, "--out", study.out, "--if-changed", "-q")
    assert rerun.exit_code == 0 and "unchanged" not in rerun.stderr
    assert len(_records(study)) == 2
    # a changed spec: another level
    study.write_spec(MINIMAL_SPEC + "inference:\n  level: 0.9\n")
    assert invoke("run", study.spec, "--out", study.out, "--if-changed", "-q").exit_code == 0
    assert len(_records(study)) == 3
    # a deleted result file is written again even when nothing else changed
    (study.out / "results.json").unlink()
    assert invoke("run", study.spec, "--out", study.out, "--if-changed", "-q").exit_code == 0
    assert (study.out / "results.json").exists() and len(_records(study)) == 4


def test_a_damaged_last_record_is_reported_kept_and_followed_on_a_new_line(study: Study,
                                                                            invoke) -> None:
    assert invoke("run", study.spec, "--out", study.out, "-q").exit_code == 0
    path = study.out / HISTORY_NAME
    with path.open("ab") as handle:
        handle.write(b'{"created": "2026-01-01", "spec_sha')  # a run killed mid-write
    history = read_history(study.out)
    assert len(history.records) == 1 and not history.ends_cleanly
    assert history.damaged == ((2, "the line is incomplete (a run stopped while writing it)"),)
    result = invoke("run", study.spec, "--out", study.out, "-q", "--if-changed")
    assert result.exit_code == 0
    assert "history.jsonl, line 2:" in result.stderr and "kept" in result.stderr
    lines = path.read_text().splitlines()
    assert lines[1] == '{"created": "2026-01-01", "spec_sha'
    assert len(lines) == 3 and json.loads(lines[2])["rows_kept"] == 76
    again = read_history(study.out)
    assert len(again.records) == 2 and again.damaged == ((2, "the line is not valid JSON"),)


def test_append_is_one_write_in_append_mode(tmp_path) -> None:
    append_record(tmp_path, {"spec_sha256": "a", "inputs": []})
    append_record(tmp_path, {"spec_sha256": "b", "inputs": []}, ends_cleanly=False)
    text = (tmp_path / HISTORY_NAME).read_text()
    # the record after a damaged line starts on a new line; the blank line is skipped
    assert text == '{"inputs":[],"spec_sha256":"a"}\n\n{"inputs":[],"spec_sha256":"b"}\n'
    assert [r["spec_sha256"] for r in read_history(tmp_path).records] == ["a", "b"]
    mode = os.stat(tmp_path / HISTORY_NAME).st_mode & 0o777
    assert mode == 0o666 & ~_umask()


def _umask() -> int:
    mask = os.umask(0)
    os.umask(mask)
    return mask


def test_gates_parse_and_refuse_unknown_conditions() -> None:
    assert parse_gates(["first-stage-f<10", "gap > 2.5", "balance", "excluded-strata",
                        "first-stage-f<1e4"]) == (
        Gate("first-stage-f", 10.0), Gate("gap", 2.5), Gate("balance", None),
        Gate("excluded-strata", None), Gate("first-stage-f", 1e4))
    with pytest.raises(Exception, match="is not a condition strativ knows"):
        parse_gates(["first_stage<10"])


def test_gates_on_a_document() -> None:
    # common practice, no source: thresholds compared on numbers written in the test
    doc = {
        "estimates": [{"outcome": "y", "estimator": "fixed_effects", "first_stage_f": 12.0},
                      {"outcome": "y", "estimator": "weighted", "first_stage_f": None}],
        "comparisons": [{"outcome": "y", "gap": {"t": -2.4}}],
        "exclusions": [{"outcome": "y", "label": "a"}, {"outcome": "y", "label": "b"}],
        "covariates": {"covariates": [{"covariate": "age", "flagged": True},
                                      {"covariate": "size", "flagged": False}]},
    }
    failed = dict((g.text, f) for g, f in failed_gates(
        parse_gates(["first-stage-f<10", "gap>2", "gap>3", "excluded-strata", "balance"]), doc))
    assert failed == {
        "first-stage-f<10": ["y, weighted: first-stage F undefined"],
        "gap>2": ["y: the estimates differ by 2.4 standard errors"],
        "excluded-strata": ["y: 2 excluded strata"],
        "balance": ["age: standardized difference flagged"],
    }


def test_a_failing_gate_exits_4_after_writing_the_results(study: Study, invoke) -> None:
    result = invoke("run", study.spec, "--out", study.out, "-q", "--fail-on", "gap>0",
                    "--fail-on", "first-stage-f<0.5")
    doc = study.results()
    t = abs(doc["comparisons"][0]["gap"]["t"])
    assert t > 0  # the study's strata have different effects and offer shares
    assert result.exit_code == EXIT_GATE == 4
    assert "gate failed: gap>0" in result.stderr
    assert "first-stage-f" not in result.stderr
    assert len(_records(study)) == 1
    passing = invoke("run", study.spec, "--out", study.out, "-q", "--fail-on",
                     f"gap>{t * 1.01}")
    assert passing.exit_code == 0 and passing.stderr == ""
    bad = invoke("run", study.spec, "--out", study.out, "--fail-on", "gapp>2")
    assert bad.exit_code == 2 and "is not a condition strativ knows" in bad.stderr


def test_quiet_keeps_warnings(study: Study, invoke) -> None:
    rows = study_rows()
    rows[3]["take_up"] = None  # one row dropped for a missing take-up: a warning
    write_csv(study.data, rows)
    study.write_spec(MINIMAL_SPEC + "missing:\n  drop_incomplete_rows: true\n")
    loud = invoke("run", study.spec, "--out", study.out)
    assert loud.exit_code == 0, loud.output
    warning = [line for line in loud.stderr.splitlines() if line.startswith("warning")]
    assert warning
    quiet = invoke("run", study.spec, "--out", study.out, "--quiet")
    assert quiet.exit_code == 0 and quiet.stdout == ""
    assert [line for line in quiet.stderr.splitlines() if line.startswith("warning")] == warning
    assert "wrote" not in quiet.stderr


def test_check_quiet_prints_only_problems(study: Study, invoke) -> None:
    loud = invoke("check", study.spec)
    assert loud.exit_code == 0 and loud.stdout
    quiet = invoke("check", study.spec, "--quiet")
    assert quiet.exit_code == 0 and quiet.stdout == "" and quiet.stderr == ""
    study.write_spec(MINIMAL_SPEC.replace("site", "sitee"))
    failed = invoke("check", study.spec, "--quiet")
    assert failed.exit_code == 3 and "sitee" in failed.stderr

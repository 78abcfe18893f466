"""`strativ compare`: two results files side by side (cli/compare.py).

Real results files come from runs of the demo spec: the three committed rounds, and the same
three plus a fourth round drawn by demo_data/generate.py with another seed. The precise checks
edit one number of a copy of a real results.json and compare against the two files' own
values.
"""

from __future__ import annotations

import copy
import io
import json
from pathlib import Path
from typing import Any

import pytest
from cli_support import DEMO_SPEC, ENV, REPO
from demo_support import load_generator
from rich.console import Console
from typer.testing import CliRunner

from strativ.cli.app import app
from strativ.cli.compare import (
    EXIT_SHIFT,
    ResultsComparison,
    compare_files,
    load_results,
)
from strativ.cli.compare_render import render_comparison
from strativ.cli.errors import EXIT_USAGE, UsageError


def _generator():
    """demo_data/generate.py, imported by path (demo_data is not a package)."""
    return load_generator("strativ_demo_generate_compare")


@pytest.fixture(scope="module")
def runs(tmp_path_factory: pytest.TempPathFactory) -> dict[str, Path]:
    """results.json of the demo (three rounds) and of the demo with a fourth round."""
    root = tmp_path_factory.mktemp("compare")
    four = root / "four_rounds"
    four.mkdir()
    for name in ("round_1.csv", "round_2.csv", "round_3.csv"):
        (four / name).write_bytes((REPO / "demo_data" / name).read_bytes())
    generate = _generator()
    # a fourth lottery round: round 3 of a draw with another seed
    (four / "round_4.csv").write_text(generate.round_csv(generate.simulate(generate.SEED + 1), 3))
    spec = DEMO_SPEC.read_text().replace("../demo_data/", "").replace("../out/demo", "out")
    (four / "demo.yaml").write_text(spec)
    runner = CliRunner()
    for spec_path, out in ((DEMO_SPEC, root / "three"), (four / "demo.yaml", root / "four")):
        result = runner.invoke(app, ["run", str(spec_path), "-q", "--out", str(out)], env=ENV)
        assert result.exit_code == 0, result.stderr
    return {"three": root / "three" / "results.json", "four": root / "four" / "results.json",
            "round_4": four / "round_4.csv"}


def _doc(path: Path) -> dict[str, Any]:
    return json.loads(path.read_text(encoding="utf-8"))


def _write(path: Path, doc: Any) -> Path:
    path.write_text(json.dumps(doc, indent=2), encoding="utf-8")
    return path


def _render(report: ResultsComparison, *, width: int = 80, **options: Any) -> str:
    buffer = io.StringIO()
    console = Console(file=buffer, width=width, no_color=True, highlight=False)
    render_comparison(console, report, **options)
    return buffer.getvalue()


def test_identical_files_show_no_shift_and_exit_0(runs) -> None:
    doc = _doc(runs["three"])
    report = compare_files(runs["three"], runs["three"])
    # reference: the file's own estimates and adjusted estimates, each compared with itself
    assert len(report.estimates) == len(doc["estimates"]) + len(doc["adjusted_estimates"])
    assert all(e.shift == 0 and e.shift_in_std_errors == 0 for e in report.estimates)
    assert not report.added_estimates and not report.removed_estimates
    # reference: the file's own input list
    assert report.inputs.unchanged == len(doc["inputs"])
    assert not (report.inputs.added or report.inputs.removed or report.inputs.changed)
    assert all(c.difference == 0 for c in report.counts)
    assert not (report.spec.changed or report.spec.added or report.spec.removed)
    assert not report.tool_changed
    # common practice, no source: no movement passes even a zero threshold (strictly beyond)
    assert report.exit_code(fail_beyond=0.0) == 0
    assert report.exit_code(fail_beyond=None) == 0
    json.dumps(report.to_dict(), allow_nan=False)


def test_an_edited_estimate_shifts_by_the_hand_computed_amount(runs, tmp_path: Path) -> None:
    old = _doc(runs["three"])
    new = copy.deepcopy(old)
    new["estimates"][1]["estimate"] += 7.25
    new["adjusted_estimates"][0]["fit"]["estimate"] -= 0.5
    report = compare_files(runs["three"], _write(tmp_path / "new.json", new))
    edited = {(e.outcome, e.estimator, e.adjusted): e for e in report.estimates}
    for adjusted, o, n in ((False, old["estimates"][1], new["estimates"][1]),
                           (True, old["adjusted_estimates"][0]["fit"],
                            new["adjusted_estimates"][0]["fit"])):
        shift = edited[o["outcome"], o["estimator"], adjusted]
        # reference: the two files' own numbers, computed here
        assert shift.old == o["estimate"] and shift.new == n["estimate"]
        assert shift.shift == n["estimate"] - o["estimate"]
        assert shift.shift_in_std_errors == (n["estimate"] - o["estimate"]) / o["std_error"]
        assert shift.reason is None
        assert list(shift.old_interval) == o["interval"]
    moved = [e for e in report.estimates if e.shift != 0]
    # by construction: exactly the two edited estimates moved
    assert len(moved) == 2


def _shifted_by(runs, tmp_path: Path, units: float) -> tuple[ResultsComparison, dict]:
    old = _doc(runs["three"])
    new = copy.deepcopy(old)
    target = new["estimates"][0]
    target["estimate"] += units * target["std_error"]
    return compare_files(runs["three"], _write(tmp_path / "new.json", new)), old["estimates"][0]


def test_the_threshold_gates_the_exit_code(runs, tmp_path: Path) -> None:
    report, old = _shifted_by(runs, tmp_path, 2.5)
    moved = report.estimates[0]
    # reference: the edit above moved the first estimate by 2.5 of its own standard errors
    assert moved.shift_in_std_errors == pytest.approx(2.5, rel=1e-12)
    assert report.exit_code(fail_beyond=2.0) == EXIT_SHIFT == 4
    assert report.beyond(2.0) == (moved,)
    assert report.exit_code(fail_beyond=3.0) == 0
    assert report.exit_code(fail_beyond=None) == 0
    # source: the brief, negative direction counts too (|shift| / old se)
    down, _ = _shifted_by(runs, tmp_path, -2.5)
    assert down.exit_code(fail_beyond=2.0) == EXIT_SHIFT
    for bad in (-1.0, float("nan"), float("inf")):
        with pytest.raises(UsageError, match="0 or more"):
            report.exit_code(fail_beyond=bad)
    screen = _render(report, fail_beyond=2.0)
    assert "! moved more than 2 old standard errors" in screen
    assert sum(line.endswith(" !") for line in screen.splitlines()) == 1
    assert "! moved" not in _render(report, fail_beyond=3.0)


def test_a_missing_or_zero_old_standard_error_gives_no_units_with_a_reason(runs,
                                                                           tmp_path: Path) -> None:
    old = _doc(runs["three"])
    old["estimates"][0]["std_error"] = None
    old["estimates"][1]["std_error"] = 0.0
    new = copy.deepcopy(old)
    new["estimates"][0]["estimate"] += 100.0
    new["estimates"][1]["estimate"] += 100.0
    new["estimates"][2]["estimate"] = None
    report = compare_files(_write(tmp_path / "old.json", old), _write(tmp_path / "new.json", new))
    first, second, third = report.estimates[:3]
    # reference: the edits above
    assert first.shift == new["estimates"][0]["estimate"] - old["estimates"][0]["estimate"]
    assert first.shift_in_std_errors is None and "undefined" in first.reason
    assert second.shift_in_std_errors is None and "zero" in second.reason
    assert third.shift is None and "undefined in the new file" in third.reason
    # common practice, no source: a shift that cannot be measured in standard errors does not
    # trip the threshold; it is listed with its reason instead
    assert report.exit_code(fail_beyond=0.0) == 0
    screen = _render(report)
    assert "no shift in standard errors, the old standard error is zero" in screen


def test_added_removed_and_changed_inputs(runs, tmp_path: Path) -> None:
    old = _doc(runs["three"])
    new = copy.deepcopy(old)
    gone = new["inputs"].pop(0)
    new["inputs"][0]["sha256"] = "0" * 64
    new["inputs"].append({**gone, "file": "round_9.csv", "path": "/elsewhere/round_9.csv",
                          "rows": 17})
    report = compare_files(runs["three"], _write(tmp_path / "new.json", new))
    inputs = report.inputs
    # reference: the edits above
    assert [f.name for f in inputs.added] == ["round_9.csv"] and inputs.added[0].rows == 17
    assert [f.name for f in inputs.removed] == [gone["file"]]
    assert [(a.name, b.sha256) for a, b in inputs.changed] == [(old["inputs"][1]["file"],
                                                                "0" * 64)]
    assert inputs.unchanged == len(old["inputs"]) - 2
    screen = _render(report)
    assert "input files: 1 added, 1 removed, 1 changed, 1 unchanged" in screen
    assert f"removed  {gone['file']} ({gone['rows']:,} rows)" in screen


def test_estimates_spec_keys_and_tool_version_in_one_file_only(runs, tmp_path: Path) -> None:
    old = _doc(runs["three"])
    new = copy.deepcopy(old)
    dropped = new["estimates"].pop()
    new["adjusted_estimates"] = []
    new["spec"]["inference"]["level"] = 0.9
    new["spec"]["extra_section"] = {}
    del new["spec"]["sensitivity"]
    new["tool"]["version"] = "9.9.9"
    report = compare_files(runs["three"], _write(tmp_path / "new.json", new))
    removed = {(e.outcome, e.estimator, e.adjusted) for e in report.removed_estimates}
    # reference: the edits above
    assert (dropped["outcome"], dropped["estimator"], False) in removed
    assert len(removed) == 1 + len(old["adjusted_estimates"])
    assert not report.added_estimates
    assert report.spec.changed == ("inference",)
    assert report.spec.added == ("extra_section",) and report.spec.removed == ("sensitivity",)
    assert report.tool_changed
    screen = _render(report)
    assert f"strativ {old['tool']['version']} \u2192 9.9.9" in screen
    assert "spec  changed inference; only old sensitivity; only new extra_section" in screen
    assert "only in the old file:" in screen
    back = compare_files(_write(tmp_path / "new.json", new), runs["three"])
    # reference: the same two files in the other order
    assert len(back.added_estimates) == len(report.removed_estimates)


def test_demo_against_four_rounds_lists_the_new_file_and_rows(runs) -> None:
    old, new = _doc(runs["three"]), _doc(runs["four"])
    report = compare_files(runs["three"], runs["four"].parent)  # a run folder stands for its file
    assert [f.name for f in report.inputs.added] == ["round_4.csv"]
    # by construction: the three committed rounds were copied byte for byte
    assert report.inputs.unchanged == 3 and not report.inputs.changed
    counts = {(c.what, c.outcome): c for c in report.counts}
    lines = runs["round_4"].read_text().splitlines()
    # reference: data lines of round_4.csv (header excluded)
    assert counts["rows read", None].difference == len(lines) - 1
    for outcome in ("gas_therms", "behind_on_bills"):
        # reference: the two files' own per-stratum tables
        assert counts["strata used", outcome].difference == \
            sum(s["outcome"] == outcome for s in new["strata"]) - \
            sum(s["outcome"] == outcome for s in old["strata"])
    for shift, o, n in zip(report.estimates, old["estimates"], new["estimates"], strict=False):
        # reference: the two files' own numbers
        assert shift.shift == n["estimate"] - o["estimate"]
        assert shift.shift_in_std_errors == (n["estimate"] - o["estimate"]) / o["std_error"]
    # by construction: the copied spec names other data files and another output folder
    assert {"data_files", "output"} <= set(report.spec.changed)
    screen = _render(report, fail_beyond=2.0)
    assert "added    round_4.csv" in screen
    assert max(len(line.rstrip()) for line in screen.splitlines()) <= 80
    assert "\u2026" not in screen
    # common practice, no source: every outcome gets its own section
    assert screen.count("outcome gas_therms") == 1 and screen.count("outcome behind_on_bills") == 1


def test_render_keeps_every_line_within_narrow_consoles(runs, tmp_path: Path) -> None:
    new = _doc(runs["four"])
    for e in new["estimates"]:
        e["estimate"] *= -12345.678  # wide numbers and intervals
        e["interval"] = [-1.2345e-9, 9.8767e12]
    report = compare_files(runs["three"], _write(tmp_path / "new.json", new))
    for width in (80, 60):
        screen = _render(report, width=width)
        assert max(len(line.rstrip()) for line in screen.splitlines()) <= width
        assert "\u2026" not in screen
        # source: the edit above to four significant digits, as the run report prints
        assert "9.877e+12]" in screen


@pytest.mark.parametrize(("content", "fragment"), [
    (None, "not found"),
    ("{not json", "not JSON (line 1, column 2)"),
    ("[1, 2]", "not a strativ results file"),
    ('{"title": "x", "rows": {}}', "not a strativ results file"),
    ('{"schema_version": "2.0", "tool": {"name": "other"}}', "not a strativ results file"),
    ('{"schema_version": "1.0", "tool": {"name": "strativ", "version": "0.0.1"}}',
     "results layout 1.0, but this strativ reads layout 2.x"),
    ('{"schema_version": "2.0", "tool": {"name": "strativ", "version": "0.1.0"}}',
     "damaged ('inputs' missing)"),
])
def test_bad_files_are_usage_errors_naming_the_file(runs, tmp_path: Path, content: str | None,
                                                    fragment: str) -> None:
    bad = tmp_path / "bad.json"
    if content is not None:
        bad.write_text(content, encoding="utf-8")
    with pytest.raises(UsageError) as caught:
        compare_files(runs["three"], bad)
    text = str(caught.value)
    # source: cli/errors.py, a usage error exits 2; the message names the file and a fix
    assert caught.value.exit_code == EXIT_USAGE
    assert f"new file {bad}" in text and fragment in text and "hint:" in text


def test_a_folder_without_results_and_a_binary_file_are_refused(tmp_path: Path) -> None:
    with pytest.raises(UsageError, match="the folder holds no results.json"):
        load_results(tmp_path, role="old")
    binary = tmp_path / "results.json"
    binary.write_bytes(b"\xff\xfe\x00\x81")
    with pytest.raises(UsageError, match="not a text file"):
        load_results(binary, role="old")

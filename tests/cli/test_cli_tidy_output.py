"""The screen and results.json say the same thing, tidily: row counts with one meaning, no
negative zero, numbers that parse when copied, singular and plural right, no trailing
spaces, comma-separated formats, and no stale result file from an earlier run."""

from __future__ import annotations

import json
import re
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd
from cli_support import DEMO_SPEC, ENV, REPO
from typer.testing import CliRunner

from strativ.cli.app import app


def _invoke(*args: str, code: int = 0) -> Any:
    result = CliRunner().invoke(app, list(args), env=ENV)
    assert result.exit_code == code, result.output
    return result


def _excluded_design(root: Path) -> Path:
    """Four strata of 100 rows; s3 offers everyone (excluded); 3 outcomes missing in each
    stratum's offered rows."""
    rng = np.random.default_rng(2)
    frames = []
    for s in range(4):
        z = (np.arange(100) < 50).astype(int) if s < 3 else np.ones(100, dtype=int)
        d = ((rng.random(100) < 0.7) & (z == 1)).astype(int)
        y = d + rng.standard_normal(100)
        y[:3] = np.nan
        frames.append(pd.DataFrame({"s": f"s{s}", "z": z, "d": d, "y": y}))
    pd.concat(frames).to_csv(root / "ex.csv", index=False)
    spec = root / "ex.yaml"
    spec.write_text("data: ex.csv\ncolumns: {outcome: y, take_up: d, offer: z, stratum: s}\n",
                    encoding="utf-8")
    return spec


def test_rows_used_mean_the_same_on_screen_and_in_the_file(tmp_path) -> None:
    result = _invoke("run", str(_excluded_design(tmp_path)), "--out", str(tmp_path / "out"))
    doc = json.loads((tmp_path / "out" / "results.json").read_text(encoding="utf-8"))
    c = doc["comparisons"][0]
    # by construction: 3 strata of 100 rows with 3 missing outcomes each are used; s3's 97
    # rows with the outcome are excluded (before, rows_used counted them: 388)
    assert (c["rows_used"], c["rows_in_excluded_strata"], c["rows_missing_outcome"]) == \
        (291, 97, 12)
    assert c["rows_used"] + c["rows_in_excluded_strata"] + c["rows_missing_outcome"] == \
        doc["rows"]["kept"] == 400
    assert all(e["n_units"] == c["rows_used"] for e in doc["estimates"])
    flat = " ".join(result.stdout.split())
    assert "291 rows used in 3 strata; 1 stratum excluded (97 rows); 12 rows without this " \
           "outcome left out" in flat
    assert "400 rows kept" in flat


def test_the_demo_screen_has_no_trailing_space_and_every_number_parses(tmp_path) -> None:
    spec = tmp_path / "spec.yaml"
    spec.write_text(DEMO_SPEC.read_text(encoding="utf-8").replace(
        "../demo_data/", str(REPO / "demo_data") + "/"), encoding="utf-8")
    result = _invoke("run", str(spec), "--out", str(tmp_path / "out"))
    for stream in (result.stdout, result.stderr):
        assert all(line == line.rstrip() for line in stream.splitlines())
    numbers = re.findall(r"[\u2212-]?\d[\d,]*(?:\.\d+)?(?:e[\u2212+-]?\d+)?", result.stdout)
    assert len(numbers) > 300
    for text in numbers:
        # common practice, no source: a number copied from the screen parses once the
        # typographic minus is made ASCII (and a grouping comma removed)
        float(text.replace("\u2212", "-").replace(",", ""))
    assert not re.search(r"e\u2212", result.stdout)  # an exponent's sign is ASCII


def test_no_negative_zero_in_files_or_on_screen() -> None:
    import math

    from strativ.cli.reading import format_number
    from strativ.cli.report_tables import plain_number
    from strativ.cli.results import _cell
    from strativ.estimators.results import clean

    # by construction: -0.0 equals 0.0 but prints with a sign that is not there
    assert math.copysign(1.0, clean(-0.0)) == 1.0
    assert clean({"a": [-0.0]}) == {"a": [0.0]} and json.dumps(clean(-0.0)) == "0.0"
    assert _cell(-0.0) == "0.0" and _cell(-1.5) == "-1.5"
    assert format_number(-0.0) == "0" and plain_number(-0.0) == "0"
    assert plain_number(-0.00001) == "-1.000e-05" and plain_number(-0.00004, digits=1) != "-0"


def test_formats_may_be_comma_separated(tmp_path) -> None:
    spec = _excluded_design(tmp_path)
    _invoke("run", str(spec), "--out", str(tmp_path / "out"), "-q", "--format", "json,md")
    assert sorted(p.name for p in (tmp_path / "out").iterdir()) == [
        "history.jsonl", "report.md", "results.json"]
    bad = _invoke("run", str(spec), "-q", "--format", "json,pdf", code=2)
    assert "pdf" in bad.stderr


def test_a_run_with_fewer_formats_removes_the_stale_files(tmp_path) -> None:
    spec = _excluded_design(tmp_path)
    out = tmp_path / "out"
    _invoke("run", str(spec), "--out", str(out), "-q", "--format", "json,csv,md")
    (out / "notes.txt").write_text("mine", encoding="utf-8")
    result = _invoke("run", str(spec), "--out", str(out), "-q", "--format", "json")
    assert sorted(p.name for p in out.iterdir()) == ["history.jsonl", "notes.txt",
                                                     "results.json"]
    assert "removed strata.csv, report.md left from an earlier run" in \
        " ".join(result.stderr.split())


def test_an_exponent_keeps_an_ascii_minus() -> None:
    from strativ.cli.reading import format_number

    # common practice, no source: the sign in front may be typographic, the exponent's not
    assert format_number(-1.218e-6) == "\u22121.218e-06"
    assert float(format_number(-1.218e-6).replace("\u2212", "-")) == -1.218e-6
    assert format_number(3.5e9) == "3.500e+09" and format_number(-2.5) == "\u22122.500"


def test_counts_take_the_noun_their_number_needs(tmp_path) -> None:
    from strativ.cli.counting import count

    # common practice, no source: English singular for one, plural otherwise
    assert count(1, "stratum", "strata") == "1 stratum"
    assert count(0, "stratum", "strata") == "0 strata"
    assert count(1234, "row") == "1,234 rows" and count(1, "row") == "1 row"
    frame = pd.DataFrame({"s": ["a"] * 6, "z": [1, 1, 1, 0, 0, 0], "d": [1, 1, 0, 0, 0, 1],
                          "y": [1.0, 2.0, None, 0.5, 0.1, 0.3]})
    frame.to_csv(tmp_path / "one.csv", index=False)
    spec = tmp_path / "one.yaml"
    spec.write_text("data: one.csv\ncolumns: {outcome: y, take_up: d, offer: z, "
                    "stratum: s}\n", encoding="utf-8")
    result = _invoke("run", str(spec), "--out", str(tmp_path / "out"))
    flat = " ".join((result.stdout + result.stderr).split())
    # by construction: one stratum, one row without the outcome
    assert "5 rows used in 1 stratum; 0 strata excluded (0 rows); 1 row without this " \
           "outcome left out" in flat
    assert "is missing in 1 row (1 offered, 0 not offered); it is left out" in flat

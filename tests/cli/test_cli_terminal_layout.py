"""The terminal report at 80 and 120 columns: no table cuts or wraps a number, no line runs
past the width, and long stratum labels wrap instead of squeezing the numbers."""

from __future__ import annotations

import re
from collections import Counter
from pathlib import Path

import pandas as pd
import pytest
from cli_support import DEMO_SPEC, ENV, MINIMAL_SPEC, REPO, Study, write_csv
from typer.testing import CliRunner, Result

from strativ.cli.app import app

LABEL = "Upper valley energy service district number {}"
NUMBER = re.compile(r"(?<!\w)[\u2212+-]?\d[\d,]*(?:\.\d+)?(?:e[+-]\d+)?%?")
"""A number on screen; digits inside a word (the wave in 'round_1') are not one."""
# common practice, no source: a terminal narrower than this is not supported
WIDE = 250


def _at(width: int, *args: str | Path) -> Result:
    env = {**ENV, "COLUMNS": str(width)}
    return CliRunner().invoke(app, [str(a) for a in args], env=env)


def _numbers(text: str) -> Counter:
    return Counter(NUMBER.findall(text))


def _long_label_study(root: Path) -> Study:
    rows = []
    for s in range(6):
        for i in range(12):
            offer = int(i < 3 + s)
            take_up = int((i % 4 != 3) if offer else (i % 5 == 2))
            rows.append({"unit": f"{s}-{i}", "site": LABEL.format(s),
                         "offer": offer, "take_up": take_up,
                         "y": round(1e6 * (10 + (1 + s) * take_up + (i * 7 % 5) / 3), 2)})
    study = Study(root)
    write_csv(study.data, rows, header=("unit", "site", "offer", "take_up", "y"))
    study.write_spec(MINIMAL_SPEC)
    return study


@pytest.mark.parametrize("width", [80, 120])
def test_demo_report_keeps_every_number_at_common_widths(tmp_path: Path, width: int) -> None:
    wide = _at(WIDE, "run", DEMO_SPEC, "--out", tmp_path / "wide")
    narrow = _at(width, "run", DEMO_SPEC, "--out", tmp_path / "narrow")
    assert wide.exit_code == 0 and narrow.exit_code == 0, narrow.stderr
    assert "\u2026" not in narrow.stdout
    assert max(len(line.rstrip()) for line in narrow.stdout.splitlines()) <= width
    # reference: the same run printed 250 columns wide, where nothing needs to wrap
    assert _numbers(narrow.stdout) == _numbers(wide.stdout)
    lines = narrow.stdout.splitlines()
    # reference: Cedar Flats in round 1, ITT and first stage as differences of arm means
    # computed here from the demo file
    rows = pd.read_csv(REPO / "demo_data" / "round_1.csv")
    cedar = rows[rows["district"] == "Cedar Flats"].groupby("won_lottery")
    itt = cedar["gas_therms"].mean().diff().iloc[-1]
    first = cedar["retrofitted"].mean().diff().iloc[-1]
    itt_text = f"{itt:.2f}".replace("-", "\u2212")
    assert any(line.startswith("Cedar Flats / round_1") and itt_text in line
               and f"{first:.3f}" in line for line in lines), (itt_text, first)


@pytest.mark.parametrize("width", [80, 120])
def test_long_stratum_labels_wrap_instead_of_cutting_numbers(tmp_path: Path,
                                                             width: int) -> None:
    study = _long_label_study(tmp_path)
    wide = _at(WIDE, "run", study.spec, "--out", study.out)
    narrow = _at(width, "run", study.spec, "--out", study.out)
    assert wide.exit_code == 0 and narrow.exit_code == 0, narrow.stderr
    assert "\u2026" not in narrow.stdout
    assert max(len(line.rstrip()) for line in narrow.stdout.splitlines()) <= width
    # reference: the same run printed 250 columns wide; a split table repeats the labels (and
    # the digits in them), so the numbers are compared as a set
    assert set(_numbers(narrow.stdout)) == set(_numbers(wide.stdout))


def test_check_table_fits_80_columns_with_long_labels(tmp_path: Path) -> None:
    study = _long_label_study(tmp_path)
    probabilities = "".join(f"    {LABEL.format(s)}: {(3 + s) / 12:.4f}\n" for s in range(6))
    study.write_spec(MINIMAL_SPEC + "design:\n  offer_probability:\n" + probabilities)
    wide, narrow = _at(WIDE, "check", study.spec), _at(80, "check", study.spec)
    assert wide.exit_code == 0 and narrow.exit_code == 0, narrow.stderr
    assert "\u2026" not in narrow.stdout
    assert max(len(line.rstrip()) for line in narrow.stdout.splitlines()) <= 80
    # reference: the same check printed 250 columns wide
    assert _numbers(narrow.stdout) == _numbers(wide.stdout)

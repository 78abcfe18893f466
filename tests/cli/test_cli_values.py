"""Cell parsers: accepted binary codes, numbers, missing tokens and labels."""

from __future__ import annotations

import math

import numpy as np

from strativ.cli.values import is_missing, parse_binary, parse_label, parse_number


def test_binary_accepts_only_numbers_equal_to_0_1_and_true_false() -> None:
    cells = ["0", "1", " true ", "FALSE", "True", "yes", "1.0", "2", "", "NA", True, 0, 1.0, 0.5,
             "0.0", "1.00", "2.0", "1e-400"]
    parsed = parse_binary(cells)
    # source: issue 8 point 1, any number equal to 0 or 1 and true/false; other codes refused
    assert parsed.values[[0, 1, 2, 3, 4, 6, 10, 11, 12, 14, 15]].tolist() == \
        [0, 1, 1, 0, 1, 1, 1, 0, 1, 0, 1]
    # source: issue 4 and issue 8, yes/no and 1/2 codes are not read silently
    assert parsed.invalid.tolist() == [5, 7, 13, 16, 17]
    assert np.flatnonzero(parsed.missing).tolist() == [8, 9]


def test_numbers_reject_text_and_infinity() -> None:
    parsed = parse_number(["1.5", " -2 ", "1e3", "abc", "inf", "1_000", "", "null", "true",
                           np.float64(2.5), float("nan")])
    # source: float() of each accepted text; true/false read as 1/0
    assert parsed.values[[0, 1, 2, 8, 9]].tolist() == [1.5, -2.0, 1000.0, 1.0, 2.5]
    assert parsed.invalid.tolist() == [3, 4, 5]
    assert np.flatnonzero(parsed.missing).tolist() == [6, 7, 10]


def test_missing_tokens() -> None:
    for cell in (None, "", "  ", "NA", "n/a", "NaN", "NULL", "None", math.nan):
        assert is_missing(cell), cell
    for cell in ("0", 0, "missing?", False):
        assert not is_missing(cell), cell


def test_labels_are_trimmed_text_and_integral_numbers_lose_the_point() -> None:
    parsed = parse_label([" north ", 3, 3.0, 2.5, True, ""])
    # common practice, no source: 3.0 read from a typed file is the label "3"
    assert parsed.values[:5].tolist() == ["north", "3", "3", "2.5", "true"]
    assert parsed.missing.tolist() == [False] * 5 + [True]


def test_integral_text_labels_lose_decimal_zeros_only_when_all_are_integers() -> None:
    # source: issue 8 point 1, an integer stratum id is an integer from CSV and Parquet alike
    assert parse_label(["63.0", " 7.00 ", "NA", "-0.0", "12"]).values.tolist() == \
        ["63", "7", "", "0", "12"]
    # common practice, no source: one non-integer label keeps the column as written
    assert parse_label(["63.0", "2.5"]).values.tolist() == ["63.0", "2.5"]
    assert parse_label(["63.0", "north"]).values.tolist() == ["63.0", "north"]
    assert parse_label(["007.0", "1.0"]).values.tolist() == ["007.0", "1.0"]

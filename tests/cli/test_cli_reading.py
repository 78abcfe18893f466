"""The plain-language reading quotes the core's gap and gap contributions."""

from __future__ import annotations

import pandas as pd
from cli_support import study_rows

from strativ.cli.reading import ASSUMPTIONS, format_number, gap_differs, pulling_strata, reading
from strativ.estimators import build_cells, fit_all


def _comparison(rows, **options):
    frame = pd.DataFrame(rows)
    cells = build_cells(frame["y"].to_numpy(float), frame["take_up"].to_numpy(),
                        frame["offer"].to_numpy(), frame["site"].to_numpy(object))
    return fit_all(cells, **options)


def test_reading_reports_distance_in_standard_errors_and_the_pulling_strata() -> None:
    rows = study_rows()
    for row in rows:  # a large effect where the offer share is far from one half
        if row["site"] == "east":
            row["y"] += 40 * row["take_up"]
    comparison = _comparison(rows)
    sentences = reading(comparison)
    gap = comparison.gap
    # reference: Comparison.gap.z from strativ.estimators.fit_all
    assert f"lies {format_number(abs(gap.z), digits=2)} standard errors" in sentences[0]
    assert gap_differs(comparison) is True and "differs beyond noise" in sentences[0]
    top = pulling_strata(comparison.strata.rows)
    # reference: StratumRow.gap_contribution, largest in absolute value
    assert max(abs(r.gap_contribution) for r in comparison.strata.rows) == \
        abs(top[0].gap_contribution)
    assert sentences[1].startswith(f"Strata that pull it most: {top[0].label} (")


def test_reading_says_agreement_when_the_gap_is_within_noise() -> None:
    comparison = _comparison(study_rows())
    if gap_differs(comparison):
        raise AssertionError("the plain study should not separate the estimators")
    assert "within noise" in reading(comparison)[0]


def test_reading_without_fixed_effects_asks_for_both() -> None:
    sentences = reading(_comparison(study_rows(), estimators=("weighted",)))
    assert sentences[0].startswith("Fit both fixed_effects and a complier-weighted")


def test_assumptions_line_names_all_four() -> None:
    # source: METHODS.md §1, independence, exclusion, monotonicity, no interference
    for phrase in ("random within strata", "only through take-up",
                   "no one takes up because they were not offered", "another's outcome"):
        assert phrase in ASSUMPTIONS


def test_number_format() -> None:
    # common practice, no source: about four significant digits, true minus sign
    assert [format_number(v) for v in (-129.0325, 3.5649, 0.043641, 3623.9, 0.0, None)] == [
        "\u2212129.0", "3.565", "0.04364", "3,624", "0", "undefined"]

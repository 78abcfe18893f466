"""The plain-language reading quotes the core's gap and gap contributions, and derives every
word of direction and difference from the numbers."""

from __future__ import annotations

import pandas as pd
from cli_support import study_rows

from strativ.cli.reading import (
    ASSUMPTIONS,
    ESTIMATOR_NAMES,
    format_number,
    format_set,
    gap_differs,
    pulling_strata,
    reading,
)
from strativ.estimators import ConfidenceSet, build_cells, fit_all


def _comparison(rows, **options):
    frame = pd.DataFrame(rows)
    cells = build_cells(frame["y"].to_numpy(float), frame["take_up"].to_numpy(),
                        frame["offer"].to_numpy(), frame["site"].to_numpy(object))
    return fit_all(cells, **options)


def _gap_sentence(sentences: list[str]) -> str:
    return next(s for s in sentences if s.startswith("The fixed-effects estimate"))


def test_reading_reports_the_gap_with_its_t_reference_and_the_pulling_strata() -> None:
    rows = study_rows()
    for row in rows:  # a large effect where the offer share is far from one half
        if row["site"] == "east":
            row["y"] += 40 * row["take_up"]
    comparison = _comparison(rows)
    sentences = reading(comparison)
    gap = comparison.gap
    sentence = _gap_sentence(sentences)
    # reference: Comparison.gap of strativ.estimators.fit_all (t, df, p-value, estimator)
    assert f"t = {format_number(gap.t, digits=3)} on {format_number(gap.df, digits=3)} " \
        "degrees of freedom" in sentence
    assert f"fixed effects minus {ESTIMATOR_NAMES[gap.complier_estimator]} is " \
        f"{format_number(gap.estimate)}" in sentence
    assert gap_differs(comparison) is True and "differs beyond noise" in sentence
    top = pulling_strata(comparison.strata.rows)
    # reference: StratumRow.gap_contribution, largest in absolute value
    assert max(abs(r.gap_contribution) for r in comparison.strata.rows) == \
        abs(top[0].gap_contribution)
    following = sentences[sentences.index(sentence) + 1]
    assert following.startswith(f"Strata that pull it most: {top[0].label} (")


def test_reading_says_agreement_when_the_gap_is_within_noise() -> None:
    comparison = _comparison(study_rows())
    if gap_differs(comparison):
        raise AssertionError("the plain study should not separate the estimators")
    # reference: Comparison.gap.p_value against 1 - level, from strativ.estimators.fit_all
    assert comparison.gap.p_value >= 1 - comparison.estimates[0].level
    assert "does not differ beyond noise" in _gap_sentence(reading(comparison))


def _pulled(rows, site: str, shift: float):
    out = []
    for row in rows:
        row = dict(row)
        if row["site"] == site:
            row["y"] += shift * row["take_up"]
        out.append(row)
    return out


def test_direction_word_follows_the_sign_of_the_gap_in_two_contrasting_designs() -> None:
    # the same strata; a large effect in 'south' (offer share one half, favoured by fixed
    # effects) against one in 'east' (share 0.7, favoured by complier weights)
    above = _comparison(_pulled(study_rows(), "south", 30.0))
    below = _comparison(_pulled(study_rows(), "east", 30.0))
    # reference: Comparison.gap.estimate = fixed_effects_estimate - complier_estimate
    assert above.gap.estimate > 0 > below.gap.estimate
    for comparison, word in ((above, "above"), (below, "below")):
        gap = comparison.gap
        assert gap.estimate == gap.fixed_effects_estimate - gap.complier_estimate
        sentence = _gap_sentence(reading(comparison))
        assert f"lies {word} the LATE from the interacted estimator" in sentence
        other = "below" if word == "above" else "above"
        assert f"lies {other}" not in sentence


def test_direction_word_names_the_weighted_estimator_with_design_probabilities() -> None:
    rows = _pulled(study_rows(), "east", 30.0)
    # offers declared unit by unit, so the weighted estimator keeps these design probabilities
    probabilities = {"north": 0.35, "south": 0.45, "east": 0.6, "west": 0.55}
    comparison = _comparison(rows, estimators=("fixed_effects", "weighted"),
                             offer_probability=probabilities, assignment="independent")
    gap = comparison.gap
    # reference: strativ.estimators.fit_all; weighted is the complier estimator reported
    assert gap.complier_estimator == "weighted"
    assert abs(gap.estimate - (comparison.get("fixed_effects").estimate
                               - comparison.get("weighted").estimate)) <= 1e-12
    word = "above" if gap.estimate > 0 else "below"
    sentence = _gap_sentence(reading(comparison))
    assert f"lies {word} the LATE from the weighted (IPW) estimator" in sentence
    assert "fixed effects minus weighted (IPW) is" in sentence


def test_gap_is_named_after_the_fitted_estimator_when_block_counts_match_the_design() -> None:
    rows = _pulled(study_rows(), "east", 30.0)
    # source: study_rows offers 6/20, 10/20, 14/20, 8/16, exactly n x probability here, so
    # the realized shares are used and weighted equals interacted
    probabilities = {"north": 0.3, "south": 0.5, "east": 0.7, "west": 0.5}
    comparison = _comparison(rows, estimators=("fixed_effects", "weighted"),
                             offer_probability=probabilities)
    sentences = reading(comparison)
    # reference: Comparison.gap.complier_estimate equals the fitted weighted estimate
    assert abs(comparison.gap.complier_estimate - comparison.get("weighted").estimate) <= 1e-12
    assert "the LATE from the weighted (IPW) estimator" in _gap_sentence(sentences)
    assert not any("interacted" in sentence for sentence in sentences)


def test_reading_without_fixed_effects_asks_for_both() -> None:
    sentences = reading(_comparison(study_rows(), estimators=("weighted",)))
    assert any(s.startswith("Fit both fixed_effects and a complier-weighted") for s in sentences)


def test_two_rays_are_written_so_they_cannot_be_read_as_an_interval() -> None:
    # common practice, no source: the union of two closed rays
    rays = ConfidenceSet("two_rays", left_ray_end=-1.5, right_ray_start=2.25)
    assert format_set(rays) == "(\u2212\u221e, \u22121.500] \u222a [2.250, \u221e)"
    assert format_set(ConfidenceSet("bounded", lower=1.0, upper=2.0)) == "[1.000, 2.000]"
    assert format_set(ConfidenceSet("whole_line")) == "(\u2212\u221e, \u221e)"


def test_assumptions_line_names_all_four() -> None:
    # source: METHODS.md §1, independence, exclusion, monotonicity, no interference
    for phrase in ("random within strata", "only through take-up",
                   "no one takes up because they were not offered", "another's outcome"):
        assert phrase in ASSUMPTIONS


def test_number_format() -> None:
    # common practice, no source: about four significant digits, true minus sign
    assert [format_number(v) for v in (-129.0325, 3.5649, 0.043641, 3623.9, 0.0, None)] == [
        "\u2212129.0", "3.565", "0.04364", "3,624", "0", "undefined"]

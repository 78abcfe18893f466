"""Invariances of the estimators (issue 3, point f), checked with hypothesis.

Designs are small: 2 to 6 strata, 3 to 10 units per arm, two-sided non-compliance (at least
one always-taker and one never-taker per stratum) and a first stage of at least 0.2 in every
stratum, so every estimator is defined. Hypothesis draws the design and a seed; numpy draws
the outcomes from that seed.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Any

import numpy as np
import pandas as pd
from core_support import ESTIMATORS, assert_close
from core_support import FLAVOURS as CORE_FLAVOURS
from hypothesis import given, settings
from hypothesis import strategies as st

from strativ.estimators import build_cells, fit_all

FLOOR = 1.0
# (variance, assignment, sampling); the robust flavours ignore assignment and sampling.
FLAVOURS = CORE_FLAVOURS + (("cluster", "block", "fixed"), ("cluster", "block", "random"))
FAST = settings(max_examples=30, deadline=None)


@dataclass(frozen=True)
class Lottery:
    """Unit-level arrays of one drawn design."""

    outcome: np.ndarray
    take_up: np.ndarray
    offer: np.ndarray
    stratum: np.ndarray
    probability: dict[int, float]
    """A design offer probability per stratum, for the weighted estimator."""

    def cells(self, **changes: Any):
        arrays = {
            "outcome": self.outcome,
            "take_up": self.take_up,
            "offer": self.offer,
            "stratum": self.stratum,
            **changes,
        }
        return build_cells(**arrays, cluster=np.arange(arrays["outcome"].size))


@st.composite
def lotteries(draw: st.DrawFn) -> Lottery:
    n_strata = draw(st.integers(2, 6))
    seed = draw(st.integers(0, 2**32 - 1))
    rng = np.random.default_rng(seed)
    parts = []
    probability = {}
    for j in range(n_strata):
        label = 10 * j + 3
        n0, n1 = draw(st.integers(3, 10)), draw(st.integers(3, 10))
        always = draw(st.integers(1, 2 * n0 // 5))  # take-up <= 0.4 without an offer
        never = draw(st.integers(1, 2 * n1 // 5))  # take-up >= 0.6 with an offer
        d0 = (np.arange(n0) < always).astype(int)
        d1 = (np.arange(n1) >= never).astype(int)
        z = np.repeat([0, 1], [n0, n1])
        d = np.concatenate([d0, d1])
        y = rng.normal(j, 1.0, n0 + n1) + rng.normal(1.0, 1.0) * d
        parts.append((y, d, z, np.full(n0 + n1, label)))
        probability[label] = draw(st.floats(0.2, 0.8))
    y, d, z, s = (np.concatenate(a) for a in zip(*parts, strict=True))
    order = rng.permutation(y.size)
    return Lottery(y[order], d[order], z[order], s[order], probability)


def fits(cells, probability: dict | None = None) -> list[dict[str, Any]]:
    """`fit_all` in every flavour; with design probabilities only the weighted estimator
    changes, so only it is refitted."""
    names = ESTIMATORS if probability is None else ("weighted",)
    return [
        fit_all(
            cells,
            estimators=names,
            variance=v,
            assignment=a,
            sampling=s,
            offer_probability=probability,
        ).to_dict()
        for v, a, s in FLAVOURS
    ]


def comparable(result: dict[str, Any]) -> dict[str, Any]:
    """The fit with the gap's spread as a variance, the form whose rounding error is bounded.

    When the fixed-effects and complier weights coincide (equal offer shares) the gap's true
    variance is 0 and its computed value is rounding noise of order 1e-16 * scale^2, so its
    standard error is noise of order 1e-8 * scale and its z meaningless. Compare the variance
    and the squared half-width instead, against a floor of 1e-10 times the squared standard
    error of the estimates, and z only when the gap's standard error is clearly not noise.
    """
    gap = result["gap"]
    scale = max(e["std_error"] for e in result["estimates"]) ** 2
    out = {k: v for k, v in result.items() if k != "gap"}
    out["variance_floor"] = scale
    variance = (gap["std_error"] or 0.0) ** 2
    half = 0.0 if gap["interval"] is None else (gap["interval"][1] - gap["interval"][0]) / 2
    out["gap"] = {"estimate": gap["estimate"], "variance": variance, "half_width_sq": half**2}
    if variance > 1e-6 * scale:  # t, its degrees of freedom and p only when not noise
        out["gap"].update(t=gap["t"], df=gap["df"], p_value=gap["p_value"],
                          centre=sum(gap["interval"]) / 2)
    return out


def assert_fits_close(
    actual: dict[str, Any], expected: dict[str, Any], *, floor: float = FLOOR
) -> None:
    """`assert_close` on `comparable` forms; the gap's variance against its own floor."""
    got, want = comparable(actual), comparable(expected)
    variance_floor = want.pop("variance_floor")
    got.pop("variance_floor")
    got_gap, want_gap = got.pop("gap"), want.pop("gap")
    assert_close(got, want, floor=floor)
    if ("t" in got_gap) != ("t" in want_gap):
        for key in ("t", "df", "p_value", "centre"):
            got_gap.pop(key, None)
            want_gap.pop(key, None)
    for key in ("variance", "half_width_sq"):
        assert_close(got_gap.pop(key), want_gap.pop(key), floor=variance_floor, path=key)
    assert_close(got_gap, want_gap, floor=floor, path="gap")


def rows_by_label(result: dict[str, Any]) -> dict[Any, dict[str, Any]]:
    return {
        row["label"]: {k: v for k, v in row.items() if k != "label"}
        for row in result["strata"]["rows"]
    }


@FAST
@given(lottery=lotteries(), order_seed=st.integers(0, 2**32 - 1))
def test_row_order_changes_no_estimate_error_or_stratum_row(lottery, order_seed):
    order = np.random.default_rng(order_seed).permutation(lottery.outcome.size)
    shuffled = {
        "outcome": lottery.outcome[order],
        "take_up": lottery.take_up[order],
        "offer": lottery.offer[order],
        "stratum": lottery.stratum[order],
    }
    for probability in (None, lottery.probability):
        # common practice, no source: every cell sum is invariant to the order of its terms
        for got, want in zip(
            fits(lottery.cells(**shuffled), probability),
            fits(lottery.cells(), probability),
            strict=True,
        ):
            assert_fits_close(got, want)


distinct_labels = st.lists(
    st.one_of(
        st.integers(-(10**6), 10**6), st.text(max_size=6), st.floats(-1e6, 1e6, allow_nan=False)
    ),
    min_size=6,
    max_size=6,
    unique=True,
)


@FAST
@given(lottery=lotteries(), new_labels=distinct_labels)
def test_relabelling_strata_changes_nothing_but_the_labels(lottery, new_labels):
    old_labels = sorted(set(lottery.stratum.tolist()))
    mapping = dict(zip(old_labels, new_labels, strict=False))
    relabelled = np.array([mapping[v] for v in lottery.stratum.tolist()], dtype=object)
    probability = {mapping[k]: v for k, v in lottery.probability.items()}
    for design_probability in (False, True):
        got_all = fits(
            lottery.cells(stratum=relabelled), probability if design_probability else None
        )
        want_all = fits(lottery.cells(), lottery.probability if design_probability else None)
        for got, want in zip(got_all, want_all, strict=True):
            got_rows, want_rows = rows_by_label(got), rows_by_label(want)
            assert set(got_rows) == {mapping[k] for k in want_rows}
            # common practice, no source: labels only name strata; sums run over the same cells
            for old, row in want_rows.items():
                assert_close(got_rows[mapping[old]], row)
            for result in (got, want):
                result["strata"]["rows"] = []
            assert_fits_close(got, want)


def _scaled(value: float | None, factor: float) -> float | None:
    return None if value is None else factor * value


def _ends(pair: list[float] | None, b: float) -> list[float] | None:
    return None if pair is None else sorted([b * pair[0], b * pair[1]])


def affine_image(result: dict[str, Any], a: float, b: float) -> dict[str, Any]:
    """What a fit of a + b*Y must report, given the fit of Y."""
    out = {**result}
    estimates = []
    for est in result["estimates"]:
        conf = est["confidence_set"]
        if conf["shape"] == "bounded":
            low, high = _ends([conf["lower"], conf["upper"]], b)
            conf = {**conf, "lower": low, "upper": high}
        elif conf["shape"] == "two_rays":
            low, high = _ends([conf["left_ray_end"], conf["right_ray_start"]], b)
            conf = {**conf, "left_ray_end": low, "right_ray_start": high}
        estimates.append(
            {
                **est,
                "estimate": _scaled(est["estimate"], b),
                "std_error": _scaled(est["std_error"], abs(b)),
                "interval": _ends(est["interval"], b),
                "confidence_set": conf,
                "itt": b * est["itt"],
                "itt_std_error": _scaled(est["itt_std_error"], abs(b)),
            }
        )
    out["estimates"] = estimates
    rows = []
    for row in result["strata"]["rows"]:
        rows.append(
            {
                **row,
                "mean_outcome_offered": a + b * row["mean_outcome_offered"],
                "mean_outcome_not_offered": a + b * row["mean_outcome_not_offered"],
                "itt": b * row["itt"],
                "effect": _scaled(row["effect"], b),
                "effect_std_error": _scaled(row["effect_std_error"], abs(b)),
                "gap_contribution": _scaled(row["gap_contribution"], b),
            }
        )
    out["strata"] = {**result["strata"], "rows": rows}
    test = result["constant_effect"]
    out["constant_effect"] = {**test, "fitted_common_effect": _scaled(
        test["fitted_common_effect"], b)}
    gap = result["gap"]
    out["gap"] = {
        "estimate": _scaled(gap["estimate"], b),
        "std_error": _scaled(gap["std_error"], abs(b)),
        "interval": _ends(gap["interval"], b),
        "t": _scaled(gap["t"], math.copysign(1.0, b)),
        "df": gap["df"],
        "p_value": gap["p_value"],
        "fixed_effects_estimate": _scaled(gap["fixed_effects_estimate"], b),
        "complier_estimate": _scaled(gap["complier_estimate"], b),
        "complier_estimator": gap["complier_estimator"],
        "reason": gap["reason"],
    }
    size = result["size_weighted"]
    out["size_weighted"] = {
        **size,
        "estimate": _scaled(size["estimate"], b),
        "std_error": _scaled(size["std_error"], abs(b)),
    }
    return out


@FAST
@given(
    lottery=lotteries(),
    a=st.floats(-100.0, 100.0),
    magnitude=st.floats(0.1, 10.0),
    negative=st.booleans(),
)
def test_an_affine_outcome_map_scales_estimates_errors_and_interval_ends(
    lottery, a, magnitude, negative
):
    b = -magnitude if negative else magnitude
    mapped = lottery.cells(outcome=a + b * lottery.outcome)
    for probability in (None, lottery.probability):
        for got, want in zip(
            fits(mapped, probability), fits(lottery.cells(), probability), strict=True
        ):
            # common practice, no source: ITT_s and every cell deviation of Y scale by b and
            # the level a cancels, so theta -> b theta, se -> |b| se; the first stage, its F
            # and the weights do not involve Y; a negative b swaps the interval ends
            assert_fits_close(got, affine_image(want, a, b))


@FAST
@given(lottery=lotteries())
def test_duplicating_every_row_leaves_every_estimate_unchanged(lottery):
    doubled = {
        "outcome": np.tile(lottery.outcome, 2),
        "take_up": np.tile(lottery.take_up, 2),
        "offer": np.tile(lottery.offer, 2),
        "stratum": np.tile(lottery.stratum, 2),
    }
    point_fields = ("estimate", "itt", "first_stage")
    row_fields = (
        "offer_share",
        "mean_outcome_offered",
        "mean_outcome_not_offered",
        "itt",
        "first_stage",
        "effect",
        "weight_fixed_effects",
        "weight_complier",
        "gap_contribution",
    )
    for probability in (None, lottery.probability):
        for got, want in zip(
            fits(lottery.cells(**doubled), probability),
            fits(lottery.cells(), probability),
            strict=True,
        ):
            # common practice, no source: every mean and share is unchanged by repeating each
            # row once (standard errors do change and are not compared)
            for est_got, est_want in zip(got["estimates"], want["estimates"], strict=True):
                assert_close(
                    {k: est_got[k] for k in point_fields}, {k: est_want[k] for k in point_fields}
                )
            for row_got, row_want in zip(
                got["strata"]["rows"], want["strata"]["rows"], strict=True
            ):
                assert row_got["n"] == 2 * row_want["n"]
                assert_close(
                    {k: row_got[k] for k in row_fields}, {k: row_want[k] for k in row_fields}
                )
            assert_close(got["gap"]["estimate"], want["gap"]["estimate"])
            assert_close(got["size_weighted"]["estimate"], want["size_weighted"]["estimate"])


@FAST
@given(lottery=lotteries(), as_series=st.booleans(), as_bool=st.booleans())
def test_inputs_are_never_modified(lottery, as_series, as_bool):
    take_up = lottery.take_up.astype(bool) if as_bool else lottery.take_up
    offer = lottery.offer.astype(bool) if as_bool else lottery.offer.astype(float)
    arrays = {
        "outcome": lottery.outcome,
        "take_up": take_up,
        "offer": offer,
        "stratum": lottery.stratum,
        "cluster": np.arange(lottery.outcome.size),
    }
    if as_series:
        index = np.arange(lottery.outcome.size)[::-1] * 3
        arrays = {k: pd.Series(v, index=index) for k, v in arrays.items()}
    before = {k: v.copy() for k, v in arrays.items()}
    probability = dict(lottery.probability)
    cells = build_cells(**arrays)
    cell_arrays = {
        k: getattr(cells, k).copy()
        for k in ("n", "mean_outcome", "mean_take_up", "ss_outcome", "ss_cross", "ss_take_up")
    }
    for v, a, s in FLAVOURS:
        fit_all(cells, variance=v, assignment=a, sampling=s, offer_probability=probability)
    # common practice, no source: inputs are never modified (STYLE.md)
    for key, value in arrays.items():
        if as_series:
            pd.testing.assert_series_equal(value, before[key])
        else:
            np.testing.assert_array_equal(value, before[key])
            assert value.dtype == before[key].dtype
    assert probability == lottery.probability
    for key, value in cell_arrays.items():
        np.testing.assert_array_equal(getattr(cells, key), value)

"""Degenerate inputs (issue 3, point g): documented results or clear typed errors.

Never a crash and never a silent NaN or inf: every result object and its `to_dict()` is
walked for non-finite floats, and `to_dict()` must pass `json.dumps(..., allow_nan=False)`.

Test data: small hand-built designs and seeded numpy draws (seeds below), not simulations.
"""

from __future__ import annotations

import dataclasses
import json
import math
from typing import Any

import numpy as np
import pandas as pd
import pytest
from core_support import ESTIMATORS, FLAVOUR_IDS, FLAVOURS

from strativ.estimators import (
    DegenerateDesignError,
    InputError,
    build_cells,
    fit,
    fit_all,
)

SEED = 20260412


def options(flavour: tuple[str, str, str]) -> dict[str, str]:
    variance, assignment, sampling = flavour
    return {"variance": variance, "assignment": assignment, "sampling": sampling}


def assert_no_silent_nan(result: Any) -> dict[str, Any]:
    """Walk the result object and its to_dict(): no float may be NaN or inf."""

    def walk(value: Any, path: str) -> None:
        if dataclasses.is_dataclass(value):
            for field in dataclasses.fields(value):
                walk(getattr(value, field.name), f"{path}.{field.name}")
        elif isinstance(value, dict):
            for key, item in value.items():
                walk(item, f"{path}.{key}")
        elif isinstance(value, (list, tuple)):
            for i, item in enumerate(value):
                walk(item, f"{path}[{i}]")
        elif isinstance(value, (float, np.floating)):
            assert math.isfinite(value), path

    walk(result, "result")
    data = result.to_dict()
    walk(data, "to_dict")
    json.dumps(data, allow_nan=False)
    return data


def units(spec: list[tuple[Any, int, int, int, int]], seed: int = SEED) -> pd.DataFrame:
    """Rows from (stratum, n not offered, takers not offered, n offered, takers offered)."""
    rng = np.random.default_rng(seed)
    parts = []
    for j, (label, n0, t0, n1, t1) in enumerate(spec):
        z = np.repeat([0, 1], [n0, n1])
        d = np.concatenate([np.arange(n0) < t0, np.arange(n1) < t1]).astype(int)
        y = rng.normal(j, 1.0, n0 + n1) + (1.0 + j) * d + 2.0 * z
        parts.append(pd.DataFrame({"y": y, "d": d, "z": z, "s": label}))
    frame = pd.concat(parts, ignore_index=True)
    return frame.iloc[rng.permutation(len(frame))].reset_index(drop=True)


def cells_of(frame: pd.DataFrame, **kwargs: Any):
    return build_cells(frame["y"], frame["d"], frame["z"], frame["s"], **kwargs)


def close(a: float, b: float, rel: float = 1e-10) -> bool:
    return abs(a - b) <= rel * max(abs(a), abs(b), 1.0)


# ---------------------------------------------------------------- one stratum

ONE_STRATUM = [("only", 37, 9, 45, 33)]


@pytest.mark.parametrize("flavour", FLAVOURS, ids=FLAVOUR_IDS)
def test_one_stratum_gives_three_equal_estimates_equal_to_the_wald_ratio(flavour):
    frame = units(ONE_STRATUM)
    comparison = fit_all(cells_of(frame), **options(flavour))
    assert_no_silent_nan(comparison)
    arm = frame.groupby("z")[["y", "d"]].mean()
    # source: Imbens & Angrist (1994) Wald estimator (ybar1 - ybar0) / (dbar1 - dbar0)
    wald = (arm.loc[1, "y"] - arm.loc[0, "y"]) / (arm.loc[1, "d"] - arm.loc[0, "d"])
    for estimate in comparison.estimates:
        assert estimate.estimate == pytest.approx(wald, rel=1e-12), estimate.estimator
    fe = comparison.get("fixed_effects")
    for estimate in comparison.estimates:
        # from METHODS.md §3-4: with K = 1 every estimator has weight 1 on the one stratum and
        # Delta_s = ITT - theta FS = 0 at theta-hat, so the between, assignment and robust-shift
        # terms vanish and the three errors coincide (k = 2 for all three when K = 1)
        assert estimate.std_error == pytest.approx(fe.std_error, rel=1e-10), estimate.estimator
    assert comparison.strata.rows[0].effect == pytest.approx(wald, rel=1e-12)
    # source: METHODS.md §3, identical estimators differ by exactly zero
    assert comparison.gap.estimate == pytest.approx(0.0, abs=1e-12 * abs(wald))


# ---------------------------------------------------------------- one-armed strata

WITH_FULL_STRATUM = [
    ("a", 30, 6, 20, 15),
    ("b", 14, 2, 26, 20),
    ("c", 22, 5, 22, 16),
    ("everyone", 0, 0, 17, 12),
    ("nobody", 11, 3, 0, 0),
]


@pytest.mark.parametrize("flavour", FLAVOURS, ids=FLAVOUR_IDS)
def test_a_stratum_with_everyone_or_nobody_offered_is_excluded_and_changes_nothing(flavour):
    frame = units(WITH_FULL_STRATUM)
    kept = frame[frame["s"].isin(["a", "b", "c"])]
    full = assert_no_silent_nan(fit_all(cells_of(frame), **options(flavour)))
    reduced = assert_no_silent_nan(fit_all(cells_of(kept), **options(flavour)))
    # source: METHODS.md §2, a stratum with offer share 0 or 1 is excluded and listed
    assert full["strata"]["excluded"] == [
        {"label": "everyone", "n": 17, "reason": "every unit was offered (offer share 1)"},
        {"label": "nobody", "n": 11, "reason": "no unit was offered (offer share 0)"},
    ]
    assert reduced["strata"]["excluded"] == []
    full["strata"]["excluded"] = []
    # source: METHODS.md §2, all estimators share one analysis sample without those strata
    assert full == reduced


def test_all_strata_one_armed_raise_a_degenerate_design_error():
    frame = units([("a", 0, 0, 12, 8), ("b", 9, 3, 0, 0)])
    cells = cells_of(frame)
    # source: CONTRACT.md, DegenerateDesignError when no stratum has both arms
    with pytest.raises(DegenerateDesignError, match=r"no stratum has both offered and not-offered"):
        fit(cells)
    with pytest.raises(DegenerateDesignError, match=r"check the offer and stratum columns"):
        fit_all(cells)


# ---------------------------------------------------------------- zero overall first stage


@pytest.mark.parametrize("flavour", FLAVOURS, ids=FLAVOUR_IDS)
def test_zero_overall_first_stage_leaves_the_estimate_undefined_with_a_reason(flavour):
    # take-up 2/4 = 3/6 = 0.5 and 3/12 = 2/8 = 0.25: equal in both arms of every stratum
    frame = units([("a", 4, 2, 6, 3), ("b", 12, 3, 8, 2), ("c", 10, 5, 10, 5)])
    comparison = fit_all(cells_of(frame), **options(flavour))
    data = assert_no_silent_nan(comparison)
    for estimate in comparison.estimates:
        # source: CONTRACT.md, an undefined number is None with a reason
        assert estimate.first_stage == 0.0
        assert estimate.estimate is None and estimate.std_error is None
        assert estimate.interval is None
        assert "first stage is zero" in estimate.undefined_reason
        # source: METHODS.md §4, D = 0 gives qa = -z^2 C <= 0: two rays or the whole line
        assert estimate.confidence_set.shape in ("two_rays", "whole_line")
    for row in data["strata"]["rows"]:
        # source: CONTRACT.md, StratumRow.effect None with effect_reason when FS_s = 0
        assert row["effect"] is None and row["effect_std_error"] is None
        assert row["effect_reason"] == "first stage is zero in this stratum"
    assert data["gap"] == {
        "estimate": None,
        "std_error": None,
        "interval": None,
        "t": None,
        "df": None,
        "p_value": None,
        "fixed_effects_estimate": None,
        "complier_estimate": None,
        "complier_estimator": "interacted",
        "reason": "an overall first stage is zero",
    }
    assert data["size_weighted"]["estimate"] is None
    assert "zero first stage" in data["size_weighted"]["reason"]


def _zero_first_stage_with(itt: float) -> pd.DataFrame:
    """Two equal strata with first stages +0.5 and -0.5 (overall exactly 0), a given ITT."""
    rng = np.random.default_rng(SEED + 1)
    rows = []
    for label, t0, t1 in (("up", 1, 3), ("down", 3, 1)):
        z = np.repeat([0, 1], 4)
        d = np.array([1] * t0 + [0] * (4 - t0) + [1] * t1 + [0] * (4 - t1))
        noise = np.tile(rng.normal(size=4), 2)  # same values in both arms: ITT_s from itt only
        y = noise + itt * z
        rows.append(pd.DataFrame({"y": y, "d": d, "z": z, "s": label}))
    return pd.concat(rows, ignore_index=True)


@pytest.mark.parametrize("estimator", ESTIMATORS)
def test_zero_overall_first_stage_with_a_clear_itt_gives_two_rays(estimator):
    result = fit(cells_of(_zero_first_stage_with(itt=25.0)), estimator=estimator)
    assert_no_silent_nan(result)
    assert result.estimate is None
    # source: METHODS.md §4, qa < 0 and N^2 > z^2 A make qc > 0 and disc = qb^2 - qa qc > 0
    assert result.confidence_set.shape == "two_rays"
    assert result.confidence_set.left_ray_end < result.confidence_set.right_ray_start


@pytest.mark.parametrize("estimator", ESTIMATORS)
def test_zero_overall_first_stage_without_an_itt_gives_the_whole_line(estimator):
    result = fit(cells_of(_zero_first_stage_with(itt=0.0)), estimator=estimator)
    data = assert_no_silent_nan(result)
    assert result.estimate is None
    # source: METHODS.md §4, N = 0 gives disc = z^4 (B^2 - A C) <= 0 (Cauchy-Schwarz)
    assert data["confidence_set"] == {"shape": "whole_line", "lower": None, "upper": None,
                                      "left_ray_end": None, "right_ray_start": None}


# ---------------------------------------------------------------- FS_s = 0 in one stratum

ONE_FLAT_STRATUM = [("a", 30, 6, 20, 15), ("flat", 4, 2, 6, 3), ("c", 22, 5, 28, 20)]


@pytest.mark.parametrize("flavour", FLAVOURS, ids=FLAVOUR_IDS)
def test_a_stratum_with_zero_first_stage_has_no_effect_but_the_estimators_are_fine(flavour):
    frame = units(ONE_FLAT_STRATUM)
    comparison = fit_all(cells_of(frame), **options(flavour))
    assert_no_silent_nan(comparison)
    rows = {row.label: row for row in comparison.strata.rows}
    # source: CONTRACT.md, effect None plus effect_reason when FS_s = 0
    assert rows["flat"].first_stage == 0.0
    assert rows["flat"].effect is None and rows["flat"].effect_std_error is None
    assert rows["flat"].effect_reason == "first stage is zero in this stratum"
    cell = frame.groupby(["s", "z"])[["y", "d"]].mean()
    size = frame.groupby("s").size()
    share = frame.groupby("s")["z"].mean()
    itt = {s: cell.loc[(s, 1), "y"] - cell.loc[(s, 0), "y"] for s in size.index}
    fs = {s: cell.loc[(s, 1), "d"] - cell.loc[(s, 0), "d"] for s in size.index}
    for label in ("a", "c"):
        # source: METHODS.md §2, beta_s = ITT_s / FS_s
        assert rows[label].effect == pytest.approx(itt[label] / fs[label], rel=1e-12)
        assert math.isfinite(rows[label].effect_std_error)
    weights = {
        "fixed_effects": {s: size[s] * share[s] * (1 - share[s]) for s in size.index},
        "weighted": dict(size),
        "interacted": dict(size),
    }
    for name, a in weights.items():
        # source: METHODS.md §3, theta = sum_s a_s ITT_s / sum_s a_s FS_s
        expected = sum(a[s] * itt[s] for s in a) / sum(a[s] * fs[s] for s in a)
        result = comparison.get(name)
        assert result.estimate == pytest.approx(expected, rel=1e-12), name
        assert math.isfinite(result.std_error) and result.std_error > 0
    assert comparison.gap.estimate is not None
    # source: CONTRACT.md, SizeWeighted estimate None with a reason; METHODS.md §1 needs pi_s > 0
    assert comparison.size_weighted.estimate is None
    assert comparison.size_weighted.std_error is None
    assert "zero first stage" in comparison.size_weighted.reason


# ---------------------------------------------------------------- one-unit cell

WITH_LONE_UNIT = [("a", 30, 6, 20, 15), ("lone", 9, 2, 1, 1), ("c", 22, 5, 28, 20)]


def within_variance_by_hand(frame: pd.DataFrame, a: dict[Any, float], theta: float) -> float:
    """V_within of METHODS.md §4 with a one-unit cell given its arm's pooled variance."""
    g = frame["y"] - theta * frame["d"]
    work = frame.assign(g=g)
    grouped = work.groupby(["s", "z"])["g"]
    n = grouped.size()
    ss = grouped.apply(lambda v: float(((v - v.mean()) ** 2).sum()))
    var = ss / (n - 1).where(n > 1)
    for arm in (0, 1):
        donors = [k for k in n.index if k[1] == arm and n[k] > 1]
        pooled = sum(ss[k] for k in donors) / sum(n[k] - 1 for k in donors)
        for k in n.index:
            if k[1] == arm and n[k] == 1:
                var[k] = pooled
    mean_d = work.groupby(["s", "z"])["d"].mean()
    total = sum(a.values())
    b = {s: a[s] / total for s in a}
    denominator = sum(b[s] * (mean_d[(s, 1)] - mean_d[(s, 0)]) for s in b)
    spread = sum(b[s] ** 2 * (var[(s, 1)] / n[(s, 1)] + var[(s, 0)] / n[(s, 0)]) for s in b)
    return spread / denominator**2


@pytest.mark.parametrize("estimator", ESTIMATORS)
def test_a_one_unit_cell_borrows_its_arms_pooled_variance_and_is_reported(estimator):
    frame = units(WITH_LONE_UNIT)
    comparison = fit_all(cells_of(frame), sampling="fixed")
    assert_no_silent_nan(comparison)
    # source: METHODS.md §4, report how many one-unit cells borrowed a pooled variance
    assert comparison.strata.single_unit_cells == 1
    assert any("1 one-unit cell" in note for note in comparison.notes)
    result = comparison.get(estimator)
    size = frame.groupby("s").size()
    share = frame.groupby("s")["z"].mean()
    if estimator == "fixed_effects":
        a = {s: size[s] * share[s] * (1 - share[s]) for s in size.index}
    else:
        a = dict(size)
    # source: METHODS.md §4, V_within = sum_s a_s^2 (S2_s1/n_s1 + S2_s0/n_s0) / D^2 with
    # divisor n_sz - 1 and the one-unit cell given the pooled within-arm variance of its arm
    expected = within_variance_by_hand(frame, a, result.estimate)
    assert result.std_error**2 == pytest.approx(expected, rel=1e-10)


def test_a_design_without_one_unit_cells_reports_none():
    comparison = fit_all(cells_of(units(ONE_FLAT_STRATUM)))
    # source: METHODS.md §4, the count of one-unit cells is reported (here zero)
    assert comparison.strata.single_unit_cells == 0
    assert not any("one-unit cell" in note for note in comparison.notes)


# ---------------------------------------------------------------- large mean


@pytest.mark.parametrize("flavour", FLAVOURS, ids=FLAVOUR_IDS)
def test_an_outcome_with_mean_1e9_gives_the_results_of_the_shifted_outcome(flavour):
    small = units(WITH_FULL_STRATUM + [("lone", 9, 2, 1, 1)])
    big = small.assign(y=small["y"] + 1e9)
    shifted = big.assign(y=big["y"] - 1e9)  # exact (Sterbenz): the same numbers as big
    at_level = assert_no_silent_nan(fit_all(cells_of(big), **options(flavour)))
    reference = assert_no_silent_nan(fit_all(cells_of(shifted), **options(flavour)))
    for row in at_level["strata"]["rows"]:
        for key in ("mean_outcome_offered", "mean_outcome_not_offered"):
            row[key] -= 1e9

    def compare(got: Any, want: Any, path: str) -> None:
        if isinstance(want, dict):
            for key in want:
                compare(got[key], want[key], f"{path}.{key}")
        elif isinstance(want, list):
            for i, (g, w) in enumerate(zip(got, want, strict=True)):
                compare(g, w, f"{path}[{i}]")
        elif isinstance(want, float):
            # common practice, no source: a shift changes no effect and no variance; means near
            # 1e9 are stored to half a spacing (1.19e-7), hence 1e-6 against a floor of 1
            assert abs(got - want) <= 1e-6 * max(abs(want), 1.0), (path, got, want)
        else:
            assert got == want, path

    compare(at_level, reference, "")


# ---------------------------------------------------------------- option errors


@pytest.fixture(scope="module")
def cells():
    return cells_of(units(ONE_FLAT_STRATUM))


@pytest.mark.parametrize(
    ("option", "value", "suggestion"),
    [
        ("estimator", "fixed_effect", "fixed_effects"),
        ("estimator", "weigthed", "weighted"),
        ("variance", "stratifed", "stratified"),
        ("variance", "robust_scale", "robust_scaled"),
        ("assignment", "blok", "block"),
        ("sampling", "randon", "random"),
    ],
)
def test_a_misspelt_option_value_is_rejected_with_a_suggestion(cells, option, value, suggestion):
    # source: STYLE.md, "Did you mean" via difflib
    with pytest.raises(
        InputError,
        match=rf"^{option}: unknown value '{value}'.*Did you mean "
        rf"'{suggestion}'\?",
    ) as caught:
        fit(cells, **{option: value})
    assert caught.value.argument == option


def test_a_misspelt_estimator_in_fit_all_is_rejected_with_a_suggestion(cells):
    # source: STYLE.md, "Did you mean" via difflib
    with pytest.raises(InputError, match=r"Did you mean 'interacted'\?"):
        fit_all(cells, estimators=("fixed_effects", "interacter"))


def test_a_repeated_estimator_in_fit_all_is_rejected(cells):
    # source: CONTRACT.md / fit_all docstring, estimators are distinct
    with pytest.raises(InputError, match=r"^estimators: expected distinct estimator names"):
        fit_all(cells, estimators=("weighted", "weighted"))


@pytest.mark.parametrize("level", [0.0, 1.0, -0.5, 1.5, 95, float("nan")])
def test_a_level_outside_zero_one_is_rejected(cells, level):
    # source: CONTRACT.md, level is a confidence level in (0, 1)
    with pytest.raises(InputError, match=r"^level: expected a confidence level between 0 and 1"):
        fit(cells, level=level)
    with pytest.raises(InputError, match=r"^level: "):
        fit_all(cells, level=level)


def test_cluster_variance_without_cluster_ids_is_rejected(cells):
    # source: CONTRACT.md, "cluster" needs cells built with cluster=
    with pytest.raises(InputError, match=r"^variance: 'cluster' needs cells built with cluster="):
        fit(cells, variance="cluster")


def test_cluster_variance_with_independent_assignment_is_rejected():
    frame = units(ONE_FLAT_STRATUM)
    clustered = cells_of(frame, cluster=np.arange(len(frame)))
    # source: fit docstring, clusters are offered as blocks
    with pytest.raises(
        InputError,
        match=r"^assignment: 'independent' is not supported with "
        r"variance='cluster'",
    ):
        fit(clustered, variance="cluster", assignment="independent")


def test_cells_that_are_not_a_cell_table_are_rejected():
    # source: fit docstring, cells come from build_cells or cells_from_frame
    with pytest.raises(InputError, match=r"^cells: expected a CellTable"):
        fit({"n": [[1, 1]]})


def test_outcomes_near_the_overflow_limit_scale_every_result_exactly():
    rng = np.random.default_rng(7)
    n = 400
    s = rng.integers(0, 4, n)
    z = rng.integers(0, 2, n)
    d = (rng.random(n) < 0.2 + 0.6 * z).astype(int)
    y = 10 + 2 * d + rng.normal(size=n)
    base = fit_all(build_cells(y, d, z, s))
    big = fit_all(build_cells(y * 2.0**460, d, z, s))  # about 1e138, exact in binary
    # common practice, no source: ratio estimators are equivariant to the outcome's scale
    for a, b in zip(base.estimates, big.estimates, strict=True):
        assert b.estimate == pytest.approx(a.estimate * 2.0**460, rel=1e-12)
        assert b.std_error == pytest.approx(a.std_error * 2.0**460, rel=1e-10)
    assert big.constant_effect.statistic == pytest.approx(base.constant_effect.statistic,
                                                          rel=1e-9)
    assert_no_silent_nan(big)


def test_outcomes_beyond_the_overflow_limit_are_refused_with_the_row():
    y = np.array([1.0, 2.0, 3e160, 4.0])
    # common practice, no source: squares of 1e155 and more overflow doubles
    with pytest.raises(InputError, match=r"value 3e\+160 at index 2 is beyond \+/-1e\+150"):
        build_cells(y, [0, 1, 0, 1], [0, 1, 0, 1], [0, 0, 0, 0])

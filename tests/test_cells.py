"""The cell table (METHODS.md §2): `build_cells` and `cells_from_frame`.

Checks the cell sums against a direct pandas computation, the precomputed-sums path, precision
for outcomes with a large mean (issue 3, point 1), stratum labels of several kinds, the
messages of bad inputs, that inputs are never modified, and the cluster sums.

Test data: one seeded numpy draw per test (seeds below), not a simulation study.
"""

from __future__ import annotations

import math
from typing import Any

import numpy as np
import pandas as pd
import pytest
from core_support import ESTIMATORS, FLAVOURS, assert_close

import strativ.estimators.cells as cells_module
from strativ.estimators import (
    CellTable,
    InputError,
    build_cells,
    cells_from_frame,
    fit,
    fit_all,
)
from strativ.estimators.kernels import fused_available

SEED = 20260311
CELL_FIELDS = ("n", "mean_outcome", "mean_take_up", "ss_outcome", "ss_cross", "ss_take_up")


@pytest.fixture(params=["numpy", "fused"])
def kernel(request, monkeypatch):
    """Run a test on the numpy kernel and on the compiled single pass (forced for small data;
    `build_cells` uses it from kernels.FUSED_MIN_ROWS rows on, without clusters)."""
    if request.param == "fused":
        if not fused_available():
            pytest.skip("numba is not installed")
        monkeypatch.setattr(cells_module, "FUSED_MIN_ROWS", 0)
    return request.param


def lottery(seed: int = SEED, level: float = 10.0) -> pd.DataFrame:
    """Five strata of unequal size and offer share, two-sided non-compliance, rows shuffled.

    Stratum 50 has everyone offered, so its not-offered cell is empty.
    """
    rng = np.random.default_rng(seed)
    parts = []
    for label, size, share in [
        (10, 40, 0.3),
        (20, 25, 0.5),
        (30, 60, 0.7),
        (40, 31, 0.45),
        (50, 12, 1.0),
    ]:
        z = (np.arange(size) < round(share * size)).astype(int)
        kind = rng.choice(3, size=size, p=[0.2, 0.25, 0.55])  # always, never, complier
        d = np.where(kind == 0, 1, np.where(kind == 1, 0, z))
        y = level + 0.1 * label + 0.7 * kind + (1.0 + 0.05 * label) * d + rng.normal(size=size)
        parts.append(pd.DataFrame({"y": y, "d": d, "z": z, "s": label}))
    frame = pd.concat(parts, ignore_index=True)
    return frame.iloc[rng.permutation(len(frame))].reset_index(drop=True)


def cells_of(frame: pd.DataFrame, **kwargs: Any) -> CellTable:
    return build_cells(frame["y"], frame["d"], frame["z"], frame["s"], **kwargs)


def direct_table(frame: pd.DataFrame) -> dict[str, np.ndarray]:
    """Counts, means and centred sums of squares per (stratum, offer), two passes in pandas."""
    keys = [frame["s"], frame["z"]]
    grouped = frame.groupby(keys)
    dev_y = frame["y"] - grouped["y"].transform("mean")
    dev_d = frame["d"] - grouped["d"].transform("mean")
    table = pd.DataFrame(
        {
            "n": grouped.size(),
            "mean_outcome": grouped["y"].mean(),
            "mean_take_up": grouped["d"].mean(),
            "ss_outcome": (dev_y * dev_y).groupby(keys).sum(),
            "ss_cross": (dev_y * dev_d).groupby(keys).sum(),
            "ss_take_up": (dev_d * dev_d).groupby(keys).sum(),
        }
    )
    labels = sorted(frame["s"].unique())
    full = pd.MultiIndex.from_product([labels, [0, 1]])
    table = table.reindex(full, fill_value=0)
    return {name: table[name].to_numpy().reshape(-1, 2) for name in CELL_FIELDS}


def raw_sums(frame: pd.DataFrame) -> pd.DataFrame:
    """Per-(stratum, offer) raw sums, as a database would return them."""
    work = frame.assign(yy=frame["y"] ** 2, dd=frame["d"] ** 2, yd=frame["y"] * frame["d"])
    grouped = work.groupby(["s", "z"])
    out = pd.DataFrame(
        {
            "n": grouped.size(),
            "sum_outcome": grouped["y"].sum(),
            "sum_take_up": grouped["d"].sum(),
            "sum_outcome_sq": grouped["yy"].sum(),
            "sum_take_up_sq": grouped["dd"].sum(),
            "sum_cross": grouped["yd"].sum(),
        }
    )
    return out.reset_index().rename(columns={"s": "stratum", "z": "offer"})


# ---------------------------------------------------------------- build_cells vs pandas


def test_build_cells_matches_a_direct_groupby_of_counts_means_and_centred_sums(kernel):
    frame = lottery()
    cells = cells_of(frame)
    # common practice, no source: direct two-pass sums per (stratum, offer) in pandas
    expected = direct_table(frame)
    assert cells.labels == (10, 20, 30, 40, 50)
    np.testing.assert_array_equal(cells.n, expected["n"])
    for name in CELL_FIELDS[1:]:
        got = getattr(cells, name)
        scale = np.abs(expected[name]).max()
        np.testing.assert_allclose(
            got, expected[name], rtol=1e-12, atol=1e-12 * scale, err_msg=name
        )
    assert cells.n_units == len(frame)


def test_an_empty_cell_has_zero_count_mean_and_sums(kernel):
    cells = cells_of(lottery())
    row = cells.labels.index(50)
    # source: CONTRACT.md, "mean_outcome (K,2)" with 0 for an empty cell (cells.py docstring)
    assert cells.n[row, 0] == 0
    for name in CELL_FIELDS[1:]:
        assert getattr(cells, name)[row, 0] == 0.0, name


# ---------------------------------------------------------------- cells_from_frame


def test_cells_from_raw_sums_reproduce_the_cell_table(kernel):
    frame = lottery()
    direct = cells_of(frame)
    from_sums = cells_from_frame(raw_sums(frame))
    assert from_sums.labels == direct.labels
    np.testing.assert_array_equal(from_sums.n, direct.n)
    for name in CELL_FIELDS[1:]:
        scale = np.abs(getattr(direct, name)).max()
        # common practice, no source: both tables describe the same rows
        np.testing.assert_allclose(
            getattr(from_sums, name),
            getattr(direct, name),
            rtol=1e-10,
            atol=1e-10 * scale,
            err_msg=name,
        )


@pytest.mark.parametrize(("variance", "assignment", "sampling"), FLAVOURS)
def test_cells_from_raw_sums_give_the_same_fits_as_rows(kernel, variance, assignment, sampling):
    frame = lottery()
    options = {"variance": variance, "assignment": assignment, "sampling": sampling}
    direct = fit_all(cells_of(frame), **options).to_dict()
    from_sums = fit_all(cells_from_frame(raw_sums(frame)), **options).to_dict()
    # common practice, no source: identical sufficient statistics give identical fits
    assert_close(from_sums, direct, rtol=1e-10, floor=1.0)


def test_cells_from_frame_leaves_the_frame_unmodified():
    sums = raw_sums(lottery())
    before = sums.copy(deep=True)
    cells_from_frame(sums)
    # common practice, no source: inputs are never modified (STYLE.md)
    pd.testing.assert_frame_equal(sums, before)


# ---------------------------------------------------------------- precision


def large_mean_pair() -> tuple[pd.DataFrame, pd.DataFrame]:
    """The lottery with outcome mean near 1e9 and spread about 1, and the same minus 1e9.

    The subtraction is exact (Sterbenz), so both frames hold the same numbers.
    """
    small = lottery(level=0.0)
    big = small.assign(y=small["y"] + 1e9)
    shifted = big.assign(y=big["y"] - 1e9)
    return big, shifted


def test_large_mean_outcome_keeps_per_cell_variance_of_the_shifted_data(kernel):
    big, shifted = large_mean_pair()
    cells = cells_of(big)
    grouped = shifted.groupby(["s", "z"])["y"]
    for (label, arm), values in grouped:
        row = cells.labels.index(label)
        got = cells.ss_outcome[row, arm] / (cells.n[row, arm] - 1)
        # reference: numpy two-pass var (ddof=1) on the outcome minus 1e9; numpy's two-pass on
        # the unshifted outcome itself agrees with it to about 3e-14 here
        expected = np.var(values.to_numpy(), ddof=1)
        assert got == pytest.approx(expected, rel=1e-10), (label, arm)


def test_large_mean_outcome_keeps_per_cell_cross_products_of_the_shifted_data(kernel):
    big, shifted = large_mean_pair()
    cells = cells_of(big)
    # common practice, no source: direct two-pass sums on the outcome minus 1e9
    expected = direct_table(shifted)["ss_cross"]
    np.testing.assert_allclose(
        cells.ss_cross, expected, rtol=1e-10, atol=1e-10 * np.abs(expected).max()
    )


@pytest.mark.parametrize(("variance", "assignment", "sampling"), FLAVOURS)
@pytest.mark.parametrize("estimator", ESTIMATORS)
def test_large_mean_outcome_gives_the_estimates_and_errors_of_the_shifted_outcome(
    kernel, estimator, variance, assignment, sampling
):
    big, shifted = large_mean_pair()
    options = {
        "estimator": estimator,
        "variance": variance,
        "assignment": assignment,
        "sampling": sampling,
    }
    at_level = fit(cells_of(big), **options)
    reference = fit(cells_of(shifted), **options)
    # from memory: a mean near 1e9 is stored to half a spacing (np.spacing(1e9) = 1.19e-7), so
    # an ITT carries about two spacings of error and the ratio that over the first stage
    tolerance = 4.0 * np.spacing(1e9) / abs(reference.first_stage)
    # common practice, no source: shifting the outcome by a constant leaves the effect unchanged
    assert abs(at_level.estimate - reference.estimate) <= tolerance
    # common practice, no source: and leaves every variance unchanged
    assert at_level.std_error == pytest.approx(reference.std_error, rel=1e-6)
    assert at_level.itt_std_error == pytest.approx(reference.itt_std_error, rel=1e-6)


@pytest.mark.parametrize("estimator", ESTIMATORS)
def test_large_mean_outcome_gives_the_cluster_errors_of_the_shifted_outcome(estimator):
    frame = clustered_lottery()
    big = frame.assign(y=frame["y"] - frame["y"].mean() + 1e9)
    shifted = big.assign(y=big["y"] - 1e9)
    options = {"estimator": estimator, "variance": "cluster"}
    at_level = fit(cells_of(big, cluster=big["g"]), **options)
    reference = fit(cells_of(shifted, cluster=shifted["g"]), **options)
    # common practice, no source: shifting the outcome by a constant leaves every variance
    assert at_level.std_error == pytest.approx(reference.std_error, rel=1e-6)


def test_large_mean_outcome_keeps_the_cluster_sums_of_the_shifted_data():
    frame = clustered_lottery()
    big = frame.assign(y=frame["y"] - frame["y"].mean() + 1e9)
    shifted = big.assign(y=big["y"] - 1e9)  # exact (Sterbenz): the same numbers
    at_level = cells_of(big, cluster=big["g"]).clusters
    reference = cells_of(shifted, cluster=shifted["g"]).clusters
    for name in ("q_outcome", "q_cross"):
        expected = getattr(reference, name)
        # common practice, no source: cluster deviations from the cell mean ignore the level
        np.testing.assert_allclose(
            getattr(at_level, name),
            expected,
            rtol=1e-10,
            atol=1e-10 * np.abs(expected).max(),
            err_msg=name,
        )


# ---------------------------------------------------------------- labels


def _label_frame(labels: list[Any]) -> pd.DataFrame:
    frame = lottery()
    codes = {old: new for old, new in zip((10, 20, 30, 40, 50), labels, strict=True)}
    return frame.assign(s=frame["s"].map(codes).astype(object))


@pytest.mark.parametrize(
    "labels",
    [
        ["north", "south", "east", "west", "hill"],
        [7, -3, 12, 0, 99],
        [0.5, 2.25, -1.5, 10.0, 3.75],
        ["north", 7, 2.25, "west", -3],
    ],
    ids=["strings", "ints", "floats", "mixed"],
)
@pytest.mark.parametrize("container", ["object_array", "series", "list"])
def test_stratum_labels_of_any_kind_are_kept_as_given(labels, container):
    frame = _label_frame(labels)
    column = {
        "object_array": frame["s"].to_numpy(dtype=object),
        "series": frame["s"],
        "list": frame["s"].tolist(),
    }[container]
    cells = build_cells(frame["y"], frame["d"], frame["z"], column)
    # common practice, no source: labels are only names; each given value comes back unchanged
    assert set(cells.labels) == set(labels)
    assert {type(v) for v in cells.labels} == {type(v) for v in labels}
    reference = cells_of(_label_frame([10, 20, 30, 40, 50]))
    for old, new in zip((10, 20, 30, 40, 50), labels, strict=True):
        np.testing.assert_array_equal(
            cells.n[cells.labels.index(new)], reference.n[reference.labels.index(old)]
        )
    comparison = fit_all(cells, offer_probability={v: 0.5 for v in labels})
    assert {row.label for row in comparison.strata.rows} | {
        e.label for e in comparison.strata.excluded
    } == set(labels)


# ---------------------------------------------------------------- bad inputs


def _arrays() -> dict[str, Any]:
    return {
        "outcome": np.array([1.0, 2.0, 3.0, 4.0, 5.0, 6.0]),
        "take_up": np.array([0, 1, 0, 1, 1, 0]),
        "offer": np.array([0, 1, 0, 1, 1, 0]),
        "stratum": np.array(["a", "a", "a", "b", "b", "b"]),
    }


def test_a_non_binary_offer_is_rejected_with_its_value_and_index(kernel):
    args = _arrays()
    args["offer"] = np.array([0, 1, 0, 2, 1, 0])
    # source: STYLE.md, a message names the value found and where
    with pytest.raises(InputError, match=r"^offer: expected only 0 and 1, found 2 at index 3;"):
        build_cells(**args)


def test_a_non_binary_take_up_is_rejected_with_its_value_and_index(kernel):
    args = _arrays()
    args["take_up"] = pd.Series([0.0, 1.0, 0.5, 1.0, 1.0, 0.0])
    # source: STYLE.md, a message names the value found and where
    with pytest.raises(
        InputError, match=r"^take_up: expected only 0 and 1, found 0\.5 at index 2;"
    ):
        build_cells(**args)


def test_a_nan_outcome_is_rejected_with_its_index(kernel):
    args = _arrays()
    args["outcome"] = pd.Series([1.0, np.nan, 3.0, 4.0, 5.0, 6.0])
    # source: STYLE.md, a message names the value found and where
    with pytest.raises(InputError, match=r"^outcome: non-finite value nan at index 1;"):
        build_cells(**args)


def test_arrays_of_different_lengths_are_rejected_with_every_length():
    args = _arrays()
    args["offer"] = np.array([0, 1, 0, 1, 1])
    # source: STYLE.md, a message says what is wrong and how to fix it
    with pytest.raises(InputError, match=r"lengths differ: .*'offer': 5.*one value per unit"):
        build_cells(**args)


def test_a_two_dimensional_input_is_rejected_with_its_shape():
    args = _arrays()
    args["take_up"] = np.array([[0, 1], [0, 1], [1, 0]])
    # source: STYLE.md, a message says what is wrong and the value found
    with pytest.raises(
        InputError,
        match=r"^take_up: expected a one-dimensional array, got shape "
        r"\(3, 2\)",
    ):
        build_cells(**args)


@pytest.mark.parametrize("missing", [None, np.nan])
def test_a_missing_stratum_label_is_rejected_with_its_index(missing):
    args = _arrays()
    args["stratum"] = np.array(["a", "a", "a", missing, "b", "b"], dtype=object)
    # source: STYLE.md, a message says what is wrong and where
    with pytest.raises(InputError, match=r"^stratum: missing label at index 3;") as caught:
        build_cells(**args)
    assert caught.value.argument == "stratum"


def test_an_empty_input_is_rejected():
    args = {key: value[:0] for key, value in _arrays().items()}
    # source: CONTRACT.md, build_cells raises InputError on bad shapes
    with pytest.raises(InputError, match=r"no units"):
        build_cells(**args)


# ---------------------------------------------------------------- inputs unmodified


@pytest.mark.parametrize("container", ["numpy", "pandas"])
def test_build_cells_and_fit_leave_their_inputs_unmodified(kernel, container):
    frame = lottery()
    frame["g"] = np.arange(len(frame))
    names = ("y", "d", "z", "s", "g")
    if container == "numpy":
        inputs = {name: frame[name].to_numpy().copy() for name in names}
    else:
        inputs = {name: frame[name].copy() for name in names}
    before = {name: value.copy() for name, value in inputs.items()}
    plain = build_cells(inputs["y"], inputs["d"], inputs["z"], inputs["s"])
    cells = build_cells(inputs["y"], inputs["d"], inputs["z"], inputs["s"], cluster=inputs["g"])
    arrays_before = {name: getattr(cells, name).copy() for name in CELL_FIELDS}
    fit_all(plain, variance="robust")
    fit_all(cells, variance="cluster")
    for name in names:
        # common practice, no source: inputs are never modified (STYLE.md)
        if container == "numpy":
            np.testing.assert_array_equal(inputs[name], before[name])
            assert inputs[name].dtype == before[name].dtype
        else:
            pd.testing.assert_series_equal(inputs[name], before[name])
    for name in CELL_FIELDS:
        # common practice, no source: fitting never writes into the cell table
        np.testing.assert_array_equal(getattr(cells, name), arrays_before[name])


# ---------------------------------------------------------------- clusters


def clustered_lottery(seed: int = SEED) -> pd.DataFrame:
    """The lottery with households of 1 to 4 units nested in (stratum, offer) cells."""
    rng = np.random.default_rng(seed + 1)
    frame = lottery(seed).sort_values(["s", "z"], kind="stable").reset_index(drop=True)
    cell = frame["s"].astype(str) + "-" + frame["z"].astype(str)
    ids = []
    counter = 0
    for _, size in cell.value_counts(sort=False).items():
        left = size
        while left > 0:
            take = min(left, int(rng.integers(1, 5)))
            ids.extend([f"h{counter}"] * take)
            counter += 1
            left -= take
    frame["g"] = ids
    return frame.iloc[rng.permutation(len(frame))].reset_index(drop=True)


def test_cluster_sums_match_a_direct_groupby_of_cluster_deviations():
    frame = clustered_lottery()
    cells = cells_of(frame, cluster=frame["g"])
    keys = [frame["s"], frame["z"]]
    dev = pd.DataFrame(
        {
            "y": frame["y"] - frame.groupby(keys)["y"].transform("mean"),
            "d": frame["d"] - frame.groupby(keys)["d"].transform("mean"),
            "s": frame["s"],
            "z": frame["z"],
            "g": frame["g"],
        }
    )
    totals = dev.groupby(["s", "z", "g"])[["y", "d"]].sum()
    per_cell = pd.DataFrame(
        {
            "count": totals.groupby(level=[0, 1]).size(),
            "q_outcome": (totals["y"] ** 2).groupby(level=[0, 1]).sum(),
            "q_cross": (totals["y"] * totals["d"]).groupby(level=[0, 1]).sum(),
            "q_take_up": (totals["d"] ** 2).groupby(level=[0, 1]).sum(),
        }
    ).reindex(pd.MultiIndex.from_product([cells.labels, [0, 1]]), fill_value=0)
    for name in ("count", "q_outcome", "q_cross", "q_take_up"):
        expected = per_cell[name].to_numpy().reshape(-1, 2)
        # common practice, no source: sum deviations within a cluster, then square and add
        np.testing.assert_allclose(
            getattr(cells.clusters, name),
            expected,
            rtol=1e-12,
            atol=1e-12 * np.abs(expected).max(),
            err_msg=name,
        )


@pytest.mark.parametrize("estimator", ESTIMATORS)
def test_cluster_variance_gives_finite_errors_for_every_estimator(estimator):
    frame = clustered_lottery()
    result = fit(cells_of(frame, cluster=frame["g"]), estimator=estimator, variance="cluster")
    assert result.variance == "cluster"
    # common practice, no source: a variance of a non-degenerate design is positive and finite
    assert math.isfinite(result.std_error) and result.std_error > 0
    assert result.estimate == pytest.approx(
        fit(cells_of(frame), estimator=estimator).estimate, rel=1e-12
    )


@pytest.mark.parametrize("sampling", ["fixed", "random"])
@pytest.mark.parametrize("estimator", ESTIMATORS)
def test_duplicating_each_unit_into_a_two_unit_cluster_changes_neither_estimate_nor_error(
    estimator, sampling
):
    frame = lottery()
    frame = frame[frame["s"] != 50].reset_index(drop=True)
    single = cells_of(frame, cluster=np.arange(len(frame)))
    doubled_frame = pd.concat([frame, frame], ignore_index=True)
    doubled = cells_of(doubled_frame, cluster=np.tile(np.arange(len(frame)), 2))
    options = {"estimator": estimator, "variance": "cluster", "sampling": sampling}
    one, two = fit(single, **options), fit(doubled, **options)
    # common practice, no source: identical copies change no mean
    assert two.estimate == pytest.approx(one.estimate, rel=1e-12)
    # from METHODS.md §4 (cluster form): a pair of copies doubles the cluster deviation, so
    # kappa^2 Q is unchanged (kappa halves, Q quadruples) and G is the same; under random
    # sampling the between term weighs strata by the sum of squared cluster sizes, which
    # quadruples while h^2 falls by four: equal errors
    assert two.std_error == pytest.approx(one.std_error, rel=1e-10)


@pytest.mark.parametrize("estimator", ESTIMATORS)
def test_singleton_clusters_give_exactly_the_stratified_variance(estimator):
    rng = np.random.default_rng(SEED + 2)
    m, strata = 9, 4
    s = np.repeat(np.arange(strata), 2 * m)
    z = np.tile(np.repeat([0, 1], m), strata)
    d = np.where(rng.random(s.size) < 0.25, 1 - z, z)
    y = rng.normal(size=s.size) + (1.0 + s) * d
    options = {"estimator": estimator, "sampling": "fixed"}
    stratified = fit(build_cells(y, d, z, s), **options)
    clustered = fit(
        build_cells(y, d, z, s, cluster=np.arange(s.size)), variance="cluster", **options
    )
    # source: METHODS.md §4, per-cell scale G_sz/(G_sz - 1): with singleton clusters
    # Q_sz = (m-1) S^2_sz and G_sz = m, so Q_sz G_sz/(G_sz-1) = m S^2_sz, the stratified n_sz S^2
    assert clustered.std_error == pytest.approx(stratified.std_error, rel=1e-12)


def test_a_cluster_spanning_two_cells_is_rejected_with_its_id_and_index():
    args = _arrays()
    args["cluster"] = np.array(["g1", "g1", "g2", "g3", "g3", "g4"])
    # source: METHODS.md §2, clusters are nested in (stratum, offer) cells
    with pytest.raises(
        InputError,
        match=r"^cluster: cluster 'g1' \(index 1\) spans more than one "
        r"\(stratum, offer\) cell",
    ):
        build_cells(**args)

"""The moment path (issue 8, point 2): one GROUP BY query run by DuckDB, read by
`cells_from_moments`, gives the cell table of `build_cells` (the in-memory route).

Data: the committed demo (demo_data/round_*.csv, stratum ``district``, as in specs/demo.yaml)
and one seeded draw of 1,000,000 units in 200 strata and 100,000 clusters, written to a
Parquet file in a temporary folder (seed below). Neither is a simulation study.
"""

from __future__ import annotations

from pathlib import Path

import duckdb
import numpy as np
import pandas as pd
import pytest
from core_support import assert_close

from strativ.cli.duckdb_engine import SOURCE_VIEW, moment_frame, run_query
from strativ.estimators import (
    CellTable,
    InputError,
    build_cells,
    cells_from_moments,
    fit_all,
    moment_query,
)
from strativ.estimators.moments import MOMENT_COLUMNS, moment_columns

SEED = 20260408
DEMO_DIR = Path(__file__).resolve().parents[1] / "demo_data"
DEMO_ROLES = {
    "outcome": "gas_therms",
    "take_up": "retrofitted",
    "offer": "won_lottery",
    "stratum": "district",
}
DEMO_COVARIATES = ("baseline_therms", "home_age_years", "household_size")
CELL_FIELDS = ("mean_outcome", "mean_take_up", "ss_outcome", "ss_cross", "ss_take_up")
CLUSTER_FIELDS = ("q_outcome", "q_cross", "q_take_up", "size_sq")
RTOL = 1e-12


def demo_rows() -> pd.DataFrame:
    return pd.concat(
        [pd.read_csv(path) for path in sorted(DEMO_DIR.glob("round_*.csv"))], ignore_index=True
    )


def cells_of(frame: pd.DataFrame, roles: dict[str, str], cluster: str | None = None) -> CellTable:
    return build_cells(
        frame[roles["outcome"]].to_numpy(),
        frame[roles["take_up"]].to_numpy(),
        frame[roles["offer"]].to_numpy(),
        frame[roles["stratum"]].to_numpy(),
        cluster=None if cluster is None else frame[cluster].to_numpy(),
    )


def assert_within(actual: np.ndarray, expected: np.ndarray, scale: np.ndarray, name: str) -> None:
    """|actual - expected| <= RTOL * max(|expected|, scale), element by element."""
    bound = RTOL * np.maximum(np.abs(expected), scale)
    worst = np.abs(actual - expected) - bound
    assert (worst <= 0).all(), (name, float(np.max(np.abs(actual - expected) / bound)))


def assert_same_table(actual: CellTable, expected: CellTable) -> None:
    """Counts identical; every other array to RTOL of itself, or of the Cauchy-Schwarz bound
    of a cross-product that nearly cancels."""
    assert actual.labels == expected.labels
    np.testing.assert_array_equal(actual.n, expected.n)
    scales = {
        "mean_outcome": np.abs(expected.mean_outcome),
        "mean_take_up": np.abs(expected.mean_take_up),
        "ss_outcome": expected.ss_outcome,
        "ss_cross": np.sqrt(expected.ss_outcome * expected.ss_take_up),
        "ss_take_up": expected.ss_take_up,
    }
    for name in CELL_FIELDS:
        assert_within(getattr(actual, name), getattr(expected, name), scales[name], name)
    if expected.clusters is None:
        assert actual.clusters is None
        return
    got, ref = actual.clusters, expected.clusters
    np.testing.assert_array_equal(got.count, ref.count)
    scales = {
        "q_outcome": ref.q_outcome,
        "q_cross": np.sqrt(ref.q_outcome * ref.q_take_up),
        "q_take_up": ref.q_take_up,
        "size_sq": ref.size_sq,
        # sizes times deviations that sum to zero per cell: bounded by sqrt(size_sq * q)
        "size_dev_outcome": np.sqrt(ref.size_sq * ref.q_outcome),
        "size_dev_take_up": np.sqrt(ref.size_sq * ref.q_take_up),
    }
    for name, scale in scales.items():
        assert_within(getattr(got, name), getattr(ref, name), scale, f"clusters.{name}")


def clustered_units(seed: int = SEED, n_units: int = 1_000_000, level: float = 50.0):
    """Units in 200 strata of 500 households each, offers by household, two-sided
    non-compliance within households, stratum-specific offer shares, levels and effects."""
    rng = np.random.default_rng(seed)
    n_strata, n_clusters = 200, 100_000
    cluster = rng.integers(0, n_clusters, n_units)
    stratum = cluster // (n_clusters // n_strata)
    share = 0.2 + 0.6 * rng.random(n_strata)
    offer = (rng.random(n_clusters) < share[np.arange(n_clusters) // 500]).astype(np.int8)
    offer = offer[cluster]
    take_up = (rng.random(n_units) < 0.1 + 0.6 * offer).astype(np.int8)
    effect = 1.0 + rng.normal(size=n_strata)
    outcome = (
        level
        + 5.0 * rng.random(n_strata)[stratum]
        + effect[stratum] * take_up
        + rng.normal(size=n_clusters)[cluster]
        + rng.normal(size=n_units)
    )
    return pd.DataFrame({"s": stratum, "z": offer, "d": take_up, "g": cluster, "y": outcome})


UNIT_ROLES = {"outcome": "y", "take_up": "d", "offer": "z", "stratum": "s"}


@pytest.fixture(scope="module")
def million(tmp_path_factory: pytest.TempPathFactory) -> tuple[pd.DataFrame, Path]:
    frame = clustered_units()
    path = tmp_path_factory.mktemp("moments") / "units.parquet"
    frame.to_parquet(path)
    return frame, path


# ---------------------------------------------------------------- the column list and the SQL


def test_moment_columns_are_declared_once_and_grow_with_covariates():
    assert [c.name for c in MOMENT_COLUMNS] == ["n", "sum_outcome", "sum_outcome_sq"]
    names = [c.name for c in moment_columns(2)]
    assert names == [
        "n",
        "sum_outcome",
        "sum_x1",
        "sum_x2",
        "sum_outcome_sq",
        "sum_outcome_x1",
        "sum_outcome_x2",
        "sum_x1_sq",
        "sum_x1_x2",
        "sum_x2_sq",
    ]


def test_query_quotes_every_user_name():
    sql = moment_query(
        ("lake", "units`v2"),
        outcome="gas therms",
        take_up="d",
        offer="z",
        stratum="site; DROP TABLE x",
    )
    assert "FROM `lake`.`units``v2`" in sql
    assert "CAST(r.`gas therms` AS DOUBLE)" in sql
    assert "GROUP BY `site; DROP TABLE x`" in sql


def test_query_runs_on_awkward_column_names():
    rows = demo_rows()
    renamed = {"gas_therms": "gas therms (kWh)", "district": "dis`trict", "retrofitted": "n"}
    frame = rows.rename(columns=renamed)
    roles = {role: renamed.get(name, name) for role, name in DEMO_ROLES.items()}
    got = cells_from_moments(moment_frame(frame, **roles))
    # reference: build_cells (in-memory route)
    assert_same_table(got, cells_of(rows, DEMO_ROLES))


def test_query_refuses_a_column_named_for_two_roles():
    with pytest.raises(InputError, match="column 'y' is named for two roles"):
        moment_query("t", outcome="y", take_up="d", offer="z", stratum="y")


# ---------------------------------------------------------------- the demo


def test_demo_moment_path_equals_build_cells():
    rows = demo_rows()
    got = cells_from_moments(moment_frame(rows, **DEMO_ROLES))
    # reference: build_cells (in-memory route)
    assert_same_table(got, cells_of(rows, DEMO_ROLES))


def test_demo_moment_path_reads_the_csv_files_themselves():
    paths = sorted(DEMO_DIR.glob("round_*.csv"))
    frames = [moment_frame(path, **DEMO_ROLES) for path in paths]
    got = cells_from_moments(pd.concat(frames, ignore_index=True))
    # reference: build_cells (in-memory route), on the three files stacked
    assert_same_table(got, cells_of(demo_rows(), DEMO_ROLES))


def test_demo_fit_all_is_the_same_from_moments():
    rows = demo_rows()
    got = fit_all(cells_from_moments(moment_frame(rows, **DEMO_ROLES))).to_dict()
    # reference: build_cells (in-memory route), then fit_all
    expected = fit_all(cells_of(rows, DEMO_ROLES)).to_dict()
    assert_close(got, expected, rtol=RTOL)


def test_printed_sql_run_by_duckdb_reproduces_the_table():
    rows = demo_rows()
    sql = moment_query("insulation_rounds", **DEMO_ROLES)
    connection = duckdb.connect()
    connection.register("insulation_rounds", rows)
    result = connection.execute(sql).df()
    connection.close()
    # reference: build_cells (in-memory route)
    assert_same_table(cells_from_moments(result), cells_of(rows, DEMO_ROLES))


def test_covariate_moments_equal_direct_sums_of_the_stratum_centred_values():
    rows = demo_rows()
    frame = moment_frame(rows, covariates=DEMO_COVARIATES, **DEMO_ROLES)
    names = dict(zip(("x1", "x2", "x3"), DEMO_COVARIATES, strict=True))
    names["outcome"] = DEMO_ROLES["outcome"]
    centred = pd.DataFrame(
        {v: rows[col] - rows.groupby("district")[col].transform("min") for v, col in names.items()}
    )
    keys = [rows["district"], rows["won_lottery"], rows["retrofitted"]]
    frame = frame.set_index(["stratum", "offer", "take_up"]).sort_index()
    for column in moment_columns(len(DEMO_COVARIATES))[1:]:
        product = np.prod([centred[f].to_numpy() for f in column.factors], axis=0)
        # common practice, no source: pandas group sums of the stratum-centred products
        expected = pd.Series(product).groupby(keys).sum().sort_index()
        np.testing.assert_allclose(
            frame[column.name].to_numpy(), expected.to_numpy(), rtol=RTOL, err_msg=column.name
        )
    np.testing.assert_array_equal(frame["n_missing_x3"].to_numpy(), 0)


def test_tables_aggregated_apart_with_their_own_centres_combine():
    rows = demo_rows()
    halves = [rows.iloc[: len(rows) // 2], rows.iloc[len(rows) // 2 :]]
    parts = [moment_frame(part, **DEMO_ROLES) for part in halves]
    # the halves have different stratum minima, so their centres differ
    assert not parts[0]["centre_outcome"].isin(parts[1]["centre_outcome"]).all()
    got = cells_from_moments(pd.concat(parts, ignore_index=True))
    # reference: build_cells (in-memory route), on all rows
    assert_same_table(got, cells_of(rows, DEMO_ROLES))


# ---------------------------------------------------------------- one million units


def test_million_units_with_clusters_equal_build_cells(million):
    frame, path = million
    moments = moment_frame(path, cluster="g", **UNIT_ROLES)
    got = cells_from_moments(moments)
    # reference: build_cells (in-memory route), numpy kernel with clusters
    expected = cells_of(frame, UNIT_ROLES, cluster="g")
    assert_same_table(got, expected)
    for variance in ("stratified", "cluster"):
        # reference: build_cells (in-memory route), then fit_all
        reference = fit_all(expected, variance=variance).to_dict()
        assert_close(fit_all(got, variance=variance).to_dict(), reference, rtol=RTOL)


def test_million_units_without_clusters_equal_the_compiled_pass(million):
    frame, path = million
    got = cells_from_moments(moment_frame(path, **UNIT_ROLES))
    # reference: build_cells (in-memory route), the single compiled pass from 1M rows on
    expected = cells_of(frame, UNIT_ROLES)
    assert_same_table(got, expected)
    # reference: build_cells (in-memory route), then fit_all
    assert_close(fit_all(got).to_dict(), fit_all(expected).to_dict(), rtol=RTOL)


def test_large_outcome_level_keeps_precision():
    frame = clustered_units(n_units=100_000, level=0.0)
    frame["y"] = frame["y"] - frame["y"].mean() + 1e9
    got = cells_from_moments(moment_frame(frame, cluster="g", **UNIT_ROLES))
    # reference: build_cells (in-memory route); both store the means at the level, and every
    # centred sum must keep 12 digits though the level is 1e9 and the spread about 1
    expected = cells_of(frame, UNIT_ROLES, cluster="g")
    assert_same_table(got, expected)
    shifted = frame.assign(y=frame["y"] - 1e9)  # exact (Sterbenz): the same spreads
    # reference: build_cells (in-memory route) on the outcome minus 1e9
    small = cells_of(shifted, UNIT_ROLES, cluster="g")
    for name in ("ss_outcome", "ss_cross"):
        assert_within(getattr(got, name), getattr(small, name), getattr(small, name), name)
    estimates = fit_all(got).estimates
    reference = fit_all(small).estimates
    for at_level, ref in zip(estimates, reference, strict=True):
        # from memory: a mean near 1e9 is stored to half a spacing (np.spacing(1e9) = 1.19e-7),
        # so an ITT carries about two spacings of error and the ratio that over the first stage
        assert abs(at_level.estimate - ref.estimate) <= 4 * np.spacing(1e9) / ref.first_stage
        # common practice, no source: shifting the outcome leaves the variance unchanged
        assert at_level.std_error == pytest.approx(ref.std_error, rel=1e-6)


# ---------------------------------------------------------------- refusals and inputs


def test_a_cluster_spanning_two_cells_is_refused():
    rows = demo_rows().assign(household="h1")
    moments = moment_frame(rows, cluster="household", **DEMO_ROLES)
    with pytest.raises(InputError, match="cluster 'h1' .* spans more than one"):
        cells_from_moments(moments)


def test_a_missing_outcome_is_refused_naming_the_stratum():
    rows = demo_rows()
    rows.loc[3, "gas_therms"] = np.nan
    moments = moment_frame(rows, **DEMO_ROLES)
    stratum = rows.loc[3, "district"]
    with pytest.raises(InputError, match=f"1 missing values in stratum '{stratum}'"):
        cells_from_moments(moments)


def test_a_frame_without_the_centre_is_refused():
    moments = moment_frame(demo_rows(), **DEMO_ROLES).drop(columns="centre_outcome")
    with pytest.raises(InputError, match=r"missing columns \['centre_outcome'\]"):
        cells_from_moments(moments)


def test_an_offer_code_other_than_zero_or_one_is_refused():
    moments = moment_frame(demo_rows(), **DEMO_ROLES)
    moments.loc[0, "offer"] = 2
    with pytest.raises(InputError, match="expected only 0 and 1, found 2"):
        cells_from_moments(moments)


def test_cells_from_moments_leaves_its_input_unchanged():
    moments = moment_frame(demo_rows(), **DEMO_ROLES)
    before = moments.copy(deep=True)
    cells_from_moments(moments)
    pd.testing.assert_frame_equal(moments, before)


def test_duckdb_errors_become_data_errors_naming_the_file(tmp_path):
    from strativ.cli.errors import DataError

    path = tmp_path / "rounds.csv"
    demo_rows().to_csv(path, index=False)
    with pytest.raises(DataError, match="the moment query failed") as caught:
        run_query(moment_query(SOURCE_VIEW, **{**DEMO_ROLES, "outcome": "gas"}), path)
    assert caught.value.file == path

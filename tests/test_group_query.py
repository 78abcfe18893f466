"""The run's grouped query (`group_query`) gives `build_cells`' table, whatever the centre.

Reference: `build_cells` (the in-memory route) on the same rows. Data: one seeded draw of
30,000 units (seed below) at a large outcome level; not a simulation study.
"""

from __future__ import annotations

import duckdb
import numpy as np
import pandas as pd
import pytest

from strativ.estimators import InputError, build_cells, cells_from_moments, group_query

SEED = 20261203


def _units() -> pd.DataFrame:
    rng = np.random.default_rng(SEED)
    n = 30_000
    stratum = rng.integers(0, 6, n)
    # the first rows hold only strata 0 and 1, so the other strata take the overall centre
    stratum[:50] = np.arange(50) % 2
    offer = (rng.random(n) < 0.2 + 0.1 * stratum).astype(np.int64)
    take_up = np.where(rng.random(n) < 0.75, offer, rng.integers(0, 2, n))
    y = 1e9 + 40.0 * stratum + 0.5 * take_up + rng.normal(0.0, 1.0, n)
    y[rng.random(n) < 0.05] = np.nan
    return pd.DataFrame({"s": stratum, "z": offer, "d": take_up, "y": y})


def _cells(frame: pd.DataFrame):
    return cells_from_moments(pd.DataFrame({
        "stratum": frame["s"], "offer": frame["z"], "take_up": frame["d"],
        "n": frame["n_y"], "sum_outcome": frame["sum_y"], "sum_outcome_sq": frame["sum_y_sq"],
        "centre_outcome": frame["centre_y"]})[frame["n_y"] > 0].reset_index(drop=True))


@pytest.mark.parametrize("centre_rows", [None, 50, 100_000])
@pytest.mark.parametrize("total", ["SUM", "FSUM"])
def test_grouped_moments_equal_build_cells_at_a_large_level(centre_rows, total) -> None:
    units = _units()
    sql = group_query("units", keys=["s", "z", "d"], centre_keys=["s"], outcomes=["y"],
                      total=total, centre_rows=centre_rows)
    connection = duckdb.connect()
    connection.register("units", units)
    got = _cells(connection.execute(sql).df())
    kept = units.dropna(subset=["y"])
    # reference: build_cells (in-memory route) on the rows with the outcome
    want = build_cells(kept["y"].to_numpy(), kept["d"].to_numpy(), kept["z"].to_numpy(),
                       kept["s"].to_numpy())
    assert np.array_equal(got.n, want.n)
    # by construction: the within-cell spread is about 1 at a level of 1e9; 12 digits of
    # every centred sum must survive (uncentred sums of these rows miss by a factor of
    # thousands)
    np.testing.assert_allclose(got.ss_outcome, want.ss_outcome, rtol=1e-10)
    np.testing.assert_allclose(got.ss_cross, want.ss_cross, rtol=1e-10, atol=1e-6)
    np.testing.assert_allclose(got.mean_outcome - 1e9, want.mean_outcome - 1e9, atol=1e-6)


def test_the_query_refuses_a_bad_centre_count_or_a_repeated_column() -> None:
    with pytest.raises(InputError, match="positive whole number"):
        group_query("units", keys=["s"], centre_keys=["s"], outcomes=["y"], centre_rows=0)
    with pytest.raises(InputError, match="named twice"):
        group_query("units", keys=["s", "y"], centre_keys=["s"], outcomes=["y"])
    with pytest.raises(InputError, match="SUM or FSUM"):
        group_query("units", keys=["s"], centre_keys=["s"], outcomes=["y"], total="AVG")


def _with_covariates() -> pd.DataFrame:
    units = _units()
    rng = np.random.default_rng(SEED + 1)
    n = len(units)
    units["a"] = 5e6 + rng.normal(0.0, 2.0, n) + units["s"]
    units["b"] = rng.integers(0, 2, n).astype(float)
    units.loc[rng.random(n) < 0.03, "a"] = np.nan
    units.loc[rng.random(n) < 0.02, "b"] = np.nan
    return units


@pytest.mark.parametrize("centre_rows", [None, 50])
def test_covariate_moments_equal_direct_sums_of_the_centred_values(centre_rows) -> None:
    units = _with_covariates()
    sql = group_query("units", keys=["s", "z", "d"], centre_keys=["s"], outcomes=["y"],
                      covariates=["a", "b"], total="FSUM", centre_rows=centre_rows)
    connection = duckdb.connect()
    connection.register("units", units)
    got = connection.execute(sql).df().set_index(["s", "z", "d"]).sort_index()
    for key, rows in units.groupby(["s", "z", "d"]):
        row = got.loc[key]
        # reference: numpy sums of each value minus the centre the query reports; a missing
        # covariate counts as its centre (a zero after centring)
        centred = {v: rows[v].to_numpy() - row[f"centre_{v}"] for v in ("y", "a", "b")}
        filled = {x: np.nan_to_num(centred[x], nan=0.0) for x in ("a", "b")}
        has_y = ~np.isnan(centred["y"])
        for x in ("a", "b"):
            assert row[f"n_{x}"] == np.count_nonzero(~np.isnan(centred[x]))
            assert row[f"sum_{x}"] == pytest.approx(np.nansum(centred[x]), rel=1e-12, abs=1e-9)
            assert row[f"sum_{x}_sq"] == pytest.approx(np.nansum(centred[x] ** 2), rel=1e-12)
            assert row[f"n_y_{x}"] == np.count_nonzero(has_y & ~np.isnan(centred[x]))
            assert row[f"sum_y_{x}"] == pytest.approx(filled[x][has_y].sum(), rel=1e-12,
                                                      abs=1e-9)
            assert row[f"sum_y_y_{x}"] == pytest.approx(
                (centred["y"][has_y] * filled[x][has_y]).sum(), rel=1e-12, abs=1e-9)
        assert row["cross_a_b"] == pytest.approx((filled["a"] * filled["b"]).sum(), rel=1e-12,
                                                 abs=1e-9)
        for x, w in (("a", "a"), ("a", "b"), ("b", "b")):
            assert row[f"sum_y_{x}_{w}"] == pytest.approx(
                (filled[x][has_y] * filled[w][has_y]).sum(), rel=1e-12, abs=1e-9)
        # by construction: each centre is a value of its stratum (first rows or all rows),
        # so the centred sums stay small next to the level of 5e6
        assert abs(row["centre_a"] - 5e6) < 100

"""The run's one data path: DuckDB reads the files and one GROUP BY gives group moments; no
row reaches Python on clean data, and every number equals what the row reader's rows give.

Reference throughout: the row reader (`loading.load_data`, the checked rows) grouped by
`grouped.from_rows`, and `build_cells` on those rows. Data: the committed demo and small
deterministic studies written in each test (invented, for engine agreement only).
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from cli_support import MINIMAL_SPEC, REPO, Study, study_rows, write_csv

from strativ.cli import grouped
from strativ.cli.grouped import from_rows, group_data
from strativ.cli.loading import load_data
from strativ.cli.spec import load_spec
from strativ.estimators import build_cells

CELL_FIELDS = ("n", "mean_outcome", "mean_take_up", "ss_outcome", "ss_cross", "ss_take_up")


@pytest.fixture
def no_row_reader(monkeypatch: pytest.MonkeyPatch) -> None:
    """Fail the test if the run reads a row with the row reader."""

    def refuse(spec):
        raise AssertionError("the row reader was asked for rows")

    monkeypatch.setattr(grouped, "load_data", refuse)


def assert_same_cells(actual, expected) -> None:
    assert actual.labels == expected.labels
    for name in CELL_FIELDS:
        a, e = getattr(actual, name), getattr(expected, name)
        scale = max(float(np.abs(e).max()), 1.0)
        # common practice, no source: sums in another order agree to rounding
        np.testing.assert_allclose(a, e, rtol=0, atol=1e-12 * scale, err_msg=name)
    if expected.clusters is not None:
        for name in ("q_outcome", "q_cross", "q_take_up", "size_sq"):
            a, e = getattr(actual.clusters, name), getattr(expected.clusters, name)
            np.testing.assert_allclose(a, e, rtol=1e-12, atol=1e-12, err_msg=name)


def assert_same_data(spec_path: Path) -> grouped.GroupedData:
    """group_data (DuckDB, no rows) equals the row reader's rows, grouped, in every field."""
    spec = load_spec(spec_path)
    got = group_data(spec)
    # by construction: the engine path read the files itself
    assert got.dataset is None
    rows = load_data(spec)
    want = from_rows(spec, rows)
    assert (got.n_read, got.n_rows, got.dropped, got.n_dropped) == (
        want.n_read, want.n_rows, want.dropped, want.n_dropped)
    assert [f.rows for f in got.files] == [f.rows for f in rows.files]
    assert got.stratum_parts == rows.stratum_parts
    assert sorted(got.labels, key=str) == sorted(set(rows.stratum.tolist()), key=str)
    assert_same_cells(got.cells(None), want.cells(None))
    for name in got.outcomes:
        assert got.missing(name) == int(np.isnan(rows.outcomes[name]).sum())
        assert got.missing_by_arm(name) == want.missing_by_arm(name)
        keep = ~np.isnan(rows.outcomes[name])
        # reference: build_cells on the row reader's rows
        direct = build_cells(rows.outcomes[name][keep], rows.take_up[keep], rows.offer[keep],
                             rows.stratum[keep],
                             cluster=None if rows.cluster is None else rows.cluster[keep])
        assert_same_cells(got.cells(name), direct)
    return got


def test_the_demo_is_grouped_without_reading_rows(monkeypatch: pytest.MonkeyPatch) -> None:
    spec = REPO / "specs" / "demo.yaml"
    got = assert_same_data(spec)
    # source: demo_data/README.md (three rounds of 1,840, 2,000 and 2,160 households)
    assert [f.rows for f in got.files] == [1840, 2000, 2160]
    monkeypatch.setattr(grouped, "load_data", lambda spec: (_ for _ in ()).throw(
        AssertionError("rows read")))
    assert group_data(load_spec(spec)).dataset is None


def _messy_rows() -> list[dict]:
    rows = study_rows()
    for i, row in enumerate(rows):
        # 0/1 columns as a tool writes them when the column also holds a gap
        row["offer"] = f"{row['offer']}.0"
        row["take_up"] = ["true", "false"][1 - row["take_up"]] if i % 3 else row["take_up"]
        row["y"] = "NA" if i % 11 == 0 else row["y"]
        row["site"] = f" {row['site']} " if i % 4 == 0 else row["site"]
    return rows


def test_text_codes_gaps_and_spaces_give_the_row_readers_numbers(study: Study,
                                                                 no_row_reader) -> None:
    write_csv(study.data, _messy_rows())
    got = group_data(load_spec(study.spec))
    # by construction: every 11th row misses its outcome (0, 11, ..., 66 of 76 rows)
    assert got.missing("y") == 7
    assert got.labels and all(label == label.strip() for label in got.labels)


def test_text_codes_gaps_and_spaces_match_the_row_reader(study: Study) -> None:
    write_csv(study.data, _messy_rows())
    assert_same_data(study.spec)


def test_dropped_rows_clusters_and_a_probability_column_match(study: Study) -> None:
    rows = study_rows()
    share = {"north": 0.3, "south": 0.5, "east": 0.7, "west": 0.5}
    for i, row in enumerate(rows):
        row["household"] = f"h{i // 2}" if row["offer"] else f"h{i // 2}x"
        row["p"] = share[row["site"]]
        if i % 13 == 5:
            row["offer"] = ""
        if i % 17 == 3:
            row["site"] = "NA"
    write_csv(study.data, rows, header=("unit", "site", "offer", "take_up", "y", "household",
                                        "p"))
    study.write_spec(MINIMAL_SPEC + "  cluster: household\ndesign:\n  offer_probability: p\n"
                     "missing:\n  drop_incomplete_rows: true\n")
    got = assert_same_data(study.spec)
    # by construction: rows 5, 18, ... miss the offer and rows 3, 20, ... the stratum
    assert got.n_dropped == len([i for i in range(76) if i % 13 == 5 or i % 17 == 3])
    assert got.probability_ranges()["east"] == (0.7, 0.7)
    # by construction: rows dropped for the stratum (offer present) split by their offer,
    # in the engine's grouping and in the row reader alike
    site_only = [r for i, r in enumerate(rows) if i % 17 == 3 and i % 13 != 5]
    offered = sum(1 for r in site_only if r["offer"] == 1)
    assert got.dropped_by_arm == (("site", offered, len(site_only) - offered),)
    assert load_data(load_spec(study.spec)).dropped_by_arm == got.dropped_by_arm


def test_a_stratum_from_two_columns_and_integer_ids_from_parquet(tmp_path: Path) -> None:
    rows = pd.DataFrame(study_rows())
    rows["round"] = np.where(np.arange(len(rows)) % 2 == 0, 1.0, 2.0)
    rows["site_id"] = rows["site"].map({"north": 10, "south": 2, "east": 3, "west": 4})
    rows.to_parquet(tmp_path / "data.parquet")
    spec = tmp_path / "spec.yaml"
    spec.write_text(MINIMAL_SPEC.replace("data.csv", "data.parquet").replace(
        "stratum: site", "stratum: [site, round]"), encoding="utf-8")
    got = assert_same_data(spec)
    # by construction: rounds stored as 1.0/2.0 read as the integers 1 and 2
    assert got.stratum_parts["north / 1"] == ("north", 1)
    spec.write_text(MINIMAL_SPEC.replace("data.csv", "data.parquet").replace(
        "stratum: site", "stratum: site_id"), encoding="utf-8")
    got = assert_same_data(spec)
    # by construction: integer ids stay integers and sort as numbers
    assert got.cells(None).labels == (2, 3, 4, 10)


def test_bad_values_are_reported_by_the_row_reader(study: Study) -> None:
    rows = study_rows()
    rows[4]["offer"] = "yes"
    write_csv(study.data, rows)
    spec = load_spec(study.spec)
    with pytest.raises(Exception) as raised:
        group_data(spec)
    # reference: the row reader's own message for the same file
    with pytest.raises(Exception) as direct:
        load_data(spec)
    assert str(raised.value) == str(direct.value)
    assert "row 5" in str(raised.value)


def test_two_runs_over_a_parallel_scan_give_the_same_bits(tmp_path: Path) -> None:
    rng = np.random.default_rng(20261203)
    n = 1_000_000
    stratum = rng.integers(0, 50, n)
    offer = (rng.random(n) < 0.3 + 0.01 * stratum).astype(np.int64)
    frame = pd.DataFrame({"site": stratum, "offer": offer,
                          "take_up": np.where(rng.random(n) < 0.8, offer, 1 - offer),
                          "y": 1e6 + rng.normal(0.0, 1.0, n)})
    # many row groups, so DuckDB adds partial sums from both threads in varying order
    frame.to_parquet(tmp_path / "data.parquet", row_group_size=50_000)
    spec = tmp_path / "spec.yaml"
    spec.write_text(MINIMAL_SPEC.replace("data.csv", "data.parquet"), encoding="utf-8")
    first, second = (group_data(load_spec(spec)).groups for _ in range(2))
    keys = ["stratum", "offer", "take_up"]
    first, second = (g.sort_values(keys).reset_index(drop=True) for g in (first, second))
    # by construction: a compensated sum does not depend on the order of partial sums (the
    # plain SUM differed in the last bits in about 3 of 4 groups between two runs)
    pd.testing.assert_frame_equal(first, second, check_exact=True)


def test_the_demo_covariate_moments_equal_the_row_readers(no_row_reader) -> None:
    spec = load_spec(REPO / "specs" / "demo.yaml")
    got = group_data(spec)
    want = from_rows(spec, load_data(spec))  # the module's own import, not the barred one
    variables = ("x0", "x1", "x2", "m0", "m1", "m2")  # covariates and missing indicators
    columns = [c for c in want.groups.columns
               if any(f"_{v}" in c for v in variables) and not c.startswith(("bad_", "centre_"))]
    # by construction: 3 covariates and their 3 indicators: 3 sums each and 15 products of
    # pairs; per outcome (2) 3 per variable and 21 products
    assert len(columns) == 6 * 3 + 15 + 2 * (6 * 3 + 21)
    a = got.groups.set_index(["stratum", "offer", "take_up"]).sort_index()
    b = want.groups.set_index(["stratum", "offer", "take_up"]).sort_index()
    # by construction: both take each centre from the stratum's first rows in file order
    np.testing.assert_array_equal(a["centre_x0"], b["centre_x0"])
    for column in columns:
        # reference: the same moments from the row reader's rows
        np.testing.assert_allclose(a[column].to_numpy(float), b[column].to_numpy(float),
                                   rtol=1e-9, atol=1e-6, err_msg=column)

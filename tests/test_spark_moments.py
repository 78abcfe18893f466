"""The Spark engine runs the same moment query as DuckDB: the moment tables of numpy
(`build_cells`), DuckDB and Spark agree.

Data: the committed demo (demo_data/round_*.csv with specs/demo.yaml's roles: outcome
``gas_therms``, which has no missing values, take-up ``retrofitted``, offer ``won_lottery``,
stratum ``district``, covariates ``baseline_therms`` and ``home_age_years``) and one seeded draw
of 1,000,000 invented units (text strata, households as clusters, two covariates) written to
Parquet in a temporary folder. Only agreement between engines is checked, not any statistic's
value. One local Spark session (two cores) serves the whole module.
"""

from __future__ import annotations

import subprocess
import sys
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from strativ.cli import duckdb_engine, spark_engine
from strativ.cli.errors import DataError, UsageError
from strativ.estimators import CellTable, build_cells, cells_from_moments

SEED = 20261203
RTOL = 1e-12
DEMO_DIR = Path(__file__).resolve().parents[1] / "demo_data"
DEMO_ROLES = {
    "outcome": "gas_therms",
    "take_up": "retrofitted",
    "offer": "won_lottery",
    "stratum": "district",
}
DEMO_COVARIATES = ("baseline_therms", "home_age_years")
UNIT_ROLES = {"outcome": "use", "take_up": "insulated", "offer": "offered", "stratum": "district"}
UNIT_COVARIATES = ("baseline_use", "floor_area")
CELL_FIELDS = ("mean_outcome", "mean_take_up", "ss_outcome", "ss_cross", "ss_take_up")


@pytest.fixture(scope="module")
def spark():
    session = spark_engine.spark_session("local[2]")
    yield session
    session.stop()


@pytest.fixture(scope="module")
def units(tmp_path_factory: pytest.TempPathFactory) -> tuple[pd.DataFrame, Path]:
    """1,000,000 invented units in 300 text strata of 1,000 households; offers by household,
    take-up by unit; an outcome that moves with both covariates."""
    rng = np.random.default_rng(SEED)
    n_units, n_strata, per_stratum = 1_000_000, 300, 1_000
    household = rng.integers(0, n_strata * per_stratum, n_units)
    stratum = household // per_stratum
    share = (0.2 + 0.6 * rng.random(n_strata)).repeat(per_stratum)  # offer share by household
    offered = (rng.random(n_strata * per_stratum) < share).astype(np.int8)[household]
    insulated = (rng.random(n_units) < 0.05 + 0.7 * offered).astype(np.int8)
    baseline = 600.0 + 40.0 * rng.normal(size=n_strata)[stratum] + 25.0 * rng.normal(size=n_units)
    area = np.round(rng.gamma(9.0, 12.0, n_units), 1)
    use = (
        0.9 * baseline
        + 0.3 * area
        - (20.0 + 5.0 * rng.normal(size=n_strata))[stratum] * insulated
        + 8.0 * rng.normal(size=n_strata * per_stratum)[household]
        + 15.0 * rng.normal(size=n_units)
    )
    labels = np.array([f"utility district {k:03d}" for k in range(n_strata)], dtype=object)
    frame = pd.DataFrame(
        {
            "district": labels[stratum],
            "household": household,
            "offered": offered,
            "insulated": insulated,
            "use": use,
            "baseline_use": baseline,
            "floor_area": area,
        }
    )
    path = tmp_path_factory.mktemp("spark_moments") / "units.parquet"
    frame.to_parquet(path, index=False, row_group_size=125_000)  # read in parallel
    return frame, path


def demo_rows() -> pd.DataFrame:
    return pd.concat(
        [pd.read_csv(path) for path in sorted(DEMO_DIR.glob("round_*.csv"))], ignore_index=True
    )


def numpy_cells(frame: pd.DataFrame, roles: dict[str, str], cluster: str | None) -> CellTable:
    return build_cells(
        frame[roles["outcome"]].to_numpy(),
        frame[roles["take_up"]].to_numpy(),
        frame[roles["offer"]].to_numpy(),
        frame[roles["stratum"]].to_numpy(),
        cluster=None if cluster is None else frame[cluster].to_numpy(),
    )


def by_keys(moments: pd.DataFrame) -> pd.DataFrame:
    keys = [k for k in ("stratum", "offer", "take_up", "cluster") if k in moments.columns]
    return moments.sort_values(keys, kind="stable").reset_index(drop=True)


def assert_same_moments(spark: pd.DataFrame, duck: pd.DataFrame) -> None:
    """Same groups and counts; every sum to RTOL of DuckDB's (each sums products of values at
    or above their stratum's minimum, so no sum cancels); the same centres."""
    assert list(spark.columns) == list(duck.columns)
    assert len(spark) == len(duck)
    got, ref = by_keys(spark), by_keys(duck)
    for column in ref.columns:
        actual, expected = got[column].to_numpy(), ref[column].to_numpy()
        if column == "stratum":
            assert actual.tolist() == expected.tolist()
        elif column.startswith("sum_"):
            np.testing.assert_allclose(actual, expected, rtol=RTOL, atol=0, err_msg=column)
        else:  # keys, counts, missing counts, centres (minima): exact
            np.testing.assert_array_equal(actual, expected, err_msg=column)


def assert_field(actual: np.ndarray, expected: np.ndarray, floor: np.ndarray, name: str) -> None:
    """|actual - expected| <= RTOL * max(|expected|, floor), element by element."""
    scale = np.maximum(np.abs(expected), floor)
    scale = np.where(scale > 0, scale, 1.0)
    np.testing.assert_allclose(actual / scale, expected / scale, rtol=0, atol=RTOL, err_msg=name)


def assert_same_cells(actual: CellTable, expected: CellTable) -> None:
    """Counts identical; the other arrays to RTOL; a sum that nearly cancels to RTOL of its
    Cauchy-Schwarz bound."""
    assert actual.labels == expected.labels
    np.testing.assert_array_equal(actual.n, expected.n)
    floors = {"ss_cross": np.sqrt(expected.ss_outcome * expected.ss_take_up)}
    for name in CELL_FIELDS:
        want = getattr(expected, name)
        assert_field(getattr(actual, name), want, floors.get(name, 0.0), name)
    if expected.clusters is None:
        assert actual.clusters is None
        return
    got, ref = actual.clusters, expected.clusters
    np.testing.assert_array_equal(got.count, ref.count)
    floors = {
        "q_cross": np.sqrt(ref.q_outcome * ref.q_take_up),
        # sizes times deviations that sum to zero per cell: bounded by sqrt(size_sq * q)
        "size_dev_outcome": np.sqrt(ref.size_sq * ref.q_outcome),
        "size_dev_take_up": np.sqrt(ref.size_sq * ref.q_take_up),
    }
    for name in ("q_outcome", "q_cross", "q_take_up", "size_sq", *floors):
        want = getattr(ref, name)
        assert_field(getattr(got, name), want, floors.get(name, 0.0), f"clusters.{name}")


# ---------------------------------------------------------------- the demo


def test_demo_moments_agree_across_numpy_duckdb_and_spark(spark):
    rows = demo_rows()
    pattern = str(DEMO_DIR / "round_*.csv")
    on_spark = spark_engine.moment_frame(pattern, covariates=DEMO_COVARIATES, **DEMO_ROLES)
    on_duck = duckdb_engine.moment_frame(rows, covariates=DEMO_COVARIATES, **DEMO_ROLES)
    # reference: DuckDB, the same query over the same rows
    assert_same_moments(on_spark, on_duck)
    expected = numpy_cells(rows, DEMO_ROLES, cluster=None)
    # reference: build_cells (in-memory route), for each engine's table
    assert_same_cells(cells_from_moments(on_spark), expected)
    assert_same_cells(cells_from_moments(on_duck), expected)


# ---------------------------------------------------------------- one million units


def test_million_parquet_units_agree_across_numpy_duckdb_and_spark(spark, units):
    frame, path = units
    kwargs = {**UNIT_ROLES, "cluster": "household", "covariates": UNIT_COVARIATES}
    on_spark = spark_engine.moment_frame(path, **kwargs)
    on_duck = duckdb_engine.moment_frame(path, **kwargs)
    # by construction: 1,000,000 units over 300,000 households (about 290,000 of them drawn)
    # that never span strata, so the groups are (stratum, offer, take-up, household)
    assert len(on_duck) > 250_000
    # reference: DuckDB, the same query over the same file
    assert_same_moments(on_spark, on_duck)
    expected = numpy_cells(frame, UNIT_ROLES, cluster="household")
    # reference: build_cells (in-memory route) with clusters, for each engine's table
    assert_same_cells(cells_from_moments(on_spark), expected)
    assert_same_cells(cells_from_moments(on_duck), expected)


def test_million_parquet_units_without_clusters_agree(spark, units):
    frame, path = units
    on_spark = spark_engine.moment_frame(str(path), **UNIT_ROLES)
    on_duck = duckdb_engine.moment_frame(path, **UNIT_ROLES)
    # by construction: 300 strata x 2 offers x 2 take-up values; the smallest cell (5 % take-up
    # without an offer, in a stratum offered to 80 %) still expects about 30 units
    assert len(on_duck) == 1_200
    # reference: DuckDB, the same query over the same file
    assert_same_moments(on_spark, on_duck)
    # reference: build_cells (in-memory route)
    assert_same_cells(cells_from_moments(on_spark), numpy_cells(frame, UNIT_ROLES, None))


# ---------------------------------------------------------------- errors and loading


def test_a_missing_column_is_named_in_the_error(spark, units):
    _, path = units
    with pytest.raises(DataError, match="the moment query failed: .*`monthly_use`") as caught:
        spark_engine.moment_frame(path, **{**UNIT_ROLES, "outcome": "monthly_use"})
    assert caught.value.file == path
    assert "Traceback" not in caught.value.render()


def test_without_pyspark_the_error_names_the_extra(monkeypatch):
    monkeypatch.setitem(sys.modules, "pyspark.sql", None)  # as if pyspark were not installed
    with pytest.raises(UsageError, match=r"pip install 'strativ\[spark\]'"):
        spark_engine.spark_session()


def test_importing_the_engine_loads_neither_pyspark_nor_pandas():
    code = (
        "import sys, strativ.cli.spark_engine\n"
        "print(sorted({'pyspark', 'py4j', 'pandas', 'numpy', 'duckdb'} & set(sys.modules)))\n"
    )
    done = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True)
    assert done.stdout.strip() == "[]"


def test_the_printed_cells_query_on_spark_feeds_a_moment_run(spark, tmp_path):
    from typer.testing import CliRunner

    from strativ.cli.app import app

    demo_spec = Path(__file__).resolve().parents[1] / "specs" / "demo.yaml"
    runner = CliRunner()
    printed = runner.invoke(app, ["cells", str(demo_spec), "--sql", "--table",
                                  spark_engine.SOURCE_VIEW])
    assert printed.exit_code == 0, printed.stderr
    table = tmp_path / "cells.csv"
    # the demo's files are three waves: the user's table holds each row's wave
    units = tmp_path / "units.csv"
    pd.concat([pd.read_csv(p).assign(wave=p.stem)
               for p in sorted(DEMO_DIR.glob("round_*.csv"))]).to_csv(units, index=False)
    spark_engine.run_query(printed.stdout, [str(units)]).to_csv(table, index=False)
    spec = tmp_path / "demo.yaml"
    spec.write_text(demo_spec.read_text(encoding="utf-8").replace(
        "data: ../demo_data/round_*.csv", f"moments: {table}"), encoding="utf-8")
    rows, moments = (runner.invoke(app, ["run", str(path), "--out", str(tmp_path / name),
                                         "--format", "json"])
                     for path, name in ((demo_spec, "rows"), (spec, "moments")))
    assert rows.exit_code == 0 and moments.exit_code == 0, moments.stderr
    got, want = (pd.read_json(tmp_path / name / "results.json", typ="series")["estimates"]
                 for name in ("moments", "rows"))
    # reference: the same spec run on the unit rows with DuckDB (sums in another order)
    for g, w in zip(got, want, strict=True):
        assert g["estimate"] == pytest.approx(w["estimate"], rel=1e-12)
        assert g["std_error"] == pytest.approx(w["std_error"], rel=1e-10)


# --- engine: spark in the spec: the whole run's GROUP BY on Spark ---------------------------

ENGINE_SPARK = "engine: {name: spark, master: 'local[2]'}\n"
RUN_SECTIONS = {"created", "spec", "inputs"}


def _run_both(spec_text: str, folder: Path, monkeypatch) -> tuple[dict, dict]:
    """results.json of the spec run by DuckDB and by Spark, the row reader barred from both."""
    import json

    from typer.testing import CliRunner

    from strativ.cli import grouped
    from strativ.cli.app import app

    def no_row_reader(spec):
        raise AssertionError("the engine refused a clean file")

    monkeypatch.setattr(grouped, "load_data", no_row_reader)
    out = []
    for name, text in (("duckdb", spec_text), ("spark", spec_text + ENGINE_SPARK)):
        spec = folder / f"{name}.yaml"
        spec.write_text(text, encoding="utf-8")
        done = CliRunner().invoke(app, ["run", str(spec), "--out", str(folder / name),
                                        "--format", "json"])
        assert done.exit_code == 0, done.stderr
        out.append(json.loads((folder / name / "results.json").read_text(encoding="utf-8")))
    return out[0], out[1]


def test_engine_spark_in_the_spec_runs_the_demo_as_duckdb_does(spark, tmp_path, monkeypatch):
    from core_support import assert_close

    demo_spec = Path(__file__).resolve().parents[1] / "specs" / "demo.yaml"
    text = demo_spec.read_text(encoding="utf-8").replace(
        "../demo_data/round_*.csv", str(DEMO_DIR / "round_*.csv"))
    duck, on_spark = _run_both(text, tmp_path, monkeypatch)
    assert on_spark["spec"]["reading"] == {**duck["spec"]["reading"], "engine": "spark",
                                           "master": "local[2]"}
    for section in sorted(set(duck) - RUN_SECTIONS):
        # reference: the same spec run by DuckDB; Spark adds the sums in another order
        assert_close(on_spark[section], duck[section], rtol=RTOL, path=section)


def test_engine_spark_reads_a_semicolon_export_with_codes_as_duckdb_does(spark, tmp_path,
                                                                        monkeypatch):
    from core_support import assert_close

    frame = pd.read_csv(DEMO_DIR / "round_2.csv")
    frame["gas_therms"] = frame["gas_therms"].where(np.arange(len(frame)) % 11 != 4)
    frame["won_lottery"] = frame["won_lottery"].map({1: "won", 0: "lost"})
    frame["retrofitted"] = frame["retrofitted"].map({1: "Yes", 0: "no"})
    frame.to_csv(tmp_path / "round_2.csv", index=False, sep=";", decimal=",")
    text = (
        "title: semicolon export\ndata: round_2.csv\n"
        "columns: {outcome: [gas_therms, behind_on_bills], take_up: retrofitted,\n"
        "          offer: won_lottery, stratum: district}\n"
        "reading:\n  delimiter: ';'\n  decimal: ','\n"
        "  codes: {offer: {won: 1, lost: 0}, take_up: {'yes': 1, 'no': 0}}\n"
    )
    duck, on_spark = _run_both(text, tmp_path, monkeypatch)
    # by construction: every 11th gas reading blanked, counted as attrition by both engines
    assert sum(a["missing"] for a in duck["attrition"] if a["outcome"] == "gas_therms") == \
        len(range(4, len(frame), 11))
    for section in sorted(set(duck) - RUN_SECTIONS):
        # reference: the same spec run by DuckDB; Spark adds the sums in another order
        assert_close(on_spark[section], duck[section], rtol=RTOL, path=section)


def test_engine_spark_sends_a_bad_value_to_the_located_message(spark, tmp_path):
    from typer.testing import CliRunner

    from strativ.cli.app import app

    frame = pd.read_csv(DEMO_DIR / "round_3.csv")
    frame["won_lottery"] = frame["won_lottery"].astype(object)
    frame.loc[41, "won_lottery"] = "maybe"
    frame.to_csv(tmp_path / "round_3.csv", index=False)
    spec = tmp_path / "spark.yaml"
    spec.write_text("data: round_3.csv\ncolumns: {outcome: gas_therms, take_up: retrofitted, "
                    "offer: won_lottery, stratum: district}\n" + ENGINE_SPARK, encoding="utf-8")
    done = CliRunner().invoke(app, ["run", str(spec), "--out", str(tmp_path / "out")])
    # by construction: data row 42 holds the word
    assert done.exit_code == 3 and "'maybe' in row 42" in done.stderr, done.stderr

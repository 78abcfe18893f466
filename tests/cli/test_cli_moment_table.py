"""Aggregate-only runs: `strativ cells` writes the moment table, a spec's `moments` key reads
it, and every number of results.json equals the run on the rows, to the last bit.

Reference: the same spec run on the unit rows (`data:`), and the printed SQL run by DuckDB.
Data: the committed demo and the small deterministic study of cli_support (invented).
"""

from __future__ import annotations

import json
from pathlib import Path

import duckdb
import numpy as np
import pandas as pd
import pytest
from cli_support import MINIMAL_SPEC, REPO, Study, assert_clean_failure, study_rows, write_csv

from strativ.cli.moment_table import MOMENT_FIELDS

DEMO_SPEC = REPO / "specs" / "demo.yaml"
ROW_ONLY = ("created", "spec", "inputs", "waves")
"""Fields a moment-table run cannot share: its own file and spec, and the fits of each input
file's wave alone (the table holds each stratum's wave, not the files)."""


def _moment_spec(spec: Path, table: Path, folder: Path) -> Path:
    """The spec, under its own name in `folder`, with its one-line `data:` entry replaced by
    `moments: table` (its name is its title)."""
    folder.mkdir()
    target = folder / spec.name
    lines = spec.read_text(encoding="utf-8").splitlines()
    swapped = [f"moments: {table}" if line.startswith("data:") else line for line in lines]
    assert swapped != lines
    target.write_text("\n".join(swapped) + "\n", encoding="utf-8")
    return target


def _numbers(path: Path) -> dict:
    doc = json.loads(path.read_text(encoding="utf-8"))
    return {k: v for k, v in doc.items() if k not in ROW_ONLY}


@pytest.mark.parametrize("suffix", [".csv", ".parquet"])
def test_a_moment_table_run_equals_the_row_run_exactly(tmp_path: Path, invoke,
                                                       suffix: str) -> None:
    table = tmp_path / f"cells{suffix}"
    made = invoke("cells", DEMO_SPEC, "--out", table)
    assert made.exit_code == 0, made.stderr
    assert "disclosure" in made.stderr
    rows_out, table_out = tmp_path / "rows", tmp_path / "table"
    assert invoke("run", DEMO_SPEC, "--out", rows_out).exit_code == 0
    spec = _moment_spec(DEMO_SPEC, table, tmp_path / "m")
    ran = invoke("run", spec, "--out", table_out)
    assert ran.exit_code == 0, ran.stderr
    # reference: the run on the unit rows; estimates, intervals, diagnostics, strata,
    # attrition, covariate balance and warnings are moment-only features and must agree
    # bit for bit
    rows_doc, table_doc = _numbers(rows_out / "results.json"), _numbers(table_out / "results.json")
    assert table_doc == rows_doc
    doc = json.loads((table_out / "results.json").read_text(encoding="utf-8"))
    assert doc["spec"]["data_kind"] == "moments"
    # by construction: the demo's three files split each district into three strata, and
    # the table keeps each stratum's wave as a stratum column
    assert doc["strata"][0]["stratum_columns"] == {"district": "Cedar Flats", "wave": "round_1"}
    assert doc["waves"] is None
    assert [f["file"] for f in doc["inputs"]] == [table.name]
    # by construction: the demo names three covariates, carried by the table
    assert [c["covariate"] for c in doc["covariates"]["covariates"]] == \
        ["baseline_therms", "home_age_years", "household_size"]


def test_a_table_without_covariate_columns_runs_without_the_checks(tmp_path: Path,
                                                                   invoke) -> None:
    table = tmp_path / "cells.csv"
    assert invoke("cells", DEMO_SPEC, "--out", table).exit_code == 0
    frame = pd.read_csv(table, dtype=str, keep_default_na=False)
    frame.drop(columns=[c for c in frame.columns if "baseline" in c or "home_age" in c
                        or "household_size" in c]).to_csv(table, index=False)
    spec = _moment_spec(DEMO_SPEC, table, tmp_path / "m")
    ran = invoke("run", spec, "--out", tmp_path / "out")
    assert ran.exit_code == 0, ran.stderr
    doc = json.loads((tmp_path / "out" / "results.json").read_text(encoding="utf-8"))
    # by construction: the covariate columns were removed from the table
    assert doc["covariates"] is None
    assert any("are not in the moment table" in w for w in doc["warnings"])


def test_clusters_and_gaps_survive_the_table(study: Study, invoke) -> None:
    rows = study_rows()
    for i, row in enumerate(rows):
        row["household"] = f"h{i // 2}" if row["offer"] else f"g{i // 2}"
        row["y"] = "" if i % 9 == 0 else row["y"]
    write_csv(study.data, rows, header=("unit", "site", "offer", "take_up", "y", "household"))
    study.write_spec(MINIMAL_SPEC + "  cluster: household\ninference:\n  variance: cluster\n")
    table = study.root / "cells.csv"
    assert invoke("cells", study.spec, "--out", table).exit_code == 0
    assert invoke("run", study.spec, "--out", study.out).exit_code == 0
    spec = _moment_spec(study.spec, table, study.root / "mspec")
    assert invoke("run", spec, "--out", study.root / "m").exit_code == 0
    # reference: the run on the unit rows
    assert _numbers(study.root / "m" / "results.json") == _numbers(study.out / "results.json")


def test_the_printed_query_run_by_duckdb_gives_the_table(tmp_path: Path, invoke) -> None:
    printed = invoke("cells", DEMO_SPEC, "--sql", "--table", "units")
    assert printed.exit_code == 0, printed.stderr
    table = tmp_path / "cells.csv"
    assert invoke("cells", DEMO_SPEC, "--out", table).exit_code == 0
    # the demo's three files are three waves: the user's table carries each row's wave
    units = pd.concat([pd.read_csv(p).assign(wave=p.stem)
                       for p in sorted((REPO / "demo_data").glob("round_*.csv"))])
    connection = duckdb.connect()
    connection.register("units", units)
    got = connection.execute(printed.stdout).df()
    want = pd.read_csv(table)
    keys = ["district", "wave", "won_lottery", "retrofitted"]
    got = got.groupby(keys).sum(numeric_only=False).sort_index()
    want = want.groupby(keys).agg("sum").sort_index()
    assert list(got.index) == list(want.index)
    for outcome in ("gas_therms", "behind_on_bills"):
        for field in MOMENT_FIELDS:
            name = field.format(outcome)
            if field == "n_{}":
                # reference: DuckDB's own count of the same rows
                assert np.array_equal(got[name].to_numpy(), want[name].to_numpy())
            elif field.startswith("sum"):
                scale = np.maximum(np.abs(want[name].to_numpy()), 1.0)
                # reference: DuckDB's own sums of the same rows (another order: rounding)
                assert np.all(np.abs(got[name].to_numpy() - want[name].to_numpy())
                              <= 1e-12 * scale), name


def test_a_table_without_a_moment_column_is_refused_by_name(tmp_path: Path, invoke) -> None:
    table = tmp_path / "cells.csv"
    assert invoke("cells", DEMO_SPEC, "--out", table).exit_code == 0
    frame = pd.read_csv(table).drop(columns=["sum_gas_therms_sq"])
    frame.to_csv(table, index=False)
    spec = _moment_spec(DEMO_SPEC, table, tmp_path / "m")
    assert_clean_failure(invoke("run", spec, "--out", tmp_path / "o"), 3,
                         "cells.csv", "no column 'sum_gas_therms_sq'")
    assert_clean_failure(invoke("cells", DEMO_SPEC), 2, "--out FILE")


def test_a_refusal_that_needs_rows_says_so_on_a_moment_table(study: Study, invoke) -> None:
    rows = study_rows()
    for row in rows:
        row["household"] = row["unit"]
    write_csv(study.data, rows, header=("unit", "site", "offer", "take_up", "y", "household"))
    study.write_spec(MINIMAL_SPEC + "  cluster: household\n")
    table = study.root / "cells.csv"
    assert invoke("cells", study.spec, "--out", table).exit_code == 0
    frame = pd.read_csv(table)
    # one household now in two strata: the core refuses it, and only rows could show where
    frame.loc[frame.index[-1], "household"] = frame.loc[0, "household"]
    frame.to_csv(table, index=False)
    spec = _moment_spec(study.spec, table, study.root / "mspec")
    assert_clean_failure(invoke("run", spec, "--out", study.out), 3,
                         "needs the unit rows", "data: instead of moments:")

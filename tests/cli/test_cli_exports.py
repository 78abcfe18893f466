"""The same data exported by pandas as CSV and as Parquet gives the same results (issue 8).

pandas writes a 0/1 column holding a missing value as 1.0/0.0 and a float id column as 63.0;
such a CSV must load, and its labels must keep the type they have from Parquet.
"""

from __future__ import annotations

import json
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd
from cli_support import MINIMAL_SPEC, assert_clean_failure

# source: issue 4 exit codes (3 = data error)
DATA_ERROR = 3
SEED = 20240808
STRATA = (61, 62, 63, 64, 65, 66)
SPEC = MINIMAL_SPEC + "missing:\n  drop_incomplete_rows: true\n"


def _lottery() -> pd.DataFrame:
    """A small invented lottery (seed SEED): per stratum, a fixed number of units offered at
    random; take-up follows the offer with two-sided non-compliance; four outcomes and one
    take-up value are missing. Stratum ids are floats, as after a merge with missing ids."""
    rng = np.random.default_rng(SEED)
    frames = []
    for j, site in enumerate(STRATA):
        n = 24 + 4 * j
        offer = np.zeros(n, dtype=np.int64)
        offer[rng.permutation(n)[: n // 2 + j % 3]] = 1
        take_up = np.where(offer == 1, rng.random(n) < 0.8, rng.random(n) < 0.15).astype(float)
        y = 10.0 + 0.5 * j + (1.0 + 0.3 * j) * take_up + rng.normal(0.0, 1.0, n)
        frames.append(pd.DataFrame({"site": float(site), "offer": offer, "take_up": take_up,
                                    "y": y}))
    data = pd.concat(frames, ignore_index=True)
    data.loc[[3, 40, 77, 120], "y"] = np.nan
    data.loc[55, "take_up"] = np.nan
    return data


def _run(root: Path, invoke, data: pd.DataFrame, suffix: str) -> dict[str, Any]:
    folder = root / suffix
    folder.mkdir()
    path = folder / f"data.{suffix}"
    if suffix == "csv":
        data.to_csv(path, index=False)
    else:
        data.to_parquet(path, index=False)
    spec = folder / "spec.yaml"
    spec.write_text(SPEC.replace("data.csv", path.name), encoding="utf-8")
    result = invoke("run", spec, "--out", folder / "out")
    assert result.exit_code == 0, (result.stdout, result.stderr)
    return json.loads((folder / "out" / "results.json").read_text(encoding="utf-8"))


def test_pandas_csv_and_parquet_give_identical_estimates(tmp_path: Path, invoke) -> None:
    data = _lottery()
    text = data.to_csv(index=False)
    # common practice, no source: pandas writes float 0/1 codes and float ids with ".0"
    assert "63.0," in text and ",1.0," in text and ",0.0," in text
    from_csv = _run(tmp_path, invoke, data, "csv")
    from_parquet = _run(tmp_path, invoke, data, "parquet")
    # source: issue 8 acceptance, byte-identical estimates whatever the file format
    for section in ("estimates", "comparisons", "strata", "rows"):
        assert json.dumps(from_csv[section]) == json.dumps(from_parquet[section]), section
    # source: _lottery, four missing outcomes and one missing take-up (one row missing both)
    assert from_csv["rows"]["read"] == len(data)
    assert from_csv["rows"]["dropped_incomplete"] == 1
    for doc in (from_csv, from_parquet):
        labels = [row["label"] for row in doc["strata"]]
        # source: issue 8 point 1, an integer stratum id stays an integer from CSV and Parquet
        assert all(type(label) is int for label in labels), labels
        assert sorted(set(labels)) == list(STRATA)


def test_offer_coded_2_0_is_refused(tmp_path: Path, invoke) -> None:
    data = _lottery()
    data["offer"] = data["offer"].astype(float)
    data.loc[9, "offer"] = 2.0
    data.to_csv(tmp_path / "data.csv", index=False)
    spec = tmp_path / "spec.yaml"
    spec.write_text(SPEC, encoding="utf-8")
    for command in ("check", "run"):
        result = invoke(command, spec, *(["--out", tmp_path / "out"] if command == "run" else []))
        # source: issue 8 point 1, codes other than 0/1 are refused; data row 10 is file line 11
        assert_clean_failure(result, DATA_ERROR,
                             "data.csv, column 'offer': values must be 0/1 or true/false",
                             "'2.0' in row 10 (line 11)", "recode the column to 0 and 1")
    assert not (tmp_path / "out").exists()

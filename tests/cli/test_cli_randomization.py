"""Randomization inference in a run: the rows DuckDB reads again give the core's test.

Reference: `strativ.estimators.randomization` on the demo's rows read by pandas (the core
itself is checked against full enumeration in tests/test_randomization.py); spec and moment
table refusals by construction.
"""

from __future__ import annotations

import json

import pandas as pd
import pytest
from cli_support import REPO, assert_clean_failure
from typer.testing import CliRunner

from strativ.cli.app import app
from strativ.estimators.randomization import randomization_draws, randomization_test

SPEC = f"""\
data: {REPO / "demo_data" / "round_*.csv"}
columns: {{outcome: gas_therms, take_up: retrofitted, offer: won_lottery, stratum: district}}
inference:
  randomization: {{draws: 199, seed: 11}}
"""


def _demo_rows() -> pd.DataFrame:
    """The demo's rows with the run's strata: district x round (one file per round)."""
    rows = pd.concat([pd.read_csv(p).assign(wave=p.stem)
                      for p in sorted((REPO / "demo_data").glob("round_*.csv"))])
    return rows.assign(stratum=rows["district"] + " / " + rows["wave"])


def test_the_run_gives_the_cores_test_on_the_rows(tmp_path) -> None:
    spec = tmp_path / "ri.yaml"
    spec.write_text(SPEC, encoding="utf-8")
    done = CliRunner().invoke(app, ["run", str(spec), "--out", str(tmp_path / "out")])
    assert done.exit_code == 0, done.stderr
    doc = json.loads((tmp_path / "out" / "results.json").read_text(encoding="utf-8"))
    got = doc["comparisons"][0]["randomization"]
    rows = _demo_rows()
    want = randomization_test(randomization_draws(
        rows["gas_therms"], rows["retrofitted"], rows["won_lottery"],
        rows["stratum"].to_numpy(object), draws=199, seed=11))
    # reference: the core's test on the same rows, same draws and seed
    assert got["p_value"] == want.p_value
    assert got["interval"] == pytest.approx(list(want.interval), rel=1e-9)
    assert (got["draws"], got["seed"], got["exact"]) == (199, 11, False)
    assert doc["spec"]["inference"]["randomization"] == {"draws": 199, "seed": 11,
                                                         "null_effect": 0.0}
    assert "Randomization inference over 199 re-drawn" in " ".join(done.stdout.split())


def test_a_moment_table_cannot_be_redrawn(tmp_path) -> None:
    spec = tmp_path / "ri.yaml"
    spec.write_text(SPEC.replace("inference:\n  randomization: {draws: 199, seed: 11}\n", ""),
                    encoding="utf-8")
    table = tmp_path / "cells.csv"
    assert CliRunner().invoke(app, ["cells", str(spec), "--out", str(table)]).exit_code == 0
    moments = tmp_path / "m.yaml"
    moments.write_text(SPEC.replace(f"data: {REPO / 'demo_data' / 'round_*.csv'}",
                                    f"moments: {table}"), encoding="utf-8")
    done = CliRunner().invoke(app, ["run", str(moments), "--out", str(tmp_path / "out")])
    assert_clean_failure(done, 3, "randomization inference re-draws the offers",
                         "data: instead of moments:")


@pytest.mark.parametrize(("value", "fragment"), [
    ("{draws: 10}", "at least 99"),
    ("{rounds: 100}", "unknown key 'rounds'"),
    ("often", "must be true, false or a mapping"),
])
def test_a_wrong_option_is_named(tmp_path, value: str, fragment: str) -> None:
    spec = tmp_path / "ri.yaml"
    spec.write_text(SPEC.replace("{draws: 199, seed: 11}", value), encoding="utf-8")
    done = CliRunner().invoke(app, ["check", str(spec)])
    assert_clean_failure(done, 2, "ri.yaml", fragment)


def test_a_null_effect_other_than_zero_is_tested(tmp_path) -> None:
    spec = tmp_path / "ri.yaml"
    spec.write_text(SPEC.replace("{draws: 199, seed: 11}",
                                 "{draws: 199, seed: 11, null_effect: -150}"), encoding="utf-8")
    done = CliRunner().invoke(app, ["run", str(spec), "--out", str(tmp_path / "out")])
    assert done.exit_code == 0, done.stderr
    got = json.loads((tmp_path / "out" / "results.json").read_text(encoding="utf-8"))[
        "comparisons"][0]["randomization"]
    rows = _demo_rows()
    want = randomization_test(randomization_draws(
        rows["gas_therms"], rows["retrofitted"], rows["won_lottery"],
        rows["stratum"].to_numpy(object), draws=199, seed=11), null_effect=-150.0)
    # reference: the core's test of the same sharp null on the same rows and draws
    assert (got["null_effect"], got["p_value"]) == (-150.0, want.p_value)
    # by construction: -150 lies inside the randomization interval, so it is not rejected
    assert got["interval"][0] < -150 < got["interval"][1] and got["p_value"] > 0.05
    assert "for an effect of exactly" in " ".join(done.stdout.split())


def test_several_outcomes_get_westfall_young_from_the_same_draws(tmp_path) -> None:
    from strativ.estimators.randomization import randomization_family, westfall_young

    spec = tmp_path / "ri.yaml"
    spec.write_text(SPEC.replace("outcome: gas_therms", "outcome: [gas_therms, behind_on_bills]"),
                    encoding="utf-8")
    done = CliRunner().invoke(app, ["run", str(spec), "--out", str(tmp_path / "out")])
    assert done.exit_code == 0, done.stderr
    got = json.loads((tmp_path / "out" / "results.json").read_text(encoding="utf-8"))[
        "randomization_outcomes"]
    rows = _demo_rows()
    family = randomization_family(rows[["gas_therms", "behind_on_bills"]].to_numpy(float),
                                  rows["retrofitted"], rows["won_lottery"],
                                  rows["stratum"].to_numpy(object), draws=199, seed=11)
    # reference: the core's family on the same rows and draws
    assert got["westfall_young"] == list(westfall_young(family))
    assert got["p_value"] == [randomization_test(f).p_value for f in family]
    # by construction: the demo has no missing outcome
    assert got["rows"] == len(rows) and got["outcomes"] == ["gas_therms", "behind_on_bills"]
    assert all(w >= p for w, p in zip(got["westfall_young"], got["p_value"], strict=True))


def test_outcomes_measured_on_different_rows_keep_their_own_tests(tmp_path) -> None:
    rows = pd.read_csv(REPO / "demo_data" / "round_1.csv")
    half = len(rows) // 2
    rows.loc[:half, "gas_therms"] = None  # one survey module per half of the households
    rows.loc[half + 1:, "behind_on_bills"] = None
    rows.to_csv(tmp_path / "round_1.csv", index=False)
    spec = tmp_path / "ri.yaml"
    spec.write_text(SPEC.replace(str(REPO / "demo_data" / "round_*.csv"), "round_1.csv")
                    .replace("outcome: gas_therms", "outcome: [gas_therms, behind_on_bills]"),
                    encoding="utf-8")
    done = CliRunner().invoke(app, ["run", str(spec), "--out", str(tmp_path / "out")])
    assert done.exit_code == 0, done.stderr
    doc = json.loads((tmp_path / "out" / "results.json").read_text(encoding="utf-8"))
    # by construction: no row has both outcomes, so there is no joint family, while each
    # outcome still gets its own randomization test
    assert doc["randomization_outcomes"] is None
    assert all(c["randomization"]["p_value"] is not None for c in doc["comparisons"])

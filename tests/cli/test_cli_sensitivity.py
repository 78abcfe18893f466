"""Sensitivity to a direct effect of the offer in a run (METHODS.md §7).

Reference: the core's estimator refitted by `build_cells` on the demo's rows with the outcome
shifted by delta * offer (the definition); spec errors by construction.
"""

from __future__ import annotations

import json

import pandas as pd
import pytest
from cli_support import REPO, assert_clean_failure
from typer.testing import CliRunner

from strativ.cli.app import app
from strativ.estimators import build_cells, fit

SPEC_ERROR = 2


def _spec(tmp_path, extra: str):
    text = (REPO / "specs" / "demo.yaml").read_text(encoding="utf-8").replace(
        "../demo_data/round_*.csv", str(REPO / "demo_data" / "round_*.csv"))
    spec = tmp_path / "demo.yaml"
    spec.write_text(text + extra, encoding="utf-8")
    return spec


def test_the_range_and_the_delta_to_zero_follow_the_definition(tmp_path) -> None:
    spec = _spec(tmp_path, "sensitivity:\n  direct_effect: [-20, 30]\n")
    done = CliRunner().invoke(app, ["run", str(spec), "--out", str(tmp_path / "out")])
    assert done.exit_code == 0, done.stderr
    doc = json.loads((tmp_path / "out" / "results.json").read_text(encoding="utf-8"))
    assert doc["spec"]["sensitivity"] == {"direct_effect": [-20.0, 30.0], "defier_share": []}
    rows = pd.concat([pd.read_csv(p).assign(wave=p.stem)
                      for p in sorted((REPO / "demo_data").glob("round_*.csv"))])
    strata = (rows["district"] + " / " + rows["wave"]).to_numpy(object)  # district x wave
    sens = doc["comparisons"][0]["sensitivity"]
    # by construction: the demo's reported complier estimator (no design probabilities)
    assert sens["estimator"] == "interacted"

    def reference(delta):
        y = rows["gas_therms"].to_numpy() - delta * rows["won_lottery"].to_numpy()
        return fit(build_cells(y, rows["retrofitted"].to_numpy(), rows["won_lottery"].to_numpy(),
                               strata), estimator="interacted")

    assert [r["delta"] for r in sens["rows"]] == [-20.0, 0.0, 30.0]
    for row in sens["rows"]:
        want = reference(row["delta"])
        # reference: the definition, the estimator on y - delta * offer
        assert row["estimate"] == pytest.approx(want.estimate, rel=1e-10)
        assert row["interval"] == pytest.approx(list(want.interval), rel=1e-10)
    assert sens["union"] == [min(r["interval"][0] for r in sens["rows"]),
                             max(r["interval"][1] for r in sens["rows"])]
    at = reference(sens["delta_to_zero"]).interval
    # by construction: one end of the interval is at zero there
    assert min(abs(at[0]), abs(at[1])) < 1e-6 * (at[1] - at[0])
    assert "intervals together span" in " ".join(done.stdout.split())


@pytest.mark.parametrize(("extra", "fragment"), [
    ("sensitivity:\n  direct_effect: [5, -5]\n", "two numbers, low then high"),
    ("sensitivity:\n  direct_effect: 3\n", "two numbers, low then high"),
    ("sensitivity:\n  defiers: 0.1\n", "unknown key 'defiers'"),
    ("sensitivity:\n  defier_share: [0.5, 1.2]\n", "shares of units in [0, 1)"),
])
def test_a_wrong_range_is_named_with_its_line(tmp_path, extra: str, fragment: str) -> None:
    spec = _spec(tmp_path, extra)
    done = CliRunner().invoke(app, ["check", str(spec)])
    assert_clean_failure(done, SPEC_ERROR, "demo.yaml", fragment)


def test_the_defier_table_uses_the_reported_first_stage(tmp_path) -> None:
    spec = _spec(tmp_path, "sensitivity:\n  defier_share: [0.02]\n")
    done = CliRunner().invoke(app, ["run", str(spec), "--out", str(tmp_path / "out")])
    assert done.exit_code == 0, done.stderr
    doc = json.loads((tmp_path / "out" / "results.json").read_text(encoding="utf-8"))
    sens = doc["comparisons"][0]["sensitivity"]
    first = next(e["first_stage"] for e in doc["estimates"]
                 if e["estimator"] == sens["estimator"] and e["outcome"] == "gas_therms")
    # source: de Chaisemartin (2017): complier share FS + rho, bias factor rho / FS
    assert sens["defiers"] == [{"defier_share": 0.02, "complier_share": first + 0.02,
                                "comvivor_share": first / (first + 0.02),
                                "bias_factor": 0.02 / first}]
    assert "were defiers" in " ".join(done.stdout.split())

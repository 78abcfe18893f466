"""Input files as waves: (stratum x wave) strata by default, pooling on request with a warning
when the waves' offer odds differ, per-wave fits, and probabilities given per stratum."""

from __future__ import annotations

import csv
import io
import json
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from cli_support import ENV
from typer.testing import CliRunner

from strativ.cli.app import app

SPEC = """\
data: [wave_a.csv, wave_b.csv]
columns:
  outcome: y
  take_up: d
  offer: z
  stratum: site
estimators: [fixed_effects, weighted, interacted]
"""
TRUE_EFFECT = 2.0
"""Every complier's effect in `_waves` (a constant effect: the LATE is known exactly)."""


def _waves(seed: int, n: int = 4000) -> dict[str, pd.DataFrame]:
    """Two waves of four sites; wave b offers at other odds and has higher outcomes, so
    pooling a site across the waves ties the offer to the wave."""
    rng = np.random.default_rng(seed)
    out = {}
    for wave, odds, level in (("wave_a", (0.2, 0.3, 0.5, 0.4), 0.0),
                              ("wave_b", (0.7, 0.6, 0.5, 0.8), 3.0)):
        site = np.repeat(np.arange(4), n // 4)
        z = (rng.random(n) < np.asarray(odds)[site]).astype(int)
        complier = rng.random(n) < 0.7
        always = ~complier & (rng.random(n) < 0.2)
        d = (always | (complier & (z == 1))).astype(int)
        y = level + site + TRUE_EFFECT * d + rng.standard_normal(n)
        out[wave] = pd.DataFrame({"site": np.array(["north", "south", "east", "west"])[site],
                                  "z": z, "d": d, "y": np.round(y, 6)})
    return out


def _study(root: Path, frames: dict[str, pd.DataFrame], spec: str = SPEC) -> Path:
    for name, frame in frames.items():
        frame.to_csv(root / f"{name}.csv", index=False)
    (root / "spec.yaml").write_text(spec, encoding="utf-8")
    return root / "spec.yaml"


def _run(spec: Path, out: Path):
    result = CliRunner().invoke(app, ["run", str(spec), "--out", str(out)], env=ENV)
    assert result.exit_code == 0, result.output
    return result, json.loads((out / "results.json").read_text(encoding="utf-8"))


def _estimates(doc: dict) -> dict[str, dict]:
    return {e["estimator"]: e for e in doc["estimates"]}


def test_waves_split_strata_and_recover_the_effect_that_pooling_misses(tmp_path) -> None:
    spec = _study(tmp_path, _waves(20261203))
    result, doc = _run(spec, tmp_path / "out")
    assert doc["waves"]["strata"] == "separate"
    assert len({s["label"] for s in doc["strata"]}) == 8
    assert doc["strata"][0]["stratum_columns"] == {"site": "east", "wave": "wave_a"}
    assert "pooled across" not in result.stderr
    split = _estimates(doc)["interacted"]
    pooled_spec = _study(tmp_path, {}, SPEC + "waves:\n  pool: true\n")
    pooled_result, pooled_doc = _run(pooled_spec, tmp_path / "pooled")
    pooled = _estimates(pooled_doc)["interacted"]
    # source: the simulation's constant effect (TRUE_EFFECT); 4 standard errors
    assert abs(split["estimate"] - TRUE_EFFECT) < 4 * split["std_error"]
    # by construction: wave b offers more often and sits 3 higher, so pooling biases upward
    assert pooled["estimate"] - TRUE_EFFECT > 10 * pooled["std_error"]
    print(f"split {split['estimate']:.3f}, pooled {pooled['estimate']:.3f}")
    flat = " ".join(pooled_result.stderr.split())
    assert "strata pooled across the input files (waves.pool: true) had offer shares that " \
           "differ between waves beyond noise" in flat
    test = pooled_doc["waves"]["offer_share_test"]
    # by construction: four sites, each in two waves: 4 x (2 - 1) degrees of freedom
    assert test["df"] == 4 and test["p_value"] < 1e-10
    assert "'north' offered" in flat


def test_pooling_waves_with_equal_odds_does_not_warn(tmp_path) -> None:
    frames = _waves(7)
    frames["wave_b"] = _waves(8)["wave_a"]  # same odds as wave a
    spec = _study(tmp_path, frames, SPEC + "waves:\n  pool: true\n")
    result, doc = _run(spec, tmp_path / "out")
    assert doc["waves"]["strata"] == "pooled"
    assert doc["waves"]["offer_share_test"]["p_value"] > 0.01
    assert "beyond noise" not in result.stderr


def test_wave_strata_equal_the_concatenated_data_with_stratum_by_wave(tmp_path) -> None:
    frames = _waves(11)
    spec = _study(tmp_path, frames)
    _, doc = _run(spec, tmp_path / "out")
    joined = pd.concat([f.assign(wave=name) for name, f in frames.items()])
    one = tmp_path / "one"
    one.mkdir()
    joined.to_csv(one / "all.csv", index=False)
    (one / "spec.yaml").write_text(
        SPEC.replace("[wave_a.csv, wave_b.csv]", "all.csv").replace("stratum: site",
                                                                     "stratum: [site, wave]"))
    _, want = _run(one / "spec.yaml", one / "out")
    assert want["waves"] is None
    for name in ("fixed_effects", "weighted", "interacted"):
        got, ref = _estimates(doc)[name], _estimates(want)[name]
        # reference: the same rows in one file with the wave as a second stratum column
        assert got["estimate"] == pytest.approx(ref["estimate"], rel=1e-12, abs=1e-12)
        assert got["std_error"] == pytest.approx(ref["std_error"], rel=1e-10)
        assert got["n_strata"] == ref["n_strata"] == 8


def test_each_wave_alone_equals_a_run_on_its_file(tmp_path) -> None:
    frames = _waves(13)
    spec = _study(tmp_path, frames)
    _, doc = _run(spec, tmp_path / "out")
    fits = {f["wave"]: f for f in doc["waves"]["by_wave"]}
    assert list(fits) == ["wave_a", "wave_b"]
    alone = tmp_path / "alone"
    alone.mkdir()
    frames["wave_b"].to_csv(alone / "wave_b.csv", index=False)
    (alone / "spec.yaml").write_text(SPEC.replace("[wave_a.csv, wave_b.csv]", "wave_b.csv"))
    _, want = _run(alone / "spec.yaml", alone / "out")
    assert fits["wave_b"]["rows"] == len(frames["wave_b"])
    for entry in fits["wave_b"]["estimates"]:
        ref = _estimates(want)[entry["estimator"]]
        # reference: the run on wave b's file alone
        assert entry["estimate"] == pytest.approx(ref["estimate"], rel=1e-12)
        assert entry["interval"] == pytest.approx(ref["interval"], rel=1e-12)


def test_a_probability_per_stratum_holds_in_each_wave(tmp_path) -> None:
    frames = _waves(17)
    spec = _study(tmp_path, frames, SPEC + "design:\n  offer_probability: {north: 0.3, "
                  "south: 0.45, east: 0.5, west: 0.6, 'north / wave_b': 0.7}\n"
                  "  assignment: independent\n")
    _, doc = _run(spec, tmp_path / "out")
    given = {p["stratum"]: p["probability"] for p in doc["offer_probability"]}
    # by construction: a stratum's probability applies to both waves unless one wave is named
    assert given["north / wave_a"] == 0.3 and given["north / wave_b"] == 0.7
    assert given["south / wave_a"] == given["south / wave_b"] == 0.45


def test_strata_csv_has_the_wave_column(tmp_path) -> None:
    spec = _study(tmp_path, _waves(19))
    _run(spec, tmp_path / "out")
    rows = list(csv.DictReader(io.StringIO((tmp_path / "out" / "strata.csv").read_text())))
    assert {(r["site"], r["wave"]) for r in rows} == {
        (s, w) for s in ("north", "south", "east", "west") for w in ("wave_a", "wave_b")}


def test_a_single_file_has_no_waves_and_pool_must_be_true_or_false(tmp_path) -> None:
    frames = _waves(23)
    spec = _study(tmp_path, frames, SPEC.replace("[wave_a.csv, wave_b.csv]", "wave_a.csv"))
    _, doc = _run(spec, tmp_path / "out")
    assert doc["waves"] is None and "stratum_columns" not in doc["strata"][0]
    (tmp_path / "spec.yaml").write_text(SPEC + "waves:\n  pool: yes please\n")
    bad = CliRunner().invoke(app, ["run", str(tmp_path / "spec.yaml")], env=ENV)
    assert bad.exit_code == 2
    assert "line 9" in bad.stderr and "'waves.pool' must be true or false" in bad.stderr


def test_row_features_see_the_wave_strata(tmp_path) -> None:
    """The robust sandwich with covariates and randomization inference read the rows again;
    they must see the same (stratum x wave) strata as the moments."""
    frames = _waves(29, n=800)
    for frame in frames.values():
        frame["x"] = np.round(frame["y"] * 0.3 + np.arange(len(frame)) % 7, 3)
    text = SPEC.replace("  stratum: site\n", "  stratum: site\n  covariates: [x]\n") + \
        "inference:\n  variance: robust\n  randomization: {draws: 199, seed: 5}\n"
    spec = _study(tmp_path, frames, text)
    _, doc = _run(spec, tmp_path / "out")
    joined = pd.concat([f.assign(wave=name) for name, f in frames.items()])
    one = tmp_path / "one"
    one.mkdir()
    joined.to_csv(one / "all.csv", index=False)
    (one / "spec.yaml").write_text(spec.read_text().replace("[wave_a.csv, wave_b.csv]", "all.csv")
                                   .replace("stratum: site", "stratum: [site, wave]"))
    _, want = _run(one / "spec.yaml", one / "out")
    # reference: the same rows in one file with the wave as a second stratum column
    for got, ref in zip(doc["adjusted_estimates"], want["adjusted_estimates"], strict=True):
        assert got["fit"]["std_error"] == pytest.approx(ref["fit"]["std_error"], rel=1e-10)
    got_ri, want_ri = (d["comparisons"][0]["randomization"] for d in (doc, want))
    assert got_ri["p_value"] == want_ri["p_value"]
    assert got_ri["interval"] == pytest.approx(want_ri["interval"], rel=1e-9)

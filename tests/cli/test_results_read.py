"""results.json read back: every result type rebuilt by its `from_dict` gives back exactly the
JSON it was written as, on runs that use every part of the file."""

from __future__ import annotations

import json
from pathlib import Path
from typing import Any

import pytest
from cli_support import DEMO_SPEC, ENV, REPO
from typer.testing import CliRunner

from strativ.cli.app import app
from strativ.cli.errors import UsageError
from strativ.cli.results_read import read_results

FULL = (DEMO_SPEC.read_text(encoding="utf-8")
        .replace("../demo_data/", str(REPO / "demo_data") + "/")
        .replace("  level: 0.95\n", "  level: 0.95\n  randomization: {draws: 99, seed: 11}\n")
        + "sensitivity:\n  direct_effect: [-20, 20]\n  defier_share: [0.01, 0.02]\n"
        + "planning:\n  target_effect: {gas_therms: -10}\n")


def _run(tmp_path: Path, text: str, *args: str) -> tuple[Path, dict[str, Any]]:
    spec = tmp_path / "spec.yaml"
    spec.write_text(text, encoding="utf-8")
    out = tmp_path / "out"
    result = CliRunner().invoke(app, ["run", str(spec), "--out", str(out), *args], env=ENV)
    assert result.exit_code == 0, result.output
    path = out / "results.json"
    return path, json.loads(path.read_text(encoding="utf-8"))


def _without(entry: dict[str, Any], *keys: str) -> dict[str, Any]:
    return {k: v for k, v in entry.items() if k not in keys}


def _assert_round_trip(path: Path, doc: dict[str, Any]) -> None:
    """Each rebuilt result's `to_dict` equals the part of the file it came from."""
    back = read_results(path)
    assert back.title == doc["title"] and back.warnings == tuple(doc["warnings"])
    assert [f.to_dict() for f in back.inputs] == doc["inputs"]
    assert [r.outcome for r in back.outcomes] == [c["outcome"] for c in doc["comparisons"]]
    for report, entry in zip(back.outcomes, doc["comparisons"], strict=True):
        name = report.outcome
        comp = json.loads(json.dumps(report.comparison.to_dict()))
        # reference: the flat lists of results.json, one outcome at a time
        assert comp["estimates"] == [_without(e, "outcome") for e in doc["estimates"]
                                     if e["outcome"] == name]
        assert comp["strata"]["rows"] == [_without(s, "outcome", "stratum_columns")
                                          for s in doc["strata"] if s["outcome"] == name]
        assert comp["strata"]["excluded"] == [_without(s, "outcome", "stratum_columns")
                                              for s in doc["exclusions"] if s["outcome"] == name]
        for key in ("gap", "size_weighted", "constant_effect", "negative_first_stage",
                    "offer_counts", "notes", "variance_rule", "single_cluster_cells"):
            assert comp[key] == entry[key], key
        for key, value in (("attrition_test", report.attrition_test),
                           ("sensitivity", report.sensitivity),
                           ("randomization", report.randomization),
                           ("planning", report.planning)):
            assert (None if value is None else json.loads(json.dumps(value.to_dict()))) \
                == entry[key], key
        assert [json.loads(json.dumps({"outcome": name, **a.to_dict(),
                                       "fit": {"outcome": name, **a.fit.to_dict()}}))
                for a in report.adjusted] == [a for a in doc["adjusted_estimates"]
                                              if a["outcome"] == name]
    assert (None if back.covariates is None else back.covariates.to_dict()) \
        == doc["covariates"]
    assert [f.to_dict() for f in back.families] == doc["multiple_outcomes"]
    family = back.randomization_outcomes
    assert (None if family is None else family.to_dict()) == doc["randomization_outcomes"]
    waves = None if back.waves is None else json.loads(json.dumps(back.waves.to_dict()))
    assert waves == doc["waves"]
    assert (None if back.plan is None else back.plan.to_dict()) == doc["plan"]


def test_every_part_of_a_full_run_reads_back(tmp_path) -> None:
    path, doc = _run(tmp_path, FULL)
    assert doc["comparisons"][0]["randomization"] is not None
    assert doc["comparisons"][0]["sensitivity"]["defiers"]
    assert doc["covariates"] is not None and doc["waves"] is not None
    _assert_round_trip(path, doc)


def test_pooled_waves_probabilities_and_blinding_read_back(tmp_path) -> None:
    text = FULL.replace("  offer_probability: estimated\n", "  offer_probability:\n"
                        "    Lakeshore: 0.2\n    North Ridge: 0.3\n    Cedar Flats: 0.45\n"
                        "    Millbrook: 0.5\n    Eastvale: 0.5\n    Granite Hollow: 0.55\n"
                        "    Pine Terrace: 0.65\n    Riverbend: 0.75\n    Stonebridge: 0.8\n"
                        "    Willow Creek: 0.8\n") + "waves:\n  pool: true\n"
    path, doc = _run(tmp_path, text, "--blind", "--blind-seed", "5")
    assert doc["blinded"]["seed"] == 5 and doc["waves"]["offer_share_test"] is not None
    assert doc["comparisons"][0]["offer_counts"] is not None
    _assert_round_trip(path, doc)
    assert read_results(path).blinded == 5


def test_a_file_that_is_not_results_is_refused_by_place(tmp_path) -> None:
    path = tmp_path / "results.json"
    path.write_text('{"schema_version": "2.0"}', encoding="utf-8")
    with pytest.raises(UsageError, match="does not follow the results layout"):
        read_results(path)
    path.write_text("{not json", encoding="utf-8")
    with pytest.raises(UsageError, match="is not a JSON results file"):
        read_results(path)
    with pytest.raises(UsageError, match="cannot read"):
        read_results(tmp_path / "absent.json")

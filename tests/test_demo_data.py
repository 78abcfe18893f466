"""The committed demo data are what demo_data/generate.py writes, and its truth is coherent."""

from __future__ import annotations

import json
import math
from pathlib import Path
from types import ModuleType

import pytest
from demo_support import load_generator

DEMO_DIR = Path(__file__).resolve().parents[1] / "demo_data"
FILES = ("round_1.csv", "round_2.csv", "round_3.csv", "truth.json")


def _load_generator() -> ModuleType:
    return load_generator()


@pytest.fixture(scope="module")
def generator() -> ModuleType:
    return _load_generator()


@pytest.fixture(scope="module")
def regenerated(generator: ModuleType, tmp_path_factory: pytest.TempPathFactory) -> Path:
    out_dir = tmp_path_factory.mktemp("demo_regenerated")
    generator.generate(out_dir)
    return out_dir


@pytest.fixture(scope="module")
def truth() -> dict:
    return json.loads((DEMO_DIR / "truth.json").read_text(encoding="utf-8"))


@pytest.mark.parametrize("file_name", FILES)
def test_committed_file_equals_generator_output_byte_for_byte(
    regenerated: Path, file_name: str
) -> None:
    # source: issue 4, the committed CSVs equal what the seeded generator writes
    assert (regenerated / file_name).read_bytes() == (DEMO_DIR / file_name).read_bytes()


def test_generator_writes_exactly_the_round_files_and_truth(regenerated: Path) -> None:
    # common practice, no source: the generator writes only the files the README lists
    assert sorted(p.name for p in regenerated.iterdir()) == sorted(FILES)


@pytest.mark.parametrize("outcome", ["gas_therms", "behind_on_bills"])
def test_overall_late_is_complier_weighted_mean_of_stratum_lates(truth: dict, outcome: str) -> None:
    strata = truth["strata"]
    compliers = [s["compliers"] for s in strata]
    weighted = math.fsum(c * s["late"][outcome] for c, s in zip(compliers, strata, strict=True))
    # source: METHODS.md §1 estimand, beta = sum q_s pi_s beta_s / sum q_s pi_s
    assert truth["overall"][outcome]["late"] == pytest.approx(
        weighted / sum(compliers), rel=1e-12, abs=1e-15
    )


@pytest.mark.parametrize("outcome", ["gas_therms", "behind_on_bills"])
def test_fixed_effects_target_uses_offer_variance_weights(truth: dict, outcome: str) -> None:
    strata = truth["strata"]
    for s in strata:
        # source: p_s = n_s1 / n_s (METHODS.md §2)
        assert s["offer_share"] == pytest.approx(s["n_offered"] / s["n"], rel=1e-15)
    weights = [s["offer_share"] * (1 - s["offer_share"]) * s["compliers"] for s in strata]
    weighted = math.fsum(w * s["late"][outcome] for w, s in zip(weights, strata, strict=True))
    # source: Angrist & Imbens (1995) weights n_s p_s (1 - p_s) FS_s, METHODS.md §3
    assert truth["overall"][outcome]["fixed_effects_target"] == pytest.approx(
        weighted / math.fsum(weights), rel=1e-12, abs=1e-15
    )


def test_compliance_types_partition_every_district(truth: dict) -> None:
    for s in truth["strata"]:
        # source: METHODS.md §1, compliers, always-takers and never-takers (no defiers)
        assert s["compliers"] + s["always_takers"] + s["never_takers"] == s["n"]


def test_fixed_effects_target_differs_from_late_in_gas_use(truth: dict) -> None:
    overall = truth["overall"]["gas_therms"]
    # common practice, no source: the demo exists to show the gap; 10 therms is about
    # 2.5 standard errors of either estimate at this sample size (measured when designing it)
    assert abs(overall["fixed_effects_target"] - overall["late"]) > 10.0


def test_truth_labels_the_data_as_invented(truth: dict) -> None:
    # common practice, no source: RULES.md requires the demo to be labelled as invented
    assert truth["note"].startswith("INVENTED DATA")

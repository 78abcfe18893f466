"""The constant-effect test and negative first stages reach the terminal and results.json."""

from __future__ import annotations

import numpy as np
from cli_support import Study, assert_same_numbers, study_rows, write_csv

from strativ.estimators import build_cells, fit_all


def _core(rows):
    y = np.array([r["y"] for r in rows], dtype=float)
    d = np.array([r["take_up"] for r in rows])
    z = np.array([r["offer"] for r in rows])
    s = np.array([r["site"] for r in rows], dtype=object)
    return fit_all(build_cells(y, d, z, s)).to_dict()


def test_results_json_carries_the_core_constant_effect_test(study: Study, invoke) -> None:
    result = invoke("run", study.spec, "--out", study.out)
    assert result.exit_code == 0, result.stderr
    got = study.results()["comparisons"][0]
    # reference: strativ.estimators fit_all(...).to_dict() on the same rows
    want = _core(study_rows())
    assert_same_numbers(got["constant_effect"], want["constant_effect"])
    assert got["negative_first_stage"] == want["negative_first_stage"] == []
    assert "The test that every stratum has the same effect" in " ".join(result.stdout.split())


def test_a_first_stage_negative_beyond_noise_is_named_in_the_reading(study: Study,
                                                                     invoke) -> None:
    rows = study_rows()
    for row in rows:  # in 'east' the offer now lowers take-up sharply
        if row["site"] == "east":
            row["take_up"] = 1 - row["offer"]
    write_csv(study.data, rows)
    result = invoke("run", study.spec, "--out", study.out)
    assert result.exit_code == 0, result.stderr
    flagged = study.results()["comparisons"][0]["negative_first_stage"]
    # reference: strativ.estimators fit_all(...).to_dict() on the same rows
    assert flagged == _core(rows)["negative_first_stage"]
    assert [f["label"] for f in flagged] == ["east"]
    text = " ".join(result.stdout.split())
    assert "The first stage is negative beyond noise in east" in text
    # reference: StratumRow.first_stage and the implied weights of strativ.estimators
    row = next(r for r in _core(rows)["strata"]["rows"] if r["label"] == "east")
    assert row["first_stage"] < 0 and row["weight_complier"] < 0
    assert "Negative first stage in east (" in text
    assert "so the complier share is negative and the stratum enters the fixed-effects and " \
        "complier weights with a negative weight" in text

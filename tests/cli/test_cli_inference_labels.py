"""How the inference of issue 7 reaches the reader: two-ray sets, weak first stages, missing
standard errors, clusters under every flavour, the offer-count check, and one option
vocabulary shared by the spec, the schema and the starter."""

from __future__ import annotations

import json

import jsonschema
import pandas as pd
from cli_support import MINIMAL_SPEC, Study, assert_same_numbers, study_rows, write_csv

from strativ.cli.reading import format_set
from strativ.cli.results import load_schema
from strativ.cli.starter import starter_spec
from strativ.estimators import ConfidenceSet, build_cells, fit_all
from strativ.estimators.options import (
    ASSIGNMENTS,
    DEFAULTS,
    DESCRIPTIONS,
    ESTIMATORS,
    SAMPLINGS,
    VARIANCES,
)

HOUSEHOLD = ("unit", "site", "household", "offer", "take_up", "y")


def _roundtrip(data):
    return json.loads(json.dumps(data))


def _fit(study: Study, *, cluster: bool = False, **options):
    frame = pd.read_csv(study.data)
    cells = build_cells(frame["y"].to_numpy(float), frame["take_up"].to_numpy(),
                        frame["offer"].to_numpy(), frame["site"].to_numpy(object),
                        cluster=frame["household"].to_numpy(object) if cluster else None)
    return fit_all(cells, **options)


def _validate(doc) -> None:
    jsonschema.Draft202012Validator(load_schema()).validate(doc)


def _weak_rows():
    """take-up almost unrelated to the offer: every first-stage F is far below 10."""
    rows = study_rows()
    for i, row in enumerate(rows):
        row["take_up"] = int((i * 4) % 5 == 0) if row["offer"] else int((i * 4 + 1) % 5 == 0)
    return rows


def test_a_two_ray_set_prints_as_a_union_and_round_trips_in_results_json(study: Study,
                                                                         invoke) -> None:
    write_csv(study.data, _weak_rows())
    result = invoke("run", study.spec, "--out", study.out)
    assert result.exit_code == 0, result.stderr
    doc = study.results()
    _validate(doc)
    # reference: strativ.estimators.fit_all on the same rows
    expected = _roundtrip(_fit(study).to_dict())["estimates"]
    for got, want in zip(doc["estimates"], expected, strict=True):
        stored = got["confidence_set"]
        assert_same_numbers(stored, want["confidence_set"])
        assert stored["shape"] == "two_rays"
        assert stored["lower"] is None and stored["upper"] is None
        assert stored["left_ray_end"] < stored["right_ray_start"]
        text = format_set(ConfidenceSet(**stored))
        assert text.startswith("(\u2212\u221e, ") and "] \u222a [" in text
        assert text.endswith(", \u221e)")
        assert text in result.stdout


def test_a_weak_first_stage_is_flagged_in_the_table_and_the_reading(study: Study,
                                                                   invoke) -> None:
    write_csv(study.data, _weak_rows())
    result = invoke("run", study.spec, "--out", study.out)
    assert result.exit_code == 0, result.stderr
    comparison = _fit(study)
    lines = result.stdout.splitlines()
    flat = " ".join(result.stdout.split())
    for est in comparison.estimates:
        # reference: Estimate.first_stage_f and weak_first_stage of strativ.estimators
        assert est.weak_first_stage and est.first_stage_f < 10
        row = next(line for line in lines if line.startswith(
            {"fixed_effects": "fixed effects ", "weighted": "weighted (IPW) ",
             "interacted": "interacted "}[est.estimator]))
        assert row.rstrip().endswith(" weak"), row
    assert "weak: first-stage F below 10" in flat
    late = comparison.get("interacted")
    # source: issue 7, under a weak first stage the reading quotes the robust set
    assert f"read its 95% weak-IV robust set {format_set(late.confidence_set)} rather than " \
        "the normal interval" in flat
    assert "the first stage is weak" in result.stderr


def test_results_json_carries_the_new_fields_and_validates(study: Study, invoke) -> None:
    result = invoke("run", study.spec, "--out", study.out)
    assert result.exit_code == 0, result.stderr
    doc = study.results()
    _validate(doc)
    # reference: strativ.estimators.fit_all(...).to_dict() on the same rows
    want = _roundtrip(_fit(study).to_dict())
    got = doc["comparisons"][0]
    assert_same_numbers(got["gap"], want["gap"])
    assert_same_numbers(got["constant_effect"], want["constant_effect"])
    assert got["gap"]["complier_estimator"] == "interacted"
    assert set(got["constant_effect"]) >= {"fitted_common_effect", "p_value_asymptotic",
                                           "draws", "seed"}
    for estimate in doc["estimates"]:
        for key in ("first_stage_f", "first_stage_f_unadjusted", "first_stage_f_null"):
            assert key in estimate
        # source: the default flavour 'stratified' reads assignment and sampling
        assert (estimate["assignment"], estimate["sampling"]) == ("block", "random")


def test_robust_records_no_assignment_or_sampling(study: Study, invoke) -> None:
    study.write_spec(MINIMAL_SPEC + "inference:\n  variance: robust\n")
    result = invoke("run", study.spec, "--out", study.out)
    assert result.exit_code == 0, result.stderr
    doc = study.results()
    _validate(doc)
    # source: estimators.options.USES_ASSIGNMENT / USES_SAMPLING leave out 'robust'
    assert all(e["assignment"] is None and e["sampling"] is None for e in doc["estimates"])
    header = next(line for line in result.stdout.splitlines() if line.startswith("inference"))
    assert "assignment" not in header and "sampling" not in header


def _clustered_rows():
    rows = study_rows()
    for i, row in enumerate(rows):
        row["household"] = f"{row['site']}-{row['offer']}-{i // 3}"
    return rows


def test_a_cluster_column_is_used_by_robust(study: Study, invoke) -> None:
    write_csv(study.data, _clustered_rows(), header=HOUSEHOLD)
    study.write_spec(MINIMAL_SPEC + "  cluster: household\ninference:\n  variance: robust\n")
    result = invoke("run", study.spec, "--out", study.out)
    assert result.exit_code == 0, result.stderr
    doc = study.results()
    _validate(doc)
    # reference: strativ.estimators.fit_all, robust variance, cells built with the clusters
    clustered = _roundtrip(_fit(study, cluster=True, variance="robust").to_dict())["estimates"]
    plain = _roundtrip(_fit(study, variance="robust").to_dict())["estimates"]
    got = [{k: v for k, v in e.items() if k != "outcome"} for e in doc["estimates"]]
    assert_same_numbers(got, clustered)
    assert [e["std_error"] for e in got] != [e["std_error"] for e in plain]
    flat = " ".join(result.stderr.split())
    assert "cluster column 'household' is used: variance 'robust' is the cluster-robust " \
        "sandwich" in flat
    assert "not used" not in flat


def test_stratified_with_a_cluster_column_is_the_cluster_form(study: Study, invoke) -> None:
    write_csv(study.data, _clustered_rows(), header=HOUSEHOLD)
    study.write_spec(MINIMAL_SPEC + "  cluster: household\n")
    result = invoke("run", study.spec, "--out", study.out)
    assert result.exit_code == 0, result.stderr
    # source: issue 7 contract, stratified with clusters is recorded as 'cluster'
    assert {e["variance"] for e in study.results()["estimates"]} == {"cluster"}
    assert "variance stratified (as cluster) by cluster column 'household'" in result.stdout
    assert "recorded as variance 'cluster'" in " ".join(result.stderr.split())


def test_offer_counts_off_block_rounding_switch_with_a_warning_naming_strata(study: Study,
                                                                            invoke) -> None:
    study.write_spec(MINIMAL_SPEC + "design:\n  offer_probability: {north: 0.3, south: 0.3, "
                     "east: 0.3, west: 0.3}\n")
    result = invoke("run", study.spec, "--out", study.out)
    assert result.exit_code == 0, result.stderr
    doc = study.results()
    _validate(doc)
    counts = doc["comparisons"][0]["offer_counts"]
    # source: study_rows offers 6/20, 10/20, 14/20, 8/16; at 0.3 only north is within rounding
    assert counts["switched"] and counts["assignment_used"] == "independent"
    assert [r["label"] for r in counts["rows"] if not r["within_rounding"]] == \
        ["east", "south", "west"]
    flat = " ".join(result.stderr.split())
    assert "'east' 14 of 20 offered (expected 20 × 0.3 = 6)" in flat
    assert "the variance uses assignment 'independent'" in flat
    for label in counts["rejected"]:
        assert f"'{label}' " in flat.split("offered counts unlikely")[1]
    # `strativ check` gives the same warning before any fit is shown
    checked = invoke("check", study.spec)
    assert checked.exit_code == 0 and "the variance uses assignment 'independent'" in \
        " ".join(checked.stderr.split())


def test_no_standard_error_is_shown_with_its_reason(study: Study, invoke) -> None:
    rows = []
    for s in range(12):  # matched pairs: one offered and one not offered unit per stratum
        for offer in (0, 1):
            rows.append({"unit": f"u{2 * s + offer}", "site": f"p{s:02d}", "offer": offer,
                         "take_up": int(offer or s % 4 == 0),
                         "y": round(1 + 0.5 * offer + (s * 7 % 5) / 3 + offer * (s % 3), 4)})
    write_csv(study.data, rows)
    study.write_spec(MINIMAL_SPEC + "inference:\n  variance: robust\n")
    result = invoke("run", study.spec, "--out", study.out)
    assert result.exit_code == 0, result.stderr
    doc = study.results()
    _validate(doc)
    missing = [e for e in doc["estimates"] if e["std_error"] is None and e["estimate"] is not None]
    # source: issue 7, a robust sandwich with n <= k (interacted on pairs: 24 regressors for
    # 24 units) has no standard error
    assert [e["estimator"] for e in missing] == ["interacted"]
    reason = missing[0]["std_error_reason"]
    flat = " ".join(result.stdout.split())
    assert f"no standard error: {reason}" in flat
    assert f"no standard error for interacted: {reason}" in " ".join(result.stderr.split())
    assert all(e["std_error"] != 0 for e in doc["estimates"])


def test_schema_enums_are_the_option_vocabulary() -> None:
    defs = load_schema()["$defs"]
    # reference: strativ.estimators.options, the one declaration of every option
    assert defs["estimator"]["enum"] == list(ESTIMATORS)
    assert defs["variance"]["enum"] == list(VARIANCES)
    assert defs["assignment"]["enum"] == list(ASSIGNMENTS)
    assert defs["sampling"]["enum"] == list(SAMPLINGS)
    gap = defs["comparison"]["properties"]["gap"]["oneOf"][1]["properties"]
    assert set(gap["complier_estimator"]["enum"]) < set(ESTIMATORS)
    vocabulary = set(ESTIMATORS + VARIANCES + ASSIGNMENTS + SAMPLINGS)
    spelled = [e for e in _enums(load_schema()) if vocabulary & set(map(str, e))]
    # every enum that names an option is one of the four, or the gap's complier subset
    assert len(spelled) == 5 and gap["complier_estimator"]["enum"] in spelled


def _enums(node) -> list[list]:
    if isinstance(node, dict):
        found = [node["enum"]] if "enum" in node else []
        return found + [e for value in node.values() for e in _enums(value)]
    if isinstance(node, list):
        return [e for value in node for e in _enums(value)]
    return []


def test_starter_lists_every_option_value_with_its_description(study: Study) -> None:
    text = starter_spec(study.data, study.root / "start.yaml")
    for option, values in (("assignment", ASSIGNMENTS), ("sampling", SAMPLINGS),
                           ("variance", VARIANCES), ("estimators", ESTIMATORS)):
        for value in values:
            # reference: strativ.estimators.options.DESCRIPTIONS
            assert f"{value}: {DESCRIPTIONS[option][value]}" in text, (option, value)
    assert f"#   variance: {DEFAULTS['variance']}" in text

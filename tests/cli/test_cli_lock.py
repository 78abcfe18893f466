"""`strativ lock`: a plan fixed before outcomes are seen, and each later run's deviations."""

from __future__ import annotations

import json

from cli_support import MINIMAL_SPEC, Study, study_rows, write_csv

PLAN = MINIMAL_SPEC + "estimators: [fixed_effects, weighted, interacted]\n"


def _lock(study: Study, invoke) -> None:
    study.write_spec(PLAN)
    done = invoke("lock", study.spec)
    assert done.exit_code == 0, done.output
    assert "locked the plan of spec.yaml" in done.stderr


def test_a_run_that_follows_the_plan_reports_no_deviation(study: Study, invoke) -> None:
    _lock(study, invoke)
    result = invoke("run", study.spec, "--out", study.out, "-q", "--fail-on", "deviation")
    assert result.exit_code == 0 and result.stderr == ""
    plan = study.results()["plan"]
    assert plan["lock"] == "spec.lock.json" and plan["deviations"] == []


def test_a_changed_estimator_list_is_reported_and_fails_the_gate(study: Study, invoke) -> None:
    _lock(study, invoke)
    study.write_spec(PLAN.replace("[fixed_effects, weighted, interacted]",
                                  "[fixed_effects, weighted]"))
    result = invoke("run", study.spec, "--out", study.out, "--fail-on", "deviation")
    # source: README exit codes, 4 = a --fail-on condition held, after the files are written
    assert result.exit_code == 4
    wanted = "estimators in the plan but not run: interacted"
    assert wanted in " ".join(result.stderr.split())
    assert "gate failed: deviation" in result.stderr
    assert study.results()["plan"]["deviations"] == [wanted]


def test_every_kind_of_deviation_is_named(study: Study, invoke) -> None:
    _lock(study, invoke)
    study.write_spec(PLAN.replace("outcome: y", "outcome: [y, age]")
                     + "inference:\n  variance: robust\n  level: 0.9\n")
    assert invoke("run", study.spec, "--out", study.out, "-q").exit_code == 0
    deviations = study.results()["plan"]["deviations"]
    # by construction: one outcome added, the variance and the level changed
    assert deviations == ["outcomes added after the lock: age",
                          'inference.variance: planned "stratified", run "robust"',
                          "inference.level: planned 0.95, run 0.9"]


def test_baseline_files_changed_are_deviations_and_new_waves_are_not(study: Study,
                                                                      invoke) -> None:
    _lock(study, invoke)
    rows = study_rows()
    write_csv(study.root / "later.csv", rows[:40])
    study.write_spec(PLAN.replace("data: data.csv", "data: [data.csv, later.csv]"))
    assert invoke("run", study.spec, "--out", study.out, "-q").exit_code == 0
    assert study.results()["plan"]["deviations"] == []
    rows[0]["y"] += 1
    write_csv(study.data, rows)
    assert invoke("run", study.spec, "--out", study.out, "-q").exit_code == 0
    [deviation] = study.results()["plan"]["deviations"]
    assert deviation.startswith("baseline file data.csv changed since the lock")


def test_a_lock_is_never_replaced_and_a_damaged_one_stops_the_run(study: Study,
                                                                   invoke) -> None:
    _lock(study, invoke)
    lock = study.root / "spec.lock.json"
    before = lock.read_bytes()
    again = invoke("lock", study.spec)
    assert again.exit_code == 2 and "is locked already" in again.stderr
    assert lock.read_bytes() == before
    document = json.loads(before)
    document["tool_version"] = "0.0.1"
    lock.write_text(json.dumps(document))
    assert invoke("run", study.spec, "--out", study.out, "-q").exit_code == 0
    assert study.results()["plan"]["deviations"][-1].startswith(
        "strativ version: planned 0.0.1, run ")
    lock.write_text("{not json")
    bad = invoke("run", study.spec, "--out", study.out, "-q")
    assert bad.exit_code == 2 and "is not a readable strativ lock" in bad.stderr

"""Covariates in a run: every estimator refitted with them next to the unadjusted fit, the
balance table and complier means, and what happens with robust variances, gaps and
degenerate covariates.

References: the core's `fit_adjusted` on group moments written by the test from the demo's
rows (the core itself is checked against linearmodels in tests/test_adjust.py) and
`covariate_profile` likewise; counts by construction.
"""

from __future__ import annotations

import json

import numpy as np
import pandas as pd
import pytest
from cli_support import MINIMAL_SPEC, REPO, Study, assert_clean_failure, study_rows, write_csv
from linearmodels.iv import IV2SLS
from test_adjust import moments_of

from strativ.estimators.adjust import fit_adjusted

DATA_ERROR = 3
DEMO_COVARIATES = ["baseline_therms", "home_age_years", "household_size"]


@pytest.fixture(scope="module")
def demo(tmp_path_factory):
    from typer.testing import CliRunner

    from strativ.cli.app import app

    out = tmp_path_factory.mktemp("demo")
    done = CliRunner().invoke(app, ["run", str(REPO / "specs" / "demo.yaml"), "--out", str(out),
                                    "--format", "json"])
    assert done.exit_code == 0, done.stderr
    import json

    return json.loads((out / "results.json").read_text(encoding="utf-8")), done


def test_the_demo_shows_adjusted_estimates_equal_to_the_core(demo) -> None:
    doc, _ = demo
    rows = pd.concat([pd.read_csv(p).assign(wave=p.stem)
                      for p in sorted((REPO / "demo_data").glob("round_*.csv"))])
    for outcome in ("gas_therms", "behind_on_bills"):
        # the run's strata: district x wave (one file per lottery round)
        frame = pd.DataFrame({"s": rows["district"] + " / " + rows["wave"],
                              "z": rows["won_lottery"],
                              "d": rows["retrofitted"], "y": rows[outcome],
                              **{x: rows[x].astype(float) for x in DEMO_COVARIATES}})
        m = moments_of(frame.reset_index(drop=True), DEMO_COVARIATES)
        got = [a for a in doc["adjusted_estimates"] if a["outcome"] == outcome]
        plain = {e["estimator"]: e for e in doc["estimates"] if e["outcome"] == outcome}
        # by construction: the demo fits three estimators on two outcomes
        assert [a["estimator"] for a in got] == ["fixed_effects", "weighted", "interacted"]
        for entry in got:
            want = fit_adjusted(m, entry["estimator"], tuple(DEMO_COVARIATES),
                                unadjusted_std_error=plain[entry["estimator"]]["std_error"])
            # reference: strativ.estimators.adjust.fit_adjusted on moments from the rows
            assert entry["fit"]["estimate"] == pytest.approx(want.fit.estimate, rel=1e-10)
            assert entry["fit"]["std_error"] == pytest.approx(want.fit.std_error, rel=1e-8)
            assert entry["std_error_ratio"] == pytest.approx(want.std_error_ratio, rel=1e-8)
            assert list(entry["slopes"]) == DEMO_COVARIATES


def test_the_demo_prints_balance_and_adjusted_estimates_at_80_columns(demo) -> None:
    _, done = demo
    lines = done.stdout.splitlines()
    # common practice, no source: a terminal report fits 80 columns
    assert max(len(line.rstrip()) for line in lines) <= 80
    assert any(line.startswith("with covariates (baseline_therms") for line in lines)
    assert any("joint balance test" in line for line in lines)


def _study(study: Study, rows, extra: str = "") -> None:
    write_csv(study.data, rows, header=tuple(rows[0]))
    study.write_spec(MINIMAL_SPEC + "  covariates: age\n" + extra)


@pytest.mark.parametrize("variance", ["robust", "robust_scaled"])
def test_robust_variance_with_covariates_equals_the_regression_sandwich(
        study: Study, invoke, variance: str) -> None:
    rows = study_rows()
    _study(study, rows, f"inference:\n  variance: {variance}\n")
    done = invoke("run", study.spec, "--out", study.out)
    assert done.exit_code == 0, done.stderr
    doc = study.results()
    frame = pd.DataFrame(rows)
    dummies = pd.get_dummies(frame["site"], dtype=float)
    reference = IV2SLS(frame["y"].astype(float), pd.concat([dummies, frame[["age"]]], axis=1),
                       frame["take_up"].astype(float), frame["offer"].astype(float)).fit(
        cov_type="robust", debiased=variance == "robust_scaled")
    got = next(a for a in doc["adjusted_estimates"] if a["estimator"] == "fixed_effects")
    # reference: linearmodels IV2SLS, stratum dummies and the covariate, robust covariance
    # (debiased for robust_scaled)
    assert got["fit"]["estimate"] == pytest.approx(reference.params["take_up"], rel=1e-10)
    assert got["fit"]["std_error"] == pytest.approx(reference.std_errors["take_up"], rel=1e-8)
    assert got["fit"]["variance"] == variance
    assert doc["covariates"]["covariates"][0]["covariate"] == "age"


@pytest.mark.parametrize("variance", ["stratified", "robust"])
def test_a_covariate_with_gaps_follows_the_indicator_rule(study: Study, invoke,
                                                           variance: str) -> None:
    rows = study_rows()
    for i in (3, 17, 30, 41, 52):
        rows[i]["age"] = ""
    _study(study, rows, f"inference:\n  variance: {variance}\n")
    done = invoke("run", study.spec, "--out", study.out)
    assert done.exit_code == 0, done.stderr
    doc = study.results()
    # by construction: five ages blanked above
    assert any("covariate 'age' is missing in 5 of" in w for w in doc["warnings"])
    assert doc["covariates"]["covariates"][0]["n_present"] == len(rows) - 5
    frame = pd.DataFrame(rows)
    age = pd.to_numeric(frame["age"], errors="coerce")
    filled = age.fillna(age.groupby(frame["site"]).transform("mean"))
    dummies = pd.get_dummies(frame["site"], dtype=float)
    controls = pd.concat([dummies, filled.rename("age"),
                          age.isna().astype(float).rename("age_missing")], axis=1)
    reference = IV2SLS(frame["y"].astype(float), controls, frame["take_up"].astype(float),
                       frame["offer"].astype(float)).fit(cov_type="robust", debiased=False)
    got = next(a for a in doc["adjusted_estimates"] if a["estimator"] == "fixed_effects")
    # reference: linearmodels IV2SLS with the stratum-mean fill and a missing indicator
    assert got["fit"]["estimate"] == pytest.approx(reference.params["take_up"], rel=1e-10)
    assert list(got["slopes"]) == ["age", "age missing"]
    assert got["slopes"]["age missing"] == pytest.approx(reference.params["age_missing"],
                                                         rel=1e-8, abs=1e-10)
    if variance == "robust":
        # reference: the same regression's robust standard error
        assert got["fit"]["std_error"] == pytest.approx(reference.std_errors["take_up"],
                                                        rel=1e-8)


def test_a_constant_covariate_is_refused_by_name(study: Study, invoke) -> None:
    rows = study_rows()
    for row in rows:
        row["age"] = 40
    _study(study, rows)
    done = invoke("run", study.spec, "--out", study.out)
    assert_clean_failure(done, DATA_ERROR, "covariate 'age' does not vary within any stratum",
                         "columns: covariates:")


def test_collinear_covariates_are_refused(study: Study, invoke) -> None:
    rows = study_rows()
    for row in rows:
        row["age2"] = 2 * row["age"] + 1
    write_csv(study.data, rows, header=tuple(rows[0]))
    study.write_spec(MINIMAL_SPEC + "  covariates: [age, age2]\n")
    done = invoke("run", study.spec, "--out", study.out)
    assert_clean_failure(done, DATA_ERROR, "collinear within strata")


def test_a_covariate_that_predicts_the_outcome_narrows_the_interval(study: Study,
                                                                    invoke) -> None:
    rows = study_rows()
    rng = np.random.default_rng(20261205)
    for row in rows:
        row["score"] = round(float(rng.normal()), 6)
        row["y"] = round(row["y"] + 3 * row["score"], 6)
    write_csv(study.data, rows, header=tuple(rows[0]))
    study.write_spec(MINIMAL_SPEC + "  covariates: score\n")
    assert invoke("run", study.spec, "--out", study.out).exit_code == 0
    ratios = [a["std_error_ratio"] for a in study.results()["adjusted_estimates"]]
    # by construction: the score carries most of the outcome's spread
    assert all(r < 0.6 for r in ratios), ratios


def test_a_moment_table_with_robust_variance_skips_adjustment_and_says_why(tmp_path,
                                                                     invoke) -> None:
    table = tmp_path / "cells.csv"
    assert invoke("cells", REPO / "specs" / "demo.yaml", "--out", table).exit_code == 0
    text = (REPO / "specs" / "demo.yaml").read_text(encoding="utf-8")
    spec = tmp_path / "m.yaml"
    spec.write_text(text.replace("data: ../demo_data/round_*.csv", f"moments: {table}")
                    .replace("variance: stratified", "variance: robust"), encoding="utf-8")
    done = invoke("run", spec, "--out", tmp_path / "out")
    assert done.exit_code == 0, done.stderr
    doc = json.loads((tmp_path / "out" / "results.json").read_text(encoding="utf-8"))
    # by construction: robust with covariates needs fourth moments, which a table lacks; the
    # unadjusted run and the balance check go on, and a warning says why
    assert doc["adjusted_estimates"] == [] and doc["covariates"] is not None
    assert any("variance 'robust' with covariates needs the regression's sandwich" in w
               for w in doc["warnings"])

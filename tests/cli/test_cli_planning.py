"""Planning after each run: the complier estimator's MDE and the rows a target needs."""

from __future__ import annotations

import math

from cli_support import MINIMAL_SPEC, Study
from scipy import stats


def test_the_run_reports_the_mde_and_the_rows_a_target_needs(study: Study, invoke) -> None:
    study.write_spec(MINIMAL_SPEC + "planning:\n  power: 0.9\n  target_effect: 0.5\n")
    result = invoke("run", study.spec, "--out", study.out)
    assert result.exit_code == 0, result.output
    doc = study.results()
    comp = doc["comparisons"][0]
    plan = comp["planning"]
    chosen = comp["gap"]["complier_estimator"]
    est = next(e for e in doc["estimates"] if e["estimator"] == chosen)
    t = stats.t(est["degrees_of_freedom"])
    # source: Bloom (1995), MDE = (t_{1-alpha/2} + t_power) x se on the estimate's df;
    # reference: scipy.stats.t quantiles and the estimate's own standard error
    mde = (t.ppf(0.975) + t.ppf(0.9)) * est["std_error"]
    assert plan["estimator"] == chosen and plan["power"] == 0.9
    assert math.isclose(plan["mde"], mde, rel_tol=1e-12)
    # source: se proportional to 1/sqrt(n) at a fixed design: n* = n (MDE / target)^2
    assert plan["rows_needed"] == math.ceil(est["n_units"] * (mde / 0.5) ** 2)
    assert plan["further_rows"] == max(0, plan["rows_needed"] - est["n_units"])
    flat = " ".join(result.stdout.split())
    assert "with 90% power at the 95% level" in flat
    assert f"{plan['rows_needed']:,} rows" in flat


def test_planning_options_are_checked_with_their_line(study: Study, invoke) -> None:
    for text, message in (("planning:\n  power: 1.5\n", "'planning.power' is 1.5"),
                          ("planning:\n  target_effect: {z: 1}\n", "'z' is not an outcome"),
                          ("planning:\n  target_effect: 0\n", "must be a nonzero number"),
                          ("planning:\n  powr: 0.8\n", "unknown key 'powr'")):
        study.write_spec(MINIMAL_SPEC + text)
        result = invoke("run", study.spec, "--out", study.out)
        assert result.exit_code == 2, text
        # by construction: the minimal spec has 6 lines, so the planning key is on line 8
        assert message in result.stderr and "line 8" in result.stderr, result.stderr

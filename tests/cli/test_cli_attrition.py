"""Differential attrition in a run: counts by arm, the Mantel-Haenszel test, a warning.

Reference: statsmodels' StratifiedTable.test_null_odds on the 2x2 tables of the study's rows
(written by the test); counts by construction.
"""

from __future__ import annotations

import numpy as np
import pytest
from cli_support import MINIMAL_SPEC, Study, study_rows, write_csv
from statsmodels.stats.contingency_tables import StratifiedTable


def _run(study: Study, invoke, rows) -> dict:
    write_csv(study.data, rows, header=tuple(rows[0]))
    study.write_spec(MINIMAL_SPEC)
    done = invoke("run", study.spec, "--out", study.out)
    assert done.exit_code == 0, done.stderr
    return study.results()


def _tables(rows) -> np.ndarray:
    sites = sorted({r["site"] for r in rows})
    out = np.zeros((2, 2, len(sites)))
    for r in rows:
        out[1 - r["offer"], 0 if r["y"] == "" else 1, sites.index(r["site"])] += 1
    return out


def test_attrition_by_arm_is_tested_and_warned(study: Study, invoke) -> None:
    rows = study_rows()
    for i, row in enumerate(rows):
        if (row["offer"] and i % 3 == 0) or (not row["offer"] and i % 11 == 0):
            row["y"] = ""
    doc = _run(study, invoke, rows)
    test = doc["comparisons"][0]["attrition_test"]
    # by construction: the blanks made above
    assert test["missing_offered"] == sum(1 for r in rows if r["offer"] and r["y"] == "")
    assert test["offered"] == sum(1 for r in rows if r["offer"])
    want = StratifiedTable(_tables(rows)).test_null_odds(correction=False)
    # reference: statsmodels Mantel-Haenszel test on the same tables
    assert test["statistic"] == pytest.approx(want.statistic, rel=1e-12)
    assert test["p_value"] == pytest.approx(want.pvalue, rel=1e-10)
    assert test["p_value"] < 0.05
    assert any("goes missing more often among the offered" in w for w in doc["warnings"])


def test_even_attrition_gives_no_warning(study: Study, invoke) -> None:
    rows = study_rows()
    for i, row in enumerate(rows):
        if i % 10 == 0:
            row["y"] = ""
    doc = _run(study, invoke, rows)
    test = doc["comparisons"][0]["attrition_test"]
    assert test["p_value"] is not None
    # by construction: the warning is given exactly when the test rejects at 5 %
    assert any("goes missing more often" in w for w in doc["warnings"]) == \
        (test["p_value"] < 0.05)
    assert test["missing_offered"] + test["missing_not_offered"] == len(range(0, len(rows), 10))

"""p-values of each estimate and their adjustment across a run's outcomes.

References: scipy.stats (Student t and normal tails) for each p-value; statsmodels'
multipletests for the Holm and Benjamini-Hochberg adjustments of the demo's two outcomes.
"""

from __future__ import annotations

import json

import pytest
from cli_support import REPO
from scipy import stats
from statsmodels.stats.multitest import multipletests
from typer.testing import CliRunner

from strativ.cli.app import app


@pytest.fixture(scope="module")
def doc(tmp_path_factory):
    out = tmp_path_factory.mktemp("outcomes")
    done = CliRunner().invoke(app, ["run", str(REPO / "specs" / "demo.yaml"), "--out", str(out),
                                    "--format", "json"])
    assert done.exit_code == 0, done.stderr
    return json.loads((out / "results.json").read_text(encoding="utf-8"))


def test_each_p_value_is_the_two_sided_tail_of_its_interval_reference(doc) -> None:
    entries = doc["estimates"] + [a["fit"] for a in doc["adjusted_estimates"]]
    for e in entries:
        t = abs(e["estimate"] / e["std_error"])
        df = e["degrees_of_freedom"]
        # reference: scipy.stats.t (or norm) two-sided tail at estimate / std_error
        want = 2 * (stats.t.sf(t, df) if df is not None else stats.norm.sf(t))
        assert e["p_value"] == pytest.approx(want, rel=1e-9, abs=1e-300)


def test_the_families_equal_statsmodels_adjustments(doc) -> None:
    families = doc["multiple_outcomes"]
    # by construction: three estimators, unadjusted and with covariates
    assert [(f["estimator"], f["with_covariates"]) for f in families] == [
        (e, adjusted) for adjusted in (False, True)
        for e in ("fixed_effects", "weighted", "interacted")]
    for family in families:
        source = doc["adjusted_estimates"] if family["with_covariates"] else doc["estimates"]
        p = [(e["fit"] if family["with_covariates"] else e)["p_value"] for e in source
             if e["estimator"] == family["estimator"]]
        assert family["p_value"] == p
        # reference: statsmodels.stats.multitest.multipletests
        assert family["holm"] == multipletests(p, method="holm")[1].tolist()
        assert family["benjamini_hochberg"] == multipletests(p, method="fdr_bh")[1].tolist()


def test_one_outcome_has_no_family(study, invoke) -> None:
    assert invoke("run", study.spec, "--out", study.out).exit_code == 0
    # by construction: the minimal study has one outcome
    assert study.results()["multiple_outcomes"] == []

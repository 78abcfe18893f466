"""linearmodels IV2SLS regressions that the reference tests compare strativ against.

Each function here builds one regression of METHODS.md section 3 from unit-level rows and
fits it with ``linearmodels.iv.IV2SLS`` twice: ``cov_type="robust"`` with
``debiased=False`` (HC0) and with ``debiased=True`` (scaled by ``n / (n - k)``, ``k`` the
number of regressors including every dummy). The helpers only build the reference side;
the comparison with strativ, and the datasets with their sources, are in
``test_reference.py``.

The second half builds the references of the inference checks (``test_reference_inference.py``):
the cluster-robust covariance (``cov_type="clustered"``, clusters = the sample's cluster
column) and the first-stage diagnostics ``first_stage.diagnostics["f.stat"]`` of each
estimator's regression, under every covariance of ``COVARIANCES``.

The module also lists the (dataset, estimator, check) cases that the reference tests must
cover, written out here independently of the test modules' parametrization, so that a
guard test can tell when a check or a dataset goes missing: ``CHECKS`` for
``test_reference.py``, ``INFERENCE_CHECKS`` and ``CLUSTER_CHECKS`` for
``test_reference_inference.py``.
"""

from __future__ import annotations

from collections.abc import Callable, Collection, Hashable, Mapping
from dataclasses import dataclass
from typing import Any

import numpy as np
import pandas as pd
from linearmodels.iv import IV2SLS

POINT_TOLERANCE = 1e-10
"""Largest relative error allowed between a strativ point estimate and its reference."""

STD_ERROR_TOLERANCE = 1e-8
"""Largest relative error allowed between a strativ standard error and its reference."""

CLUSTER_STD_ERROR_TOLERANCE = 1e-10
"""Largest relative error allowed between a strativ cluster-robust standard error and the
reference clustered covariance (cell sums reach about 1e-14 on the cluster datasets)."""

FIRST_STAGE_F_TOLERANCE = 1e-8
"""Largest relative error allowed between a strativ first-stage F (times its number of
instruments, where the reference reports the Wald statistic) and the reference's
``f.stat``."""

REFERENCE_DATASETS: tuple[str, ...] = ("voucher", "401ksubs", "simulated")
"""Every dataset that the reference checks must run on."""

CHECKS: tuple[tuple[str, str], ...] = (
    ("fixed_effects", "estimate"),
    ("fixed_effects", "robust"),
    ("fixed_effects", "robust_scaled"),
    ("weighted", "estimate"),
    ("weighted", "estimate_with_dummies"),
    ("weighted", "robust"),
    ("weighted", "robust_scaled"),
    ("weighted", "estimated_shares_as_design"),
    ("weighted", "supplied_design"),
    ("weighted", "supplied_design_robust"),
    ("interacted", "estimate"),
    ("interacted", "stratum_effect"),
    ("interacted", "stratum_robust"),
)
"""Every (estimator, check) pair that the reference checks must cover on each dataset."""

REQUIRED_CASES: frozenset[tuple[str, str, str]] = frozenset(
    (dataset, estimator, check) for dataset in REFERENCE_DATASETS for estimator, check in CHECKS
)
"""Every (dataset, estimator, check) case of the reference suite."""

INFERENCE_DATASETS: tuple[str, ...] = ("voucher", "401ksubs", "wagepan", "jtrain")
"""Every dataset that the first-stage F checks must run on."""

CLUSTER_DATASETS: tuple[str, ...] = ("wagepan", "jtrain")
"""The datasets with a cluster column, on which the cluster-robust checks must also run."""

INFERENCE_CHECKS: tuple[tuple[str, str], ...] = (
    ("fixed_effects", "first_stage_f_robust"),
    ("fixed_effects", "first_stage_f_robust_scaled"),
    ("fixed_effects", "first_stage_f_unadjusted"),
    ("weighted", "first_stage_f_robust"),
    ("weighted", "first_stage_f_robust_scaled"),
    ("weighted", "first_stage_f_unadjusted"),
    ("interacted", "first_stage_f_robust"),
    ("interacted", "first_stage_f_robust_scaled"),
    ("interacted", "first_stage_f_unadjusted"),
)
"""Every (estimator, check) pair that must be covered on each of ``INFERENCE_DATASETS``."""

CLUSTER_CHECKS: tuple[tuple[str, str], ...] = (
    ("fixed_effects", "clustered"),
    ("fixed_effects", "clustered_scaled"),
    ("fixed_effects", "first_stage_f_clustered"),
    ("fixed_effects", "first_stage_f_clustered_scaled"),
    ("weighted", "clustered"),
    ("weighted", "clustered_scaled"),
    ("weighted", "first_stage_f_clustered"),
    ("weighted", "first_stage_f_clustered_scaled"),
    ("interacted", "first_stage_f_clustered"),
    ("interacted", "first_stage_f_clustered_scaled"),
)
"""Every (estimator, check) pair that must be covered on each of ``CLUSTER_DATASETS``."""

REQUIRED_INFERENCE_CASES: frozenset[tuple[str, str, str]] = frozenset(
    (dataset, estimator, check)
    for dataset in INFERENCE_DATASETS
    for estimator, check in INFERENCE_CHECKS
) | frozenset(
    (dataset, estimator, check)
    for dataset in CLUSTER_DATASETS
    for estimator, check in CLUSTER_CHECKS
)
"""Every (dataset, estimator, check) case of the inference reference suite."""

COVARIANCES: dict[str, tuple[str, bool]] = {
    "robust": ("robust", False),
    "robust_scaled": ("robust", True),
    "clustered": ("clustered", False),
    "clustered_scaled": ("clustered", True),
    "unadjusted": ("unadjusted", True),
}
"""The reference covariances: name -> linearmodels ``(cov_type, debiased)``.

``robust`` is HC0; ``robust_scaled`` scales it by ``n / (n - k)``; ``clustered`` is the
one-way cluster-robust sandwich on the sample's cluster column, unscaled;
``clustered_scaled`` scales it by ``(n - 1) / (n - k) * G / (G - 1)`` (``G`` clusters);
``unadjusted`` with ``debiased=True`` is the textbook homoskedastic covariance
``s^2 = RSS / (n - k)``."""


@dataclass(frozen=True, slots=True)
class Sample:
    """Unit-level rows of one dataset, as strativ and linearmodels both receive them."""

    outcome: np.ndarray
    """Outcome ``Y``, float, one entry per unit."""
    take_up: np.ndarray
    """Take-up ``D`` coded 0/1."""
    offer: np.ndarray
    """Offer ``Z`` coded 0/1."""
    stratum: np.ndarray
    """Stratum label of each unit."""
    cluster: np.ndarray | None = None
    """Cluster label of each unit (nested in the (stratum, offer) cells), or None."""

    @property
    def labels(self) -> tuple[Hashable, ...]:
        """Sorted distinct stratum labels."""
        return tuple(sorted(pd.unique(self.stratum).tolist()))


@dataclass(frozen=True, slots=True)
class ReferenceFit:
    """Coefficient on take-up from one IV2SLS regression, with both robust flavours."""

    estimate: float
    """Coefficient on ``D``."""
    std_error: float
    """Robust standard error, ``debiased=False`` (HC0)."""
    std_error_scaled: float
    """Robust standard error, ``debiased=True``: scale ``n / (n - k)``, ``k`` counting the
    constant or every dummy, plus ``D``."""


@dataclass(frozen=True, slots=True)
class SaturatedFit:
    """Per-stratum effects from the saturated regression (D x stratum by Z x stratum)."""

    effects: dict[Hashable, float]
    """Coefficient on ``D x 1[S = s]``, keyed by stratum label."""
    std_errors: dict[Hashable, float]
    """Robust standard errors of those coefficients (``debiased=False``), keyed by label."""


def relative_error(actual: float, expected: float) -> float:
    """Return ``|actual - expected| / |expected|`` (absolute error when expected is 0)."""
    scale = abs(expected) if expected != 0 else 1.0
    return abs(actual - expected) / scale


def stratum_dummies(sample: Sample) -> pd.DataFrame:
    """Return one 0/1 column per stratum label, named ``stratum_<label>``."""
    return pd.DataFrame(
        {f"stratum_{label}": (sample.stratum == label).astype(float) for label in sample.labels}
    )


def offer_shares(sample: Sample) -> dict[Hashable, float]:
    """Return the realized offer share ``n_s1 / n_s`` of every stratum."""
    return {label: float(sample.offer[sample.stratum == label].mean()) for label in sample.labels}


def complier_weights(sample: Sample) -> dict[Hashable, float]:
    """Return ``n_s FS_s / sum_t n_t FS_t`` computed from the rows of every stratum."""
    raw = {}
    for label in sample.labels:
        inside = sample.stratum == label
        offered = sample.offer[inside] == 1
        take_up = sample.take_up[inside]
        raw[label] = inside.sum() * (take_up[offered].mean() - take_up[~offered].mean())
    total = sum(raw.values())
    return {label: float(value / total) for label, value in raw.items()}


def inverse_probability_weights(
    sample: Sample, probability: Mapping[Hashable, float] | None = None
) -> np.ndarray:
    """Return ``Z / p_s + (1 - Z) / (1 - p_s)``, ``p_s`` the given or realized offer share."""
    shares = offer_shares(sample) if probability is None else probability
    unit_share = np.array([shares[label] for label in sample.stratum], dtype=float)
    return sample.offer / unit_share + (1 - sample.offer) / (1 - unit_share)


def _fit_both(model: IV2SLS) -> tuple[Any, Any]:
    return (
        model.fit(cov_type="robust", debiased=False),
        model.fit(cov_type="robust", debiased=True),
    )


def _take_up_fit(model: IV2SLS) -> ReferenceFit:
    plain, scaled = _fit_both(model)
    return ReferenceFit(
        estimate=float(plain.params["take_up"]),
        std_error=float(plain.std_errors["take_up"]),
        std_error_scaled=float(scaled.std_errors["take_up"]),
    )


def _frame(sample: Sample, column: str) -> pd.DataFrame:
    return pd.DataFrame({column: np.asarray(getattr(sample, column), dtype=float)})


def _fixed_effects_model(sample: Sample) -> IV2SLS:
    dummies = stratum_dummies(sample)
    return IV2SLS(
        _frame(sample, "outcome"), dummies, _frame(sample, "take_up"), _frame(sample, "offer")
    )


def fixed_effects_2sls(sample: Sample) -> ReferenceFit:
    """Fit IV2SLS of Y on D with one dummy per stratum (no constant), instrument Z."""
    return _take_up_fit(_fixed_effects_model(sample))


def _weighted_model(
    sample: Sample, with_dummies: bool, probability: Mapping[Hashable, float] | None
) -> IV2SLS:
    if with_dummies:
        exog = stratum_dummies(sample)
    else:
        exog = pd.DataFrame({"const": np.ones(sample.outcome.shape[0])})
    return IV2SLS(
        _frame(sample, "outcome"),
        exog,
        _frame(sample, "take_up"),
        _frame(sample, "offer"),
        weights=pd.Series(inverse_probability_weights(sample, probability)),
    )


def weighted_2sls(
    sample: Sample, *, probability: Mapping[Hashable, float] | None = None
) -> ReferenceFit:
    """Fit weighted IV2SLS of Y on (1, D) instrumented by (1, Z), with both robust flavours.

    The weight is ``Z / p_s + (1 - Z) / (1 - p_s)``, ``p_s`` the realized offer share
    unless ``probability`` supplies design probabilities.
    """
    return _take_up_fit(_weighted_model(sample, False, probability))


def weighted_2sls_estimate(
    sample: Sample,
    *,
    with_dummies: bool = False,
    probability: Mapping[Hashable, float] | None = None,
) -> float:
    """Return the coefficient on D from a weighted IV2SLS fit (one fit, no variance needed).

    ``with_dummies`` replaces the constant by one dummy per stratum; ``probability``
    supplies design probabilities for the weights in place of the realized offer shares.
    """
    model = _weighted_model(sample, with_dummies, probability)
    return float(model.fit(cov_type="robust", debiased=False).params["take_up"])


def offer_by_stratum(sample: Sample) -> pd.DataFrame:
    """Return one column ``Z x 1[S = s]`` per stratum label, named ``offer_<label>``."""
    dummies = stratum_dummies(sample)
    return pd.DataFrame(
        {
            f"offer_{label}": dummies.iloc[:, j] * sample.offer
            for j, label in enumerate(sample.labels)
        }
    )


def saturated_2sls(sample: Sample) -> SaturatedFit:
    """Fit IV2SLS with D x stratum instrumented by Z x stratum, plus stratum dummies."""
    dummies = stratum_dummies(sample)
    names = [f"take_up_{label}" for label in sample.labels]
    endog = pd.DataFrame(
        {name: dummies.iloc[:, j] * sample.take_up for j, name in enumerate(names)}
    )
    instruments = offer_by_stratum(sample)
    result = IV2SLS(_frame(sample, "outcome"), dummies, endog, instruments).fit(
        cov_type="robust", debiased=False
    )
    return SaturatedFit(
        effects={
            label: float(result.params[name])
            for label, name in zip(sample.labels, names, strict=True)
        },
        std_errors={
            label: float(result.std_errors[name])
            for label, name in zip(sample.labels, names, strict=True)
        },
    )


@dataclass(frozen=True, slots=True)
class CovarianceFit:
    """One estimator's reference regression fitted with one covariance of ``COVARIANCES``."""

    std_error: float
    """Standard error of the coefficient on take-up in that regression (for ``interacted``
    the regression is the constant-effect model, whose take-up coefficient is not the
    interacted estimate; only its first stage is compared)."""
    first_stage_f: float
    """``first_stage.diagnostics["f.stat"]`` of take-up: the Wald statistic of the excluded
    instruments for robust and clustered covariances, that statistic divided by
    ``instruments`` for the unadjusted one."""
    instruments: int
    """Number of excluded instruments ``q``: 1, or ``K`` for ``interacted``."""


def estimator_regression(sample: Sample, estimator: str) -> IV2SLS:
    """Return the IV2SLS regression whose first stage is the estimator's own (METHODS.md section 4).

    - ``fixed_effects``: Y on D and one dummy per stratum, instrument Z (q = 1);
    - ``weighted``: Y on (1, D), instruments (1, Z), weights ``Z / p_s + (1 - Z) / (1 - p_s)``
      with ``p_s`` the realized offer share (q = 1);
    - ``interacted``: Y on D and one dummy per stratum, instruments ``Z x 1[S = s]`` (q = K),
      so that the first stage is the saturated ``D ~ dummies + Z x dummies`` and ``f.stat``
      the joint test of its K instruments. (With D x stratum as K endogenous regressors
      instead, the reference reports one statistic per endogenous column, each regressing
      ``D x 1[S = t]`` on all K instruments; that coefficient covariance is singular, since
      the residuals vanish outside stratum t, and no joint F is reported.)
    """
    if estimator == "fixed_effects":
        return _fixed_effects_model(sample)
    if estimator == "weighted":
        return _weighted_model(sample, False, None)
    if estimator == "interacted":
        return IV2SLS(
            _frame(sample, "outcome"),
            stratum_dummies(sample),
            _frame(sample, "take_up"),
            offer_by_stratum(sample),
        )
    raise ValueError(f"unknown estimator {estimator!r}")


def covariance_fits(
    sample: Sample, estimator: str, covariances: Collection[str]
) -> dict[str, CovarianceFit]:
    """Fit the estimator's regression once per covariance of ``COVARIANCES`` that is named.

    The model is built once and fitted with each covariance. The clustered covariances read
    ``sample.cluster`` (one-way clusters, coded as integers).
    """
    model = estimator_regression(sample, estimator)
    instruments = len(model.instruments.cols)
    fits = {}
    for covariance in covariances:
        cov_type, debiased = COVARIANCES[covariance]
        options: dict[str, Any] = {"cov_type": cov_type, "debiased": debiased}
        if cov_type == "clustered":
            if sample.cluster is None:
                raise ValueError("a clustered covariance needs a sample with a cluster column")
            options["clusters"] = pd.Series(pd.factorize(sample.cluster)[0])
        result = model.fit(**options)
        fits[covariance] = CovarianceFit(
            std_error=float(result.std_errors["take_up"]),
            first_stage_f=float(result.first_stage.diagnostics.loc["take_up", "f.stat"]),
            instruments=instruments,
        )
    return fits


def covers(
    estimator: str, check: str, *, table: Collection[tuple[str, str]] = CHECKS
) -> Callable[[Callable[..., None]], Callable[..., None]]:
    """Mark a test function as covering the (estimator, check) pair on every dataset it runs on.

    ``table`` is the list the pair must appear in: ``CHECKS`` (default), ``INFERENCE_CHECKS``
    or ``CLUSTER_CHECKS``.
    """
    if (estimator, check) not in table:
        raise ValueError(f"({estimator!r}, {check!r}) is not listed in the reference checks")

    def mark(test: Callable[..., None]) -> Callable[..., None]:
        test.reference_checks = (*getattr(test, "reference_checks", ()), (estimator, check))
        return test

    return mark


def covered_cases(
    namespace: Mapping[str, Any], datasets: Collection[str]
) -> frozenset[tuple[str, str, str]]:
    """Return the (dataset, estimator, check) cases marked by ``covers`` in a test module.

    ``datasets`` are the datasets that the module's tests are parametrized over; each
    marked ``test_`` function counts once per dataset.
    """
    return frozenset(
        (dataset, estimator, check)
        for dataset in datasets
        for name, value in namespace.items()
        if name.startswith("test_")
        for estimator, check in getattr(value, "reference_checks", ())
    )

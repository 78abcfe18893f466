"""linearmodels IV2SLS regressions that the reference tests compare strativ against.

Each function here builds one regression of METHODS.md section 3 from unit-level rows and
fits it with ``linearmodels.iv.IV2SLS`` twice: ``cov_type="robust"`` with
``debiased=False`` (HC0) and with ``debiased=True`` (scaled by ``n / (n - k)``, ``k`` the
number of regressors including every dummy). The helpers only build the reference side;
the comparison with strativ, and the datasets with their sources, are in
``test_reference.py``.

The module also lists the (dataset, estimator, check) cases that the reference tests must
cover, written out here independently of the test module's parametrization, so that a
guard test can tell when a check or a dataset goes missing.
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


def fixed_effects_2sls(sample: Sample) -> ReferenceFit:
    """Fit IV2SLS of Y on D with one dummy per stratum (no constant), instrument Z."""
    dummies = stratum_dummies(sample)
    model = IV2SLS(
        _frame(sample, "outcome"), dummies, _frame(sample, "take_up"), _frame(sample, "offer")
    )
    return _take_up_fit(model)


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


def saturated_2sls(sample: Sample) -> SaturatedFit:
    """Fit IV2SLS with D x stratum instrumented by Z x stratum, plus stratum dummies."""
    dummies = stratum_dummies(sample)
    names = [f"take_up_{label}" for label in sample.labels]
    endog = pd.DataFrame(
        {name: dummies.iloc[:, j] * sample.take_up for j, name in enumerate(names)}
    )
    instruments = pd.DataFrame(
        {
            f"offer_{label}": dummies.iloc[:, j] * sample.offer
            for j, label in enumerate(sample.labels)
        }
    )
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


def covers(estimator: str, check: str) -> Callable[[Callable[..., None]], Callable[..., None]]:
    """Mark a test function as covering the (estimator, check) pair on every dataset it runs on."""
    if (estimator, check) not in CHECKS:
        raise ValueError(f"({estimator!r}, {check!r}) is not listed in reference_fits.CHECKS")

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

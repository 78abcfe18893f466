"""Covariate adjustment from group moments: each estimator's regression with covariates added
(METHODS.md §6).

Each estimator stays a ratio of stratum contrasts; covariates only change the outcome it
reads. With the slopes γ of the estimator's own regression,

- fixed effects: 2SLS of Y on D and X with one dummy per stratum, instrument Z;
- weighted: weighted 2SLS of Y on (1, D, X), instruments (1, Z, X), weights
  ``Z/p_s + (1−Z)/(1−p_s)``;
- interacted: D×stratum instrumented by Z×stratum, with stratum dummies and X (one slope per
  covariate across strata); stratum effects combined with complier weights,

the coefficient on D (for interacted: each stratum's) equals the same estimator without
covariates applied to ``y − x'γ``: the instrument's normal equation is the unadjusted one on
that outcome. So `adjusted_moments` gives the group sums of ``y − x'γ``, and the cell path
(`cells_from_moments`, `fit`) gives the point estimate exactly and the design-based variance
of the adjusted residual ``y − θd − x'γ`` (γ held at its estimate, as the regression-adjusted
variance of METHODS §6 does).

γ solves the estimator's normal equations, built from within-stratum (for weighted: total)
cross-products of (y, d, z, x), which the group sums give exactly: d and z are constant in a
group of (stratum, offer, take-up).
"""

from __future__ import annotations

from collections.abc import Mapping
from dataclasses import dataclass, replace
from typing import Any

import numpy as np
import pandas as pd
from scipy.special import ndtr

from .adjust_robust import RobustFit
from .errors import InputError
from .intervals import critical_value, normal_interval
from .moments import cells_from_moments
from .rebuild import rebuild
from .results import Estimate

__all__ = ["AdjustedEstimate", "AdjustmentMoments", "adjusted_moments", "adjustment_slopes",
           "constant_covariates", "fit_adjusted"]


@dataclass(frozen=True, slots=True, eq=False)
class AdjustmentMoments:
    """Group moments of one outcome and k covariates over the rows where the outcome is present.

    Every sum is of values minus their stratum's centre (a missing covariate counts as its
    centre, a zero).
    """

    stratum: np.ndarray
    """Stratum label per group (G,)."""
    offer: np.ndarray
    """0/1 per group (G,)."""
    take_up: np.ndarray
    """0/1 per group (G,)."""
    n: np.ndarray
    """Rows per group (G,)."""
    sum_y: np.ndarray
    """Σ (y − c_y) per group (G,)."""
    sum_yy: np.ndarray
    """Σ (y − c_y)² per group (G,)."""
    centre_y: np.ndarray
    """The outcome's stratum centre, per group (G,)."""
    sum_x: np.ndarray
    """Σ (x_j − c_j) per group (G, k)."""
    sum_xy: np.ndarray
    """Σ (x_j − c_j)(y − c_y) per group (G, k)."""
    sum_xx: np.ndarray
    """Σ (x_j − c_j)(x_l − c_l) per group (G, k, k)."""
    centre_x: np.ndarray
    """The covariates' stratum centres, per group (G, k)."""
    cluster: np.ndarray | None = None
    """Cluster label per group (G,), when groups are split by cluster."""


def _blocks(m: AdjustmentMoments, weights: np.ndarray) -> tuple[np.ndarray, ...]:
    """Per stratum: weighted count W, sums T (order y, d, z, x...) and products Q, centred."""
    codes, labels = pd.factorize(pd.Series(list(m.stratum), dtype=object), sort=False)
    G, k = m.sum_x.shape
    z, d, n = m.offer.astype(float), m.take_up.astype(float), m.n.astype(float)
    S = np.column_stack([m.sum_y, n * d, n * z, m.sum_x])  # (G, 3 + k)
    P = np.zeros((G, 3 + k, 3 + k))
    P[:, 0, 0] = m.sum_yy
    P[:, 0, 1] = P[:, 1, 0] = d * m.sum_y
    P[:, 0, 2] = P[:, 2, 0] = z * m.sum_y
    P[:, 1, 1] = n * d
    P[:, 1, 2] = P[:, 2, 1] = n * d * z
    P[:, 2, 2] = n * z
    P[:, 0, 3:] = P[:, 3:, 0] = m.sum_xy
    P[:, 1, 3:] = P[:, 3:, 1] = d[:, None] * m.sum_x
    P[:, 2, 3:] = P[:, 3:, 2] = z[:, None] * m.sum_x
    P[:, 3:, 3:] = m.sum_xx
    K = len(labels)
    W = np.zeros(K)
    T = np.zeros((K, 3 + k))
    Q = np.zeros((K, 3 + k, 3 + k))
    np.add.at(W, codes, weights * n)
    np.add.at(T, codes, weights[:, None] * S)
    np.add.at(Q, codes, weights[:, None, None] * P)
    centre = np.zeros((K, 3 + k))
    centre[codes, 0] = m.centre_y
    centre[codes, 3:] = m.centre_x
    return W, T, Q, centre, codes


def _within(W: np.ndarray, T: np.ndarray, Q: np.ndarray) -> np.ndarray:
    """Per-stratum within cross-products, (K, m, m)."""
    return Q - T[:, :, None] * T[:, None, :] / W[:, None, None]


def constant_covariates(m: AdjustmentMoments, covariates: tuple[str, ...]) -> list[str]:
    """Covariates whose within-stratum spread is zero (to rounding) in every stratum."""
    W, T, Q, _, _ = _blocks(m, np.ones(len(m.n)))
    within = np.diagonal(_within(W, T, Q), axis1=1, axis2=2)[:, 3:].sum(axis=0)
    scale = np.diagonal(Q, axis1=1, axis2=2)[:, 3:].sum(axis=0)
    return [name for name, w, q in zip(covariates, within, scale, strict=True)
            if w <= 1e-12 * max(q, 1.0)]


def _solve(a: np.ndarray, b: np.ndarray, what: str) -> np.ndarray:
    if a.size == 0:
        return np.zeros(0)
    if np.linalg.cond(a) > 1e12:
        raise InputError("covariates", f"the covariates are collinear within strata in the "
                         f"{what} regression; drop one of them.")
    return np.linalg.solve(a, b)


def adjustment_slopes(estimator: str, m: AdjustmentMoments,
                      probability: Any = None) -> np.ndarray:
    """The covariate slopes γ of one estimator's regression.

    Parameters
    ----------
    estimator : {"fixed_effects", "weighted", "interacted"}
        Which regression.
    m : AdjustmentMoments
        Group moments of the analysed strata (each with both offer arms).
    probability : mapping, optional
        Design offer probability per stratum label for the weighted estimator's weights;
        default the realized offer shares (of the rows in `m`).

    Returns
    -------
    numpy.ndarray
        γ, one slope per covariate.

    Raises
    ------
    InputError
        When the covariates are collinear in the estimator's regression, or a stratum lacks
        an offer arm.
    """
    k = m.sum_x.shape[1]
    ones = np.ones(len(m.n))
    if estimator == "weighted":
        W1, T1, _, _, codes = _blocks(m, ones)
        offered = np.zeros_like(W1)
        np.add.at(offered, codes, m.n * m.offer)
        if probability is None:
            p = offered / W1
        else:
            _, labels = pd.factorize(pd.Series(list(m.stratum), dtype=object), sort=False)
            p = np.array([float(probability[label]) for label in labels])
        if not ((p > 0) & (p < 1)).all():
            raise InputError("offer", "every stratum needs both offer arms.")
        z = m.offer.astype(float)
        weights = z / p[codes] + (1 - z) / (1 - p[codes])
        W, T, Q, centre, _ = _blocks(m, weights)
        within = _within(W, T, Q)
        mean = T / W[:, None] + centre
        overall = (W[:, None] * mean).sum(axis=0) / W.sum()
        spread = mean - overall
        C = within.sum(axis=0) + (W[:, None, None] * spread[:, :, None]
                                  * spread[:, None, :]).sum(axis=0)
        return _iv_slopes(C, k, "weighted")
    W, T, Q, _, _ = _blocks(m, ones)
    per = _within(W, T, Q)
    if estimator == "fixed_effects":
        return _iv_slopes(per.sum(axis=0), k, "fixed effects")
    if estimator != "interacted":
        raise InputError("estimator", f"unknown estimator {estimator!r}.")
    # A stratum whose first stage is exactly zero identifies no effect of its own and, in the
    # saturated regression, nothing about the common slopes: it is left out of the slopes
    # (its units still enter the estimate on y - x'γ, as in the unadjusted fit).
    per = per[per[:, 2, 1] != 0]
    zd = per[:, 2, 1]
    if zd.size == 0:
        raise InputError("take_up", "no stratum has a first stage, so no effect is defined.")
    a = (per[:, 3:, 3:] - per[:, 3:, 1, None] * per[:, 2, None, 3:] / zd[:, None, None]).sum(0)
    b = (per[:, 3:, 0] - per[:, 3:, 1] * (per[:, 2, 0] / zd)[:, None]).sum(0)
    return _solve(a, b, "interacted")


def _iv_slopes(C: np.ndarray, k: int, what: str) -> np.ndarray:
    """γ of the just-identified IV with regressors (d, x), instruments (z, x), from the
    cross-products C of (y, d, z, x)."""
    if k == 0:
        return np.zeros(0)
    rows = [2, *range(3, 3 + k)]
    cols = [1, *range(3, 3 + k)]
    a = C[np.ix_(rows, cols)]
    b = C[rows, 0]
    return _solve(a, b, what)[1:]


def adjusted_moments(m: AdjustmentMoments, gamma: np.ndarray) -> pd.DataFrame:
    """Group sums of the adjusted outcome ``y − x'γ``, in the layout `cells_from_moments` reads.

    Parameters
    ----------
    m : AdjustmentMoments
        Group moments.
    gamma : numpy.ndarray
        Covariate slopes (`adjustment_slopes`).

    Returns
    -------
    pandas.DataFrame
        Columns stratum, offer, take_up, n, sum_outcome, sum_outcome_sq, centre_outcome; with
        γ = 0 the unadjusted sums, unchanged.
    """
    gamma = np.asarray(gamma, dtype=float)
    total = m.sum_y - m.sum_x @ gamma
    square = m.sum_yy - 2 * m.sum_xy @ gamma + np.einsum("gjl,j,l->g", m.sum_xx, gamma, gamma)
    frame = pd.DataFrame({
        "stratum": list(m.stratum), "offer": m.offer, "take_up": m.take_up, "n": m.n,
        "sum_outcome": total, "sum_outcome_sq": np.maximum(square, 0.0),
        "centre_outcome": m.centre_y - m.centre_x @ gamma,
    })
    if m.cluster is not None:
        frame["cluster"] = list(m.cluster)
    return frame


@dataclass(frozen=True, slots=True)
class AdjustedEstimate:
    """One estimator fitted with covariates: its slopes and the fit on ``y − x'γ``."""

    estimator: str
    """``fixed_effects``, ``weighted`` or ``interacted``."""
    covariates: tuple[str, ...]
    """Covariate names, in the order of `slopes`."""
    slopes: tuple[float, ...]
    """γ of the estimator's regression."""
    fit: Estimate
    """The estimate, interval and diagnostics of the adjusted outcome (first-stage figures
    are those of the regression without covariates)."""
    std_error_ratio: float | None
    """Adjusted over unadjusted standard error (below 1: the covariates bought precision)."""

    def to_dict(self) -> dict[str, Any]:
        """Return the JSON form."""
        return {"estimator": self.estimator, "covariates": list(self.covariates),
                "slopes": dict(zip(self.covariates, self.slopes, strict=True)),
                "std_error_ratio": self.std_error_ratio, "fit": self.fit.to_dict()}

    @classmethod
    def from_dict(cls, data: Mapping[str, Any]) -> AdjustedEstimate:
        """Rebuild the estimate from its JSON form (`to_dict`)."""
        covariates = tuple(data["covariates"])
        return rebuild(cls, data, covariates=covariates,
                       slopes=tuple(float(data["slopes"][c]) for c in covariates))


def fit_adjusted(
    m: AdjustmentMoments,
    estimator: str,
    covariates: tuple[str, ...],
    *,
    variance: str = "stratified",
    assignment: str = "block",
    sampling: str = "random",
    level: float = 0.95,
    offer_probability: Mapping[Any, float] | None = None,
    unadjusted_std_error: float | None = None,
    robust: RobustFit | None = None,
) -> AdjustedEstimate:
    """Fit one estimator with covariates from group moments.

    Parameters
    ----------
    m : AdjustmentMoments
        Group moments of the analysed strata.
    estimator : str
        As in `fit`.
    covariates : tuple of str
        Names of the k covariates of `m`.
    variance : str, default="stratified"
        The design-based flavours (stratified, cluster) apply to the adjusted residual; the
        robust ones take their standard error from `robust`.
    assignment, sampling, level, offer_probability
        As in `fit`; design probabilities also set the weighted estimator's weights.
    unadjusted_std_error : float, optional
        The same estimator's standard error without covariates, for the ratio.
    robust : RobustFit, optional
        The estimator's robust fit on the rows (`adjust_robust.robust_adjusted`), for the
        robust flavours: its standard error replaces the moments' and the interval uses the
        normal reference; the weak-IV robust set then treats the slopes as known.

    Returns
    -------
    AdjustedEstimate

    Raises
    ------
    InputError
        For a robust flavour, collinear covariates, or as `fit`.
    """
    from .fitting import fit

    if variance not in ("stratified", "cluster") and robust is None:
        raise InputError("variance", f"variance {variance!r} with covariates needs the "
                         "robust fit from the rows (adjust_robust.robust_adjusted).")
    flat = constant_covariates(m, covariates)
    if flat:
        raise InputError("covariates", f"covariate {flat[0]!r} does not vary within any "
                         "stratum (constant, or missing everywhere), so it cannot adjust; "
                         "remove it from the covariates.")
    gamma = adjustment_slopes(estimator, m, offer_probability)
    cells = cells_from_moments(adjusted_moments(m, gamma))
    result = fit(cells, estimator=estimator, variance=variance, assignment=assignment,
                 sampling=sampling, level=level, offer_probability=offer_probability)
    if robust is not None and variance not in ("stratified", "cluster"):
        se = robust.std_error
        interval = None if se is None or result.estimate is None else \
            normal_interval(result.estimate, se, critical_value(level))
        p_value = None if interval is None else \
            float(2.0 * ndtr(-abs(result.estimate) / se))
        result = replace(result, std_error=se, interval=interval, degrees_of_freedom=None,
                         p_value=p_value, std_error_reason=None if se is not None else
                         "no robust standard error: as many coefficients as units, or a "
                         "single cluster",
                         notes=result.notes + ("robust sandwich of the regression with "
                                               "covariates; the weak-IV robust set treats "
                                               "the covariate slopes as known",))
    ratio = None
    if result.std_error is not None and unadjusted_std_error:
        ratio = float(result.std_error / unadjusted_std_error)
    return AdjustedEstimate(estimator, tuple(covariates), tuple(float(g) for g in gamma),
                            result, ratio)

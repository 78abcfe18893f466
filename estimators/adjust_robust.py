"""The robust sandwich of each estimator's regression with covariates (METHODS.md §6).

With covariates the robust variance needs products of squared residuals with the covariates
(fourth moments), so it is computed from the unit rows in a second pass, after the slopes.
Stratum dummies (fixed effects, interacted) and the constant (weighted) are partialled out
first: for a just-identified IV regression the coefficients and their HC0 sandwich block are
the same on the partialled variables (Frisch–Waugh–Lovell), and the weighted regression is
the unweighted one on variables times ``sqrt(w)``.

- fixed effects: regressors (d, x), instruments (z, x), all within strata;
- weighted: the same after removing the weighted overall means, weights
  ``Z/p_s + (1−Z)/(1−p_s)``;
- interacted: regressors (d × stratum, x), instruments (z × stratum, x) within strata; the
  reported estimate combines the stratum effects with complier weights ω_s, whose variance
  is ``ω' V ω`` with ω held fixed (as for the estimate without covariates).

`robust_scaled` multiplies by ``n / (n − k)`` (k counts every coefficient, dummies included);
with clusters the scores are summed within clusters and `robust_scaled` uses
``G (n − 1) / ((G − 1)(n − k))``.
"""

from __future__ import annotations

from collections.abc import Mapping
from dataclasses import dataclass
from typing import Any

import numpy as np
import pandas as pd

from .errors import InputError

__all__ = ["RobustFit", "robust_adjusted"]


@dataclass(frozen=True, slots=True)
class RobustFit:
    """Point estimate and robust standard error of one estimator with covariates."""

    estimate: float
    """The estimate (equal to the one from group moments)."""
    std_error: float | None
    """Robust standard error (None when n ≤ k or a single cluster)."""
    slopes: tuple[float, ...]
    """Covariate slopes γ."""
    n: int
    """Units."""
    k: int
    """Coefficients, dummies included."""


def _demean(values: np.ndarray, codes: np.ndarray, weights: np.ndarray | None = None
            ) -> np.ndarray:
    """Values minus their (weighted) stratum means; codes all zero: the overall mean."""
    w = np.ones(values.shape[0]) if weights is None else weights
    groups = codes.max() + 1
    total = np.zeros((groups,) + values.shape[1:])
    np.add.at(total, codes, values * w.reshape((-1,) + (1,) * (values.ndim - 1)))
    mass = np.bincount(codes, weights=w, minlength=groups)
    return values - (total / mass.reshape((-1,) + (1,) * (values.ndim - 1)))[codes]


def _sandwich(W: np.ndarray, Q: np.ndarray, y: np.ndarray,
              cluster: np.ndarray | None) -> tuple[np.ndarray, np.ndarray, int | None]:
    """Coefficients and HC0 (or cluster) covariance of the just-identified IV of y on W."""
    A = Q.T @ W
    if np.linalg.cond(A) > 1e12:
        raise InputError("covariates", "the covariates are collinear within strata in the "
                         "robust regression; drop one of them.")
    beta = np.linalg.solve(A, Q.T @ y)
    scores = Q * (y - W @ beta)[:, None]
    groups = None
    if cluster is not None:
        codes, labels = pd.factorize(pd.Series(list(cluster), dtype=object))
        total = np.zeros((len(labels), scores.shape[1]))
        np.add.at(total, codes, scores)
        scores, groups = total, len(labels)
    inverse = np.linalg.inv(A)
    return beta, inverse @ (scores.T @ scores) @ inverse.T, groups


def robust_adjusted(
    outcome: Any,
    take_up: Any,
    offer: Any,
    stratum: Any,
    covariates: Any,
    *,
    estimator: str,
    scaled: bool = False,
    cluster: Any = None,
    probability: Mapping[Any, float] | None = None,
) -> RobustFit:
    """Fit one estimator with covariates on unit rows and its robust standard error.

    Parameters
    ----------
    outcome, take_up, offer, stratum : array_like, shape (n,)
        Rows of the analysed strata (each with both arms), without missing values.
    covariates : array_like, shape (n, k)
        Covariate values (no missing values: fill them first).
    estimator : {"fixed_effects", "weighted", "interacted"}
        Which regression.
    scaled : bool, default=False
        `robust_scaled` rather than `robust`.
    cluster : array_like, optional
        Cluster of each row: cluster-robust sandwich.
    probability : mapping, optional
        Design offer probability per stratum (weighted estimator); default realized shares.

    Returns
    -------
    RobustFit

    Raises
    ------
    InputError
        For collinear covariates or an unknown estimator.
    """
    y = np.asarray(outcome, dtype=float)
    d = np.asarray(take_up, dtype=float)
    z = np.asarray(offer, dtype=float)
    x = np.asarray(covariates, dtype=float).reshape(y.size, -1)
    codes, labels = pd.factorize(pd.Series(list(stratum), dtype=object))
    K, p, n = len(labels), x.shape[1], y.size
    cluster_array = None if cluster is None else np.asarray(cluster, dtype=object)
    if estimator == "fixed_effects":
        yt, dt, zt, xt = (_demean(v, codes) for v in (y, d, z, x))
        beta, V, groups = _sandwich(np.column_stack([dt, xt]), np.column_stack([zt, xt]), yt,
                                    cluster_array)
        estimate, variance, k = beta[0], V[0, 0], K + 1 + p
        slopes = beta[1:]
    elif estimator == "weighted":
        counts = np.bincount(codes, minlength=K)
        shares = np.bincount(codes, weights=z, minlength=K) / counts
        if probability is not None:
            shares = np.array([float(probability[label]) for label in labels])
        w = z / shares[codes] + (1 - z) / (1 - shares[codes])
        root = np.sqrt(w)
        zeros = np.zeros(n, dtype=np.int64)
        yt, dt, zt, xt = (_demean(v, zeros, w) for v in (y, d, z, x))
        beta, V, groups = _sandwich(np.column_stack([dt, xt]) * root[:, None],
                                    np.column_stack([zt, xt]) * root[:, None], yt * root,
                                    cluster_array)
        estimate, variance, k = beta[0], V[0, 0], 2 + p
        slopes = beta[1:]
    elif estimator == "interacted":
        dummies = np.zeros((n, K))
        dummies[np.arange(n), codes] = 1.0
        W = np.column_stack([_demean(dummies * d[:, None], codes), _demean(x, codes)])
        Q = np.column_stack([_demean(dummies * z[:, None], codes), _demean(x, codes)])
        beta, V, groups = _sandwich(W, Q, _demean(y, codes), cluster_array)
        first = np.array([d[(codes == s) & (z == 1)].mean() - d[(codes == s) & (z == 0)].mean()
                          for s in range(K)])
        omega = np.bincount(codes, minlength=K) * first
        omega = omega / omega.sum()
        estimate = float(omega @ beta[:K])
        variance = float(omega @ V[:K, :K] @ omega)
        k, slopes = 2 * K + p, beta[K:]
    else:
        raise InputError("estimator", f"unknown estimator {estimator!r}.")
    std_error = None
    if n > k and (groups is None or groups > 1):
        scale = 1.0
        if scaled:
            scale = n / (n - k) if groups is None else \
                groups * (n - 1) / ((groups - 1) * (n - k))
        std_error = float(np.sqrt(variance * scale))
    return RobustFit(float(estimate), std_error, tuple(float(g) for g in slopes), n, k)

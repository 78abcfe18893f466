"""Covariates as a referee reads them: balance between offer arms and the compliers' profile,
from group moments (METHODS.md §5).

The input is one row per (stratum, offer, take-up) group with, per covariate, the count of
rows where it is present and the sums of its values and squares minus a per-stratum centre
(any value near the stratum's values; the query's choice), and the sums of products of every
pair of covariates with a missing value counted as its centre.

- Standardized mean differences (Austin 2009): the difference between offered and
  not-offered means over the pooled standard deviation ``sqrt((s1² + s0²) / 2)`` of the two
  arms (unweighted, so that the three versions share one scale): ``raw`` (all units, ignoring
  strata), ``within`` (stratum differences averaged with the strata's shares of units) and
  ``weighted`` (inverse-probability weighted arm means, ratio form, with design
  probabilities when given; with realized shares it equals ``within``). |SMD| above
  `SMD_FLAG` is flagged.
- A joint test of balance: the Wald statistic of the vector of within-stratum differences of
  all covariates (each missing value set to its stratum's centre), with the design-based
  variance ``Σ_s w_s² (S_s1/n_s1 + S_s0/n_s0)``, referred to χ² with one degree of freedom per
  covariate.
- Complier means (Abadie 2003): ``Σ κ x / Σ κ`` with
  ``κ = 1 − D(1−Z)/(1−p_s) − (1−D)Z/p_s``; κ is constant within a group, so the sums of ``x``
  per group give it exactly.

Strata where every unit or none was offered carry no contrast and are left out, as in every
estimator.
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from typing import Any

import numpy as np
import pandas as pd
from scipy import stats

from .errors import InputError
from .rebuild import rebuildable

__all__ = ["SMD_FLAG", "BalanceTest", "CovariateRow", "CovariateProfile", "covariate_profile"]

SMD_FLAG = 0.1
"""|SMD| above which a covariate is flagged (Austin 2009)."""


@rebuildable
@dataclass(frozen=True, slots=True)
class CovariateRow:
    """Balance and complier mean of one covariate."""

    covariate: str
    """Covariate column."""
    n_present: int
    """Rows of the analysed strata where the covariate is present."""
    mean_offered: float | None
    """Mean among offered units (None when no offered unit has it)."""
    mean_not_offered: float | None
    """Mean among units not offered."""
    smd_raw: float | None
    """Standardized difference of the arm means over all units, ignoring strata."""
    smd_within: float | None
    """Standardized difference within strata, averaged with the strata's shares of units."""
    smd_weighted: float | None
    """Standardized difference of the inverse-probability weighted arm means."""
    flagged: bool
    """Whether |smd_within| or |smd_weighted| exceeds `SMD_FLAG`."""
    mean_all: float | None
    """Mean over every unit of the analysed strata."""
    mean_compliers: float | None
    """κ-weighted mean among compliers (None when the κ weights sum to zero or less)."""

    def to_dict(self) -> dict[str, Any]:
        """Return the JSON form."""
        return {name: getattr(self, name) for name in self.__slots__}


@rebuildable
@dataclass(frozen=True, slots=True)
class BalanceTest:
    """The joint test that every covariate's within-stratum difference is zero."""

    statistic: float | None
    """Wald statistic (None when its variance matrix is singular)."""
    df: int
    """Degrees of freedom: the number of covariates."""
    p_value: float | None
    """χ² upper tail of `statistic`."""
    reason: str | None = None
    """Why the statistic is undefined, or None."""

    def to_dict(self) -> dict[str, Any]:
        """Return the JSON form."""
        return {name: getattr(self, name) for name in self.__slots__}


@dataclass(frozen=True, slots=True)
class CovariateProfile:
    """Balance and complier means of every covariate, with the joint test."""

    rows: tuple[CovariateRow, ...]
    """One row per covariate, in the order given."""
    joint: BalanceTest
    """Joint test of balance."""
    probabilities: str
    """``"realized"`` (offer shares of the data) or ``"design"`` (given probabilities):
    the p_s of the weighted SMD and of κ."""
    flag: float = SMD_FLAG
    """The |SMD| flag threshold."""

    def to_dict(self) -> dict[str, Any]:
        """Return the JSON form."""
        return {"covariates": [r.to_dict() for r in self.rows], "joint_test": self.joint.to_dict(),
                "probabilities": self.probabilities, "smd_flag": self.flag}

    @classmethod
    def from_dict(cls, data: Mapping[str, Any]) -> CovariateProfile:
        """Rebuild the profile from its JSON form (`to_dict`)."""
        return cls(tuple(CovariateRow.from_dict(r) for r in data["covariates"]),
                   BalanceTest.from_dict(data["joint_test"]), data["probabilities"],
                   float(data["smd_flag"]))


def _ratio(top: float, bottom: float) -> float | None:
    return float(top / bottom) if bottom > 0 else None


def _smd(difference: float | None, sd_scale: float | None) -> float | None:
    if difference is None or sd_scale is None or not sd_scale > 0:
        return None
    return float(difference / sd_scale)


def covariate_profile(
    names: Sequence[str],
    stratum: Any,
    offer: Any,
    take_up: Any,
    n: Any,
    n_x: Any,
    sum_x: Any,
    sum_x_sq: Any,
    centre_x: Any,
    cross: Any,
    *,
    probability: Mapping[Any, float] | None = None,
) -> CovariateProfile:
    """Balance, joint balance test and complier means from group moments.

    Parameters
    ----------
    names : sequence of str
        Covariate names, k of them.
    stratum, offer, take_up, n : array_like, shape (G,)
        Group keys (offer and take-up 0/1) and rows per group.
    n_x, sum_x, sum_x_sq, centre_x : array_like, shape (G, k)
        Per group and covariate: rows where it is present, the sums of its values minus
        `centre_x` and of their squares (over those rows). The centre must be the same for
        every group of a stratum.
    cross : array_like, shape (G, k, k)
        Per group, the sums of products of centred covariates, a missing value counting as
        zero (its centre); the diagonal equals `sum_x_sq`.
    probability : mapping, optional
        Design offer probability per stratum label; default: realized offer shares.

    Returns
    -------
    CovariateProfile

    Raises
    ------
    InputError
        When shapes disagree, a centre differs within a stratum, or no stratum has both arms.
    """
    k = len(names)
    offer, take_up = np.asarray(offer, dtype=float), np.asarray(take_up, dtype=float)
    n = np.asarray(n, dtype=float)
    arrays = [np.asarray(a, dtype=float).reshape(len(n), k)
              for a in (n_x, sum_x, sum_x_sq, centre_x)]
    n_x, sum_x, sum_x_sq, centre_x = arrays
    cross = np.asarray(cross, dtype=float).reshape(len(n), k, k)
    codes, labels = pd.factorize(pd.Series(list(stratum), dtype=object), sort=False)
    K = len(labels)

    def per_stratum_arm(values: np.ndarray, arm: int) -> np.ndarray:
        out = np.zeros((K,) + values.shape[1:])
        np.add.at(out, codes[offer == arm], values[offer == arm])
        return out

    units = np.stack([per_stratum_arm(n, 0), per_stratum_arm(n, 1)], axis=1)  # (K, 2)
    kept = (units > 0).all(axis=1)
    if not kept.any():
        raise InputError("offer", "no stratum has both offered and not-offered units.")
    centre = np.zeros((K, k))
    centre[codes] = centre_x
    if not np.allclose(centre[codes], centre_x, rtol=0, atol=0, equal_nan=True):
        raise InputError("centre_x", "each stratum needs one centre per covariate.")
    if probability is None:
        p = units[:, 1] / units.sum(axis=1)
        source = "realized"
    else:
        p = np.array([float(probability.get(label, np.nan)) for label in labels])
        source = "design"
    use = kept[codes]
    counts = np.stack([per_stratum_arm(n_x * use[:, None], a) for a in (0, 1)], axis=1)
    sums = np.stack([per_stratum_arm(sum_x * use[:, None], a) for a in (0, 1)], axis=1)
    squares = np.stack([per_stratum_arm(sum_x_sq * use[:, None], a) for a in (0, 1)], axis=1)
    # counts, sums, squares: (K, 2, k); raw values are centre + centred
    with np.errstate(invalid="ignore", divide="ignore"):
        cell_mean = np.where(counts > 0, sums / counts, np.nan) + centre[:, None, :]
    rows = []
    with np.errstate(invalid="ignore", divide="ignore"):  # one-arm strata: not used
        kappa = 1 - take_up * (1 - offer) / (1 - p[codes]) - (1 - take_up) * offer / p[codes]
    kappa = np.where(use, kappa, 0.0)
    for j, name in enumerate(names):
        arm_n = counts[kept, :, j].sum(axis=0)
        arm_sum = (sums[kept, :, j] + counts[kept, :, j] * centre[kept, None, j]).sum(axis=0)
        arm_mean = [_ratio(arm_sum[a], arm_n[a]) for a in (0, 1)]
        # arm variances from the centred sums about each stratum's centre
        variance = []
        for a in (0, 1):
            c = counts[kept, a, j]
            if arm_n[a] < 2:
                variance.append(None)
                continue
            d = centre[kept, j] - arm_mean[a]
            total_sq = (squares[kept, a, j] + 2 * d * sums[kept, a, j] + c * d * d).sum()
            variance.append(float(total_sq / (arm_n[a] - 1)))
        scale = None if None in variance else float(np.sqrt((variance[0] + variance[1]) / 2))
        both = kept & (counts[:, :, j] > 0).all(axis=1)
        shares = counts[both, :, j].sum(axis=1)
        within = None
        if both.any():
            diff = cell_mean[both, 1, j] - cell_mean[both, 0, j]
            within = float((shares * diff).sum() / shares.sum())
        raw = None if None in arm_mean else arm_mean[1] - arm_mean[0]
        weighted = None
        if both.any():
            w1 = counts[both, 1, j] / p[both]
            w0 = counts[both, 0, j] / (1 - p[both])
            weighted = float((w1 * cell_mean[both, 1, j]).sum() / w1.sum()
                             - (w0 * cell_mean[both, 0, j]).sum() / w0.sum())
        smds = (_smd(raw, scale), _smd(within, scale), _smd(weighted, scale))
        values = sum_x[:, j] + n_x[:, j] * centre[codes, j]
        mean_all = _ratio(float((values * use).sum()), float((n_x[:, j] * use).sum()))
        weight = float((kappa * n_x[:, j]).sum())
        complier = float((kappa * values).sum()) / weight if weight > 0 else None
        flagged = any(s is not None and abs(s) > SMD_FLAG for s in smds[1:])
        rows.append(CovariateRow(name, int(arm_n.sum()), arm_mean[1], arm_mean[0], *smds,
                                 flagged, mean_all, complier))
    return CovariateProfile(tuple(rows), _joint(codes, offer, kept, n, sum_x, cross, units, k),
                            source)


def _joint(codes: np.ndarray, offer: np.ndarray, kept: np.ndarray, n: np.ndarray,
           sum_x: np.ndarray, cross: np.ndarray, units: np.ndarray, k: int) -> BalanceTest:
    """Wald test of the within-stratum differences of the centre-filled covariates."""
    K = units.shape[0]
    s = np.zeros((K, 2, k))
    ss = np.zeros((K, 2, k, k))
    for a in (0, 1):
        m = offer == a
        np.add.at(s[:, a], codes[m], sum_x[m])
        np.add.at(ss[:, a], codes[m], cross[m])
    s, ss, nn = s[kept], ss[kept], units[kept]
    mean = s / nn[:, :, None]
    w = nn.sum(axis=1) / nn.sum()
    delta = (w[:, None] * (mean[:, 1] - mean[:, 0])).sum(axis=0)
    variance = np.zeros((k, k))
    for a in (0, 1):
        dof = nn[:, a] - 1
        if (dof < 1).any():
            return BalanceTest(None, k, None, "a stratum has a single unit in an offer arm, so "
                               "its covariance is unknown")
        cov = (ss[:, a] - nn[:, a, None, None] * mean[:, a, :, None] * mean[:, a, None, :]) \
            / dof[:, None, None]
        variance += ((w**2 / nn[:, a])[:, None, None] * cov).sum(axis=0)
    try:
        statistic = float(delta @ np.linalg.solve(variance, delta))
        if np.linalg.cond(variance) > 1e12:
            raise np.linalg.LinAlgError
    except np.linalg.LinAlgError:
        return BalanceTest(None, k, None, "the covariates are collinear within strata")
    return BalanceTest(statistic, k, float(stats.chi2.sf(statistic, k)))

"""The covariate moments of a run's grouped data, handed to the core: balance and complier
means (`strativ.estimators.profile`) and covariate adjustment (`strativ.estimators.adjust`).

The columns are those `strativ.estimators.group_query` writes for covariates (view names
``x0``, ``x1``, ...; outcomes ``y0``, ...); nothing is computed here but the arrays.
"""

from __future__ import annotations

from collections.abc import Iterable
from dataclasses import dataclass
from typing import Any

import numpy as np

from strativ.estimators.adjust import AdjustmentMoments
from strativ.estimators.profile import CovariateProfile, covariate_profile

from .grouped import GroupedData

__all__ = ["ADJUSTED_VARIANCES", "AdjustmentInputs", "adjustment_inputs", "run_profile"]

ADJUSTED_VARIANCES = ("stratified", "cluster")
"""Variance flavours of the adjusted fits that come from the group moments alone (the
design-based ones, applied to the adjusted residual); the robust ones read the rows again."""


def _column(data: GroupedData, name: str, rows: np.ndarray | slice = slice(None)) -> np.ndarray:
    return data.groups[name].to_numpy(dtype=float, na_value=0.0)[rows]


def run_profile(data: GroupedData, probabilities: dict[Any, float] | None
                ) -> CovariateProfile | None:
    """Balance and complier means of the spec's covariates over every kept row (None without
    covariates, or for a moment table without them).

    Raises
    ------
    strativ.estimators.EstimatorError
        As `strativ.estimators.profile.covariate_profile`.
    """
    roles = data.roles.covariates
    if not roles:
        return None
    g = data.groups
    k = len(roles)

    def columns(pattern: str) -> np.ndarray:
        return np.column_stack([_column(data, pattern.format(x)) for x in roles])

    cross = np.zeros((len(g), k, k))
    for j, x in enumerate(roles):
        cross[:, j, j] = _column(data, f"sum_{x}_sq")
        for i, w in enumerate(roles[j + 1:], start=j + 1):
            cross[:, j, i] = cross[:, i, j] = _column(data, f"cross_{x}_{w}")
    return covariate_profile(
        data.spec.columns.covariates, g["stratum"].tolist(), g["offer"].to_numpy(),
        g["take_up"].to_numpy(), g["n"].to_numpy(), columns("n_{}"), columns("sum_{}"),
        columns("sum_{}_sq"), columns("centre_{}"), cross, probability=probabilities)


@dataclass(frozen=True, slots=True, eq=False)
class AdjustmentInputs:
    """What the covariate adjustment of one outcome reads: the group moments of the covariates
    (each missing value at its stratum's mean) and of the missing indicators of those with
    gaps, with the names and fill values that the rows must follow too."""

    moments: AdjustmentMoments
    """Group moments of the analysed strata, rows with the outcome."""
    names: tuple[str, ...]
    """Covariate names, then ``<name> missing`` for each covariate with gaps."""
    gaps: tuple[int, ...]
    """Indices of the covariates with gaps among these rows."""
    means: tuple[dict[Any, float], ...]
    """Per covariate, stratum label -> mean of its present values (the fill)."""

    def rows(self, stratum: np.ndarray, values: np.ndarray) -> np.ndarray:
        """Unit-row covariates in the same form: missing values at their stratum's mean,
        then the indicators of `gaps` (for the robust sandwich from the rows)."""
        filled = values.copy()
        for j, mean in enumerate(self.means):
            missing = np.isnan(filled[:, j])
            if missing.any():
                filled[missing, j] = [mean[label] for label in stratum[missing].tolist()]
        indicators = [np.isnan(values[:, j]).astype(float) for j in self.gaps]
        return np.column_stack([filled, *indicators]) if indicators else filled


def adjustment_inputs(data: GroupedData, outcome: str,
                      strata: Iterable[Any]) -> AdjustmentInputs | None:
    """The covariate adjustment inputs of `outcome` in the given (analysed) strata; None
    without covariates.

    Missing values follow the missing-indicator rule with mean fill: a covariate with gaps
    among the outcome's rows is filled with its stratum's mean and joined by its indicator
    (1 where missing), so every row stays in the fit. The query sums each covariate with a
    missing value at its stratum's centre; the fill moves it to the mean by a per-stratum
    linear map of the (covariate, indicator) sums, exact in the moments.
    """
    roles = data.roles.covariates
    if not roles:
        return None
    v = data.roles.outcomes[data.outcomes.index(outcome)]
    g = data.groups
    labels = list(strata)
    keep = g["stratum"].isin(labels).to_numpy() & (g[f"n_{v}"].to_numpy() > 0)
    n_v = _column(data, f"n_{v}", keep)
    gaps = tuple(j for j, x in enumerate(roles)
                 if (n_v - _column(data, f"n_{v}_{x}", keep)).sum() > 0)
    extended = list(roles) + [data.roles.indicators[j] for j in gaps]
    m = len(extended)
    sum_xx = np.zeros((int(keep.sum()), m, m))
    for i, a in enumerate(extended):
        for j in range(i, m):
            sum_xx[:, i, j] = sum_xx[:, j, i] = _column(data, f"sum_{v}_{a}_{extended[j]}", keep)
    sum_x = np.column_stack([_column(data, f"sum_{v}_{a}", keep) for a in extended])
    sum_xy = np.column_stack([_column(data, f"sum_{v}_{v}_{a}", keep) for a in extended])
    centre = np.column_stack([_column(data, f"centre_{a}", keep) for a in extended])
    # each stratum's mean of every covariate over its present values, from all kept rows
    by = g.groupby("stratum", sort=False)
    means, shift = [], np.zeros((int(keep.sum()), len(roles)))
    stratum = g["stratum"].to_numpy(dtype=object)[keep]
    for j, x in enumerate(roles):
        totals = by[[f"sum_{x}", f"n_{x}", f"centre_{x}"]].agg(
            {f"sum_{x}": "sum", f"n_{x}": "sum", f"centre_{x}": "first"})
        gap = (totals[f"sum_{x}"] / totals[f"n_{x}"].where(totals[f"n_{x}"] > 0)).fillna(0.0)
        means.append(dict(zip(totals.index.tolist(),
                              (gap + totals[f"centre_{x}"]).tolist(), strict=True)))
        shift[:, j] = gap.reindex(stratum).to_numpy(dtype=float)
    # move each filled value from the centre to the mean: x* = x + shift * indicator
    T = np.repeat(np.eye(m)[None], len(stratum), axis=0)
    for p, j in enumerate(gaps):
        T[:, j, len(roles) + p] = shift[:, j]
    sum_x = np.einsum("gij,gj->gi", T, sum_x)
    sum_xy = np.einsum("gij,gj->gi", T, sum_xy)
    sum_xx = np.einsum("gij,gjk,glk->gil", T, sum_xx, T)
    names = tuple(data.spec.columns.covariates) + tuple(
        f"{data.spec.columns.covariates[j]} missing" for j in gaps)
    moments = AdjustmentMoments(
        stratum=stratum,
        offer=g["offer"].to_numpy()[keep].astype(np.int64),
        take_up=g["take_up"].to_numpy()[keep].astype(np.int64),
        n=n_v, sum_y=_column(data, f"sum_{v}", keep), sum_yy=_column(data, f"sum_{v}_sq", keep),
        centre_y=_column(data, f"centre_{v}", keep), sum_x=sum_x, sum_xy=sum_xy, sum_xx=sum_xx,
        centre_x=centre,
        cluster=g["cluster"].to_numpy(dtype=object)[keep] if "cluster" in g.columns else None,
    )
    return AdjustmentInputs(moments, names, gaps, tuple(means))

"""The covariate moments of a run's grouped data, handed to the core: balance and complier
means (`strativ.estimators.profile`) and covariate adjustment (`strativ.estimators.adjust`).

The columns are those `strativ.estimators.group_query` writes for covariates (view names
``x0``, ``x1``, ...; outcomes ``y0``, ...); nothing is computed here but the arrays.
"""

from __future__ import annotations

from collections.abc import Iterable
from typing import Any

import numpy as np

from strativ.estimators.adjust import AdjustmentMoments
from strativ.estimators.profile import CovariateProfile, covariate_profile

from .grouped import GroupedData

__all__ = ["ADJUSTED_VARIANCES", "adjustment_moments", "run_profile"]

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


def adjustment_moments(data: GroupedData, outcome: str,
                       strata: Iterable[Any]) -> AdjustmentMoments | None:
    """The group moments of `outcome` and the covariates over the rows where the outcome is
    present, in the given (analysed) strata; None without covariates."""
    roles = data.roles.covariates
    if not roles:
        return None
    v = data.roles.outcomes[data.outcomes.index(outcome)]
    g = data.groups
    keep = g["stratum"].isin(list(strata)).to_numpy() & (g[f"n_{v}"].to_numpy() > 0)
    k = len(roles)
    sum_xx = np.zeros((int(keep.sum()), k, k))
    for j, x in enumerate(roles):
        for i, w in enumerate(roles[j:], start=j):
            sum_xx[:, j, i] = sum_xx[:, i, j] = _column(data, f"sum_{v}_{x}_{w}", keep)
    return AdjustmentMoments(
        stratum=g["stratum"].to_numpy(dtype=object)[keep],
        offer=g["offer"].to_numpy()[keep].astype(np.int64),
        take_up=g["take_up"].to_numpy()[keep].astype(np.int64),
        n=_column(data, f"n_{v}", keep),
        sum_y=_column(data, f"sum_{v}", keep), sum_yy=_column(data, f"sum_{v}_sq", keep),
        centre_y=_column(data, f"centre_{v}", keep),
        sum_x=np.column_stack([_column(data, f"sum_{v}_{x}", keep) for x in roles]),
        sum_xy=np.column_stack([_column(data, f"sum_{v}_{v}_{x}", keep) for x in roles]),
        sum_xx=sum_xx,
        centre_x=np.column_stack([_column(data, f"centre_{x}", keep) for x in roles]),
        cluster=g["cluster"].to_numpy(dtype=object)[keep] if "cluster" in g.columns else None,
    )

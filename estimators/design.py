"""The analysis sample: strata with both arms, and their per-arm moments (METHODS.md §2).

Every estimator reads one `Design`, so all estimators share one analysis sample.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any

import numpy as np

from .cells import CellTable
from .errors import DegenerateDesignError
from .results import ExcludedStratum

__all__ = ["Design", "analysis_design", "excluded_strata"]


@dataclass(frozen=True, slots=True, eq=False)
class Design:
    """Per-stratum arrays of the analysis sample (K strata with both arms)."""

    labels: tuple[Any, ...]
    """Labels of the strata used."""
    n: np.ndarray
    """Counts (K, 2), float; column 1 offered."""
    mean_outcome: np.ndarray
    """Mean outcome (K, 2)."""
    mean_take_up: np.ndarray
    """Mean take-up (K, 2)."""
    ss: np.ndarray
    """Centred within-cell sums of squares and products of (y, d), (K, 2, 2, 2)."""
    cov: np.ndarray
    """Within-cell covariance of (y, d) with divisor n - 1, (K, 2, 2, 2); a one-unit cell gets
    the pooled covariance of the other cells of its arm."""
    single_unit_cells: int
    """Cells of one unit that borrowed the pooled within-arm covariance."""
    unit_rule: str
    """``within``, or ``pairs`` when an arm has no cell of two or more units: no within-cell
    variance can be estimated or borrowed, so each stratum counts as one draw."""
    exclusions: tuple[ExcludedStratum, ...]
    """Strata left out, with reasons."""
    cluster_q: np.ndarray | None = None
    """Cluster-level sums of squares of (y, d) deviation totals (K, 2, 2, 2), or None."""
    cluster_within: np.ndarray | None = None
    """``G_sz / (G_sz - 1)`` times `cluster_q`; a one-cluster cell gets its size times the
    pooled per-unit cluster variance of its arm (K, 2, 2, 2), or None."""
    cluster_count: np.ndarray | None = None
    """Clusters per cell (K, 2), or None."""
    cluster_size_sq: np.ndarray | None = None
    """Sum of squared cluster sizes per cell (K, 2), or None."""
    cluster_size_dev: np.ndarray | None = None
    """Sum over clusters of size times deviation total of (y, d), (K, 2, 2), or None."""
    single_cluster_cells: int = 0
    """Cells of one cluster that borrowed the pooled cluster variance of their arm."""
    cluster_rule: str = "within"
    """As `unit_rule`, for clusters: ``pairs`` when an arm has no cell of two clusters."""

    @property
    def clustered(self) -> bool:
        """Whether the cell table carried a cluster column."""
        return self.cluster_q is not None

    @property
    def n_clusters(self) -> int:
        """Clusters in the analysis sample (0 without a cluster column)."""
        return 0 if self.cluster_count is None else int(self.cluster_count.sum())

    @property
    def n_stratum(self) -> np.ndarray:
        """Units per stratum, (K,)."""
        return self.n.sum(axis=1)

    @property
    def offer_share(self) -> np.ndarray:
        """Realized offer share per stratum, (K,)."""
        return self.n[:, 1] / self.n_stratum

    @property
    def itt(self) -> np.ndarray:
        """Per-stratum intention-to-treat effect, (K,)."""
        return self.mean_outcome[:, 1] - self.mean_outcome[:, 0]

    @property
    def first_stage(self) -> np.ndarray:
        """Per-stratum first stage (complier share under monotonicity), (K,)."""
        return self.mean_take_up[:, 1] - self.mean_take_up[:, 0]

    @property
    def n_units(self) -> int:
        """Units in the analysis sample."""
        return int(self.n.sum())


def _moment_matrix(yy: np.ndarray, yd: np.ndarray, dd: np.ndarray) -> np.ndarray:
    out = np.empty(yy.shape + (2, 2))
    out[..., 0, 0] = yy
    out[..., 0, 1] = yd
    out[..., 1, 0] = yd
    out[..., 1, 1] = dd
    return out


def _borrowed(own: np.ndarray, total: np.ndarray, weight: np.ndarray, count: np.ndarray,
              n: np.ndarray) -> tuple[np.ndarray, int, str]:
    """Per-cell variance moments where a cell of one unit (or cluster) borrows its arm's.

    ``own`` holds each cell's moment (``n_sz`` times a per-unit covariance); a cell with
    ``count == 1`` gets ``n_sz`` times its arm's pooled per-unit covariance
    ``sum(total) / sum(weight)`` over the cells with ``count >= 2``. Returns the moments, the
    number of borrowing cells, and ``pairs`` when an arm has no cell to borrow from.
    """
    out = own.copy()
    single = count == 1
    for arm in (0, 1):
        lonely = single[:, arm]
        if not lonely.any():
            continue
        donors = count[:, arm] >= 2
        if not donors.any():
            return out, int(single.sum()), "pairs"
        pooled = total[donors, arm].sum(axis=0) / weight[donors, arm].sum()
        out[lonely, arm] = n[lonely, arm][:, None, None] * pooled
    return out, int(single.sum()), "within"


def _unit_moments(ss: np.ndarray, n: np.ndarray) -> tuple[np.ndarray, int, str]:
    """Within-cell covariances with divisor n - 1; a one-unit cell borrows its arm's pooled
    covariance ``sum(ss) / sum(n - 1)`` (METHODS.md §4)."""
    own = ss * (n / np.maximum(n - 1.0, 1.0))[..., None, None]
    moment, single, rule = _borrowed(own, ss, n - 1.0, n, n)
    return moment / n[..., None, None], single, rule


def excluded_strata(cells: CellTable) -> tuple[ExcludedStratum, ...]:
    """The strata that every estimator leaves out, with the reason.

    Parameters
    ----------
    cells : CellTable
        Output of `build_cells` or `cells_from_frame`.

    Returns
    -------
    tuple of ExcludedStratum
        Strata with no units, no offered unit, or every unit offered, in label order
        (METHODS.md §2: an offer share of 0 or 1 carries no information about an effect).
    """
    out = []
    for k, (n0, n1) in enumerate(cells.n.tolist()):
        if n0 > 0 and n1 > 0:
            continue
        if n0 + n1 == 0:
            reason = "no units"
        elif n1 == 0:
            reason = "no unit was offered (offer share 0)"
        else:
            reason = "every unit was offered (offer share 1)"
        out.append(ExcludedStratum(label=cells.labels[k], n=int(n0 + n1), reason=reason))
    return tuple(out)


def analysis_design(cells: CellTable) -> Design:
    """Select the strata that have both arms and derive their per-arm moments.

    Parameters
    ----------
    cells : CellTable
        Output of `build_cells` or `cells_from_frame`.

    Returns
    -------
    Design
        Arrays over the strata used, and the list of excluded strata with reasons.

    Raises
    ------
    DegenerateDesignError
        When no stratum has both offered and not-offered units.

    Notes
    -----
    A stratum whose offer share is 0 or 1 carries no information about any effect and is
    excluded from every estimator (METHODS.md §2).
    """
    n = cells.n.astype(float)
    keep = (n[:, 0] > 0) & (n[:, 1] > 0)
    exclusions = excluded_strata(cells)
    if not keep.any():
        raise DegenerateDesignError(
            "no stratum has both offered and not-offered units, so no effect can be estimated; "
            "check the offer and stratum columns."
        )
    ss = _moment_matrix(cells.ss_outcome[keep], cells.ss_cross[keep], cells.ss_take_up[keep])
    n_keep = n[keep]
    cov, single, unit_rule = _unit_moments(ss, n_keep)
    extra: dict[str, Any] = {}
    if cells.clusters is not None:
        c = cells.clusters
        q = _moment_matrix(c.q_outcome[keep], c.q_cross[keep], c.q_take_up[keep])
        count = c.count[keep].astype(float)
        own = q * (count / np.maximum(count - 1.0, 1.0))[..., None, None]
        within, lonely, cluster_rule = _borrowed(own, own, n_keep, count, n_keep)
        extra = {
            "cluster_q": q,
            "cluster_within": within,
            "cluster_count": count,
            "cluster_size_sq": c.size_sq[keep].astype(float),
            "cluster_size_dev": np.stack([c.size_dev_outcome[keep], c.size_dev_take_up[keep]],
                                         axis=-1),
            "single_cluster_cells": lonely,
            "cluster_rule": cluster_rule,
        }
    return Design(
        labels=tuple(label for label, k in zip(cells.labels, keep, strict=True) if k),
        n=n_keep,
        mean_outcome=cells.mean_outcome[keep].astype(float),
        mean_take_up=cells.mean_take_up[keep].astype(float),
        ss=ss,
        cov=cov,
        single_unit_cells=single,
        unit_rule=unit_rule,
        exclusions=tuple(exclusions),
        **extra,
    )

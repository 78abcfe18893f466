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
    the pooled covariance of the other cells of its arm (of all cells if its arm has no
    cell of two or more)."""
    cluster_q: np.ndarray | None
    """Cluster-level sums of squares of (y, d) deviations (K, 2, 2, 2), or None."""
    n_clusters: int
    """Clusters in the analysis sample (0 without a cluster column)."""
    cluster_size_sq: np.ndarray | None
    """Sum of squared cluster sizes per stratum (K,), or None: with clusters sampled whole,
    it replaces n_s in the between-strata term."""
    single_unit_cells: int
    """Cells of one unit that borrowed the pooled within-arm covariance."""
    exclusions: tuple[ExcludedStratum, ...]
    """Strata left out, with reasons."""

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


def _unbiased_cov(ss: np.ndarray, n: np.ndarray) -> tuple[np.ndarray, int]:
    """Cell covariances with divisor n - 1; a one-unit cell borrows the pooled covariance of
    the other cells of its arm, or of all cells when its arm has no cell of two or more."""
    cov = ss / np.maximum(n - 1.0, 1.0)[..., None, None]
    single = n == 1
    donors_all = n >= 2
    dof_all = (n[donors_all] - 1.0).sum()
    pooled_all = ss[donors_all].sum(axis=0) / dof_all if dof_all > 0 else np.zeros((2, 2))
    for arm in (0, 1):
        lonely = single[:, arm]
        if not lonely.any():
            continue
        donors = n[:, arm] >= 2
        dof = (n[donors, arm] - 1.0).sum()
        cov[lonely, arm] = ss[donors, arm].sum(axis=0) / dof if dof > 0 else pooled_all
    return cov, int(single.sum())


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
    cov, single = _unbiased_cov(ss, n[keep])
    cluster_q = None
    n_clusters = 0
    size_sq = None
    if cells.clusters is not None:
        c = cells.clusters
        cluster_q = _moment_matrix(c.q_outcome[keep], c.q_cross[keep], c.q_take_up[keep])
        n_clusters = int(c.count[keep].sum())
        size_sq = c.size_sq[keep].sum(axis=1)
    return Design(
        labels=tuple(label for label, k in zip(cells.labels, keep, strict=True) if k),
        n=n[keep],
        mean_outcome=cells.mean_outcome[keep].astype(float),
        mean_take_up=cells.mean_take_up[keep].astype(float),
        ss=ss,
        cov=cov,
        cluster_q=cluster_q,
        n_clusters=n_clusters,
        cluster_size_sq=size_sq,
        single_unit_cells=single,
        exclusions=tuple(exclusions),
    )

"""Differential attrition: do outcomes go missing more often in one offer arm?
(METHODS.md §5).

Per stratum, a 2×2 table of offer arm by outcome present/missing. The Mantel–Haenszel test
(without continuity correction) pools the strata: with ``a_s`` the missing outcomes among
the offered, ``M_s`` all missing, ``n_s1``, ``n_s0`` the arm sizes,

    MH = (Σ_s a_s − n_s1 M_s / n_s)² / Σ_s n_s1 n_s0 M_s (n_s − M_s) / (n_s² (n_s − 1)),

χ² with one degree of freedom under no association within strata. Next to it, the
within-stratum difference of missing shares (offered minus not offered), averaged with the
strata's shares of units, says how large the difference is.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any

import numpy as np
import pandas as pd
from scipy import stats

from .rebuild import rebuildable

__all__ = ["AttritionTest", "attrition_test"]


@rebuildable
@dataclass(frozen=True, slots=True)
class AttritionTest:
    """Missing outcomes by offer arm, pooled over strata, with the Mantel–Haenszel test."""

    missing_offered: int
    """Offered units without the outcome."""
    offered: int
    """Offered units."""
    missing_not_offered: int
    """Units not offered without the outcome."""
    not_offered: int
    """Units not offered."""
    difference: float | None
    """Within-stratum difference of missing shares (offered minus not offered), averaged with
    the strata's shares of units; None without a stratum that has both arms."""
    statistic: float | None
    """Mantel–Haenszel χ² (one df); None when no outcome is missing in the strata with both
    arms (nothing to test)."""
    p_value: float | None
    """Its upper tail."""

    def to_dict(self) -> dict[str, Any]:
        """Return the JSON form."""
        return {name: getattr(self, name) for name in self.__slots__}


def attrition_test(stratum: Any, offer: Any, n: Any, n_present: Any) -> AttritionTest:
    """Test whether outcomes are missing more often in one offer arm, within strata.

    Parameters
    ----------
    stratum, offer : array_like, shape (G,)
        Group keys (offer 0/1); several groups may share a (stratum, offer) pair.
    n, n_present : array_like, shape (G,)
        Rows of each group, and those with the outcome.

    Returns
    -------
    AttritionTest
    """
    frame = pd.DataFrame({"s": pd.Series(list(stratum), dtype=object),
                          "z": np.asarray(offer, dtype=np.int64),
                          "n": np.asarray(n, dtype=float),
                          "m": np.asarray(n, dtype=float) - np.asarray(n_present, dtype=float)})
    table = frame.groupby(["s", "z"], sort=False)[["n", "m"]].sum().unstack("z", fill_value=0.0)
    n1 = table[("n", 1)].to_numpy() if ("n", 1) in table else np.zeros(len(table))
    n0 = table[("n", 0)].to_numpy() if ("n", 0) in table else np.zeros(len(table))
    m1 = table[("m", 1)].to_numpy() if ("m", 1) in table else np.zeros(len(table))
    m0 = table[("m", 0)].to_numpy() if ("m", 0) in table else np.zeros(len(table))
    both = (n1 > 0) & (n0 > 0)
    difference = None
    if both.any():
        size = (n1 + n0)[both]
        gaps = m1[both] / n1[both] - m0[both] / n0[both]
        difference = float((size * gaps).sum() / size.sum())
    total = n1 + n0
    missing = m1 + m0
    used = both & (total > 1)
    expected = n1[used] * missing[used] / total[used]
    variance = (n1[used] * n0[used] * missing[used] * (total[used] - missing[used])
                / (total[used] ** 2 * (total[used] - 1))).sum()
    statistic = p_value = None
    if variance > 0:
        statistic = float((m1[used].sum() - expected.sum()) ** 2 / variance)
        p_value = float(stats.chi2.sf(statistic, 1))
    return AttritionTest(int(m1.sum()), int(n1.sum()), int(m0.sum()), int(n0.sum()),
                         difference, statistic, p_value)

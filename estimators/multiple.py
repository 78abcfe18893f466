"""Several outcomes: p-values adjusted across the outcomes of one estimator (METHODS.md §5).

Holm (1979) controls the family-wise error rate: the ordered p-values ``p_(i)`` become
``max_{j <= i} min(1, (m - j + 1) p_(j))``. Benjamini and Hochberg (1995) control the false
discovery rate: ``min_{j >= i} min(1, p_(j) / (j / m))``. Both are written out in these few
lines, in the arithmetic order of their definitions, so that they equal the reference
implementations bit for bit (tests). Undefined p-values (an estimate without a standard
error) stay undefined and do not count in the family.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass
from typing import Any

import numpy as np

from .rebuild import rebuildable

__all__ = ["AdjustedPValues", "adjust_p_values"]


@rebuildable
@dataclass(frozen=True, slots=True)
class AdjustedPValues:
    """One family's p-values, as given and adjusted, in the order given."""

    p_value: tuple[float | None, ...]
    """Unadjusted."""
    holm: tuple[float | None, ...]
    """Holm (family-wise error rate)."""
    benjamini_hochberg: tuple[float | None, ...]
    """Benjamini-Hochberg (false discovery rate)."""

    def to_dict(self) -> dict[str, Any]:
        """Return the JSON form."""
        return {"p_value": list(self.p_value), "holm": list(self.holm),
                "benjamini_hochberg": list(self.benjamini_hochberg)}


def adjust_p_values(p_values: Sequence[float | None]) -> AdjustedPValues:
    """Holm and Benjamini-Hochberg adjustments of one family of p-values.

    Parameters
    ----------
    p_values : sequence of float or None
        The family (for example, one estimator's p-values of a zero effect, one per
        outcome); None entries are left out of the family and stay None.

    Returns
    -------
    AdjustedPValues
    """
    given = list(p_values)
    present = [i for i, p in enumerate(given) if p is not None]
    holm: list[float | None] = [None] * len(given)
    bh: list[float | None] = [None] * len(given)
    if present:
        p = np.array([given[i] for i in present], dtype=float)
        m = p.size
        order = np.argsort(p, kind="stable")
        stepped = np.maximum.accumulate(np.minimum(1.0, (m - np.arange(m)) * p[order]))
        holm_values = np.empty(m)
        holm_values[order] = stepped
        ranked = p[order] / (np.arange(1, m + 1) / m)
        bh_values = np.empty(m)
        bh_values[order] = np.minimum(1.0, np.minimum.accumulate(ranked[::-1])[::-1])
        for k, i in enumerate(present):
            holm[i] = float(holm_values[k])
            bh[i] = float(bh_values[k])
    return AdjustedPValues(tuple(given), tuple(holm), tuple(bh))

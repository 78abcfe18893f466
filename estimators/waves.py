"""Do offer shares differ between the waves pooled into one stratum? (METHODS.md §4).

When a stratum pools units from several waves whose lotteries were drawn separately, its
offer is as good as random only if every wave had the same odds. Per stratum s with waves
w = 1..W_s, the offer-by-wave table gives Pearson's statistic of homogeneity

    X²_s = Σ_w Σ_z (n_swz − n_sw n_sz / n_s)² / (n_sw n_sz / n_s),

χ² with W_s − 1 degrees of freedom when the odds are equal; the strata are independent
lotteries, so their statistics add (df Σ_s (W_s − 1)). Strata with a single wave, or in
which no one or everyone was offered, add nothing.
"""

from __future__ import annotations

from collections.abc import Mapping
from dataclasses import dataclass
from typing import Any

import numpy as np
from scipy import stats

from .rebuild import rebuild

__all__ = ["WaveShareTest", "wave_share_test"]


@dataclass(frozen=True, slots=True)
class WaveShareTest:
    """Homogeneity of offer shares across the waves of each stratum, summed over strata."""

    statistic: float | None
    """Σ of the strata's Pearson statistics (None when no stratum spans two waves)."""
    df: int
    """Degrees of freedom, Σ_s (W_s − 1) over the strata that count."""
    p_value: float | None
    """Upper tail of χ²(df) at the statistic."""
    strata: tuple[tuple[Any, float, tuple[tuple[Any, int, int], ...]], ...]
    """(stratum, its statistic, ((wave, offered, units), ...)) for the strata that count,
    largest statistic first."""

    def to_dict(self) -> dict[str, Any]:
        """Return the JSON form."""
        return {"statistic": self.statistic, "df": self.df, "p_value": self.p_value,
                "strata": [{"stratum": s, "statistic": x,
                            "waves": [{"wave": w, "offered": k, "units": n}
                                      for w, k, n in waves]}
                           for s, x, waves in self.strata]}

    @classmethod
    def from_dict(cls, data: Mapping[str, Any]) -> WaveShareTest:
        """Rebuild the test from its JSON form (`to_dict`)."""
        strata = tuple((s["stratum"], float(s["statistic"]),
                        tuple((w["wave"], int(w["offered"]), int(w["units"]))
                              for w in s["waves"])) for s in data["strata"])
        return rebuild(cls, data, strata=strata)


def wave_share_test(stratum: np.ndarray, wave: np.ndarray, offer: np.ndarray,
                    n: np.ndarray) -> WaveShareTest:
    """Test equal offer shares across waves within strata, from grouped counts.

    Parameters
    ----------
    stratum, wave, offer : array_like
        Per group: stratum label, wave label, offer (0/1).
    n : array_like of int
        Units in each group.

    Returns
    -------
    WaveShareTest
        The summed Pearson statistic, its χ² p-value and each stratum's part.
    """
    counts: dict[Any, dict[Any, list[int]]] = {}
    for s, w, z, m in zip(np.asarray(stratum, dtype=object).tolist(),
                          np.asarray(wave, dtype=object).tolist(),
                          np.asarray(offer).astype(int).tolist(),
                          np.asarray(n).astype(np.int64).tolist(), strict=True):
        cell = counts.setdefault(s, {}).setdefault(w, [0, 0])
        cell[z] += m
    parts = []
    df = 0
    for s, waves in counts.items():
        table = np.array([[k0, k1] for k0, k1 in waves.values()], dtype=float)
        table = table[table.sum(axis=1) > 0]
        arms = table.sum(axis=0)
        if table.shape[0] < 2 or (arms == 0).any():
            continue
        expected = np.outer(table.sum(axis=1), arms) / table.sum()
        x2 = float(((table - expected) ** 2 / expected).sum())
        df += table.shape[0] - 1
        parts.append((s, x2, tuple((w, int(k1), int(k0 + k1))
                                   for w, (k0, k1) in waves.items() if k0 + k1)))
    if not parts:
        return WaveShareTest(None, 0, None, ())
    statistic = float(sum(x for _, x, _ in parts))
    parts.sort(key=lambda p: -p[1])
    return WaveShareTest(statistic, df, float(stats.chi2.sf(statistic, df)), tuple(parts))

"""Planning the next wave: the minimum detectable effect of an estimate and the sample that a
target effect needs (METHODS.md §5; Bloom 1995).

For an estimate with standard error ``se`` and a two-sided test at level ``1 − α``, the
smallest true effect detected with probability ``P`` is

    MDE = (q_{1−α/2} + q_P) · se,

with q the quantiles of the estimate's reference distribution (Student t on its degrees of
freedom, or the normal). For the complier-weighted LATE, ``se`` already carries today's
complier share (the ITT's standard error divided by the first stage, to first order), so
``MDE_LATE = MDE_ITT / complier share``. At a fixed design — the same strata shares, offer
odds, complier share and outcome variance — ``se`` falls as ``1/√n``, so a target effect
``θ*`` needs ``n* = n · (MDE / θ*)²`` rows in all.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Any

from scipy import stats

from .rebuild import rebuildable

__all__ = ["Plan", "mde_from_itt", "multiplier", "plan"]


def multiplier(level: float, power: float, df: float | None = None) -> float:
    """``q_{1−α/2} + q_P``: Student t on `df` degrees of freedom, or normal when None."""
    if not 0 < level < 1 or not 0 < power < 1:
        raise ValueError(f"level and power must lie strictly between 0 and 1, got {level} "
                         f"and {power}")
    if df is not None and not df > 0:
        raise ValueError(f"degrees of freedom must be positive, got {df}")
    dist = stats.norm if df is None else stats.t(df)
    return float(dist.ppf(0.5 + level / 2) + dist.ppf(power))


@rebuildable
@dataclass(frozen=True, slots=True)
class Plan:
    """The minimum detectable effect of one estimate, and the rows a target effect needs."""

    estimator: str
    """The estimator planned for (the reported complier estimator)."""
    level: float
    """Confidence level of the two-sided test."""
    power: float
    """Probability of detecting an effect of the size of the MDE."""
    multiplier: float
    """``q_{1−α/2} + q_P`` (Student t on the estimate's degrees of freedom)."""
    mde: float | None
    """Minimum detectable effect, outcome units per unit of take-up (None: no standard
    error)."""
    rows: int
    """Rows the estimate used."""
    target_effect: float | None
    """The effect to plan for (None: not given)."""
    rows_needed: int | None
    """Rows in all that detect `target_effect` with `power`, at today's design."""
    further_rows: int | None
    """Rows beyond today's (0 when today's already suffice)."""
    reason: str | None
    """Why the MDE is undefined, or None."""

    def to_dict(self) -> dict[str, Any]:
        """Return the JSON form."""
        return {"estimator": self.estimator, "level": self.level, "power": self.power,
                "multiplier": self.multiplier, "mde": self.mde, "rows": self.rows,
                "target_effect": self.target_effect, "rows_needed": self.rows_needed,
                "further_rows": self.further_rows, "reason": self.reason}


def plan(*, estimator: str, standard_error: float | None, rows: int, level: float = 0.95,
         power: float = 0.8, df: float | None = None,
         target_effect: float | None = None) -> Plan:
    """Minimum detectable effect and the rows a target effect needs (Bloom 1995).

    Parameters
    ----------
    estimator : str
        Name of the estimate planned for.
    standard_error : float or None
        Its standard error today.
    rows : int
        Rows it used.
    level, power : float
        Confidence level of the two-sided test, and the power wanted.
    df : float, optional
        Degrees of freedom of its t reference (None: normal).
    target_effect : float, optional
        An effect to plan for (its sign is ignored).

    Returns
    -------
    Plan

    Raises
    ------
    ValueError
        For a level or power outside (0, 1), rows below 1 or a zero target.
    """
    if rows < 1:
        raise ValueError(f"rows must be at least 1, got {rows}")
    if target_effect is not None and not (math.isfinite(target_effect) and target_effect):
        raise ValueError(f"the target effect must be a nonzero number, got {target_effect}")
    q = multiplier(level, power, df)
    if standard_error is None or not math.isfinite(standard_error) or standard_error <= 0:
        return Plan(estimator, level, power, q, None, rows, target_effect, None, None,
                    "the estimate has no standard error")
    mde = q * standard_error
    needed = further = None
    if target_effect is not None:
        needed = math.ceil(rows * (mde / abs(target_effect)) ** 2)
        further = max(0, needed - rows)
    return Plan(estimator, level, power, q, mde, rows, target_effect, needed, further, None)


def mde_from_itt(*, itt_standard_error: float, complier_share: float, level: float = 0.95,
                 power: float = 0.8, df: float | None = None) -> float:
    """The LATE's minimum detectable effect from the ITT's: ``MDE_ITT / complier share``."""
    if not 0 < complier_share <= 1:
        raise ValueError(f"the complier share must lie in (0, 1], got {complier_share}")
    return multiplier(level, power, df) * itt_standard_error / complier_share

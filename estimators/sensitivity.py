"""Sensitivity to a direct effect of the offer (METHODS.md §7).

If the offer moved the outcome by δ through another channel than take-up (the same δ in
every stratum, in the outcome's units), each stratum's intention-to-treat effect carries δ,
and each estimator becomes ``(N − δ Σ a_s) / D``: exactly the estimator applied to the outcome
``y − δ Z``. Z is constant within a (stratum, offer) cell, so the group sums of that outcome
follow from the unadjusted ones (`shift_by_offer`), and every variance flavour applies
unchanged. Reported: the interval at each δ of a user range and their union (Conley, Hansen
& Rossi 2012, "plausibly exogenous" with a known range of δ), and the δ at which the interval
first reaches zero.
"""

from __future__ import annotations

from collections.abc import Callable, Sequence
from dataclasses import dataclass
from typing import Any

import pandas as pd

from .rebuild import rebuildable
from .results import Estimate

__all__ = ["DefierRow", "DirectEffectRow", "DirectEffectSensitivity", "defier_table",
           "direct_effect_sensitivity", "shift_by_offer"]

_STEPS = 52
"""Bisection steps for the δ that brings the interval to zero (to the last bits of δ)."""


@rebuildable
@dataclass(frozen=True, slots=True)
class DirectEffectRow:
    """One estimator's estimate and interval under one assumed direct effect."""

    delta: float
    """Assumed direct effect of the offer, in outcome units."""
    estimate: float | None
    """The estimate on ``y − δ Z``."""
    interval: tuple[float, float] | None
    """Its interval at the run's level."""

    def to_dict(self) -> dict[str, Any]:
        """Return the JSON form."""
        return {"delta": self.delta, "estimate": self.estimate,
                "interval": None if self.interval is None else list(self.interval)}


@rebuildable
@dataclass(frozen=True, slots=True)
class DirectEffectSensitivity:
    """How one estimator moves if the offer acted on the outcome directly."""

    estimator: str
    """The estimator examined."""
    delta_to_zero: float | None
    """The direct effect at which the interval first reaches zero, moving δ from 0 in the
    direction that shrinks the estimate; 0 when the interval already covers zero; None
    without an interval."""
    rows: tuple[DirectEffectRow, ...]
    """Estimates and intervals at the ends of the user's range and at 0 (empty without a
    range)."""
    union: tuple[float, float] | None
    """The union of the intervals over the user's range (None without a range or when an
    interval is undefined)."""
    defiers: tuple[DefierRow, ...] = ()
    """The same estimator under assumed shares of defiers (`defier_table`)."""

    def to_dict(self) -> dict[str, Any]:
        """Return the JSON form."""
        return {"estimator": self.estimator, "delta_to_zero": self.delta_to_zero,
                "rows": [r.to_dict() for r in self.rows],
                "union": None if self.union is None else list(self.union),
                "defiers": [d.to_dict() for d in self.defiers]}


def shift_by_offer(frame: pd.DataFrame, delta: float) -> pd.DataFrame:
    """Group sums of ``y − δ Z`` from those of y (layout of `cells_from_moments`).

    Parameters
    ----------
    frame : pandas.DataFrame
        Columns offer, n, sum_outcome, sum_outcome_sq (sums of ``y − centre``), among others.
    delta : float
        Direct effect removed from every offered unit's outcome.

    Returns
    -------
    pandas.DataFrame
        A copy with the sums of ``y − δ Z − centre``.
    """
    z = frame["offer"].to_numpy(dtype=float)
    n = frame["n"].to_numpy(dtype=float)
    total = frame["sum_outcome"].to_numpy(dtype=float)
    out = frame.copy()
    out["sum_outcome"] = total - delta * z * n
    out["sum_outcome_sq"] = frame["sum_outcome_sq"].to_numpy(dtype=float) \
        - 2.0 * delta * z * total + delta * delta * z * n
    return out


def direct_effect_sensitivity(
    fit_at: Callable[[float], Estimate],
    estimator: str,
    delta_range: Sequence[float] | None = None,
) -> DirectEffectSensitivity:
    """The δ that brings an estimator's interval to zero, and its intervals over a range.

    Parameters
    ----------
    fit_at : callable
        δ -> the estimator's `Estimate` on ``y − δ Z`` (the caller fits `shift_by_offer`
        of its moments with the run's options).
    estimator : str
        Its name, for the record.
    delta_range : (low, high), optional
        The range of direct effects to report.

    Returns
    -------
    DirectEffectSensitivity
    """
    base = fit_at(0.0)
    to_zero = None
    if base.interval is not None and base.estimate is not None:
        low, high = base.interval
        if low <= 0.0 <= high:
            to_zero = 0.0
        else:
            # θ(δ) = (ITT − δ) / FS is zero at δ = ITT, where the interval covers zero; on
            # the way the lower (or upper) end is concave (convex) in δ, so it crosses zero
            # once and bisection finds the crossing
            target = base.itt

            def reaches(delta: float) -> bool:
                moved = fit_at(delta).interval
                return moved is not None and moved[0] <= 0.0 <= moved[1]

            inside, outside = target, 0.0
            for _ in range(_STEPS):
                middle = (inside + outside) / 2.0
                if reaches(middle):
                    inside = middle
                else:
                    outside = middle
            to_zero = inside
    rows: list[DirectEffectRow] = []
    union = None
    if delta_range is not None:
        low, high = (float(v) for v in delta_range)
        points = sorted({low, 0.0, high}) if low <= 0.0 <= high else [low, high]
        for delta in points:
            result = base if delta == 0.0 else fit_at(delta)
            rows.append(DirectEffectRow(delta, result.estimate, result.interval))
        if all(r.interval is not None for r in rows):
            # the lower end (estimate minus a multiple of a convex standard error) is concave
            # in δ and the upper end convex, so over the range both extremes sit at its ends
            union = (min(r.interval[0] for r in rows), max(r.interval[1] for r in rows))
    return DirectEffectSensitivity(estimator, to_zero, tuple(rows), union)


@rebuildable
@dataclass(frozen=True, slots=True)
class DefierRow:
    """What a given share of defiers would mean for a Wald-type estimate."""

    defier_share: float
    """Assumed share ρ of units who take the programme up only when not offered."""
    complier_share: float
    """Compliers then: the first stage plus ρ."""
    comvivor_share: float
    """Share of the compliers the estimate describes when defiers' effects are matched by as
    many compliers' (de Chaisemartin 2017): first stage / (first stage + ρ)."""
    bias_factor: float
    """The estimate equals the compliers' average effect plus this factor times (compliers'
    minus defiers' average effect): ρ / first stage."""

    def to_dict(self) -> dict[str, Any]:
        """Return the JSON form."""
        return {name: getattr(self, name) for name in self.__slots__}


def defier_table(first_stage: float, shares: Sequence[float]) -> tuple[DefierRow, ...]:
    """How a share of defiers changes what an estimate with first stage FS describes.

    With compliers π_C and defiers π_D = ρ, the first stage is FS = π_C − ρ and the Wald ratio
    is ``(π_C β_C − ρ β_D) / FS = β_C + (ρ / FS)(β_C − β_D)`` (de Chaisemartin 2017).

    Parameters
    ----------
    first_stage : float
        The estimator's overall first stage (a share of units), positive.
    shares : sequence of float
        Defier shares to tabulate, each in [0, 1).

    Returns
    -------
    tuple of DefierRow
        One row per share; empty when the first stage is not positive.
    """
    if not first_stage > 0:
        return ()
    return tuple(DefierRow(float(rho), float(first_stage + rho),
                           float(first_stage / (first_stage + rho)),
                           float(rho / first_stage)) for rho in shares)

"""Confidence sets: the normal interval and the Fieller / Anderson-Rubin set (METHODS.md §4)."""

from __future__ import annotations

import math

from scipy.special import ndtri

from .results import ConfidenceSet

__all__ = ["critical_value", "normal_interval", "fieller_set"]


def critical_value(level: float) -> float:
    """Two-sided standard normal critical value for a confidence level in (0, 1)."""
    return float(ndtri(0.5 + level / 2.0))


def normal_interval(estimate: float, std_error: float, z: float) -> tuple[float, float]:
    """The interval ``estimate +/- z * std_error``."""
    return (estimate - z * std_error, estimate + z * std_error)


def _stable_roots(qa: float, qb: float, qc: float, disc: float) -> tuple[float, float]:
    """Roots of ``qa t^2 - 2 qb t + qc`` without cancellation."""
    root = math.sqrt(disc)
    big = qb + math.copysign(root, qb) if qb != 0 else root
    first = big / qa
    second = qc / big if big != 0 else -first
    return (min(first, second), max(first, second))


def fieller_set(
    numerator: float, denominator: float, a: float, b: float, c: float, z: float
) -> ConfidenceSet:
    """Invert ``(N - t D)^2 <= z^2 Var(N - t D)`` for t.

    Parameters
    ----------
    numerator, denominator : float
        ``N`` and ``D``.
    a, b, c : float
        ``Var(N)``, ``Cov(N, D)``, ``Var(D)`` from the variance engine.
    z : float
        Critical value.

    Returns
    -------
    ConfidenceSet
        ``bounded`` when ``qa > 0`` (null-imposed first-stage F above z^2); ``two_rays``
        ((-inf, left_ray_end] and [right_ray_start, inf)) when ``qa < 0`` and the
        discriminant is positive; ``whole_line`` otherwise (including the degenerate
        ``qa = 0``, reported conservatively).

    Notes
    -----
    ``qa = D^2 - z^2 C``, ``qb = N D - z^2 B``, ``qc = N^2 - z^2 A``,
    ``disc = qb^2 - qa qc``. Roots come from the form that does not cancel, so ``qa`` near
    zero stays accurate (METHODS.md §4).
    """
    z2 = z * z
    qa = denominator * denominator - z2 * c
    qb = numerator * denominator - z2 * b
    qc = numerator * numerator - z2 * a
    disc = qb * qb - qa * qc
    if qa > 0:
        low, high = _stable_roots(qa, qb, qc, max(disc, 0.0))
        return ConfidenceSet(shape="bounded", lower=low, upper=high)
    if qa < 0 and disc > 0:
        low, high = _stable_roots(qa, qb, qc, disc)
        return ConfidenceSet(shape="two_rays", left_ray_end=low, right_ray_start=high)
    return ConfidenceSet(shape="whole_line", lower=None, upper=None)

"""Referee diagnostics on the cells: the constant-effect test and the monotonicity check
(METHODS.md §5)."""

from __future__ import annotations

import numpy as np
from scipy.optimize import brentq, minimize_scalar
from scipy.stats import chi2, norm

from .design import Design
from .results import ConstantEffectTest, NegativeFirstStage

__all__ = ["constant_effect_test", "negative_first_stages"]

GRID_QUANTILES = np.linspace(0.0, 1.0, 41)
"""Quantiles of the stratum effects added to the search grid when there are many strata."""


def _within_spread(design: Design) -> np.ndarray:
    """Per stratum, the 2x2 within variance of (ITT_s, FS_s) read as a form in (1, -t)."""
    return (design.cov / design.n[..., None, None]).sum(axis=1)


def _objective(design: Design, spread: np.ndarray, unit: float):
    itt, fs = design.itt / unit, design.first_stage
    a, b, c = spread[:, 0, 0], spread[:, 0, 1], spread[:, 1, 1]

    def value(t):
        t = np.asarray(t, dtype=float)[..., None]
        gap = itt - t * fs
        return np.sum(gap * gap / (a - 2.0 * t * b + t * t * c), axis=-1)

    def slope(t: float) -> float:
        gap = itt - t * fs
        var = a - 2.0 * t * b + t * t * c
        return float(np.sum((-2.0 * fs * gap * var - gap * gap * (2.0 * t * c - 2.0 * b))
                            / (var * var)))

    return value, slope


def constant_effect_test(design: Design, *, theta: float | None, scale: float | None
                         ) -> ConstantEffectTest:
    """Over-identification test that every stratum has the same effect.

    Parameters
    ----------
    design : Design
        The analysis sample.
    theta : float or None
        A pooled estimate to start the search from (None: the origin).
    scale : float or None
        A standard error setting the search width (None: from the stratum effects).

    Returns
    -------
    ConstantEffectTest
        ``J = min_t sum_s Delta_s(t)^2 / Var(Delta_s(t))`` with ``Delta_s(t) = ITT_s -
        t FS_s``, chi-squared with K - 1 degrees of freedom; None with a reason for one
        stratum or a stratum without within-cell variation.

    Notes
    -----
    No division by a stratum's first stage, so strata with a weak first stage enter without
    blowing up (METHODS.md §5). ``Var`` is the within-cell variance with divisor
    ``n_sz - 1``. The minimum is found on a grid spanning the stratum effects and then
    refined as the root of the analytic derivative (bounded search if it does not change
    sign there).
    """
    k = len(design.labels)
    if k < 2:
        return ConstantEffectTest(None, 0, None, None, "needs at least two strata")
    spread = _within_spread(design)
    det = spread[:, 0, 0] * spread[:, 1, 1] - spread[:, 0, 1] ** 2
    if (spread[:, 0, 0] <= 0).any() or (det <= 0).any():
        return ConstantEffectTest(
            None, k - 1, None, None,
            "a stratum has no within-cell variation in outcome or take-up",
        )
    # J is invariant to the outcome's scale: solve in units of the outcome's spread so that
    # squares of squares cannot overflow, and scale the common effect back at the end
    unit = float(np.sqrt(spread[:, 0, 0].max()))
    scaled = spread / np.array([[unit * unit, unit], [unit, 1.0]])
    value, slope = _objective(design, scaled, unit)
    centre = 0.0 if theta is None else theta / unit
    fs = design.first_stage
    with np.errstate(divide="ignore", invalid="ignore"):
        effects = design.itt / unit / fs
    effects = effects[np.isfinite(effects)]
    width = scale / unit if scale else 1.0
    if effects.size:
        width = max(width, float(np.ptp(np.append(effects, centre))))
    grid = np.linspace(centre - 10.0 * width, centre + 10.0 * width, 161)
    if effects.size:  # every stratum's own effect is a local candidate; quantiles beyond 40
        candidates = effects if effects.size <= 40 else np.quantile(effects, GRID_QUANTILES)
        grid = np.concatenate([grid, candidates])
    grid.sort()
    values = value(grid)
    best = int(np.argmin(values))
    low, high = grid[max(best - 1, 0)], grid[min(best + 1, grid.size - 1)]
    t_best, j_best = float(grid[best]), float(values[best])
    if high > low and slope(low) < 0.0 < slope(high):
        # the derivative's root pins the minimum to rounding; a value search would stop
        # at the square root of the machine precision
        t_root = brentq(slope, low, high, xtol=1e-15, rtol=4 * np.finfo(float).eps)
        if float(value(t_root)) <= j_best:
            t_best, j_best = float(t_root), float(value(t_root))
    elif high > low:
        found = minimize_scalar(lambda t: float(value(t)), bounds=(low, high),
                                method="bounded")
        if found.fun < j_best:
            t_best, j_best = float(found.x), float(found.fun)
    return ConstantEffectTest(
        statistic=j_best,
        df=k - 1,
        p_value=float(chi2.sf(j_best, k - 1)),
        effect=t_best * unit,
        reason=None,
    )


def negative_first_stages(design: Design, *, level: float) -> tuple[NegativeFirstStage, ...]:
    """Strata whose first stage is negative beyond noise, which questions monotonicity.

    Parameters
    ----------
    design : Design
        The analysis sample.
    level : float
        Confidence level; a stratum is listed when its first stage lies below zero by more
        than the two-sided critical value times its standard error.

    Returns
    -------
    tuple of NegativeFirstStage
        Label, first stage and its z statistic, in label order.
    """
    fs = design.first_stage
    se = np.sqrt(_within_spread(design)[:, 1, 1])
    z = norm.ppf(0.5 + level / 2.0)
    out = []
    for k, label in enumerate(design.labels):
        if se[k] > 0 and fs[k] / se[k] < -z:
            out.append(NegativeFirstStage(label=label, first_stage=float(fs[k]),
                                          z=float(fs[k] / se[k])))
        elif se[k] == 0 and fs[k] < 0:
            out.append(NegativeFirstStage(label=label, first_stage=float(fs[k]), z=None))
    return tuple(out)

"""Referee diagnostics on the cells: the constant-effect test and the monotonicity check
(METHODS.md §5)."""

from __future__ import annotations

import numpy as np
from scipy.optimize import brentq, minimize_scalar
from scipy.special import chdtrc, ndtri

from .design import Design
from .engine import cell_degrees_of_freedom, rule, within_moments
from .results import ConstantEffectTest, NegativeFirstStage

__all__ = ["NULL_DRAWS", "NULL_SEED", "constant_effect_test", "negative_first_stages"]

GRID_QUANTILES = np.linspace(0.0, 1.0, 41)
"""Quantiles of the stratum effects added to the search grid when there are many strata."""

LOCAL_MINIMA = 5
"""Local minima of J on the search grid that are refined."""

NULL_DRAWS = 3999
"""Draws of the simulated null distribution of the constant-effect statistic."""

NULL_SEED = 20261202
"""Seed of those draws: the same data always give the same p-value."""


def _flavour(design: Design) -> str:
    """Diagnostics read the cluster variance whenever the cells carry clusters."""
    return "cluster" if design.clustered else "stratified"


def _cell_variance(design: Design) -> np.ndarray:
    """Per cell, the 2x2 variance of the cell means of (y, d), (K, 2, 2, 2)."""
    return within_moments(design, _flavour(design)) / (design.n**2)[..., None, None]


def _within_spread(design: Design) -> np.ndarray:
    """Per stratum, the 2x2 within variance of (ITT_s, FS_s) read as a form in (1, -t)."""
    return _cell_variance(design).sum(axis=1)


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


def _minimum(design: Design, spread: np.ndarray, theta: float | None, scale: float | None
             ) -> tuple[float, float]:
    """Minimize J over the common effect: grid, then the derivative's root."""
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
        span = np.append(effects, centre)
        grid = np.concatenate([grid, candidates, np.linspace(span.min(), span.max(), 201)])
    grid = np.unique(grid)
    with np.errstate(divide="ignore", invalid="ignore"):
        values = np.nan_to_num(value(grid), nan=np.inf)
    # J can have several local minima: refine the lowest few, keep the smallest
    padded = np.concatenate([[np.inf], values, [np.inf]])
    local = np.flatnonzero((values <= padded[:-2]) & (values <= padded[2:]))
    local = local[np.argsort(values[local])][:LOCAL_MINIMA]
    t_best, j_best = float(grid[local[0]]), float(values[local[0]])
    for best in local:
        low, high = grid[max(best - 1, 0)], grid[min(best + 1, grid.size - 1)]
        if high > low and slope(low) < 0.0 < slope(high):
            # the derivative's root pins the minimum to rounding; a value search would stop
            # at the square root of the machine precision
            t_root = brentq(slope, low, high, xtol=1e-15, rtol=4 * np.finfo(float).eps)
            t_found, j_found = float(t_root), float(value(t_root))
        elif high > low:
            found = minimize_scalar(lambda t: float(value(t)), bounds=(low, high),
                                    method="bounded")
            t_found, j_found = float(found.x), float(found.fun)
        else:
            continue
        if j_found < j_best:
            t_best, j_best = t_found, j_found
    # a minimum between two uneven grid points (next to a stratum's own effect) can leave the
    # best grid point off the minimum: polish at the derivative's root in a widening bracket
    step = float(np.min(np.diff(grid))) if grid.size > 1 else 1.0
    step = max(step, 1e-9 * max(abs(t_best), 1.0))
    for _ in range(60):
        low, high = t_best - step, t_best + step
        if slope(low) < 0.0 < slope(high):
            t_root = float(brentq(slope, low, high, xtol=1e-15, rtol=4 * np.finfo(float).eps))
            j_root = float(value(t_root))
            if j_root < j_best:
                t_best, j_best = t_root, j_root
            break
        step *= 2.0
    return t_best * unit, j_best


def _null_statistics(design: Design, effect: float, draws: int, seed: int) -> np.ndarray:
    """``J`` drawn under the fitted null, with the noise of the variances inside it.

    With known variances, ``J`` at the fitted common effect is the squared length of the
    standardized stratum contrasts ``t_s = Delta_s / sd_s`` after projecting out the one
    direction ``u ~ FS_s / sd_s`` that the common effect absorbs: chi-squared on K - 1.
    Each ``sd_s`` is estimated, on Welch-Satterthwaite degrees of freedom ``nu_s`` from its
    two cells (``n_sz - 1`` each; ``G_sz - 1`` with clusters), so ``t_s`` is Student t on
    ``nu_s``: the draws are ``sum_s t_s^2 - (sum_s u_s t_s)^2`` with independent
    ``t_s ~ t(nu_s)``. Strata get their draws in an order fixed by their data, so labels
    and row order do not change the p-value.
    """
    order = np.lexsort((np.abs(design.itt), design.first_stage, design.n[:, 1], design.n[:, 0]))
    cell = _cell_variance(design)[order]
    dof = cell_degrees_of_freedom(design, _flavour(design))[order]
    vec = np.array([1.0, -effect])
    part = np.einsum("a,szab,b->sz", vec, cell, vec)
    spread = part.sum(axis=1)
    with np.errstate(divide="ignore", invalid="ignore"):
        share = part / spread[:, None]  # shares of each stratum's variance: no overflow
        nu = 1.0 / (share**2 / dof).sum(axis=1)
        direction = design.first_stage[order] / np.sqrt(spread)
    nu = np.clip(np.nan_to_num(nu, nan=1e6, posinf=1e6), 1.0, 1e6)
    norm = float(np.sqrt((direction**2).sum()))
    rng = np.random.default_rng(seed)
    t = rng.standard_t(nu, size=(draws, nu.size))
    out = (t * t).sum(axis=1)
    if norm > 0:
        out -= (t @ (direction / norm)) ** 2
    return out


def _needs_calibration(design: Design, dof: np.ndarray) -> bool:
    """The chi-squared reference is kept when the variances inside J are nearly exact:
    each term's expected excess ``2 / nu_s`` summed over strata is small against the
    statistic's standard deviation ``sqrt(2 (K - 1))``."""
    k = len(design.labels)
    nu = np.maximum(dof.min(axis=1), 1.0)
    return float((2.0 / np.maximum(nu - 2.0, 0.5)).sum()) >= 0.05 * np.sqrt(2.0 * (k - 1))


def constant_effect_test(design: Design, *, theta: float | None, scale: float | None,
                         draws: int = NULL_DRAWS, seed: int = NULL_SEED
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
    draws : int, default=NULL_DRAWS
        Draws of the simulated null distribution; 0 keeps the chi-squared reference.
    seed : int, default=NULL_SEED
        Their seed.

    Returns
    -------
    ConstantEffectTest
        ``J = min_t sum_s Delta_s(t)^2 / Var(Delta_s(t))`` with ``Delta_s(t) = ITT_s -
        t FS_s``; the calibrated p-value from the simulated null and the chi-squared one on
        K - 1 degrees of freedom. None with a reason for one stratum, an outcome without
        variation within a cell, or no within-cell variance (pairs).

    Notes
    -----
    No division by a stratum's first stage, so strata with a weak first stage enter without
    blowing up (METHODS.md §5). ``Var`` is the within-cell variance with divisor
    ``n_sz - 1`` (cluster sums when the cells carry clusters). Constant take-up in a cell
    (one-sided non-compliance, full take-up) leaves ``Var`` positive as long as the outcome
    varies. With small cells the variances inside J are noisy and the chi-squared reference
    over-rejects, so the p-value comes from J simulated under the fitted null
    (`_null_statistics`), unless every stratum's variance rests on enough degrees of
    freedom that the chi-squared reference is accurate (then ``draws`` is 0).
    """
    k = len(design.labels)
    if k < 2:
        return ConstantEffectTest(None, 0, None, None, None, 0, seed, "needs at least two strata")
    if rule(design, _flavour(design)) == "pairs":
        return ConstantEffectTest(
            None, k - 1, None, None, None, 0, seed,
            "an offer arm has one unit (or cluster) per cell: no within-cell variance")
    spread = _within_spread(design)
    if (spread[:, 0, 0] <= 0).any():
        return ConstantEffectTest(
            None, k - 1, None, None, None, 0, seed,
            "the outcome does not vary within the cells of a stratum",
        )
    effect, statistic = _minimum(design, spread, theta, scale)
    if not np.isfinite(statistic):
        return ConstantEffectTest(
            None, k - 1, None, None, None, 0, seed,
            "the outcome is an exact linear function of take-up within a stratum's cells",
        )
    asymptotic = float(chdtrc(k - 1, statistic))
    p_value, used = asymptotic, 0
    if draws and _needs_calibration(design, cell_degrees_of_freedom(design, _flavour(design))):
        simulated = _null_statistics(design, effect, draws, seed)
        p_value = float((1 + np.sum(simulated >= statistic)) / (draws + 1))
        used = draws
    return ConstantEffectTest(
        statistic=statistic,
        df=k - 1,
        p_value=p_value,
        p_value_asymptotic=asymptotic,
        fitted_common_effect=effect,
        draws=used,
        seed=seed,
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
    if rule(design, _flavour(design)) == "pairs":
        return ()  # no within-stratum variance to judge noise by
    se = np.sqrt(_within_spread(design)[:, 1, 1])
    z = ndtri(0.5 + level / 2.0)
    out = []
    for k, label in enumerate(design.labels):
        if se[k] > 0 and fs[k] / se[k] < -z:
            out.append(NegativeFirstStage(label=label, first_stage=float(fs[k]),
                                          z=float(fs[k] / se[k])))
        elif se[k] == 0 and fs[k] < 0:
            out.append(NegativeFirstStage(label=label, first_stage=float(fs[k]), z=None))
    return tuple(out)

"""Referee diagnostics on the cells: the constant-effect test and the monotonicity check
(METHODS.md §5)."""

from __future__ import annotations

from dataclasses import replace

import numpy as np
from scipy.optimize import brentq, minimize_scalar
from scipy.stats import chi2, norm

from .design import Design
from .engine import cell_degrees_of_freedom, rule, within_moments
from .results import ConstantEffectTest, NegativeFirstStage

__all__ = ["NULL_DRAWS", "NULL_SEED", "constant_effect_test", "negative_first_stages"]

GRID_QUANTILES = np.linspace(0.0, 1.0, 41)
"""Quantiles of the stratum effects added to the search grid when there are many strata."""

NULL_DRAWS = 399
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
        grid = np.concatenate([grid, candidates])
    grid.sort()
    with np.errstate(divide="ignore", invalid="ignore"):
        values = np.nan_to_num(value(grid), nan=np.inf)
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
    return t_best * unit, j_best


def _cholesky(cov: np.ndarray) -> np.ndarray:
    """Lower factor of each 2x2 positive semi-definite matrix (zero rows allowed)."""
    a, b, c = cov[..., 0, 0], cov[..., 0, 1], cov[..., 1, 1]
    l11 = np.sqrt(np.maximum(a, 0.0))
    with np.errstate(divide="ignore", invalid="ignore"):
        l21 = np.where(l11 > 0, b / np.where(l11 > 0, l11, 1.0), 0.0)
    l22 = np.sqrt(np.maximum(c - l21 * l21, 0.0))
    out = np.zeros(cov.shape)
    out[..., 0, 0], out[..., 1, 0], out[..., 1, 1] = l11, l21, l22
    return out


def _null_statistics(design: Design, effect: float, draws: int, seed: int) -> np.ndarray:
    """J drawn under the fitted null from the cell moments (METHODS.md §5).

    Each cell's mean of (y, d) is normal around ``(effect * d_bar, d_bar)`` shifted so that
    every stratum satisfies the null, with the cell's estimated covariance; each cell's
    covariance estimate is Wishart on its degrees of freedom (Bartlett decomposition), so the
    noise of the variances inside J — what makes the chi-squared reference over-reject in
    small cells — is reproduced. Vectorised over draws; the minimum over the common effect
    comes from Newton steps started at ``effect``.
    """
    rng = np.random.default_rng(seed)
    # draws go to strata in an order fixed by their data, not their labels or row order
    order = np.lexsort((np.abs(design.itt), design.first_stage, design.n[:, 1], design.n[:, 0]))
    design = _reordered(design, order)
    cell = _cell_variance(design)
    # J is the same for c*y with any c != 0: draw in units of the outcome's spread (no
    # overflow) and in one orientation (the same draws for y and -y)
    unit = float(np.sqrt(cell[..., 0, 0].sum(axis=1).max()))
    sign = -1.0 if effect < 0 else 1.0
    cell = cell / np.array([[unit * unit, sign * unit], [sign * unit, 1.0]])
    effect = abs(effect) / unit
    dof = cell_degrees_of_freedom(design, _flavour(design))
    root = _cholesky(cell)
    l11, l21, l22 = root[..., 0, 0], root[..., 1, 0], root[..., 1, 1]
    k = len(design.labels)
    fs = design.first_stage
    shape = (draws, k, 2)
    e1, e2 = rng.standard_normal(shape), rng.standard_normal(shape)
    itt = effect * fs + (l11 * e1).sum(axis=2)
    first = fs + (l21 * e1 + l22 * e2).sum(axis=2)
    # Bartlett: L [[sqrt(chi2_nu), 0], [N(0,1), sqrt(chi2_(nu-1))]], squared, over nu
    nu = np.broadcast_to(dof, shape)
    top = np.sqrt(rng.chisquare(nu))
    bottom = np.sqrt(rng.gamma(np.maximum(nu - 1.0, 0.0) / 2.0, 2.0))
    off = rng.standard_normal(shape)
    m11, m21, m22 = l11 * top, l21 * top + l22 * off, l22 * bottom
    a = (m11 * m11 / nu).sum(axis=2)
    b = (m11 * m21 / nu).sum(axis=2)
    c = ((m21 * m21 + m22 * m22) / nu).sum(axis=2)
    return _minimum_by_newton(itt, first, a, b, c, effect)


def _minimum_by_newton(itt: np.ndarray, fs: np.ndarray, a: np.ndarray, b: np.ndarray,
                       c: np.ndarray, start: float, steps: int = 8) -> np.ndarray:
    """Smallest J per draw (rows), by safeguarded Newton steps from ``start``.

    ``J(t) = sum_s g_s^2 / v_s`` with ``g = ITT - t FS`` and ``v = a - 2 t b + t^2 c``;
    ``J' = sum (2 g g' v - g^2 v') / v^2`` and ``J'' = sum (2 FS^2 v - 2 c g^2) / v^2 -
    2 v' f' / v`` per term. A step that does not lower J is halved; the result never exceeds
    J at ``start``.
    """
    tiny = np.finfo(float).tiny

    def value(t: np.ndarray) -> np.ndarray:
        g = itt - t[:, None] * fs
        v = np.maximum(a - 2.0 * t[:, None] * b + t[:, None] ** 2 * c, tiny)
        return (g * g / v).sum(axis=1)

    t = np.full(itt.shape[0], float(start))
    best = value(t)
    for _ in range(steps):
        g = itt - t[:, None] * fs
        v = np.maximum(a - 2.0 * t[:, None] * b + t[:, None] ** 2 * c, tiny)
        dv = 2.0 * (t[:, None] * c - b)
        first = (-2.0 * fs * g * v - g * g * dv) / (v * v)
        second = (2.0 * fs * fs * v - 2.0 * c * g * g) / (v * v) - 2.0 * dv * first / v
        slope, curve = first.sum(axis=1), second.sum(axis=1)
        step = np.where(curve > 0, slope / np.where(curve > 0, curve, 1.0), 0.0)
        for _ in range(3):
            trial = value(t - step)
            better = trial < best
            t = np.where(better, t - step, t)
            best = np.where(better, trial, best)
            step = np.where(better, 0.0, step / 2.0)
    return best


def _reordered(design: Design, order: np.ndarray) -> Design:
    """The design with its strata in ``order`` (only the arrays the null draws read)."""
    changed = {}
    for name in ("n", "mean_outcome", "mean_take_up", "ss", "cov", "cluster_q",
                 "cluster_within", "cluster_count", "cluster_size_sq", "cluster_size_dev"):
        value = getattr(design, name)
        if value is not None:
            changed[name] = value[order]
    return replace(design, labels=tuple(design.labels[k] for k in order), **changed)


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
    asymptotic = float(chi2.sf(statistic, k - 1))
    p_value, used = asymptotic, 0
    if draws and _needs_calibration(design, cell_degrees_of_freedom(design, _flavour(design))):
        simulated = _null_statistics(design, effect, draws, seed)
        p_value, used = float((1 + np.sum(simulated >= statistic)) / (draws + 1)), draws
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
    z = norm.ppf(0.5 + level / 2.0)
    out = []
    for k, label in enumerate(design.labels):
        if se[k] > 0 and fs[k] / se[k] < -z:
            out.append(NegativeFirstStage(label=label, first_stage=float(fs[k]),
                                          z=float(fs[k] / se[k])))
        elif se[k] == 0 and fs[k] < 0:
            out.append(NegativeFirstStage(label=label, first_stage=float(fs[k]), z=None))
    return tuple(out)

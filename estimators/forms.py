"""Each estimator as a linear form in cell means (METHODS.md §3-§4).

An estimator is ``theta = N / D`` with ``N`` and ``D`` weighted sums of per-arm cell means of
the outcome and the take-up. A `LinearForm` holds what the variance engine needs to turn the
per-cell covariances of (y, d) into ``Cov(N, D)``:

- ``kappa[s, z]``: the weight of one unit's deviation from its cell mean (signed: the
  not-offered arm enters with a minus);
- ``count_influence[s, z, :]``: the change of (N, D) per extra unit in cell (s, z) holding the
  cell means fixed (random stratum sizes and random offer counts act through it);
- ``robust_shift[s, z, :]``: the regression residual's cell mean, as a linear form in (y, d),
  which the heteroskedasticity-robust sandwich adds to the within-cell spread.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from .design import Design

__all__ = [
    "LinearForm",
    "fixed_effects_form",
    "complier_form",
    "design_weighted_form",
]


@dataclass(frozen=True, slots=True, eq=False)
class LinearForm:
    """An estimator written as N / D over cell means, ready for the variance engine."""

    numerator: float
    """N: the intention-to-treat effect under the estimator's weighting."""
    denominator: float
    """D: the first stage under the estimator's weighting."""
    kappa: np.ndarray
    """Per-unit weight of a within-cell deviation, signed, (K, 2)."""
    count_influence: np.ndarray
    """Per-unit change of (N, D) from cell counts, as used under the null, (K, 2, 2)."""
    count_influence_centred: np.ndarray
    """The same centred at the estimate, for the spread of N and D themselves, (K, 2, 2)."""
    robust_shift: np.ndarray
    """Cell mean of the regression residual as a linear form in (y, d), under the null
    (K, 2, 2)."""
    robust_shift_centred: np.ndarray
    """The same for the reduced-form and first-stage regressions themselves, (K, 2, 2)."""
    n_regressors: int
    """Regressors of the equivalent regression, every dummy included (for n / (n - k))."""
    stratum_weight: np.ndarray | None
    """Normalized stratum weights a_s / sum(a) when the form has one (None for design
    probabilities, whose arms carry different weights)."""
    stratum_contribution: np.ndarray
    """Each stratum's share of (N, D), summing to (N, D), (K, 2): the unit of the ``pairs``
    rule, under which every stratum is one independent draw."""
    stratum_contribution_centred: np.ndarray
    """The same minus the stratum's weight times (N, D), summing to zero, (K, 2)."""
    unit_weight: np.ndarray
    """Regression weight of a unit in each cell (K, 2): ones without weights, the inverse
    offer probability of its arm for the weighted estimator."""


def _stratum_vectors(design: Design) -> np.ndarray:
    return np.stack([design.itt, design.first_stage], axis=-1)


def _stratum_weight_form(
    design: Design,
    weight: np.ndarray,
    slope: np.ndarray,
    shifts: tuple[np.ndarray, np.ndarray] | None,
    n_regressors: int,
    unit_weight: np.ndarray | None = None,
) -> LinearForm:
    """Form with ``a_s = n_s h(p_s)``: ``weight`` is a_s, ``slope`` is n_s h'(p_s).

    ``shifts`` gives the (null, centred) robust shifts; None means the fixed-effects shift
    ``(1 - p_s) v_s`` offered and ``-p_s v_s`` not offered, with ``v_s = (ITT_s, FS_s)``.
    """
    total = weight.sum()
    b = weight / total
    p = design.offer_share
    n_s = design.n_stratum
    kappa = np.stack([-b / design.n[:, 0], b / design.n[:, 1]], axis=-1)
    h = b / n_s
    h_prime = slope / n_s / total
    coef = np.stack([h - p * h_prime, h + (1.0 - p) * h_prime], axis=-1)
    v = _stratum_vectors(design)
    numerator = float(b @ v[:, 0])
    denominator = float(b @ v[:, 1])
    centred = v - np.array([numerator, denominator])
    if shifts is None:
        arm_factor = np.stack([-p, 1.0 - p], axis=-1)[..., None]
        shifts = (arm_factor * v[:, None, :], arm_factor * centred[:, None, :])
    return LinearForm(
        numerator=numerator,
        denominator=denominator,
        kappa=kappa,
        count_influence=coef[..., None] * v[:, None, :],
        count_influence_centred=coef[..., None] * centred[:, None, :],
        robust_shift=shifts[0],
        robust_shift_centred=shifts[1],
        n_regressors=n_regressors,
        stratum_weight=b,
        stratum_contribution=b[:, None] * v,
        stratum_contribution_centred=b[:, None] * centred,
        unit_weight=np.ones_like(design.n) if unit_weight is None else unit_weight,
    )


def fixed_effects_form(design: Design) -> LinearForm:
    """2SLS with one dummy per stratum: ``a_s = n_s p_s (1 - p_s)``.

    Parameters
    ----------
    design : Design
        The analysis sample.

    Returns
    -------
    LinearForm
        Robust shift: the residual of the dummies regression is a within-cell deviation plus
        ``(1 - p_s) Delta_s`` (offered) or ``-p_s Delta_s`` (not offered); ``k = K + 1``.
    """
    p = design.offer_share
    n_s = design.n_stratum
    return _stratum_weight_form(
        design, n_s * p * (1.0 - p), n_s * (1.0 - 2.0 * p), None, len(design.labels) + 1
    )


def complier_form(design: Design, *, saturated: bool) -> LinearForm:
    """Complier weights ``a_s = n_s`` (IPW with estimated offer shares, or interacted).

    Parameters
    ----------
    design : Design
        The analysis sample.
    saturated : bool
        True for the interacted estimator: its regression (take-up by stratum, instrumented
        by offer by stratum, plus stratum dummies, ``k = 2K``) leaves residuals with zero
        mean in every cell, so the robust shift is zero. False for the weighted regression on
        a constant (``k = 2``), whose residual cell mean is ``e_sz - alpha``.

    Returns
    -------
    LinearForm
        The complier-weighted form; the assignment term vanishes (``h' = 0``).
    """
    n_s = design.n_stratum.astype(float)
    if saturated:
        zero = np.zeros(design.n.shape + (2,))
        shifts = (zero, zero)
        k = 2 * len(design.labels)
    else:
        means = np.stack([design.mean_outcome, design.mean_take_up], axis=-1)
        arm_mean = (n_s[:, None, None] * means).sum(axis=0) / n_s.sum()
        shifts = (means - arm_mean.mean(axis=0), means - arm_mean[None, :, :])
        k = 2
    share = design.offer_share[:, None]
    weight = None if saturated else 1.0 / np.hstack([1.0 - share, share])
    return _stratum_weight_form(design, n_s, np.zeros_like(n_s), shifts, k, weight)


def design_weighted_form(design: Design, probability: np.ndarray) -> LinearForm:
    """IPW with design offer probabilities: ratio (Hajek) means per arm.

    Parameters
    ----------
    design : Design
        The analysis sample.
    probability : numpy.ndarray
        Design offer probability per stratum of the design, (K,), in (0, 1).

    Returns
    -------
    LinearForm
        ``N = sum_s b1_s ybar_s1 - sum_s b0_s ybar_s0`` with ``b1_s = (n_s1 / pi_s) / W1`` and
        ``b0_s = (n_s0 / (1 - pi_s)) / W0``; per-unit count influence is the cell mean's
        distance from its arm's Hajek mean. Robust shift as for the constant-only weighted
        regression (``k = 2``).

    Notes
    -----
    METHODS.md §3: with known design probabilities the weights use pi_s and the weighted
    means are Hajek means per arm, still cell sums.
    """
    arm_weight = np.stack([design.n[:, 0] / (1.0 - probability), design.n[:, 1] / probability], 1)
    totals = arm_weight.sum(axis=0)
    b = arm_weight / totals
    means = np.stack([design.mean_outcome, design.mean_take_up], axis=-1)
    arm_mean = np.einsum("sz,sza->za", b, means)
    sign = np.array([-1.0, 1.0])
    kappa = sign * b / design.n
    numerator, denominator = arm_mean[1] - arm_mean[0]
    influence = (sign * (b / design.n))[..., None] * (means - arm_mean[None, :, :])
    alpha = (totals[:, None] * arm_mean).sum(axis=0) / totals.sum()
    contribution = np.einsum("sz,sza->sa", sign * b, means)
    share_of_total = b.mean(axis=1)
    return LinearForm(
        numerator=float(numerator),
        denominator=float(denominator),
        kappa=kappa,
        count_influence=influence,
        count_influence_centred=influence,
        robust_shift=means - alpha,
        robust_shift_centred=means - arm_mean[None, :, :],
        n_regressors=2,
        stratum_weight=None,
        stratum_contribution=contribution,
        stratum_contribution_centred=contribution
        - share_of_total[:, None] * np.array([numerator, denominator]),
        unit_weight=1.0 / np.stack([1.0 - probability, probability], axis=1),
    )

"""One variance engine: every variance is a quadratic form in per-cell covariances.

`covariance` returns the joint covariance of ``(N_1, D_1, N_2, D_2, ...)`` for a stack of
estimators written as `LinearForm`. The delta-method variance of ``N / D``, the Fieller /
Anderson-Rubin set, the first-stage F and the contrast between two estimators all read it
(METHODS.md §4): ``Var(N - theta D) = A - 2 theta B + theta^2 C``.
"""

from __future__ import annotations

from collections.abc import Sequence

import numpy as np

from .design import Design
from .forms import LinearForm

__all__ = [
    "VARIANCES",
    "ASSIGNMENTS",
    "SAMPLINGS",
    "covariance",
    "quadratic_form",
    "ratio_variance",
    "stratum_effect_variance",
]

VARIANCES = ("stratified", "robust", "robust_scaled", "cluster")
ASSIGNMENTS = ("block", "independent")
SAMPLINGS = ("fixed", "random")


def _within_moments(design: Design, variance: str) -> np.ndarray:
    """Per-cell matrix whose quadratic form in kappa gives the within-cell variance."""
    if variance == "stratified":
        return design.n[..., None, None] * design.cov
    if variance in ("robust", "robust_scaled"):
        return design.ss
    if design.cluster_q is None:
        raise ValueError("cluster variance needs a cell table built with a cluster column")
    g = design.n_clusters
    return design.cluster_q * (g / (g - 1.0) if g > 1 else 1.0)


def quadratic_form(
    design: Design,
    forms: Sequence[LinearForm],
    projection: np.ndarray,
    *,
    variance: str,
    assignment: str,
    sampling: str,
    centred: bool = False,
) -> np.ndarray:
    """Covariance of linear combinations of the estimators' numerators and denominators.

    Performs no error checking: `fit` validates the options.

    Parameters
    ----------
    design : Design
        The analysis sample.
    forms : sequence of LinearForm
        The estimators, m of them.
    projection : numpy.ndarray
        Shape (m, 2, q): column r is the combination ``sum_j P[j, 0, r] N_j + P[j, 1, r] D_j``.
    variance : {"stratified", "robust", "robust_scaled", "cluster"}
        Variance flavour.
    assignment : {"block", "independent"}
        Whether the offer count per stratum was fixed (block) or random (independent);
        only the stratified and cluster flavours read it.
    sampling : {"fixed", "random"}
        Whether stratum sizes were fixed by design or came from sampling units; only the
        stratified and cluster flavours read it.
    centred : bool, default=False
        Use the count influence and robust shift centred at the estimates (for the spread
        of N and D themselves) instead of the null-imposed ones (for ratios, Fieller sets
        and the first-stage F).

    Returns
    -------
    numpy.ndarray
        Shape (q, q).

    Notes
    -----
    Each unit's influence is projected onto the combinations cell by cell before squaring,
    so a contrast of two nearly equal estimators keeps its precision (no difference of large
    sums). Stratified: ``V_within + [V_between] + [V_assign]`` with divisor ``n_sz - 1``.
    Robust: the regression sandwich (divisor ``n_sz``) with the residual cell mean added;
    robust_scaled multiplies estimator j's influence by ``sqrt(n / (n - k_j))``. Cluster:
    deviations summed within clusters, scaled by ``G / (G - 1)``, plus the bracketed terms;
    clusters are sampled whole, so the between term weighs strata by the sum of squared
    cluster sizes instead of ``n_s`` (equal for clusters of one).
    """
    proj = np.asarray(projection, dtype=float)
    if variance == "robust_scaled":
        n = design.n_units
        proj = proj * np.sqrt([n / (n - f.n_regressors) for f in forms])[:, None, None]
    kappa = np.stack([f.kappa for f in forms], axis=-1)
    within = np.einsum("szj,jaq->szaq", kappa, proj)
    out = np.einsum("szaq,szab,szbr->qr", within, _within_moments(design, variance), within)
    if variance in ("robust", "robust_scaled"):
        attr = "robust_shift_centred" if centred else "robust_shift"
        shift = np.stack([getattr(f, attr) for f in forms], axis=2)
        t = np.einsum("szj,szja,jaq->szq", kappa, shift, proj)
        out += np.einsum("sz,szq,szr->qr", design.n, t, t)
        return out
    attr = "count_influence_centred" if centred else "count_influence"
    u = np.einsum("szja,jaq->szq", np.stack([getattr(f, attr) for f in forms], axis=2), proj)
    p = design.offer_share[:, None]
    n_s = design.n_stratum
    if sampling == "random":
        mean_u = p * u[:, 1] + (1.0 - p) * u[:, 0]
        draws = design.cluster_size_sq if variance == "cluster" else n_s
        out += np.einsum("s,sq,sr->qr", draws, mean_u, mean_u)
    if assignment == "independent":
        diff = u[:, 1] - u[:, 0]
        coef = n_s * design.offer_share * (1.0 - design.offer_share)
        out += np.einsum("s,sq,sr->qr", coef, diff, diff)
    return out


def covariance(
    design: Design,
    forms: Sequence[LinearForm],
    *,
    variance: str,
    assignment: str,
    sampling: str,
    centred: bool = False,
) -> np.ndarray:
    """Joint covariance of ``(N_1, D_1, N_2, D_2, ...)`` for a stack of estimators.

    Parameters
    ----------
    design : Design
        The analysis sample.
    forms : sequence of LinearForm
        The estimators, m of them.
    variance, assignment, sampling, centred
        As in `quadratic_form`.

    Returns
    -------
    numpy.ndarray
        Shape (2m, 2m); ``[[A, B], [B, C]]`` for one estimator (METHODS.md §4).
    """
    m = len(forms)
    identity = np.eye(2 * m).reshape(m, 2, 2 * m)
    return quadratic_form(design, forms, identity, variance=variance, assignment=assignment,
                          sampling=sampling, centred=centred)


def ratio_variance(omega: np.ndarray, theta: float, denominator: float) -> float:
    """Delta-method variance of ``N / D`` from the 2x2 covariance of (N, D).

    Parameters
    ----------
    omega : numpy.ndarray
        ``[[A, B], [B, C]]``.
    theta : float
        The ratio estimate.
    denominator : float
        ``D``, non-zero.

    Returns
    -------
    float
        ``(A - 2 theta B + theta^2 C) / D^2``, clipped at 0 against rounding.
    """
    a, b, c = omega[0, 0], omega[0, 1], omega[1, 1]
    return max(float(a - 2.0 * theta * b + theta * theta * c), 0.0) / denominator**2


def stratum_effect_variance(design: Design, effect: np.ndarray, *, variance: str) -> np.ndarray:
    """Variance of each stratum's Wald ratio ``ITT_s / FS_s`` in the chosen flavour.

    Parameters
    ----------
    design : Design
        The analysis sample.
    effect : numpy.ndarray
        Stratum effects (K,); entries where the first stage is zero are ignored.
    variance : str
        Flavour; robust equals the saturated regression's sandwich, robust_scaled adds its
        ``n / (n - 2K)``; the between and assignment terms do not apply within a stratum.

    Returns
    -------
    numpy.ndarray
        (K,) variances; NaN where the first stage is zero (the caller reports None).
    """
    fs = design.first_stage
    moments = _within_moments(design, variance)
    vec = np.stack([np.ones_like(effect), -effect], axis=-1)
    spread = np.einsum("sza,szab,szb->sz", np.broadcast_to(vec[:, None, :], moments.shape[:3]),
                       moments, np.broadcast_to(vec[:, None, :], moments.shape[:3]))
    per_unit = spread / design.n**2
    with np.errstate(divide="ignore", invalid="ignore"):
        out = per_unit.sum(axis=1) / fs**2
    if variance == "robust_scaled":
        n = design.n_units
        out = out * n / (n - 2 * len(design.labels))
    return np.where(fs == 0, np.nan, np.maximum(out, 0.0))

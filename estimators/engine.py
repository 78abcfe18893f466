"""One variance engine: every variance is a quadratic form in per-cell covariances.

`covariance` returns the joint covariance of ``(N_1, D_1, N_2, D_2, ...)`` for a stack of
estimators written as `LinearForm`. The delta-method variance of ``N / D``, the Fieller /
Anderson-Rubin set, the first-stage F and the contrast between two estimators all read it
(METHODS.md §4): ``Var(N - theta D) = A - 2 theta B + theta^2 C``.
"""

from __future__ import annotations

import math
from collections.abc import Sequence

import numpy as np

from .design import Design
from .forms import LinearForm

__all__ = [
    "covariance",
    "robust_scale",
    "rule",
    "quadratic_form",
    "ratio_variance",
    "stratum_quadratic",
    "within_degrees_of_freedom",
    "within_moments",
    "cell_degrees_of_freedom",
]


def rule(design: Design, variance: str) -> str:
    """``pairs`` when the flavour's within-cell variance cannot be estimated or borrowed
    (an arm without a cell of two units, or of two clusters), else ``within``."""
    if variance == "stratified":
        return design.unit_rule
    if variance == "cluster":
        return design.cluster_rule
    return "within"


def robust_scale(design: Design, n_regressors: int) -> float:
    """Small-sample scale of the robust_scaled flavour: ``n / (n - k)``, or with clusters
    ``G (n - 1) / ((G - 1) (n - k))``; NaN when ``n <= k`` (or a single cluster), which
    the callers report as no standard error."""
    n = design.n_units
    if n <= n_regressors:
        return math.nan
    if not design.clustered:
        return n / (n - n_regressors)
    g = design.n_clusters
    return math.nan if g <= 1 else g * (n - 1.0) / ((g - 1.0) * (n - n_regressors))


def within_moments(design: Design, variance: str) -> np.ndarray:
    """Per-cell matrix (K, 2, 2, 2) whose quadratic form in a unit's weight gives the
    within-cell variance: ``n_sz`` times the covariance of (y, d) for the stratified flavour,
    the scaled cluster sums for the cluster flavour, raw sums for the robust sandwiches."""
    if variance == "stratified":
        return design.n[..., None, None] * design.cov
    if variance == "cluster":
        return design.cluster_within
    return design.cluster_q if design.clustered else design.ss


def _pairs(forms: Sequence[LinearForm], proj: np.ndarray, centred: bool) -> np.ndarray:
    """Each stratum as one independent draw: ``K / (K - 1) sum_s c_s c_s'`` (METHODS.md §4)."""
    attr = "stratum_contribution_centred" if centred else "stratum_contribution"
    c = np.einsum("sja,jaq->sq", np.stack([getattr(f, attr) for f in forms], axis=1), proj)
    k = c.shape[0]
    if k < 2:
        return np.full((proj.shape[-1], proj.shape[-1]), np.nan)
    return k / (k - 1.0) * np.einsum("sq,sr->qr", c, c)


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
    with clusters, the cluster-robust sandwich (cluster totals of the scores, squared).
    robust_scaled multiplies estimator j's influence by the square root of `robust_scale`.
    Cluster: deviations summed within clusters, scaled per cell by ``G_sz / (G_sz - 1)``,
    plus the bracketed terms; clusters are sampled whole, so the between term weighs strata
    by the sum of squared cluster sizes instead of ``n_s`` (equal for clusters of one).
    Where `rule` is ``pairs``, each stratum is one independent draw (METHODS.md §4); with a
    single stratum the result is NaN.
    """
    proj = np.asarray(projection, dtype=float)
    if rule(design, variance) == "pairs":
        return _pairs(forms, proj, centred)
    if variance == "robust_scaled":
        scale = [robust_scale(design, f.n_regressors) for f in forms]
        proj = proj * np.sqrt(scale)[:, None, None]
    kappa = np.stack([f.kappa for f in forms], axis=-1)
    within = np.einsum("szj,jaq->szaq", kappa, proj)
    out = np.einsum("szaq,szab,szbr->qr", within, within_moments(design, variance), within)
    if variance in ("robust", "robust_scaled"):
        attr = "robust_shift_centred" if centred else "robust_shift"
        shift = np.stack([getattr(f, attr) for f in forms], axis=2)
        t = np.einsum("szj,szja,jaq->szq", kappa, shift, proj)
        if not design.clustered:
            return out + np.einsum("sz,szq,szr->qr", design.n, t, t)
        # cluster totals are (deviation total + size * shift): the cross term needs the
        # size-weighted deviation totals, the square the squared sizes
        cross = np.einsum("szaq,sza,szr->qr", within, design.cluster_size_dev, t)
        return out + cross + cross.T + np.einsum("sz,szq,szr->qr", design.cluster_size_sq, t, t)
    attr = "count_influence_centred" if centred else "count_influence"
    u = np.einsum("szja,jaq->szq", np.stack([getattr(f, attr) for f in forms], axis=2), proj)
    p = design.offer_share[:, None]
    n_s = design.n_stratum
    if sampling == "random":
        mean_u = p * u[:, 1] + (1.0 - p) * u[:, 0]
        draws = design.cluster_size_sq.sum(axis=1) if variance == "cluster" else n_s
        out += np.einsum("s,sq,sr->qr", draws, mean_u, mean_u)
    if assignment == "independent":
        diff = u[:, 1] - u[:, 0]
        coef = n_s * design.offer_share * (1.0 - design.offer_share)
        out += np.einsum("s,sq,sr->qr", coef, diff, diff)
    return out


def within_degrees_of_freedom(
    design: Design, forms: Sequence[LinearForm], projection: np.ndarray, *, variance: str,
    total: float,
) -> float | None:
    """Welch-Satterthwaite degrees of freedom of one combination's variance.

    Parameters
    ----------
    design : Design
        The analysis sample.
    forms : sequence of LinearForm
        The estimators.
    projection : numpy.ndarray
        Shape (m, 2, 1): one combination, as in `quadratic_form`.
    variance : str
        Flavour.
    total : float
        The combination's whole variance from `quadratic_form`.

    Returns
    -------
    float or None
        ``total^2 / sum_sz v_sz^2 / nu_sz``: ``v_sz`` each cell's within-cell part,
        estimated on ``nu_sz = n_sz - 1`` degrees of freedom (clusters: ``G_sz - 1``; a
        borrowing cell: its arm's pooled degrees of freedom). The between, assignment or
        residual-mean part adds to ``total`` but counts as known: giving it ``K - 1``
        degrees of freedom over-covered (97.6 % under independent assignment).
        ``K - 1`` under the pairs rule; None (a normal reference) when the variance is not
        positive or has (almost) no within-cell part.

    Notes
    -----
    Satterthwaite (1946): a sum of independent variance estimates with known degrees of
    freedom is approximately a scaled chi-squared; a t reference on these degrees of
    freedom keeps intervals honest when a few small cells dominate the variance.
    """
    k = len(design.labels)
    if not math.isfinite(total) or total <= 0.0:
        return None
    if rule(design, variance) == "pairs":
        return float(k - 1) if k > 1 else None
    proj = np.asarray(projection, dtype=float)
    if variance == "robust_scaled":
        proj = proj * np.sqrt([robust_scale(design, f.n_regressors) for f in forms])[:, None, None]
    kappa = np.stack([f.kappa for f in forms], axis=-1)
    within = np.einsum("szj,ja->sza", kappa, proj[..., 0])
    part = np.einsum("sza,szab,szb->sz", within, within_moments(design, variance), within)
    dof = cell_degrees_of_freedom(design, variance)
    share = part / total  # in shares of the total, so no square can overflow
    denominator = float((share**2 / dof).sum())
    # a variance (almost) free of within-cell parts rests on no small cell: normal reference
    return 1.0 / denominator if denominator > 1e-12 else None


def cell_degrees_of_freedom(design: Design, variance: str) -> np.ndarray:
    """Degrees of freedom of each cell's variance estimate, (K, 2).

    ``n_sz - 1``, or ``G_sz - 1`` with clusters; a cell of one unit (or cluster) that borrows
    its arm's pooled variance gets the pooled degrees of freedom of that arm.
    """
    count = design.cluster_count if design.clustered and variance != "stratified" else design.n
    dof = count - 1.0
    for arm in (0, 1):
        donors = dof[:, arm] >= 1.0
        dof[~donors, arm] = dof[donors, arm].sum() if donors.any() else 1.0
    return dof


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


def stratum_quadratic(design: Design, vector: np.ndarray, *, variance: str) -> np.ndarray:
    """Variance of ``vector_s . (ITT_s, FS_s)`` within each stratum, in the chosen flavour.

    Parameters
    ----------
    design : Design
        The analysis sample.
    vector : numpy.ndarray
        (K, 2) coefficients on (ITT_s, FS_s), e.g. ``(1, -beta_s)`` for a stratum effect's
        numerator or ``(0, 1)`` for the first stage.
    variance : str
        Flavour. Robust equals the saturated regression's sandwich (residuals have zero mean
        in every cell), clustered when the design has clusters; robust_scaled adds its scale
        with ``k = 2K``; the between and assignment terms do not apply within a stratum.

    Returns
    -------
    numpy.ndarray
        (K,) variances; NaN under the ``pairs`` rule or where the variance is zero (no
        within-stratum variance exists).
    """
    if rule(design, variance) == "pairs":
        return np.full(len(design.labels), np.nan)
    moments = within_moments(design, variance)
    vec = np.broadcast_to(np.asarray(vector, dtype=float)[:, None, :], moments.shape[:3])
    spread = np.einsum("sza,szab,szb->sz", vec, moments, vec)
    out = (spread / design.n**2).sum(axis=1)
    if variance == "robust_scaled":
        out = out * robust_scale(design, 2 * len(design.labels))
    # zero: the stratum's regression fits its cells exactly (a cell of one unit in each
    # arm under the robust sandwich, or no spread at all): no variance, never a zero one
    return np.where(out > 0.0, out, np.nan)


def stratum_effect_variance(design: Design, effect: np.ndarray, *, variance: str) -> np.ndarray:
    """Variance of each stratum's Wald ratio ``ITT_s / FS_s`` in the chosen flavour.

    Parameters
    ----------
    design : Design
        The analysis sample.
    effect : numpy.ndarray
        Stratum effects (K,); entries where the first stage is zero are ignored.
    variance : str
        Flavour, as in `stratum_quadratic`.

    Returns
    -------
    numpy.ndarray
        (K,) variances; NaN where the first stage is zero or no within variance exists (the
        caller reports None).
    """
    fs = design.first_stage
    vec = np.stack([np.ones_like(effect), -effect], axis=-1)
    with np.errstate(divide="ignore", invalid="ignore"):
        out = stratum_quadratic(design, vec, variance=variance) / fs**2
    return np.where(fs == 0, np.nan, out)

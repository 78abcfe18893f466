"""First-stage strength: the F statistics a referee computes (METHODS.md §4).

Each estimator's first stage is a regression of take-up on its excluded instruments and its
included regressors: fixed effects, ``D`` on ``Z`` and one dummy per stratum; weighted, ``D``
on ``(1, Z)`` with inverse-probability weights; interacted, ``D`` on ``Z x stratum`` and the
stratum dummies (``K`` instruments). All of it is arithmetic on the cell table.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from .design import Design
from .engine import covariance, stratum_quadratic
from .forms import LinearForm

__all__ = ["FirstStageStatistics", "first_stage_statistics"]


@dataclass(frozen=True, slots=True)
class FirstStageStatistics:
    """The first-stage F in the run's flavour, its textbook form, and the instrument count."""

    f: float | None
    """Wald statistic of the excluded instruments over their number, run's flavour."""
    f_unadjusted: float | None
    """Homoskedastic F with residual variance ``RSS / (n - k)``."""
    instruments: int
    """Number of excluded instruments q."""
    f_reason: str | None = None
    """Why `f` is None, in words; None when `f` is a number."""


def _ratio(numerator: float, variance: float) -> float | None:
    if not math.isfinite(variance) or variance <= 0.0:
        return None
    return numerator / variance


def _unadjusted_fixed_effects(design: Design, form: LinearForm) -> float | None:
    p = design.offer_share
    h = design.n_stratum * p * (1.0 - p)
    rss = design.ss[..., 1, 1].sum() + float(h @ (design.first_stage - form.denominator) ** 2)
    dof = design.n_units - len(design.labels) - 1
    if dof <= 0:
        return None
    return _ratio(form.denominator**2, rss / dof / h.sum())


def _unadjusted_weighted(design: Design, form: LinearForm) -> float | None:
    w = form.unit_weight
    arm_total = (design.n * w).sum(axis=0)
    arm_mean = (design.n * w * design.mean_take_up).sum(axis=0) / arm_total
    spread = design.ss[..., 1, 1] + design.n * (design.mean_take_up - arm_mean) ** 2
    rss = float((w * spread).sum())
    dof = design.n_units - 2
    if dof <= 0:
        return None
    return _ratio(form.denominator**2, rss / dof * (1.0 / arm_total).sum())


def _unadjusted_interacted(design: Design) -> float | None:
    k = len(design.labels)
    dof = design.n_units - 2 * k
    if dof <= 0:
        return None
    s2 = design.ss[..., 1, 1].sum() / dof
    var = s2 * (1.0 / design.n).sum(axis=1)
    if s2 <= 0.0:
        return None
    return float((design.first_stage**2 / var).sum() / k)


def first_stage_statistics(
    design: Design,
    form: LinearForm,
    estimator: str,
    *,
    variance: str,
    assignment: str,
    sampling: str,
) -> FirstStageStatistics:
    """First-stage F statistics of one estimator.

    Parameters
    ----------
    design : Design
        The analysis sample.
    form : LinearForm
        The estimator's form (its denominator is the first-stage coefficient).
    estimator : {"fixed_effects", "weighted", "interacted"}
        Which first-stage regression.
    variance, assignment, sampling : str
        The run's flavour, as in `fit`.

    Returns
    -------
    FirstStageStatistics
        ``f``: the Wald statistic of the excluded instruments divided by their number, with
        the unrestricted variance of the run's flavour — for one instrument
        ``(D / se(D))^2``, for the interacted estimator
        ``(1/K) sum_s FS_s^2 / Var(FS_s)`` (the saturated first stage is block-diagonal by
        stratum). ``f_unadjusted``: the same with the homoskedastic variance
        ``RSS / (n - k) (X'WX)^-1``. None where a variance is zero or undefined.

    Notes
    -----
    METHODS.md §4. For the robust flavours these equal a regression library's first-stage
    diagnostics of the same regression (HC0, ``n / (n - k)`` scale, cluster-robust); for the
    stratified and cluster flavours they use the design-based variance of the first stage.
    """
    if estimator == "interacted":
        var = stratum_quadratic(design, np.tile([0.0, 1.0], (len(design.labels), 1)),
                                variance=variance)
        f, reason = None, None
        if np.isfinite(var).all() and (var > 0).all():
            f = float((design.first_stage**2 / var).sum() / len(design.labels))
        else:
            flat = [str(label) for label, v in zip(design.labels, var.tolist(), strict=True)
                    if not (np.isfinite(v) and v > 0)]
            shown = ", ".join(flat[:5]) + (f" and {len(flat) - 5} more" if len(flat) > 5 else "")
            which = f"stratum {shown} has" if len(flat) == 1 else f"strata {shown} have"
            reason = (f"the first stage of {which} no estimated variance in this "
                      "flavour (take-up constant within each offer arm), so the joint F over "
                      "strata is undefined; the unadjusted F pools the variance")
        return FirstStageStatistics(f, _unadjusted_interacted(design), len(design.labels),
                                    reason)
    spread = covariance(design, [form], variance=variance, assignment=assignment,
                        sampling=sampling, centred=True)
    f = _ratio(form.denominator**2, float(spread[1, 1]))
    reason = None if f is not None else \
        "the first stage has no estimated variance in this flavour"
    if estimator == "fixed_effects":
        unadjusted = _unadjusted_fixed_effects(design, form)
    else:
        unadjusted = _unadjusted_weighted(design, form)
    return FirstStageStatistics(f, unadjusted, 1, reason)

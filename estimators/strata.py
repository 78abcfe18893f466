"""Per-stratum table, the fixed-effects versus complier-weighted contrast, and the
stratum-size-weighted average (METHODS.md §1, §3, §5)."""

from __future__ import annotations

import math

import numpy as np
from scipy.special import stdtr, stdtrit

from .design import Design
from .engine import (
    quadratic_form,
    rule,
    stratum_effect_variance,
    stratum_quadratic,
    within_degrees_of_freedom,
)
from .forms import LinearForm
from .results import Gap, SizeWeighted, StratumRow, StratumTable

__all__ = ["stratum_effects", "stratum_table", "contrast", "size_weighted"]


def stratum_effects(design: Design) -> np.ndarray:
    """Per-stratum Wald ratios ``ITT_s / FS_s``; NaN where the first stage is zero."""
    fs = design.first_stage
    with np.errstate(divide="ignore", invalid="ignore"):
        return np.where(fs == 0, np.nan, design.itt / np.where(fs == 0, 1.0, fs))


def _shares(form: LinearForm, design: Design) -> np.ndarray:
    """Each stratum's share of the form's (N, D), (K, 2), summing to (N, D).

    For a form that weights strata (``b_s`` on both arms) this is ``b_s (ITT_s, FS_s)``.
    With design probabilities the arms carry different weights ``b_s1 != b_s0``, and a
    stratum's share ``b_s1 m_s1 - b_s0 m_s0`` would move with the outcome's level; measuring
    each cell mean from the pooled mean (``sum_s (b_s1 - b_s0) = 0``, so the total is kept)
    makes the shares follow the outcome's units only.
    """
    net = (form.kappa * design.n).sum(axis=1)  # b_s1 - b_s0; zero when a form weights strata
    n = design.n
    pooled = np.array([(n * design.mean_outcome).sum(), (n * design.mean_take_up).sum()])
    return form.stratum_contribution - net[:, None] * (pooled / n.sum())[None, :]


def _implied(form: LinearForm, design: Design) -> np.ndarray:
    """Each stratum's share of the form's first stage, ``c_D,s / D``: the implied weight
    ``a_s FS_s / sum_t a_t FS_t`` on its effect when the form weights strata (with design
    probabilities, its share of the complier count; see `_shares`)."""
    if form.denominator == 0:
        return np.full(len(design.labels), np.nan)
    return _shares(form, design)[:, 1] / form.denominator


def _float(value: float) -> float | None:
    return float(value) if math.isfinite(value) else None


def stratum_table(
    design: Design, fe: LinearForm, late: LinearForm, *, variance: str
) -> StratumTable:
    """The per-stratum table with effects, standard errors and implied weights.

    Parameters
    ----------
    design : Design
        The analysis sample.
    fe, late : LinearForm
        The fixed-effects form and the complier-weighted form the gap reports (weighted
        with design probabilities when given, else interacted), so that the contributions
        add up to the reported gap.
    variance : str
        Flavour for the stratum effects' standard errors.

    Returns
    -------
    StratumTable
        Rows in label order; ``gap_contribution`` sums to fixed effects minus
        complier-weighted: each stratum's share of each numerator over its denominator,
        ``c_N,s^FE / D^FE - c_N,s / D``, which is ``(w_s^FE - w_s^LATE) beta_s =
        ITT_s (b_s^FE / D^FE - b_s / D)`` for forms that weight strata.
    """
    effect = stratum_effects(design)
    eff_var = stratum_effect_variance(design, np.nan_to_num(effect), variance=variance)
    no_spread = rule(design, variance) == "pairs"
    w_fe, w_late = _implied(fe, design), _implied(late, design)
    with np.errstate(divide="ignore", invalid="ignore"):
        gap = (_shares(fe, design)[:, 0] / fe.denominator
               - _shares(late, design)[:, 0] / late.denominator)
    n, share = design.n.tolist(), design.offer_share.tolist()
    mean_y, mean_d = design.mean_outcome.tolist(), design.mean_take_up.tolist()
    itt, fs = design.itt.tolist(), design.first_stage.tolist()
    effect_l, var_l = effect.tolist(), eff_var.tolist()
    w_fe_l, w_late_l, gap_l = w_fe.tolist(), w_late.tolist(), gap.tolist()
    rows = []
    for k, label in enumerate(design.labels):
        undefined = not math.isfinite(effect_l[k])
        if undefined:
            why = "first stage is zero in this stratum"
        elif no_spread:
            why = "no within-stratum variance: an arm has one unit (or cluster) per cell"
        else:
            why = None
        se = None if undefined or not math.isfinite(var_l[k]) else math.sqrt(var_l[k])
        if se is None and why is None:
            why = "no within-stratum variance in this flavour (the stratum's cells are fitted "\
                "exactly)"
        rows.append(
            StratumRow(
                label=label,
                n=int(n[k][0] + n[k][1]),
                n_offered=int(n[k][1]),
                n_not_offered=int(n[k][0]),
                offer_share=share[k],
                mean_outcome_offered=mean_y[k][1],
                mean_outcome_not_offered=mean_y[k][0],
                take_up_offered=mean_d[k][1],
                take_up_not_offered=mean_d[k][0],
                itt=itt[k],
                first_stage=fs[k],
                effect=None if undefined else effect_l[k],
                effect_std_error=se,
                effect_reason=why,
                weight_fixed_effects=_float(w_fe_l[k]),
                weight_complier=_float(w_late_l[k]),
                always_takers=mean_d[k][0],
                never_takers=1.0 - mean_d[k][1],
                compliers=fs[k],
                gap_contribution=_float(gap_l[k]),
            )
        )
    return StratumTable(
        rows=tuple(rows),
        excluded=design.exclusions,
        single_unit_cells=design.single_unit_cells,
    )


def contrast(
    design: Design,
    fe: LinearForm,
    late: LinearForm,
    complier_estimator: str,
    *,
    variance: str,
    assignment: str,
    sampling: str,
    level: float,
) -> Gap:
    """Fixed effects minus the reported complier-weighted estimate, with its t interval.

    Parameters
    ----------
    design : Design
        The analysis sample.
    fe, late : LinearForm
        The fixed-effects form and the complier-weighted form that is reported.
    complier_estimator : str
        Name of the complier-weighted estimator (``weighted`` or ``interacted``).
    variance, assignment, sampling : str
        Flavour, as in `fit`.
    level : float
        Confidence level.

    Returns
    -------
    Gap
        Undefined (None with a reason) when either first stage is zero; without a standard
        error when the two estimators' implied weights coincide.

    Notes
    -----
    The difference is linear in the four quantities (N_FE, D_FE, N, D) to first order; its
    variance is the engine's quadratic form for that one combination, projected cell by cell
    so nearly equal estimators lose no precision. The interval uses Student's t on the
    Welch-Satterthwaite degrees of freedom of that variance (`within_degrees_of_freedom`):
    strata with few offered or few not-offered units carry most of the difference's noise,
    and their variances rest on few degrees of freedom, so a normal reference under-covers.
    """
    base = {"complier_estimator": complier_estimator, "fixed_effects_estimate": None,
            "complier_estimate": None}
    if fe.denominator == 0 or late.denominator == 0:
        return Gap(estimate=None, std_error=None, interval=None, t=None, df=None,
                   p_value=None, reason="an overall first stage is zero", **base)
    t_fe = fe.numerator / fe.denominator
    t_late = late.numerator / late.denominator
    estimate = t_fe - t_late
    base.update(fixed_effects_estimate=t_fe, complier_estimate=t_late)
    same = late.stratum_weight is not None and np.allclose(
        _implied(fe, design), _implied(late, design), rtol=0.0, atol=1e-12)
    if same:
        return Gap(estimate=estimate, std_error=None, interval=None, t=None, df=None,
                   p_value=None, reason="fixed-effects and complier weights coincide (equal "
                   "offer shares or one stratum): the two estimators are the same", **base)
    projection = (np.array([[1.0, -t_fe], [-1.0, t_late]])
                  / np.array([[fe.denominator], [late.denominator]]))[..., None]
    options = {"variance": variance, "assignment": assignment, "sampling": sampling}
    var = float(quadratic_form(design, [fe, late], projection, **options)[0, 0])
    if not math.isfinite(var) or var <= 0.0:
        return Gap(estimate=estimate, std_error=None, interval=None, t=None, df=None,
                   p_value=None, reason="the difference has no estimated sampling variance "
                   "in this flavour", **base)
    se = math.sqrt(var)
    df = within_degrees_of_freedom(design, [fe, late], projection, variance=variance,
                                   total=var)
    nu = np.inf if df is None else df
    half = float(stdtrit(nu, 0.5 + level / 2.0)) * se
    return Gap(
        estimate=estimate,
        std_error=se,
        interval=(estimate - half, estimate + half),
        t=estimate / se,
        df=df,
        p_value=float(2.0 * stdtr(nu, -abs(estimate / se))),
        reason=None,
        **base,
    )


def size_weighted(design: Design, *, variance: str, sampling: str) -> SizeWeighted:
    """The stratum-size-weighted average ``sum_s q_s beta_s`` with ``q_s = n_s / N``.

    Parameters
    ----------
    design : Design
        The analysis sample.
    variance, sampling : str
        Flavour of the stratum effects' variances; random sampling adds the spread of the
        stratum effects around the average.

    Returns
    -------
    SizeWeighted
        None with a reason when a stratum's first stage is zero; ``fragile`` when one is
        within two standard errors of zero (METHODS.md §1: it needs every ``pi_s > 0``).
    """
    fs = design.first_stage
    if (fs == 0).any():
        return SizeWeighted(
            estimate=None,
            std_error=None,
            fragile=True,
            reason="a stratum has a zero first stage, so its effect is undefined",
        )
    effect = stratum_effects(design)
    q = design.n_stratum / design.n_units
    estimate = float(q @ effect)
    eff_var = stratum_effect_variance(design, effect, variance=variance)
    if not np.isfinite(eff_var).all():
        return SizeWeighted(estimate=float(q @ effect), std_error=None, fragile=True,
                            reason="stratum effects have no within-stratum variance here")
    var = float(q**2 @ eff_var)
    if sampling == "random":
        var += float(q @ (effect - estimate) ** 2) / design.n_units
    unit = np.tile([0.0, 1.0], (len(design.labels), 1))
    fs_se = np.sqrt(stratum_quadratic(design, unit, variance=variance))
    weak = np.abs(fs) < 2.0 * fs_se
    reason = None
    if weak.any():
        reason = f"{int(weak.sum())} stratum first stage(s) within two standard errors of zero"
    return SizeWeighted(
        estimate=estimate, std_error=math.sqrt(max(var, 0.0)), fragile=bool(weak.any()),
        reason=reason,
    )

"""The report's figures, drawn with matplotlib from one outcome's rebuilt results.

`weight_figure` shows why fixed effects and the complier-weighted estimators differ: each
stratum's effect with its interval, and two markers whose areas are the stratum's implied
weight under fixed effects and under complier weights, strata ordered by offer share, with
both pooled estimates as vertical lines. `first_stage_figure` shows the first stage and the
ITT of every stratum. Both come back as SVG text (text kept as text, reproducible ids) or PNG
bytes.
"""

from __future__ import annotations

import io
from typing import Any

from .results_read import OutcomeReport

__all__ = ["COLOURS", "MAX_STRATA", "first_stage_figure", "shown_rows", "weight_figure"]

COLOURS = {"fixed_effects": "#c8553d", "complier": "#2a6f97", "interval": "#8d99ae",
           "ink": "#22313f", "grid": "#e4e8ee"}
"""The report's palette: fixed effects, complier weights, intervals, text, grid."""
MAX_STRATA = 40
"""Strata drawn at most (those with the largest weight under either estimator)."""


def shown_rows(report: OutcomeReport) -> list[Any]:
    """The strata drawn, ordered by offer share: all, or the `MAX_STRATA` with the largest
    weight under either estimator."""
    rows = list(report.comparison.strata.rows)
    if len(rows) > MAX_STRATA:
        rows = sorted(rows, key=lambda r: -max(abs(r.weight_fixed_effects),
                                               abs(r.weight_complier)))[:MAX_STRATA]
    return sorted(rows, key=lambda r: (r.offer_share, str(r.label)))


def _pyplot() -> Any:
    import matplotlib

    matplotlib.use("Agg")
    import matplotlib.pyplot as plt

    plt.rcParams.update({"svg.fonttype": "none", "svg.hashsalt": "strativ",
                         "font.family": "DejaVu Sans", "font.size": 9,
                         "axes.edgecolor": COLOURS["ink"], "axes.labelcolor": COLOURS["ink"],
                         "xtick.color": COLOURS["ink"], "ytick.color": COLOURS["ink"]})
    return plt


def _finish(figure: Any, kind: str) -> str | bytes:
    plt = _pyplot()
    buffer = io.BytesIO()
    if kind == "svg":
        figure.savefig(buffer, format="svg", metadata={"Date": None}, bbox_inches="tight")
    else:
        figure.savefig(buffer, format="png", dpi=110, metadata={"Software": None},
                       bbox_inches="tight")
    plt.close(figure)
    data = buffer.getvalue()
    if kind != "svg":
        return data
    text = data.decode("utf-8")
    return text[text.index("<svg"):]  # inline: no XML prolog or doctype


def _frame(axes: Any, rows: list[Any]) -> None:
    """The house style of side-by-side panels: a light vertical grid behind, no top or right
    frame, one stratum per row labelled with its offer share on the left."""
    for axis in axes:
        axis.grid(axis="x", color=COLOURS["grid"], linewidth=0.8)
        axis.set_axisbelow(True)
        for side in ("top", "right"):
            axis.spines[side].set_visible(False)
    axes[0].set_yticks(range(len(rows)),
                       [f"{r.label}  ({100 * r.offer_share:.0f}% offered)" for r in rows])
    axes[0].set_ylim(-0.7, len(rows) - 0.3)


def weight_figure(report: OutcomeReport, kind: str = "svg") -> str | bytes:
    """Stratum effects with intervals, marker areas showing each estimator's weight.

    Parameters
    ----------
    report : OutcomeReport
        One outcome's rebuilt results.
    kind : {"svg", "png"}
        Output format.

    Returns
    -------
    str or bytes
        SVG text (from the ``<svg`` tag on) or PNG bytes.
    """
    from scipy.stats import norm

    plt = _pyplot()
    rows = shown_rows(report)
    estimates = {e.estimator: e for e in report.comparison.estimates}
    level = next(iter(estimates.values())).level if estimates else 0.95
    z = float(norm.ppf(0.5 + level / 2))
    figure, axes = plt.subplots(1, 2, figsize=(8.4, 1.3 + 0.3 * max(len(rows), 2)),
                                sharey=True, sharex=True)
    top = max([abs(r.weight_fixed_effects) for r in rows]
              + [abs(r.weight_complier) for r in rows] + [1e-12])
    complier = report.comparison.gap.complier_estimator if report.comparison.gap else (
        "interacted" if "interacted" in estimates else "weighted")
    panels = ((axes[0], "fixed_effects", "fixed_effects", "fixed-effects weight"),
              (axes[1], complier, "complier", "complier weight"))
    for axis, name, colour, title in panels:
        for y, row in enumerate(rows):
            if row.effect is None:
                continue
            if row.effect_std_error is not None:
                axis.plot([row.effect - z * row.effect_std_error,
                           row.effect + z * row.effect_std_error], [y, y],
                          color=COLOURS["interval"], linewidth=1.3, zorder=1)
            weight = row.weight_fixed_effects if colour == "fixed_effects" \
                else row.weight_complier
            axis.scatter([row.effect], [y], s=[12 + 420 * abs(weight) / top],
                         color=COLOURS[colour], edgecolors="white",
                         linewidths=0.6, zorder=2)
        e = estimates.get(name)
        value = "" if e is None or e.estimate is None else f"{e.estimate:.4g}"
        if value:
            axis.axvline(e.estimate, color=COLOURS[colour], linewidth=1.2, linestyle="--",
                         zorder=0)
        axis.set_title(f"marker area: {title}\n(dashed: estimate {value.replace('-', '−')})"
                       if value else f"marker area: {title}", fontsize=9,
                       color=COLOURS[colour])
        axis.set_xlabel(f"effect on {report.outcome}, {level:.0%} interval")
    _frame(axes, rows)
    return _finish(figure, kind)


def first_stage_figure(report: OutcomeReport, kind: str = "svg") -> str | bytes:
    """First stage and ITT of each stratum, strata ordered by offer share.

    Parameters
    ----------
    report : OutcomeReport
        One outcome's rebuilt results.
    kind : {"svg", "png"}
        Output format.

    Returns
    -------
    str or bytes
        SVG text or PNG bytes.
    """
    plt = _pyplot()
    rows = shown_rows(report)
    figure, axes = plt.subplots(1, 2, figsize=(7.2, 1.2 + 0.28 * max(len(rows), 2)),
                                sharey=True)
    for axis, values, title, colour in (
            (axes[0], [r.first_stage for r in rows], "first stage (take-up gap)", "complier"),
            (axes[1], [r.itt for r in rows], f"ITT on {report.outcome}", "fixed_effects")):
        axis.hlines(range(len(rows)), 0, values, color=COLOURS["interval"], linewidth=1.2)
        axis.scatter(values, range(len(rows)), s=28, color=COLOURS[colour], zorder=2)
        axis.axvline(0, color=COLOURS["ink"], linewidth=0.8)
        axis.set_title(title, fontsize=9, color=COLOURS["ink"])
    _frame(axes, rows)
    return _finish(figure, kind)

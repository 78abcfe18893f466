"""The option vocabulary: every estimator, variance flavour, assignment and sampling value,
with its default and a one-line description, declared once.

The spec parser, the results schema and the starter template import these names; nothing
else spells an option.
"""

from __future__ import annotations

__all__ = [
    "ASSIGNMENTS",
    "DEFAULTS",
    "DESCRIPTIONS",
    "ESTIMATORS",
    "SAMPLINGS",
    "USES_ASSIGNMENT",
    "USES_SAMPLING",
    "VARIANCES",
    "WEAK_FIRST_STAGE_F",
]

ESTIMATORS: tuple[str, ...] = ("fixed_effects", "weighted", "interacted")
"""Estimators, in the order they are reported."""

VARIANCES: tuple[str, ...] = ("stratified", "robust", "robust_scaled", "cluster")
"""Variance flavours."""

ASSIGNMENTS: tuple[str, ...] = ("block", "independent")
"""How offers were drawn within a stratum."""

SAMPLINGS: tuple[str, ...] = ("fixed", "random")
"""Whether stratum sizes were fixed by design or came from sampling units."""

USES_ASSIGNMENT: tuple[str, ...] = ("stratified", "cluster")
"""Flavours whose variance reads `assignment` (the robust sandwiches do not)."""

USES_SAMPLING: tuple[str, ...] = ("stratified", "cluster")
"""Flavours whose variance reads `sampling` (the robust sandwiches do not)."""

WEAK_FIRST_STAGE_F = 10.0
"""Rule-of-thumb first-stage F below which a first stage is called weak
(Staiger & Stock 1997)."""

DEFAULTS: dict[str, object] = {
    "estimators": ESTIMATORS,
    "variance": "stratified",
    "assignment": "block",
    "sampling": "random",
    "level": 0.95,
}
"""Default of every option."""

DESCRIPTIONS: dict[str, dict[str, str]] = {
    "estimators": {
        "fixed_effects": "2SLS with one dummy per stratum; weights strata by n*p(1-p)*first "
        "stage, so it is the LATE only when effects or offer shares are equal across strata",
        "weighted": "inverse-probability weighted 2SLS; complier weights (the LATE)",
        "interacted": "stratum effects from the stratum-interacted 2SLS, combined with "
        "complier weights (the LATE)",
    },
    "variance": {
        "stratified": "design-based, allows effects to differ across strata; reads "
        "assignment and sampling",
        "robust": "heteroskedasticity-robust sandwich of the regression (cluster-robust "
        "when a cluster column is named), no small-sample scale",
        "robust_scaled": "the robust sandwich with the n/(n-k) scale (clusters: "
        "G(n-1)/((G-1)(n-k))); safer than robust in small strata",
        "cluster": "the stratified form with deviations summed within clusters and a "
        "per-cell G/(G-1) scale; needs a cluster column",
    },
    "assignment": {
        "block": "a fixed number of units was offered in each stratum",
        "independent": "each unit was offered independently (the offered count is random)",
    },
    "sampling": {
        "fixed": "stratum sizes were fixed by design",
        "random": "units were sampled from a population, so stratum sizes are random "
        "(conservative when sizes were fixed)",
    },
}
"""One line per option value, for help texts, the schema and the starter spec."""

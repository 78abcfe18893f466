"""Families of p-values across a run's outcomes: for each estimator (unadjusted, and with
covariates when fitted), the p-values of a zero effect on every outcome, adjusted by
`strativ.estimators.multiple.adjust_p_values`."""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from typing import TYPE_CHECKING, Any

from strativ.estimators.multiple import AdjustedPValues, adjust_p_values

if TYPE_CHECKING:
    from .runner import OutcomeResult

__all__ = ["OutcomeFamily", "outcome_families"]


@dataclass(frozen=True, slots=True)
class OutcomeFamily:
    """One estimator's p-values across the outcomes, as given and adjusted."""

    estimator: str
    """Estimator name."""
    with_covariates: bool
    """Whether the estimates are the covariate-adjusted ones."""
    outcomes: tuple[str, ...]
    """Outcomes, in spec order."""
    p_values: AdjustedPValues
    """p-values of a zero effect, unadjusted, Holm and Benjamini-Hochberg."""

    def to_dict(self) -> dict[str, Any]:
        """Return the JSON form."""
        return {"estimator": self.estimator, "with_covariates": self.with_covariates,
                "outcomes": list(self.outcomes), **self.p_values.to_dict()}

    @classmethod
    def from_dict(cls, data: Mapping[str, Any]) -> OutcomeFamily:
        """Rebuild the family from its JSON form (`to_dict`)."""
        return cls(data["estimator"], bool(data["with_covariates"]), tuple(data["outcomes"]),
                   AdjustedPValues.from_dict(data))


def outcome_families(results: Sequence[OutcomeResult]) -> tuple[OutcomeFamily, ...]:
    """The families of a run with two or more outcomes; () with one."""
    if len(results) < 2:
        return ()
    outcomes = tuple(r.outcome for r in results)
    out = []
    for k, estimate in enumerate(results[0].comparison.estimates):
        p = [r.comparison.estimates[k].p_value for r in results]
        out.append(OutcomeFamily(estimate.estimator, False, outcomes, adjust_p_values(p)))
    if all(r.adjusted for r in results):
        for k, adjusted in enumerate(results[0].adjusted):
            p = [r.adjusted[k].fit.p_value for r in results]
            out.append(OutcomeFamily(adjusted.estimator, True, outcomes, adjust_p_values(p)))
    return tuple(out)

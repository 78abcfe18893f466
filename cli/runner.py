"""Turn a spec and its data into estimator calls: one cell table and one comparison per outcome.

The numbers all come from `strativ.estimators` (`build_cells`, `fit_all`); this module only
selects rows, counts what was dropped, resolves the design offer probabilities, and turns the
core's typed errors into data errors that name the column.
"""

from __future__ import annotations

import warnings
from collections.abc import Iterator
from contextlib import contextmanager
from dataclasses import dataclass
from typing import Any

import numpy as np

from strativ.estimators import (
    CellTable,
    Comparison,
    EstimatorError,
    build_cells,
    excluded_strata,
    fit_all,
)

from .cautions import data_warnings, fit_warnings, offer_count_warnings, variance_used
from .core_errors import located_error
from .errors import DataError
from .loading import Dataset
from .spec import Spec, suggest

__all__ = [
    "AttritionCell",
    "OutcomeResult",
    "Run",
    "StratumDesign",
    "DesignSummary",
    "check_with_core",
    "data_warnings",
    "design_probabilities",
    "summarize_design",
    "run_spec",
]


@dataclass(frozen=True, slots=True)
class AttritionCell:
    """Rows of one (stratum, offer arm) whose outcome is missing."""

    outcome: str
    """Outcome column."""
    stratum: Any
    """Stratum label."""
    arm: str
    """``"offered"`` or ``"not_offered"``."""
    missing: int
    """Rows without this outcome (dropped for it)."""
    rows: int
    """Rows in the cell before dropping."""

    def to_dict(self) -> dict[str, Any]:
        """Return the JSON form."""
        return {"outcome": self.outcome, "stratum": self.stratum, "arm": self.arm,
                "missing": self.missing, "rows": self.rows}


@dataclass(frozen=True, slots=True, eq=False)
class OutcomeResult:
    """The comparison for one outcome, with what was dropped for it."""

    outcome: str
    """Outcome column."""
    cells: CellTable
    """Cell table built from the rows that have this outcome."""
    comparison: Comparison
    """`fit_all` on `cells`."""
    missing: int
    """Rows dropped because this outcome is missing."""
    attrition: tuple[AttritionCell, ...]
    """Missing outcomes per stratum and arm (cells with at least one missing row)."""


@dataclass(frozen=True, slots=True, eq=False)
class Run:
    """Everything `strativ run` reports and writes."""

    spec: Spec
    """The validated spec."""
    dataset: Dataset
    """The rows after the data rules."""
    offer_probability: dict[Any, float] | None
    """Design probabilities passed to the estimators (None: estimated)."""
    outcomes: tuple[OutcomeResult, ...]
    """One result per outcome, in spec order."""
    warnings: tuple[str, ...]
    """Plain-language warnings for the reader."""


@dataclass(frozen=True, slots=True)
class StratumDesign:
    """Design facts of one stratum, for `strativ check`."""

    label: Any
    """Stratum label."""
    n: int
    """Rows."""
    n_offered: int
    """Rows offered."""
    take_up_offered: float | None
    """Take-up share among the offered (None without offered rows)."""
    take_up_not_offered: float | None
    """Take-up share among the not offered (None without such rows)."""
    excluded_reason: str | None
    """Why the estimators will leave the stratum out, or None."""


@dataclass(frozen=True, slots=True)
class DesignSummary:
    """What `strativ check` prints: the design as the data show it, without any fit."""

    strata: tuple[StratumDesign, ...]
    """Every stratum, in label order."""
    take_up_offered: float
    """Take-up share among all offered rows."""
    take_up_not_offered: float
    """Take-up share among all not-offered rows."""
    missing_outcomes: tuple[tuple[str, int], ...]
    """(outcome, rows without it)."""


@contextmanager
def _floating_point_guard(name: str, values: np.ndarray) -> Iterator[None]:
    """Stop with a data error when the core's arithmetic overflows or loses its meaning.

    The core never warns on sound input; a floating-point warning means its numbers would
    be inf or NaN (in practice: outcome values too large to square in double precision).
    """
    with warnings.catch_warnings():
        warnings.simplefilter("error", RuntimeWarning)
        try:
            yield
        except (RuntimeWarning, FloatingPointError) as exc:
            finite = values[np.isfinite(values)]
            largest = float(np.abs(finite).max()) if finite.size else 0.0
            raise DataError(None, name, (), f"the estimators' arithmetic failed on this "
                            f"outcome ({exc}); its largest absolute value is {largest:.3g}",
                            "rescale the outcome (divide it by a power of ten) so that its "
                            "values stay well below 1e+50") from None


def _cells(dataset: Dataset, outcome: np.ndarray, keep: np.ndarray, *, spec: Spec) -> CellTable:
    """The core's cell table of the kept rows, with the cluster column whenever the spec
    names one (every variance flavour then reads the clusters)."""
    try:
        return build_cells(outcome[keep], dataset.take_up[keep], dataset.offer[keep],
                           dataset.stratum[keep],
                           cluster=None if dataset.cluster is None else dataset.cluster[keep])
    except EstimatorError as exc:
        raise located_error(exc, spec, dataset, rows=np.flatnonzero(keep)) from None


def summarize_design(spec: Spec, dataset: Dataset) -> DesignSummary:
    """Describe strata, offer shares and take-up by arm, without fitting.

    Parameters
    ----------
    spec : Spec
        The validated spec.
    dataset : Dataset
        The loaded rows.

    Returns
    -------
    DesignSummary
        Per-stratum counts and take-up shares (from the core's cell table) and exclusions.

    Raises
    ------
    DataError
        When no stratum has both offered and not-offered rows, or (with a cluster column)
        the core finds a cluster that spans (stratum, offer) cells.
    """
    zeros = np.zeros(dataset.n_rows)
    cells = _cells(dataset, zeros, np.ones(dataset.n_rows, dtype=bool), spec=spec)
    reasons = {e.label: e.reason for e in excluded_strata(cells)}
    strata = []
    for k, label in enumerate(cells.labels):
        n0, n1 = (int(v) for v in cells.n[k])
        strata.append(StratumDesign(
            label, n0 + n1, n1,
            float(cells.mean_take_up[k, 1]) if n1 else None,
            float(cells.mean_take_up[k, 0]) if n0 else None,
            reasons.get(label)))
    if all(s.excluded_reason for s in strata):
        raise DataError(None, " + ".join(spec.columns.stratum), (),
                        "no stratum has both offered and not-offered rows, so no effect can "
                        "be estimated", "check the offer and stratum columns")
    n = cells.n
    return DesignSummary(
        strata=tuple(strata),
        take_up_offered=float((n[:, 1] * cells.mean_take_up[:, 1]).sum() / max(n[:, 1].sum(), 1)),
        take_up_not_offered=float((n[:, 0] * cells.mean_take_up[:, 0]).sum()
                                  / max(n[:, 0].sum(), 1)),
        missing_outcomes=tuple((name, int(np.isnan(values).sum()))
                               for name, values in dataset.outcomes.items()),
    )


def design_probabilities(spec: Spec, dataset: Dataset) -> dict[Any, float] | None:
    """Resolve the spec's `design.offer_probability` into {stratum label: probability}.

    Parameters
    ----------
    spec : Spec
        The validated spec.
    dataset : Dataset
        The loaded rows.

    Returns
    -------
    dict or None
        None when probabilities are estimated; else one probability per stratum label.

    Raises
    ------
    SpecError
        When the mapping names a stratum that is not in the data, or leaves out a stratum
        that has both offered and not-offered rows.
    DataError
        When the probability column is not constant within a stratum.
    """
    source = spec.offer_probability
    labels = list(dict.fromkeys(dataset.stratum.tolist()))
    if source.source == "estimated":
        return None
    if source.source == "column":
        return _column_probabilities(spec, dataset, labels)
    by_text = {str(label): label for label in labels}
    out: dict[Any, float] = {}
    for key, prob in source.by_stratum:
        if key not in by_text:
            hint = suggest(key, list(by_text)) or "strata in the data: " + ", ".join(
                sorted(by_text)[:12])
            raise spec.error(("design", "offer_probability", key),
                             f"offer_probability names stratum '{key}', which is not in the "
                             "data", hint)
        out[by_text[key]] = prob
    arms: dict[Any, set[int]] = {}
    for label, offer in zip(dataset.stratum.tolist(), dataset.offer.tolist(), strict=True):
        arms.setdefault(label, set()).add(offer)
    absent = [str(label) for label in labels if label not in out and len(arms[label]) == 2]
    if absent:
        raise spec.error(("design", "offer_probability"),
                         "offer_probability gives no probability for stratum(s) "
                         + ", ".join(f"'{a}'" for a in absent[:5])
                         + (f" and {len(absent) - 5} more" if len(absent) > 5 else ""),
                         "give every stratum its design probability")
    return out


def _column_probabilities(spec: Spec, dataset: Dataset, labels: list[Any]) -> dict[Any, float]:
    column = spec.offer_probability.column
    values = dataset.offer_probability
    assert values is not None and column is not None
    first: dict[Any, int] = {}
    for i, label in enumerate(dataset.stratum.tolist()):
        j = first.setdefault(label, i)
        if values[i] != values[j]:
            raise DataError(None, column, (), "the design probability differs within stratum "
                            f"'{label}': {float(values[j])!r} in {dataset.where(j)} but "
                            f"{float(values[i])!r} in {dataset.where(i)}",
                            "give every row of a stratum the same design probability")
    return {label: float(values[first[label]]) for label in labels}


def _attrition(outcome: str, values: np.ndarray, dataset: Dataset) -> tuple[AttritionCell, ...]:
    missing = np.isnan(values)
    if not missing.any():
        return ()
    counts: dict[tuple[Any, int], list[int]] = {}
    for label, offer, miss in zip(dataset.stratum.tolist(), dataset.offer.tolist(),
                                  missing.tolist(), strict=True):
        cell = counts.setdefault((label, offer), [0, 0])
        cell[0] += miss
        cell[1] += 1
    try:
        keys = sorted(counts)
    except TypeError:
        keys = list(counts)
    return tuple(AttritionCell(outcome, label, "offered" if offer else "not_offered", m, n)
                 for (label, offer) in keys for m, n in [counts[(label, offer)]] if m)


def _fit_outcome(spec: Spec, dataset: Dataset, name: str,
                 probabilities: dict[Any, float] | None) -> OutcomeResult:
    """`fit_all` on the rows that have outcome `name`; the core's refusals become errors
    located in the spec or the data."""
    values = dataset.outcomes[name]
    keep = ~np.isnan(values)
    if not keep.any():
        raise DataError(None, name, (), "the outcome is missing in every row")
    with _floating_point_guard(name, values):
        cells = _cells(dataset, values, keep, spec=spec)
        present = set(cells.labels)
        mapping = None if probabilities is None else \
            {k: v for k, v in probabilities.items() if k in present}
        try:
            comparison = fit_all(cells, estimators=spec.estimators, variance=variance_used(spec),
                                 assignment=spec.assignment, sampling=spec.sampling,
                                 level=spec.level, offer_probability=mapping)
        except EstimatorError as exc:
            raise located_error(exc, spec, dataset, rows=np.flatnonzero(keep),
                                probabilities=mapping) from None
    return OutcomeResult(name, cells, comparison, int((~keep).sum()),
                         _attrition(name, values, dataset))


def check_with_core(spec: Spec, dataset: Dataset,
                    probabilities: dict[Any, float] | None) -> list[str]:
    """Let the core apply every rule `strativ run` meets, and return the design warnings.

    The rules (design probabilities in (0, 1), cluster nesting, option combinations) live in
    the core only, so `strativ check` asks the core on the first outcome, exactly as the run
    will; its numbers are not shown.

    Parameters
    ----------
    spec : Spec
        The validated spec.
    dataset : Dataset
        The loaded rows.
    probabilities : dict or None
        The resolved design probabilities.

    Returns
    -------
    list of str
        The offer-count warnings (switch from block assignment, binomial rejections).

    Raises
    ------
    SpecError, DataError
        Where the core refuses the spec or the data, located as in `run_spec`.
    """
    name = next(iter(dataset.outcomes))
    result = _fit_outcome(spec, dataset, name, probabilities)
    return offer_count_warnings(name, result.comparison)


def run_spec(spec: Spec, dataset: Dataset) -> Run:
    """Fit every estimator of `spec` on every outcome.

    Parameters
    ----------
    spec : Spec
        The validated spec.
    dataset : Dataset
        The rows after the data rules.

    Returns
    -------
    Run
        One `fit_all` comparison per outcome, with attrition counts and warnings.

    Raises
    ------
    SpecError
        When the offer probability mapping does not match the strata.
    DataError
        When the core rejects the data (for example no stratum with both arms, or clusters
        that span strata), an outcome is missing in every row, or the core's arithmetic
        overflows on an outcome (values far too large for double precision).
    """
    probabilities = design_probabilities(spec, dataset)
    results = [_fit_outcome(spec, dataset, name, probabilities) for name in dataset.outcomes]
    return Run(spec, dataset, probabilities, tuple(results),
               tuple(data_warnings(spec, dataset) + fit_warnings(results)))

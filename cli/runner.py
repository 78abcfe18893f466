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
    DegenerateDesignError,
    EstimatorError,
    InputError,
    build_cells,
    excluded_strata,
    fit_all,
)

from .errors import DataError
from .loading import Dataset
from .spec import Spec, suggest

__all__ = [
    "AttritionCell",
    "OutcomeResult",
    "Run",
    "StratumDesign",
    "DesignSummary",
    "data_warnings",
    "design_probabilities",
    "summarize_design",
    "run_spec",
]

WEAK_FIRST_STAGE_F = 10.0
"""Rule-of-thumb threshold below which a first stage is called weak (Staiger & Stock 1997)."""


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


def _cells(dataset: Dataset, outcome: np.ndarray, keep: np.ndarray, *,
           cluster: bool, spec: Spec) -> CellTable:
    try:
        return build_cells(outcome[keep], dataset.take_up[keep], dataset.offer[keep],
                           dataset.stratum[keep],
                           cluster=dataset.cluster[keep] if cluster else None)
    except EstimatorError as exc:
        raise _data_error(exc, spec) from None


def _data_error(exc: EstimatorError, spec: Spec) -> DataError:
    cols = spec.columns
    column = None
    if isinstance(exc, InputError):
        column = {"take_up": cols.take_up, "offer": cols.offer, "cluster": cols.cluster,
                  "stratum": " + ".join(cols.stratum)}.get(exc.argument)
        return DataError(None, column, (), exc.message)
    if isinstance(exc, DegenerateDesignError):
        return DataError(None, " + ".join(cols.stratum), (), exc.message,
                         "each stratum needs both offered and not-offered rows")
    return DataError(None, None, (), str(exc))


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
        When no stratum has both offered and not-offered rows, or (with the cluster
        variance) a cluster spans strata or offer arms.
    """
    if spec.variance == "cluster":
        _check_clusters(spec, dataset)
    zeros = np.zeros(dataset.n_rows)
    cells = _cells(dataset, zeros, np.ones(dataset.n_rows, dtype=bool), cluster=False,
                   spec=spec)
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


def _check_clusters(spec: Spec, dataset: Dataset) -> None:
    """Every cluster must sit in one stratum and one offer arm (it was offered as a whole)."""
    assert dataset.cluster is not None
    first: dict[Any, int] = {}
    for i, (cluster, label, offer) in enumerate(zip(dataset.cluster.tolist(),
                                                    dataset.stratum.tolist(),
                                                    dataset.offer.tolist(), strict=True)):
        j = first.setdefault(cluster, i)
        if (label, offer) != (dataset.stratum[j], dataset.offer[j]):
            raise DataError(None, spec.columns.cluster, (),
                            f"cluster '{cluster}' spans more than one stratum or offer arm: "
                            f"stratum '{dataset.stratum[j]}', offer {dataset.offer[j]} in "
                            f"{dataset.where(j)} but stratum '{label}', offer {offer} in "
                            f"{dataset.where(i)}",
                            "clusters must be nested in strata and offered as a whole")


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


def data_warnings(spec: Spec, dataset: Dataset) -> list[str]:
    """Return the warnings known before fitting: unused covariates or cluster, dropped rows.

    Parameters
    ----------
    spec : Spec
        The validated spec.
    dataset : Dataset
        The loaded rows.

    Returns
    -------
    list of str
        Plain-language warnings.
    """
    out = []
    cols = spec.columns
    if cols.covariates:
        out.append("covariates " + ", ".join(cols.covariates) + " were checked and recorded "
                   "but not used: the estimators do not adjust for covariates yet, so every "
                   "estimate is unadjusted")
    if cols.cluster is not None and spec.variance != "cluster":
        out.append(f"cluster column '{cols.cluster}' is not used by the '{spec.variance}' "
                   "variance; if offers went to whole clusters set inference.variance: cluster")
    if dataset.n_dropped:
        parts = ", ".join(f"{name}: {count}" for name, count in dataset.dropped)
        out.append(f"{dataset.n_dropped} of {dataset.n_read} rows were dropped because a value "
                   f"was missing ({parts})")
    return out


def _fit_warnings(outcomes: list[OutcomeResult]) -> list[str]:
    out = []
    for result in outcomes:
        if result.missing:
            offered = sum(a.missing for a in result.attrition if a.arm == "offered")
            out.append(f"outcome '{result.outcome}' is missing in {result.missing} rows "
                       f"({offered} offered, {result.missing - offered} not offered); they are "
                       "left out for this outcome (attrition by stratum and arm in results.json)")
        undefined: dict[str, list[str]] = {}
        weak: list[str] = []
        for est in result.comparison.estimates:
            f = est.first_stage_f
            if est.estimate is None:
                undefined.setdefault(est.undefined_reason or "undefined", []).append(
                    est.estimator)
            elif f is not None and f < WEAK_FIRST_STAGE_F:
                weak.append(f"{est.estimator} F = {f:.1f}")
        for reason, names in undefined.items():
            out.append(f"'{result.outcome}': no estimate from {', '.join(names)}: {reason}; "
                       "only the weak-IV robust confidence set is reported")
        if weak:
            out.append(f"'{result.outcome}': the first stage is weak ({', '.join(weak)}; below "
                       f"{WEAK_FIRST_STAGE_F:g}); read the confidence set rather than the "
                       "normal interval")
    return out


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
    use_cluster = spec.variance == "cluster"
    if use_cluster:
        _check_clusters(spec, dataset)
    results = []
    for name, values in dataset.outcomes.items():
        keep = ~np.isnan(values)
        if not keep.any():
            raise DataError(None, name, (), "the outcome is missing in every row")
        with _floating_point_guard(name, values):
            cells = _cells(dataset, values, keep, cluster=use_cluster, spec=spec)
            present = set(cells.labels)
            mapping = None if probabilities is None else \
                {k: v for k, v in probabilities.items() if k in present}
            try:
                comparison = fit_all(cells, estimators=spec.estimators,
                                     variance=spec.variance, assignment=spec.assignment,
                                     sampling=spec.sampling, level=spec.level,
                                     offer_probability=mapping)
            except EstimatorError as exc:
                raise _data_error(exc, spec) from None
        results.append(OutcomeResult(name, cells, comparison, int((~keep).sum()),
                                     _attrition(name, values, dataset)))
    return Run(spec, dataset, probabilities, tuple(results),
               tuple(data_warnings(spec, dataset) + _fit_warnings(results)))

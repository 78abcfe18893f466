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
)
from strativ.estimators.adjust import AdjustedEstimate
from strativ.estimators.attrition import AttritionTest, attrition_test
from strativ.estimators.power import Plan, plan
from strativ.estimators.profile import CovariateProfile
from strativ.estimators.randomization import (
    RandomizationFamily,
    RandomizationTest,
)
from strativ.estimators.rebuild import rebuildable
from strativ.estimators.sensitivity import (
    DirectEffectSensitivity,
)

from .cautions import (
    balance_warnings,
    data_warnings,
    fit_spec,
    fit_warnings,
    offer_count_warnings,
)
from .core_errors import located_error
from .covariate_data import run_profile
from .errors import DataError
from .grouped import GroupedData, from_rows
from .loading import Dataset
from .multiplicity import OutcomeFamily, outcome_families
from .outcome_checks import (
    adjusted_fits,
    direct_effect,
    randomization,
    randomization_family_test,
)
from .probabilities import design_probabilities
from .spec import Spec
from .wave_fits import WaveSummary, wave_summary

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


@rebuildable
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
    adjusted: tuple[AdjustedEstimate, ...] = ()
    """Each estimator refitted with the covariates (empty without covariates, or under a
    robust variance flavour)."""
    attrition_test: AttritionTest | None = None
    """Missing outcomes by offer arm, with the Mantel-Haenszel test within strata."""
    sensitivity: DirectEffectSensitivity | None = None
    """The reported complier estimator under a direct effect of the offer."""
    randomization: RandomizationTest | None = None
    """Randomization p-value of no effect and interval (`inference.randomization`)."""
    plan: Plan | None = None
    """Minimum detectable effect of the reported complier estimator, and the rows the
    spec's target effect needs (`planning`)."""


@dataclass(frozen=True, slots=True, eq=False)
class Run:
    """Everything `strativ run` reports and writes."""

    spec: Spec
    """The validated spec."""
    dataset: GroupedData
    """The run's data as group moments, with fingerprints and drop counts."""
    offer_probability: dict[Any, float] | None
    """Design probabilities passed to the estimators (None: estimated)."""
    outcomes: tuple[OutcomeResult, ...]
    """One result per outcome, in spec order."""
    warnings: tuple[str, ...]
    """Plain-language warnings for the reader."""
    profile: CovariateProfile | None = None
    """Balance and complier means of the covariates (None without covariates)."""
    families: tuple[OutcomeFamily, ...] = ()
    """p-values across outcomes, per estimator, with Holm and Benjamini-Hochberg (two or
    more outcomes)."""
    randomization_family: RandomizationFamily | None = None
    """Westfall-Young adjusted randomization p-values across the outcomes (randomization
    inference with two or more outcomes)."""
    waves: WaveSummary | None = None
    """The input files as waves: strata rule, pooled-share test, each wave fitted alone
    (None with one input file)."""
    blinded: int | None = None
    """Seed of the within-strata permutation of the outcomes in a blinded rehearsal (None:
    the real outcomes)."""


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
def _floating_point_guard(name: str, largest: float) -> Iterator[None]:
    """Stop with a data error when the core's arithmetic overflows or loses its meaning.

    The core never warns on sound input; a floating-point warning means its numbers would
    be inf or NaN (in practice: outcome values too large to square in double precision).
    `largest` is the outcome's largest absolute value, quoted in the message.
    """
    with warnings.catch_warnings():
        warnings.simplefilter("error", RuntimeWarning)
        try:
            yield
        except (RuntimeWarning, FloatingPointError) as exc:
            raise DataError(None, name, (), f"the estimators' arithmetic failed on this "
                            f"outcome ({exc}); its largest absolute value is {largest:.3g}",
                            "rescale the outcome (divide it by a power of ten) so that its "
                            "values stay well below 1e+50") from None


def _kept_rows(dataset: Dataset, outcome: str | None) -> np.ndarray:
    """Dataset rows the core sees for `outcome` (None: every row)."""
    if outcome is None:
        return np.arange(dataset.n_rows)
    return np.flatnonzero(~np.isnan(dataset.outcomes[outcome]))


def _row_cells(dataset: Dataset, outcome: str | None) -> CellTable:
    """`build_cells` on the rows, to let the core name the unit it refuses."""
    keep = _kept_rows(dataset, outcome)
    values = np.zeros(dataset.n_rows) if outcome is None else dataset.outcomes[outcome]
    return build_cells(values[keep], dataset.take_up[keep], dataset.offer[keep],
                       dataset.stratum[keep],
                       cluster=None if dataset.cluster is None else dataset.cluster[keep])


def _located(exc: EstimatorError, spec: Spec, data: GroupedData, outcome: str | None,
             probabilities: dict[Any, float] | None = None) -> Exception:
    """The located error for what the core refused: the rows name the file and row."""
    dataset = data.rows()
    return located_error(exc, spec, dataset, rows=_kept_rows(dataset, outcome),
                         probabilities=probabilities)


def _cells(data: GroupedData, outcome: str | None, *, spec: Spec) -> CellTable:
    """The core's cell table of the rows with `outcome` (None: all kept rows), with the
    cluster column whenever the spec names one (every variance flavour then reads it)."""
    try:
        return data.cells(outcome)
    except EstimatorError as exc:
        dataset = data.rows()
        try:
            _row_cells(dataset, outcome)
        except EstimatorError as row_exc:
            raise located_error(row_exc, spec, dataset,
                                rows=_kept_rows(dataset, outcome)) from None
        raise _located(exc, spec, data, outcome) from None


def summarize_design(spec: Spec, data: GroupedData) -> DesignSummary:
    """Describe strata, offer shares and take-up by arm, without fitting.

    Parameters
    ----------
    spec : Spec
        The validated spec.
    data : GroupedData
        The run's data.

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
    cells = _cells(data, None, spec=spec)
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
        missing_outcomes=tuple((name, data.missing(name)) for name in data.outcomes),
    )


def _attrition(outcome: str, data: GroupedData) -> tuple[AttritionCell, ...]:
    return tuple(AttritionCell(outcome, label, "offered" if offer else "not_offered", m, n)
                 for label, offer, m, n in data.missing_by_arm(outcome))


def _fit_outcome(spec: Spec, data: GroupedData, name: str,
                 probabilities: dict[Any, float] | None, progress: Any = None) -> OutcomeResult:
    """`fit_all` on the rows that have outcome `name`; the core's refusals become errors
    located in the spec or the data."""
    require_outcome_values(data, name)
    missing = data.missing(name)
    with _floating_point_guard(name, data.largest(name)):
        cells = _cells(data, name, spec=spec)
        present = set(cells.labels)
        mapping = None if probabilities is None else \
            {k: v for k, v in probabilities.items() if k in present}
        try:
            comparison = fit_spec(cells, spec, mapping)
        except EstimatorError as exc:
            raise _located(exc, spec, data, name, probabilities=mapping) from None
        adjusted = adjusted_fits(spec, data, name, comparison, mapping)
    g = data.groups
    role = data.roles.outcomes[data.outcomes.index(name)]
    test = attrition_test(g["stratum"].tolist(), g["offer"].to_numpy(), g["n"].to_numpy(),
                          g[f"n_{role}"].to_numpy())
    return OutcomeResult(name, cells, comparison, missing, _attrition(name, data), adjusted,
                         test, direct_effect(spec, data, name, comparison, mapping),
                         randomization(spec, data, name, progress),
                         _plan(spec, name, comparison))


def _plan(spec: Spec, name: str, comparison: Comparison) -> Plan:
    """The minimum detectable effect of the reported complier estimator (else the first)."""
    by_name = {e.estimator: e for e in comparison.estimates}
    chosen = comparison.gap.complier_estimator if comparison.gap is not None else next(
        (e for e in ("weighted", "interacted") if e in by_name), comparison.estimates[0].estimator)
    est = by_name[chosen]
    return plan(estimator=chosen, standard_error=est.std_error, rows=est.n_units,
                level=spec.level, power=spec.power, df=est.degrees_of_freedom,
                target_effect=dict(spec.target_effects).get(name))


def require_outcome_values(data: GroupedData, name: str) -> None:
    """Refuse outcome `name` when no kept row has a value (`check` and `run` alike).

    Raises
    ------
    DataError
        Naming the column and the rows read, with how to fix it.
    """
    if data.missing(name) < data.n_rows:
        return
    files = ", ".join(f.path.name for f in data.files)
    raise DataError(None, name, (), f"the outcome has no value in any of the {data.n_rows:,} "
                    f"kept rows of {files}",
                    "check that this column holds the outcome as numbers (a blank cell is "
                    "missing) and that the export filled it in; or remove it from "
                    "columns.outcome")


def check_with_core(spec: Spec, data: GroupedData,
                    probabilities: dict[Any, float] | None) -> list[str]:
    """Let the core apply every rule `strativ run` meets, and return the design warnings.

    The rules (design probabilities in (0, 1), cluster nesting, option combinations) live in
    the core only, so `strativ check` asks the core on the first outcome, exactly as the run
    will; its numbers are not shown.

    Parameters
    ----------
    spec : Spec
        The validated spec.
    data : GroupedData
        The run's data.
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
    for name in data.outcomes:  # an empty outcome is named before any design rule
        require_outcome_values(data, name)
    name = data.outcomes[0]
    result = _fit_outcome(spec, data, name, probabilities)
    return offer_count_warnings(name, result.comparison)


BLINDED = ("BLINDED rehearsal: each outcome was permuted within strata (seed {seed}), so "
           "every estimate targets zero; these numbers are not results")
"""The line every screen and file of a blinded run carries."""


def run_spec(spec: Spec, data: GroupedData | Dataset, progress: Any = None, *,
             blinded: int | None = None) -> Run:
    """Fit every estimator of `spec` on every outcome.

    Parameters
    ----------
    spec : Spec
        The validated spec.
    data : GroupedData or Dataset
        The run's data as group moments (`grouped.group_data`), or rows already read by
        the row reader (`loading.load_data`), which are grouped first.
    blinded : int, optional
        The seed, when the outcomes of `data` were permuted within strata
        (`strativ.estimators.blinding`); recorded and said on every output.

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
    if isinstance(data, Dataset):
        data = from_rows(spec, data)
    probabilities = design_probabilities(spec, data)
    results = [_fit_outcome(spec, data, name, probabilities, progress)
               for name in data.outcomes]
    profile = run_profile(data, probabilities)
    banner = [] if blinded is None else [BLINDED.format(seed=blinded)]
    return Run(spec, data, probabilities, tuple(results),
               tuple(banner + data_warnings(spec, data) + fit_warnings(results)
                     + balance_warnings(profile)), profile, outcome_families(results),
               randomization_family_test(spec, data, progress),
               wave_summary(spec, data, probabilities), blinded)

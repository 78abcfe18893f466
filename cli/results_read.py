"""results.json read back: every result of a run rebuilt from the file alone.

Reports are built from a results file, never from the data: `read_results` checks the file
against results.schema.json and rebuilds each outcome's `Comparison` (from the flat
``estimates``, ``strata``, ``exclusions`` and ``comparisons`` lists), its adjusted estimates,
attrition, sensitivity, randomization and planning results, the covariate profile, the
families of p-values, the waves and the plan check, each through its type's `from_dict`.
"""

from __future__ import annotations

import json
from collections.abc import Mapping
from dataclasses import dataclass
from pathlib import Path
from typing import Any

from strativ.estimators.adjust import AdjustedEstimate
from strativ.estimators.attrition import AttritionTest
from strativ.estimators.power import Plan
from strativ.estimators.profile import CovariateProfile
from strativ.estimators.randomization import RandomizationFamily, RandomizationTest
from strativ.estimators.results import (
    Comparison,
    ConstantEffectTest,
    Estimate,
    ExcludedStratum,
    Gap,
    NegativeFirstStage,
    OfferCounts,
    SizeWeighted,
    StratumRow,
    StratumTable,
)
from strativ.estimators.sensitivity import DirectEffectSensitivity

from .errors import UsageError
from .fingerprints import InputFile
from .multiplicity import OutcomeFamily
from .plan_lock import PlanCheck
from .runner import AttritionCell
from .wave_fits import WaveSummary

__all__ = ["OutcomeReport", "ResultsFile", "read_results", "results_from_document"]


@dataclass(frozen=True, slots=True)
class OutcomeReport:
    """One outcome's results, rebuilt from results.json."""

    outcome: str
    """Outcome column."""
    comparison: Comparison
    """The estimators side by side, with the per-stratum table and diagnostics."""
    rows_used: int
    """Rows with the outcome in the strata the estimators used (`comparisons[].rows_used`)."""
    rows_in_excluded_strata: int
    """Rows with the outcome in strata the estimators left out."""
    rows_missing_outcome: int
    """Kept rows without this outcome."""
    adjusted: tuple[AdjustedEstimate, ...]
    """Covariate-adjusted estimates (empty without covariates)."""
    attrition: tuple[AttritionCell, ...]
    """Cells missing some of the outcome."""
    attrition_test: AttritionTest | None
    """Test of differential attrition between the arms."""
    sensitivity: DirectEffectSensitivity | None
    """Sensitivity to a direct effect of the offer and to defiers."""
    randomization: RandomizationTest | None
    """Randomization inference for the complier-weighted estimate."""
    planning: Plan | None
    """Minimum detectable effect and rows for a target effect."""
    stratum_columns: Mapping[Any, Mapping[str, Any]]
    """Stratum label -> its value in each stratum column (empty for one column)."""


@dataclass(frozen=True, slots=True)
class ResultsFile:
    """A whole results file: the run's context and every outcome's results."""

    path: Path | None
    """Where it was read from (None when built from a document in memory)."""
    title: str
    """The spec's title."""
    created: str
    """When the run wrote it (ISO 8601, UTC)."""
    tool_version: str
    """strativ version that wrote it."""
    spec: Mapping[str, Any]
    """The resolved spec."""
    inputs: tuple[InputFile, ...]
    """Fingerprint of every input file."""
    rows: Mapping[str, Any]
    """Rows read, kept and dropped (`rows` of the file)."""
    offer_probability: tuple[tuple[Any, float], ...] | None
    """(stratum, design probability) pairs, or None when estimated from the data."""
    outcomes: tuple[OutcomeReport, ...]
    """Per outcome, in spec order."""
    covariates: CovariateProfile | None
    """Balance and complier means, or None without covariates."""
    families: tuple[OutcomeFamily, ...]
    """p-values across outcomes with multiplicity adjustments."""
    randomization_outcomes: RandomizationFamily | None
    """Westfall-Young adjusted randomization p-values across outcomes."""
    plan: PlanCheck | None
    """The run checked against a locked plan, or None."""
    blinded: int | None
    """Seed of a blinded rehearsal, or None for a real run."""
    waves: WaveSummary | None
    """Waves and per-wave fits, or None."""
    warnings: tuple[str, ...]
    """Every warning of the run."""

    def outcome(self, name: str) -> OutcomeReport:
        """The results of outcome `name`.

        Raises
        ------
        KeyError
            When the file has no such outcome.
        """
        for report in self.outcomes:
            if report.outcome == name:
                return report
        raise KeyError(name)


def _of(items: list[dict[str, Any]], outcome: str) -> list[dict[str, Any]]:
    return [item for item in items if item.get("outcome") == outcome]


def _outcome(document: Mapping[str, Any], entry: Mapping[str, Any]) -> OutcomeReport:
    name = entry["outcome"]
    strata = _of(document["strata"], name)
    excluded = _of(document["exclusions"], name)
    table = StratumTable(tuple(StratumRow.from_dict(r) for r in strata),
                         tuple(ExcludedStratum.from_dict(r) for r in excluded),
                         int(entry["single_unit_cells"]))
    comparison = Comparison(
        estimates=tuple(Estimate.from_dict(e) for e in _of(document["estimates"], name)),
        strata=table,
        gap=None if entry["gap"] is None else Gap.from_dict(entry["gap"]),
        size_weighted=SizeWeighted.from_dict(entry["size_weighted"]),
        notes=tuple(entry["notes"]),
        constant_effect=None if entry["constant_effect"] is None
        else ConstantEffectTest.from_dict(entry["constant_effect"]),
        negative_first_stage=tuple(NegativeFirstStage.from_dict(n)
                                   for n in entry["negative_first_stage"]),
        offer_counts=None if entry["offer_counts"] is None
        else OfferCounts.from_dict(entry["offer_counts"]),
        variance_rule=entry["variance_rule"],
        single_cluster_cells=int(entry["single_cluster_cells"]),
    )
    parts = {r["label"]: r["stratum_columns"] for r in [*strata, *excluded]
             if "stratum_columns" in r}

    def optional(kind: Any, key: str) -> Any:
        return None if entry.get(key) is None else kind.from_dict(entry[key])

    return OutcomeReport(
        outcome=name, comparison=comparison, rows_used=int(entry["rows_used"]),
        rows_in_excluded_strata=int(entry["rows_in_excluded_strata"]),
        rows_missing_outcome=int(entry["rows_missing_outcome"]),
        adjusted=tuple(AdjustedEstimate.from_dict(a)
                       for a in _of(document["adjusted_estimates"], name)),
        attrition=tuple(AttritionCell.from_dict(a) for a in _of(document["attrition"], name)),
        attrition_test=optional(AttritionTest, "attrition_test"),
        sensitivity=optional(DirectEffectSensitivity, "sensitivity"),
        randomization=optional(RandomizationTest, "randomization"),
        planning=optional(Plan, "planning"),
        stratum_columns=parts,
    )


def results_from_document(document: Mapping[str, Any], path: Path | None = None) -> ResultsFile:
    """Rebuild every result of a results.json document (already parsed and checked).

    Parameters
    ----------
    document : mapping
        The parsed results.json.
    path : Path, optional
        Where it was read from.

    Returns
    -------
    ResultsFile
    """
    probabilities = document["offer_probability"]
    blinded = document.get("blinded")
    return ResultsFile(
        path=path, title=document["title"], created=document["created"],
        tool_version=document["tool"]["version"], spec=document["spec"],
        inputs=tuple(InputFile.from_dict(f) for f in document["inputs"]),
        rows=document["rows"],
        offer_probability=None if probabilities is None else tuple(
            (p["stratum"], float(p["probability"])) for p in probabilities),
        outcomes=tuple(_outcome(document, c) for c in document["comparisons"]),
        covariates=None if document["covariates"] is None
        else CovariateProfile.from_dict(document["covariates"]),
        families=tuple(OutcomeFamily.from_dict(f) for f in document["multiple_outcomes"]),
        randomization_outcomes=None if document["randomization_outcomes"] is None
        else RandomizationFamily.from_dict(document["randomization_outcomes"]),
        plan=None if document.get("plan") is None else PlanCheck.from_dict(document["plan"]),
        blinded=None if blinded is None else int(blinded["seed"]),
        waves=None if document.get("waves") is None
        else WaveSummary.from_dict(document["waves"]),
        warnings=tuple(document["warnings"]),
    )


def read_results(path: Path) -> ResultsFile:
    """Read and check a results.json file and rebuild every result in it.

    Parameters
    ----------
    path : Path
        A results.json written by `strativ run`.

    Returns
    -------
    ResultsFile

    Raises
    ------
    UsageError
        When the file cannot be read, is not JSON, or does not follow results.schema.json
        (the message names the first offending place).
    """
    import jsonschema

    from .files import special_file
    from .results import load_schema

    kind = special_file(path)
    if kind is not None:
        raise UsageError(f"{path} is not a regular file but {kind}",
                         "name a results.json written by 'strativ run'")
    try:
        document = json.loads(path.read_text(encoding="utf-8"))
    except OSError as exc:
        raise UsageError(f"cannot read {path}: {exc.strerror or exc}",
                         "name a results.json written by 'strativ run'") from None
    except (UnicodeDecodeError, json.JSONDecodeError) as exc:
        raise UsageError(f"{path} is not a JSON results file ({exc})",
                         "name a results.json written by 'strativ run'") from None
    validator = jsonschema.Draft202012Validator(load_schema())
    error = next(iter(sorted(validator.iter_errors(document), key=lambda e: list(e.path))),
                 None)
    if error is not None:
        where = "/".join(str(p) for p in error.absolute_path) or "the top level"
        raise UsageError(f"{path} does not follow the results layout at {where}: "
                         f"{error.message[:200]}",
                         "rerun 'strativ run' with this version to write it again")
    return results_from_document(document, path)

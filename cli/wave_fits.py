"""Each wave on its own: the spec's estimators fitted on one wave's groups at a time.

Next to the pooled fit over every wave, a run with several input files (or a wave column,
`waves.column`) fits each wave's groups alone (unadjusted, same options), so a reader sees
whether a new wave moves the estimate. A wave in which the estimators cannot fit (for
example no stratum with both offer arms) is reported with the reason instead of stopping the
run.
"""

from __future__ import annotations

from collections.abc import Mapping
from dataclasses import dataclass, replace
from typing import TYPE_CHECKING, Any

from strativ.estimators.rebuild import rebuild

from .waves import has_waves, pooled_share_test, splits_strata, wave_names

if TYPE_CHECKING:
    from .grouped import GroupedData
    from .spec import Spec

__all__ = ["WaveFit", "WaveSummary", "wave_summary"]


@dataclass(frozen=True, slots=True)
class WaveFit:
    """One outcome's estimates on one wave's rows alone."""

    wave: str
    """Wave name (the input file's name without suffixes, or the wave column's value)."""
    file: str
    """Input file name (with a wave column: every input file, comma-separated)."""
    outcome: str
    """Outcome column."""
    rows: int
    """Rows of the wave with this outcome."""
    estimates: tuple[dict[str, Any], ...]
    """Per estimator: ``estimator``, ``estimate``, ``std_error``, ``interval``,
    ``n_strata``, ``first_stage_f`` (unadjusted, the spec's variance and level)."""
    reason: str | None
    """Why the wave has no estimates, or None."""

    def to_dict(self) -> dict[str, Any]:
        """Return the JSON form."""
        return {"wave": self.wave, "file": self.file, "outcome": self.outcome,
                "rows": self.rows, "estimates": [dict(e) for e in self.estimates],
                "reason": self.reason}

    @classmethod
    def from_dict(cls, data: Mapping[str, Any]) -> WaveFit:
        """Rebuild the fit from its JSON form (`to_dict`)."""
        return rebuild(cls, data, estimates=tuple(dict(e) for e in data["estimates"]))


@dataclass(frozen=True, slots=True)
class WaveSummary:
    """The run's waves: names, how strata treat them, the pooled-share test, per-wave fits."""

    names: tuple[str, ...]
    """Wave names, in input order."""
    files: tuple[str, ...]
    """Input file of each wave (with a wave column: every input file, comma-separated)."""
    strata: str
    """``"separate"`` (a stratum is stratum × wave) or ``"pooled"``."""
    share_test: Any
    """`strativ.estimators.waves.WaveShareTest` of the pooled strata (None when separate)."""
    fits: tuple[WaveFit, ...]
    """Per wave and outcome, the estimators on that wave alone."""
    column: str | None = None
    """Column whose values are the waves (`waves.column`), or None: one wave per file."""

    def to_dict(self) -> dict[str, Any]:
        """Return the JSON form."""
        return {"names": list(self.names), "files": list(self.files), "column": self.column,
                "strata": self.strata,
                "offer_share_test": None if self.share_test is None
                else self.share_test.to_dict(),
                "by_wave": [f.to_dict() for f in self.fits]}

    @classmethod
    def from_dict(cls, data: Mapping[str, Any]) -> WaveSummary:
        """Rebuild the summary from its JSON form (`to_dict`)."""
        from strativ.estimators.waves import WaveShareTest

        test = data["offer_share_test"]
        return cls(tuple(data["names"]), tuple(data["files"]), data["strata"],
                   None if test is None else WaveShareTest.from_dict(test),
                   tuple(WaveFit.from_dict(f) for f in data["by_wave"]), data.get("column"))


def _fit_wave(spec: Spec, data: GroupedData, wave: str, name: str, outcome: str,
              probabilities: dict[Any, float] | None) -> WaveFit:
    from strativ.estimators import EstimatorError

    from .cautions import fit_spec

    part = replace(data, groups=data.groups[data.groups["wave"] == wave].reset_index(drop=True))
    try:
        cells = part.cells(outcome)
        comparison = fit_spec(cells, spec, probabilities)
    except (EstimatorError, ValueError, ZeroDivisionError) as exc:
        return WaveFit(wave, name, outcome, part.n_rows - part.missing(outcome), (),
                       str(exc).splitlines()[0] if str(exc) else type(exc).__name__)
    estimates = tuple(
        {"estimator": e.estimator, "estimate": e.estimate, "std_error": e.std_error,
         "interval": None if e.interval is None else list(e.interval),
         "n_strata": e.n_strata, "first_stage_f": e.first_stage_f}
        for e in comparison.estimates)
    return WaveFit(wave, name, outcome, cells.n_units, estimates, None)


def wave_summary(spec: Spec, data: GroupedData,
                 probabilities: dict[Any, float] | None) -> WaveSummary | None:
    """Names, strata rule, pooled-share test and per-wave fits; None with one input file.

    Parameters
    ----------
    spec : Spec
        The validated spec.
    data : GroupedData
        The run's data.
    probabilities : dict or None
        The run's design probabilities by stratum label.

    Returns
    -------
    WaveSummary or None
    """
    if not has_waves(spec) or data.from_moments or "wave" not in data.groups:
        return None
    import numpy as np

    names = wave_names(spec)
    if names:
        files = tuple(p.name for p in spec.data)
    else:  # waves.column: its values, in label order (2 before 10), every file holds them
        found = np.unique(data.groups["wave"].to_numpy(dtype=object).astype(str)).tolist()
        names = tuple(sorted(found, key=lambda w: (0, int(w), w) if w.lstrip("-").isdigit()
                             else (1, 0, w)))
        files = tuple(", ".join(p.name for p in spec.data) for _ in names)
    with np.errstate(all="ignore"):
        fits = tuple(_fit_wave(spec, data, wave, file, outcome, probabilities)
                     for wave, file in zip(names, files, strict=True)
                     for outcome in data.outcomes)
    return WaveSummary(names, files, "separate" if splits_strata(spec) else "pooled",
                       pooled_share_test(spec, data), fits, spec.wave_column)

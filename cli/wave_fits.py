"""Each wave on its own: the spec's estimators fitted on one input file's groups at a time.

Next to the pooled fit over every wave, a run with several input files fits each wave's
groups alone (unadjusted, same options), so a reader sees whether a new wave moves the
estimate. A wave in which the estimators cannot fit (for example no stratum with both offer
arms) is reported with the reason instead of stopping the run.
"""

from __future__ import annotations

from dataclasses import dataclass, replace
from typing import TYPE_CHECKING, Any

from .waves import pooled_share_test, splits_strata, wave_names

if TYPE_CHECKING:
    from .grouped import GroupedData
    from .spec import Spec

__all__ = ["WaveFit", "WaveSummary", "wave_summary"]


@dataclass(frozen=True, slots=True)
class WaveFit:
    """One outcome's estimates on one wave's rows alone."""

    wave: str
    """Wave name (the input file's name without suffixes)."""
    file: str
    """Input file name."""
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


@dataclass(frozen=True, slots=True)
class WaveSummary:
    """The run's waves: names, how strata treat them, the pooled-share test, per-wave fits."""

    names: tuple[str, ...]
    """Wave names, in input order."""
    files: tuple[str, ...]
    """Input file of each wave."""
    strata: str
    """``"separate"`` (a stratum is stratum × wave) or ``"pooled"``."""
    share_test: Any
    """`strativ.estimators.waves.WaveShareTest` of the pooled strata (None when separate)."""
    fits: tuple[WaveFit, ...]
    """Per wave and outcome, the estimators on that wave alone."""

    def to_dict(self) -> dict[str, Any]:
        """Return the JSON form."""
        return {"names": list(self.names), "files": list(self.files), "strata": self.strata,
                "offer_share_test": None if self.share_test is None
                else self.share_test.to_dict(),
                "by_wave": [f.to_dict() for f in self.fits]}


def _fit_wave(spec: Spec, data: GroupedData, index: int, outcome: str,
              probabilities: dict[Any, float] | None) -> WaveFit:
    from strativ.estimators import EstimatorError

    from .cautions import fit_spec

    wave, name = wave_names(spec)[index], spec.data[index].name
    part = replace(data, groups=data.groups[data.groups["file"] == index].reset_index(drop=True))
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
    names = wave_names(spec)
    if not names or data.from_moments:
        return None
    import numpy as np

    with np.errstate(all="ignore"):
        fits = tuple(_fit_wave(spec, data, i, outcome, probabilities)
                     for i in range(len(names)) for outcome in data.outcomes)
    return WaveSummary(names, tuple(p.name for p in spec.data),
                       "separate" if splits_strata(spec) else "pooled",
                       pooled_share_test(spec, data), fits)

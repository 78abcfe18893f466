"""Gates for pipelines: conditions on a run's results that make `strativ run` exit non-zero.

A gate is checked after the result files are written, on the results document itself (the
content of results.json), so a pipeline step fails while the evidence stays on disk. The
conditions, as given to ``--fail-on`` (repeatable):

- ``first-stage-f<X``: any estimate's first-stage F below X, or undefined;
- ``gap>X``: the fixed-effects and complier-weighted estimates of an outcome differ by more
  than X standard errors of their difference;
- ``excluded-strata``: any stratum was left out of an estimator;
- ``balance``: any covariate's standardized mean difference is flagged;
- ``deviation``: the run deviates from the spec's locked plan (`strativ lock`).
"""

from __future__ import annotations

import math
import re
from collections.abc import Callable, Sequence
from dataclasses import dataclass
from typing import Any

from .errors import UsageError

__all__ = ["EXIT_GATE", "GATES", "Gate", "failed_gates", "parse_gates"]

EXIT_GATE = 4
"""Exit code when a requested gate fails (the result files are written)."""

GATES: dict[str, str] = {
    "first-stage-f<X": "an estimate's first-stage F is below X (or undefined)",
    "gap>X": "fixed-effects and complier-weighted estimates differ by more than X standard "
             "errors",
    "excluded-strata": "a stratum was left out of an estimator",
    "balance": "a covariate's standardized mean difference is flagged",
    "deviation": "the run deviates from the spec's locked plan",
}
"""Each condition ``--fail-on`` accepts, with what makes it fail."""

_PATTERN = re.compile(r"^\s*(first-stage-f\s*<|gap\s*>)\s*([0-9]*\.?[0-9]+(?:[eE][-+]?[0-9]+)?)"
                      r"\s*$"
                      r"|^\s*(excluded-strata|balance|deviation)\s*$")


@dataclass(frozen=True, slots=True)
class Gate:
    """One parsed ``--fail-on`` condition."""

    name: str
    """``first-stage-f``, ``gap``, ``excluded-strata``, ``balance`` or ``deviation``."""
    threshold: float | None
    """The number of the condition (None for conditions without one)."""

    @property
    def text(self) -> str:
        """The condition as written canonically."""
        if self.name == "first-stage-f":
            return f"first-stage-f<{self.threshold:g}"
        if self.name == "gap":
            return f"gap>{self.threshold:g}"
        return self.name


def parse_gates(conditions: Sequence[str]) -> tuple[Gate, ...]:
    """Parse the ``--fail-on`` conditions.

    Parameters
    ----------
    conditions : sequence of str
        As typed, e.g. ``["first-stage-f<10", "gap>2", "balance"]``.

    Returns
    -------
    tuple of Gate

    Raises
    ------
    UsageError
        For a condition not in `GATES`, naming the accepted ones.
    """
    out = []
    for text in conditions:
        match = _PATTERN.match(text)
        if match is None:
            raise UsageError(f"--fail-on '{text[:60]}' is not a condition strativ knows",
                             "use one of: " + "; ".join(f"{k} ({v})" for k, v in GATES.items()))
        if match.group(3):
            out.append(Gate(match.group(3), None))
        else:
            name = "first-stage-f" if match.group(1).startswith("first") else "gap"
            out.append(Gate(name, float(match.group(2))))
    return tuple(dict.fromkeys(out))


def _first_stage(gate: Gate, doc: dict[str, Any]) -> list[str]:
    out = []
    for e in doc["estimates"]:
        f = e.get("first_stage_f")
        where = f"{e['outcome']}, {e['estimator']}"
        if f is None:
            out.append(f"{where}: first-stage F undefined")
        elif f < gate.threshold:
            out.append(f"{where}: first-stage F {f:.3g} < {gate.threshold:g}")
    return out


def _gap(gate: Gate, doc: dict[str, Any]) -> list[str]:
    out = []
    for c in doc["comparisons"]:
        gap = c.get("gap") or {}
        t = gap.get("t")
        if t is not None and math.isfinite(t) and abs(t) > gate.threshold:
            out.append(f"{c['outcome']}: the estimates differ by {abs(t):.3g} standard errors")
    return out


def _excluded(gate: Gate, doc: dict[str, Any]) -> list[str]:
    by: dict[str, int] = {}
    for e in doc["exclusions"]:
        by[e["outcome"]] = by.get(e["outcome"], 0) + 1
    return [f"{outcome}: {n} excluded {'stratum' if n == 1 else 'strata'}"
            for outcome, n in by.items()]


def _balance(gate: Gate, doc: dict[str, Any]) -> list[str]:
    profile = doc.get("covariates") or {}
    return [f"{c['covariate']}: standardized difference flagged"
            for c in profile.get("covariates", []) if c.get("flagged")]


def _deviation(gate: Gate, doc: dict[str, Any]) -> list[str]:
    plan = doc.get("plan") or {}
    return list(plan.get("deviations", []))


_CHECKS: dict[str, Callable[[Gate, dict[str, Any]], list[str]]] = {
    "first-stage-f": _first_stage, "gap": _gap, "excluded-strata": _excluded,
    "balance": _balance, "deviation": _deviation,
}


def failed_gates(gates: Sequence[Gate], document: dict[str, Any]) -> list[tuple[Gate, list[str]]]:
    """The gates that fail on a results document, each with what made it fail.

    Parameters
    ----------
    gates : sequence of Gate
        Parsed conditions.
    document : dict
        The run's results.json content.

    Returns
    -------
    list of (Gate, list of str)
        Failing gates in the order given, with one line per finding.
    """
    out = []
    for gate in gates:
        found = _CHECKS[gate.name](gate, document)
        if found:
            out.append((gate, found))
    return out

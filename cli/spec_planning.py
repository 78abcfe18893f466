"""The spec's `planning` section: the power wanted and, per outcome, an effect to plan for.

    planning:
      power: 0.8                       # default
      target_effect: {gas_therms: -20} # or one number when the spec has one outcome

After each run the reported complier estimator's minimum detectable effect is given at the
spec's level and this power, and for a target effect the rows it needs at today's design
(`strativ.estimators.power`).
"""

from __future__ import annotations

import math
from pathlib import Path
from typing import Any

from .errors import SpecError
from .yamlmarks import KeyPath, dotted, line_of

__all__ = ["DEFAULT_POWER", "PLANNING_KEYS", "planning_options"]

PLANNING_KEYS = ("power", "target_effect")
DEFAULT_POWER = 0.8
"""Power of the minimum detectable effect when the spec does not say."""


def _error(path: Path, lines: dict[KeyPath, int], keys: KeyPath, message: str,
           hint: str | None = None) -> SpecError:
    return SpecError(path, line_of(lines, keys), dotted(keys), message, hint)


def _number(value: Any) -> bool:
    return isinstance(value, (int, float)) and not isinstance(value, bool) \
        and math.isfinite(value)


def planning_options(path: Path, lines: dict[KeyPath, int], value: Any,
                     outcomes: tuple[str, ...]) -> tuple[float, tuple[tuple[str, float], ...]]:
    """Validate `planning`; return (power, ((outcome, target effect), ...)).

    Raises
    ------
    SpecError
        Naming the line of an unknown key, a power outside (0, 1), a zero or non-numeric
        target, or a target for an outcome the spec does not name.
    """
    if value is None:
        return DEFAULT_POWER, ()
    if not isinstance(value, dict):
        raise _error(path, lines, ("planning",), "'planning' must be a mapping of keys",
                     "for example  planning: {power: 0.8, target_effect: 5}")
    for key in value:
        if key not in PLANNING_KEYS:
            raise _error(path, lines, ("planning", key), f"unknown key {key!r} under "
                         "'planning'", "valid keys: " + ", ".join(PLANNING_KEYS))
    power = value.get("power", DEFAULT_POWER)
    if not _number(power) or not 0 < power < 1:
        raise _error(path, lines, ("planning", "power"), f"'planning.power' is {power!r}; it "
                     "must be a number strictly between 0 and 1", "for example 0.8")
    target = value.get("target_effect")
    keys: KeyPath = ("planning", "target_effect")
    if target is None:
        return float(power), ()
    if _number(target):
        if len(outcomes) != 1:
            raise _error(path, lines, keys, "one target effect for several outcomes",
                         "give one per outcome: {" + ", ".join(f"{o}: ..." for o in outcomes)
                         + "}")
        target = {outcomes[0]: target}
    if not isinstance(target, dict):
        raise _error(path, lines, keys, "'planning.target_effect' must be a number or a "
                     "mapping outcome -> effect", "for example  target_effect: {y: 5}")
    out = []
    for name, effect in target.items():
        if str(name) not in outcomes:
            raise _error(path, lines, keys + (name,), f"'{name}' is not an outcome of the spec",
                         "outcomes: " + ", ".join(outcomes))
        if not _number(effect) or effect == 0:
            raise _error(path, lines, keys + (name,), f"the target effect of '{name}' is "
                         f"{effect!r}; it must be a nonzero number",
                         "the effect of take-up to plan for, in the outcome's units")
        out.append((str(name), float(effect)))
    return float(power), tuple(out)

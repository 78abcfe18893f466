"""The spec's optional checks: the `sensitivity` section (the range of direct effects of the
offer to report) and `inference.randomization` (re-drawn offers).

    sensitivity:
      direct_effect: [-5, 5]     # in the outcome's units, per offered unit
      defier_share: [0.01, 0.05] # shares of units assumed to be defiers
    inference:
      randomization: {draws: 2000, seed: 7, null_effect: 0}   # or: randomization: true

Without `sensitivity` the run still reports the direct effect at which the complier-weighted
interval reaches zero (`strativ.estimators.sensitivity`).
"""

from __future__ import annotations

import math
from pathlib import Path
from typing import Any

from .errors import SpecError
from .yamlmarks import KeyPath, dotted, line_of

__all__ = ["RANDOMIZATION_DRAWS", "RANDOMIZATION_SEED", "SENSITIVITY_KEYS", "defier_shares",
           "direct_effect_range", "randomization_options"]

SENSITIVITY_KEYS = ("direct_effect", "defier_share")
RANDOMIZATION_DRAWS = 2000
"""Re-draws of the offers by default."""
RANDOMIZATION_SEED = 20261203
"""Seed of the re-draws by default (recorded in results.json)."""


def _error(path: Path, lines: dict[KeyPath, int], keys: KeyPath, message: str,
           hint: str | None = None) -> SpecError:
    return SpecError(path, line_of(lines, keys), dotted(keys), message, hint)


def direct_effect_range(path: Path, lines: dict[KeyPath, int],
                        value: Any) -> tuple[float, float] | None:
    """Validate `sensitivity` and return its direct-effect range (low, high), or None.

    Raises
    ------
    SpecError
        Naming the line of an unknown key, or of a range that is not two numbers in order.
    """
    if value is None:
        return None
    if not isinstance(value, dict):
        raise _error(path, lines, ("sensitivity",), "'sensitivity' must be a mapping of keys",
                     "for example  sensitivity: {direct_effect: [-5, 5]}")
    for key in value:
        if key not in SENSITIVITY_KEYS:
            raise _error(path, lines, ("sensitivity", key), f"unknown key {key!r} under "
                         "'sensitivity'", "valid keys: " + ", ".join(SENSITIVITY_KEYS))
    pair = value.get("direct_effect")
    if pair is None:
        return None
    keys: KeyPath = ("sensitivity", "direct_effect")
    numbers = isinstance(pair, list) and len(pair) == 2 and all(
        isinstance(v, (int, float)) and not isinstance(v, bool) and math.isfinite(v)
        for v in pair)
    if not numbers or pair[0] > pair[1]:
        raise _error(path, lines, keys, f"'{dotted(keys)}' must be two numbers, low then "
                     f"high, found {pair!r}", "for example  direct_effect: [-5, 5]  (outcome "
                     "units per offered unit)")
    return float(pair[0]), float(pair[1])


def randomization_options(path: Path, lines: dict[KeyPath, int],
                          value: Any) -> tuple[int, int, float] | None:
    """Validate `inference.randomization`: (draws, seed, null effect), or None when off.

    Raises
    ------
    SpecError
        Naming the line of an unknown key or a value that is not a whole number in range.
    """
    keys: KeyPath = ("inference", "randomization")
    if value is None or value is False:
        return None
    if value is True:
        return RANDOMIZATION_DRAWS, RANDOMIZATION_SEED, 0.0
    if not isinstance(value, dict):
        raise _error(path, lines, keys, f"'{dotted(keys)}' must be true, false or a mapping "
                     "with draws and seed", "for example  randomization: {draws: 2000}")
    for key in value:
        if key not in ("draws", "seed", "null_effect"):
            raise _error(path, lines, keys + (key,), f"unknown key {key!r} under "
                         f"'{dotted(keys)}'", "valid keys: draws, seed, null_effect")
    out = []
    for key, default, low in (("draws", RANDOMIZATION_DRAWS, 99),
                              ("seed", RANDOMIZATION_SEED, 0)):
        number = value.get(key, default)
        if isinstance(number, bool) or not isinstance(number, int) or number < low:
            raise _error(path, lines, keys + (key,), f"'{dotted(keys + (key,))}' must be a "
                         f"whole number of at least {low}, found {number!r}")
        out.append(number)
    null = value.get("null_effect", 0.0)
    if isinstance(null, bool) or not isinstance(null, (int, float)) or not math.isfinite(null):
        raise _error(path, lines, keys + ("null_effect",), f"'{dotted(keys)}.null_effect' "
                     f"must be a number (the effect of take-up under the null), found {null!r}")
    return out[0], out[1], float(null)


def defier_shares(path: Path, lines: dict[KeyPath, int], value: Any) -> tuple[float, ...]:
    """Validate `sensitivity.defier_share`: a share or a list of shares in [0, 1)."""
    if not isinstance(value, dict) or value.get("defier_share") is None:
        return ()
    raw = value["defier_share"]
    items = raw if isinstance(raw, list) else [raw]
    keys: KeyPath = ("sensitivity", "defier_share")
    for item in items:
        if isinstance(item, bool) or not isinstance(item, (int, float)) or not 0 <= item < 1:
            raise _error(path, lines, keys, f"'{dotted(keys)}' must be shares of units in "
                         f"[0, 1), found {item!r}", "for example  defier_share: [0.01, 0.05]")
    return tuple(float(v) for v in items)

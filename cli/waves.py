"""Waves: each input file of a spec (or each value of `waves.column`) is one wave of the
trial, and by default its own strata.

Lotteries that run again for each wave of applicants draw the offers separately in every
wave, often with different odds. The offer is as good as random only within the block it was
drawn in: if a stratum is pooled across waves whose offer shares differ, the offer is
correlated with the wave, and any difference in outcomes between waves enters every
estimate. So, with several input files, a stratum is (stratum column(s) × wave) unless the
spec says ``waves: {pool: true}``; the wave is the file's name without its suffixes,
recorded as the stratum's part ``wave`` in results.json and strata.csv. With
``waves: {column: C}`` the wave is the value of column C instead (files are then simply
stacked): C is read as one more stratum column, the last, and kept in the stratum label
unless the waves are pooled.

This module names the waves and the stratum parts; `loading` and `grouped` add the wave part
to each row's or group's stratum label, the same way for both.
"""

from __future__ import annotations

from typing import TYPE_CHECKING, Any

import numpy as np

from .errors import SpecError
from .yamlmarks import KeyPath, dotted, line_of

if TYPE_CHECKING:
    from pathlib import Path

    from .spec import Columns, Spec

__all__ = ["WAVE_KEYS", "WAVE_PART", "centre_keys", "group_waves", "has_waves", "part_names",
           "pools_column", "splits_strata", "stratum_names", "wave_names", "wave_options",
           "wave_part"]

WAVE_KEYS = ("pool", "column")
"""Keys of the spec's `waves` section."""
WAVE_PART = "wave"
"""Name of the stratum part that holds the wave."""
_SUFFIXES = (".csv.gz", ".tsv.gz", ".csv", ".tsv", ".parquet", ".pq", ".dta", ".sav", ".xlsx")


def wave_options(path: Path, lines: dict[KeyPath, int], value: Any,
                 columns: Columns) -> tuple[bool, str | None]:
    """Read ``waves.pool`` (default false) and ``waves.column`` (default none: each input
    file is a wave) from the spec's `waves` section.

    Raises
    ------
    SpecError
        When the section is not a mapping of known keys, `pool` is not true/false, or
        `column` is not a column name free of every other role.
    """
    if value is None:
        return False, None
    if not isinstance(value, dict):
        raise SpecError(path, line_of(lines, ("waves",)), "waves", "'waves' must be a mapping",
                        "for example:  waves: {pool: false}")
    for key in value:
        if key not in WAVE_KEYS:
            raise SpecError(path, line_of(lines, ("waves", key)), dotted(("waves", key)),
                            f"unknown key '{key}' under 'waves'", "valid keys: pool, column")
    pool = value.get("pool", False)
    if not isinstance(pool, bool):
        raise SpecError(path, line_of(lines, ("waves", "pool")), "waves.pool",
                        f"'waves.pool' must be true or false, found {pool!r}",
                        "true pools each stratum across the waves; false (the default) makes "
                        "each wave's part of a stratum its own stratum")
    column = value.get("column")
    if column is None:
        return pool, None
    where = line_of(lines, ("waves", "column"))
    if not isinstance(column, str) or not column.strip():
        raise SpecError(path, where, "waves.column",
                        f"'waves.column' must be a column name, found {column!r}",
                        "name the column that holds each row's wave (for example its "
                        "lottery round)")
    used = {c: r for r, c in columns.roles()}
    if column in used:
        hint = ("with waves.column the strata are split by it already (unless waves.pool): "
                "list it only under waves" if used[column] == "stratum"
                else "name the column that holds each row's wave")
        raise SpecError(path, where, "waves.column",
                        f"wave column '{column}' is already the {used[column]} column", hint)
    return pool, column


def _stem(name: str) -> str:
    lowered = name.lower()
    for suffix in _SUFFIXES:
        if lowered.endswith(suffix):
            return name[:-len(suffix)]
    return name


def wave_names(spec: Spec) -> tuple[str, ...]:
    """One name per input file (its name without suffixes), or () for one file, moment
    tables or waves from a column (`waves.column`, whose names are the data's values).
    Names shared by files in different folders get the folder in front."""
    if spec.data_kind != "rows" or len(spec.data) < 2 or spec.wave_column:
        return ()
    names = [_stem(p.name) for p in spec.data]
    if len(set(names)) < len(names):
        names = [f"{p.parent.name}/{_stem(p.name)}" for p in spec.data]
    if len(set(names)) < len(names):
        names = [str(i + 1) for i in range(len(spec.data))]
    return tuple(names)


def has_waves(spec: Spec) -> bool:
    """Whether the run has waves: several input files, or a wave column."""
    return bool(wave_names(spec)) or (spec.wave_column is not None
                                      and spec.data_kind == "rows")


def splits_strata(spec: Spec) -> bool:
    """Whether each wave's part of a stratum is its own stratum."""
    return has_waves(spec) and not spec.pool_waves


def pools_column(spec: Spec) -> bool:
    """Whether the last stratum column is a wave column that the strata pool over: it is
    read and grouped by like a stratum column, but left out of the stratum label."""
    return spec.wave_column is not None and spec.pool_waves


def stratum_names(spec: Spec) -> tuple[str, ...]:
    """Names of the parts of a stratum label: the stratum columns, then ``wave`` when the
    waves split the strata (``wave_`` if a stratum column is already called ``wave``)."""
    names = tuple(spec.columns.stratum)
    if pools_column(spec):
        return names[:-1]
    if not splits_strata(spec) or spec.wave_column:
        return names
    part = WAVE_PART
    while part in names:
        part += "_"
    return (*names, part)


def part_names(spec: Spec, data: Any) -> tuple[str, ...]:
    """Names of the parts of `data`'s stratum labels: the data's own when it names them (a
    moment table with a wave column), else `stratum_names` of the spec."""
    return tuple(data.part_names) or stratum_names(spec)


def centre_keys(spec: Spec, roles: Any) -> tuple[str, ...]:
    """Keys of the grouped query's outcome centres: the stratum, so (stratum × input file)
    when the waves split the strata."""
    if pools_column(spec):
        return tuple(roles.strata[:-1])
    if splits_strata(spec) and not spec.wave_column:
        return (*roles.strata, "file")
    return tuple(roles.strata)


def wave_part(spec: Spec, file_index: np.ndarray) -> np.ndarray:
    """The wave name of each row or group, from its input file's index."""
    return np.asarray(wave_names(spec), dtype=object)[np.asarray(file_index, dtype=np.int64)]


def pooled_share_test(spec: Spec, data: Any) -> Any:
    """The test of equal offer shares across the waves pooled into each stratum, or None
    when the strata do not pool waves (one file, moment tables, or split strata).

    Parameters
    ----------
    spec : Spec
        The validated spec.
    data : GroupedData
        The run's data (its groups carry the input file of each group).

    Returns
    -------
    strativ.estimators.waves.WaveShareTest or None
    """
    if not has_waves(spec) or splits_strata(spec) or "wave" not in data.groups:
        return None
    from strativ.estimators.waves import wave_share_test

    g = data.groups
    return wave_share_test(g["stratum"].to_numpy(dtype=object),
                           g["wave"].to_numpy(dtype=object),
                           g["offer"].to_numpy(), g["n"].to_numpy())


def group_waves(spec: Spec, file_index: np.ndarray,
                last_part: np.ndarray | None) -> np.ndarray | None:
    """The wave of each row or group: its file's wave name, or with `waves.column` the
    column's value as text (`last_part`, the last stratum part read); None without waves."""
    if spec.wave_column is not None and last_part is not None:
        return np.asarray(last_part, dtype=object).astype(str)
    if wave_names(spec):
        return wave_part(spec, file_index)
    return None


SHARE_ALPHA = 0.05
"""Level below which the pooled waves' offer shares are said to differ beyond noise."""


def pooled_share_warnings(spec: Spec, data: Any) -> list[str]:
    """A warning, with the numbers, when strata pooled across waves had offer shares that
    differ between the waves beyond noise (`pooled_share_test` below `SHARE_ALPHA`)."""
    test = pooled_share_test(spec, data)
    if test is None or test.p_value is None or test.p_value >= SHARE_ALPHA:
        return []
    shown = []
    for label, _, waves in test.strata[:3]:
        shares = ", ".join(f"{k / n:.0%} in {w}" for w, k, n in waves)
        shown.append(f"'{label}' offered {shares}")
    more = len(test.strata) - len(shown)
    across = f"the values of {spec.wave_column}" if spec.wave_column else "the input files"
    return [f"strata pooled across {across} (waves.pool: true) had offer shares that "
            f"differ between waves beyond noise (chi-squared {test.statistic:.1f} on "
            f"{test.df} df, p = {test.p_value:.2g}): " + "; ".join(shown)
            + (f"; and {more} more strata" if more > 0 else "")
            + "; offers drawn per wave with different odds make the offer depend on the wave, "
            "so remove 'waves: {pool: true}' to make each wave's part of a stratum its own "
            "stratum"]

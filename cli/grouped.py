"""A run's data as one table of group moments, from one GROUP BY over every input file.

`group_data` shows the spec's files to DuckDB (`units_sql.units_view`), runs the core's
`group_query` once (keys: file, stratum parts, offer, take-up[, cluster]; per outcome its
count, centred sums and centre; counts of refused values) and turns the small result into a
`GroupedData`. Only that table crosses from the data to the statistics: no row is held in
Python, so the memory needed does not grow with the rows.

Whenever the table shows something the row reader would refuse (a value that is not 0/1,
a non-numeric outcome, a missing key value, a column DuckDB cannot read as the spec says),
the run asks the row reader (`loading.load_data`) for its located message: the rules and the
messages live there once, and a clean file is never read row by row. If the row reader reads
the files where DuckDB could not, the moments come from its rows (`from_rows`).
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Any

import numpy as np
import pandas as pd

from strativ.estimators import OUTCOME_LIMIT, CellTable, cells_from_moments, group_query

from .errors import DataError
from .fingerprints import InputFile, distinct_digests, file_fingerprint
from .loading import (
    Dataset,
    _incomplete_columns,
    _integer_labels,
    load_data,
    stratum_labels,
)
from .spec import Spec
from .units_sql import UNITS_VIEW, Roles, UnreadableError, roles_of, units_view
from .values import parse_label
from .waves import centre_keys, group_waves

__all__ = ["CENTRE_ROWS", "GroupedData", "group_data", "from_rows"]

CENTRE_ROWS = 100_000
"""Rows (the first, in file order) from which each stratum's outcome centre is taken: any
value near the stratum's outcomes keeps the sums precise, and the files are read once."""


@dataclass(frozen=True, slots=True, eq=False)
class GroupedData:
    """The kept rows of a run as group moments, with what the row reader would report."""

    spec: Spec
    """The validated spec."""
    files: tuple[InputFile, ...]
    """Fingerprints of the files read."""
    groups: pd.DataFrame
    """One row per (stratum, offer, take-up[, cluster]) group of kept rows: final stratum
    label, keys, ``n`` and per outcome ``n_y``, ``sum_y``, ``sum_y_sq``, ``centre_y``."""
    roles: Roles
    """View column of each role (``y0`` is the spec's first outcome)."""
    n_read: int
    """Rows read before any was dropped."""
    dropped: tuple[tuple[str, int], ...]
    """(column, rows dropped because it was missing there)."""
    n_dropped: int
    """Incomplete rows dropped (a row missing several columns counts once)."""
    dropped_by_arm: tuple[tuple[str, int, int], ...] = ()
    """(column, offered, not offered) of the rows dropped under each column other than the
    offer (whose rows have no arm)."""
    stratum_parts: dict[Any, tuple[Any, ...]] = field(default_factory=dict)
    """For a stratum from several columns: label -> its value in each column."""
    dataset: Dataset | None = None
    """The rows, when they were read row by row (else loaded on demand by `rows`)."""
    from_moments: bool = False
    """Whether the data are a moment table (`moment_table.read_moment_table`): no rows."""
    part_names: tuple[str, ...] = ()
    """Names of the parts of a stratum label when they are not the spec's (a moment table
    that carries the wave of each stratum); empty: `waves.stratum_names` of the spec."""

    @property
    def n_rows(self) -> int:
        """Rows kept."""
        return int(self.groups["n"].sum())

    @property
    def outcomes(self) -> tuple[str, ...]:
        """Outcome columns, in spec order."""
        return tuple(self.spec.columns.outcome)

    def rows(self) -> Dataset:
        """The rows, read by the row reader (to locate a value the core refused).

        Raises
        ------
        DataError
            When the data are a moment table, which holds no rows to point at.
        """
        if self.from_moments:
            raise DataError(None, None, (), "this check needs the unit rows, and the run reads "
                            "a moment table", "run the same spec on the row data (data: "
                            "instead of moments:) to see which rows it concerns")
        return self.dataset if self.dataset is not None else load_data(self.spec)

    def _role(self, outcome: str) -> str:
        return self.roles.outcomes[self.outcomes.index(outcome)]

    def cells(self, outcome: str | None) -> CellTable:
        """The core's cell table of the rows with `outcome` (None: every kept row, outcome 0).

        Raises
        ------
        strativ.estimators.EstimatorError
            As `cells_from_moments` (a cluster spanning cells, no rows).
        """
        return cells_from_moments(self.moment_frame(outcome))

    def moment_frame(self, outcome: str | None) -> pd.DataFrame:
        """The groups of `outcome` in the layout `cells_from_moments` reads."""
        g = self.groups
        frame = pd.DataFrame({"stratum": g["stratum"], "offer": g["offer"],
                              "take_up": g["take_up"]})
        if outcome is None:
            frame["n"] = g["n"]
            frame["sum_outcome"] = frame["sum_outcome_sq"] = frame["centre_outcome"] = 0.0
        else:
            role = self._role(outcome)
            frame["n"] = g[f"n_{role}"]
            frame["sum_outcome"] = g[f"sum_{role}"]
            frame["sum_outcome_sq"] = g[f"sum_{role}_sq"]
            frame["centre_outcome"] = g[f"centre_{role}"]
        if "cluster" in g.columns:
            frame["cluster"] = g["cluster"]
        return frame[frame["n"] > 0].reset_index(drop=True)

    def largest(self, outcome: str) -> float:
        """Largest absolute value of `outcome`."""
        top = self.groups[f"max_abs_{self._role(outcome)}"].to_numpy(dtype=float, na_value=0.0)
        return float(top.max()) if top.size else 0.0

    def missing(self, outcome: str) -> int:
        """Kept rows without `outcome`."""
        role = self._role(outcome)
        return int((self.groups["n"] - self.groups[f"n_{role}"]).sum())

    def missing_by_arm(self, outcome: str) -> list[tuple[Any, int, int, int]]:
        """(stratum, offer, rows missing `outcome`, rows) for cells missing some, sorted."""
        role = self._role(outcome)
        g = self.groups.assign(gone=self.groups["n"] - self.groups[f"n_{role}"])
        cells = g.groupby(["stratum", "offer"], sort=False)[["gone", "n"]].sum()
        out = [(s, int(z), int(m), int(n)) for (s, z), (m, n) in zip(
            cells.index, cells.to_numpy().tolist(), strict=True) if m]
        try:
            return sorted(out, key=lambda r: (r[0], r[1]))
        except TypeError:
            return out

    @property
    def labels(self) -> list[Any]:
        """Stratum labels of the kept rows."""
        return list(dict.fromkeys(self.groups["stratum"].tolist()))

    def arms(self) -> dict[Any, set[int]]:
        """Stratum label -> the offer arms it has."""
        out: dict[Any, set[int]] = {}
        for label, offer in zip(self.groups["stratum"].tolist(),
                                self.groups["offer"].tolist(), strict=True):
            out.setdefault(label, set()).add(int(offer))
        return out

    def probability_ranges(self) -> dict[Any, tuple[float, float]]:
        """Stratum label -> (smallest, largest) value of the probability column."""
        by = self.groups.groupby("stratum", sort=False).agg(lo=("min_prob", "min"),
                                                            hi=("max_prob", "max"))
        return {label: (float(lo), float(hi)) for label, lo, hi in zip(
            by.index.tolist(), by["lo"].tolist(), by["hi"].tolist(), strict=True)}


def _query(spec: Spec, roles: Roles) -> str:
    ranged = (roles.probability,) if roles.probability else ()
    return group_query(UNITS_VIEW, keys=roles.keys, centre_keys=centre_keys(spec, roles),
                       outcomes=roles.outcomes,
                       covariates=roles.covariates + roles.indicators,
                       uncentred=roles.indicators,
                       counted=roles.flags, ranged=ranged, total="FSUM",
                       centre_rows=CENTRE_ROWS)


def group_data(spec: Spec) -> GroupedData:
    """Read the data of `spec` with DuckDB into group moments, applying the data rules.

    Parameters
    ----------
    spec : Spec
        A validated spec.

    Returns
    -------
    GroupedData
        The kept rows as group moments, with fingerprints and drop counts.

    Raises
    ------
    DataError
        As `loading.load_data`, with its message, for any data the row reader refuses.
    """
    if spec.data_kind == "moments":
        from .moment_table import read_moment_table

        return read_moment_table(spec)
    digests = distinct_digests(spec)
    try:
        if spec.reading.engine == "spark":
            from .spark_units import spark_group_frame

            roles, frame = spark_group_frame(spec, CENTRE_ROWS)
        else:
            roles, frame = _duckdb_frame(spec)
    except UnreadableError:
        return from_rows(spec, load_data(spec))
    return _finish(spec, roles, frame, digests) or from_rows(spec, load_data(spec))


def _duckdb_frame(spec: Spec) -> tuple[Roles, pd.DataFrame]:
    """The grouped table of `spec`'s files, by DuckDB in this process."""
    import duckdb

    connection = duckdb.connect()
    try:
        roles = units_view(connection, spec)
        return roles, connection.execute(_query(spec, roles)).df()
    except duckdb.Error as exc:
        raise UnreadableError(str(exc)) from None
    finally:
        connection.close()


def _null(frame: pd.DataFrame, column: str) -> np.ndarray:
    return frame[column].isna().to_numpy()


def _finish(spec: Spec, roles: Roles, frame: pd.DataFrame,
            digests: list[str]) -> GroupedData | None:
    """The GroupedData of the query result, or None when the row reader must speak."""
    cols = spec.columns
    if frame.empty:
        return None
    frame = frame.copy()  # one block per type: an engine's result can arrive column by column
    for flag in roles.flags:
        if frame[flag].fillna(0).to_numpy().any():
            return None
    for arm in ("offer", "take_up"):
        if (frame[arm].fillna(0).to_numpy() == 2).any():
            return None
    n = frame["n"].to_numpy().astype(np.int64)
    names = _incomplete_columns(spec)
    view = {cols.offer: "offer", cols.take_up: "take_up"}
    view.update(zip(cols.stratum, roles.strata, strict=True))
    if cols.cluster:
        view[cols.cluster] = "cluster"
    incomplete = np.zeros(len(frame), dtype=bool)
    dropped = {}
    arms = {}
    offer = frame["offer"].to_numpy(dtype=float, na_value=np.nan)
    for name in names:
        miss = frame["prob_missing"].to_numpy(dtype=bool) if name not in view \
            else _null(frame, view[name])
        if miss.any() and not spec.drop_incomplete_rows:
            return None
        here = miss & ~incomplete
        dropped[name] = int(n[here].sum())
        if name != cols.offer:  # the offer is known for every row dropped after it
            arms[name] = (int(n[here & (offer == 1)].sum()), int(n[here & (offer == 0)].sum()))
        incomplete |= miss
    # groups in key order: the engine returns them in any order, and the cell table adds
    # them in the order given, so a fixed order gives the same bits on every run
    kept = frame[~incomplete].sort_values(list(roles.keys), kind="stable")
    if kept.empty:
        return None
    for role in roles.outcomes:
        top = kept[f"max_abs_{role}"].to_numpy(dtype=float, na_value=0.0)
        if (top > OUTCOME_LIMIT).any():
            return None
    files = [file_fingerprint(path, int(n[frame["file"].to_numpy() == i].sum()),
                              sha256=digests[i]) for i, path in enumerate(spec.data)]
    values = [_labels(frame, kept, part) for part in roles.strata]
    labels, stratum_parts = stratum_labels(spec, values, kept["file"].to_numpy())
    waves = group_waves(spec, kept["file"].to_numpy(), values[-1])
    groups = kept.drop(columns=list(roles.strata)).reset_index(drop=True)
    groups.insert(0, "stratum", labels)
    if waves is not None:
        groups["wave"] = waves
    if cols.cluster:
        groups["cluster"] = _labels(frame, kept, "cluster")
    return GroupedData(
        spec=spec, files=tuple(files), groups=groups, roles=roles,
        n_read=int(n.sum()),
        dropped=tuple((name, c) for name, c in dropped.items() if c),
        n_dropped=int(n[incomplete].sum()),
        dropped_by_arm=tuple((name, *arms[name]) for name, c in dropped.items()
                             if c and name in arms),
        stratum_parts=stratum_parts,
    )


def _labels(frame: pd.DataFrame, kept: pd.DataFrame, column: str) -> np.ndarray:
    """Labels of the kept groups, by the row reader's rule applied to each file's values."""
    out = np.empty(len(kept), dtype=object)
    files = kept["file"].to_numpy()
    for index in np.unique(frame["file"].to_numpy()):
        raw = frame.loc[frame["file"] == index, column].dropna()
        values = pd.unique(raw.to_numpy(dtype=object))
        parsed = parse_label(list(values))
        mapping = dict(zip(values.tolist(), parsed.values.tolist(), strict=True))
        here = files == index
        out[here] = [mapping[v] for v in kept.loc[here, column].tolist()]
    return out


def from_rows(spec: Spec, dataset: Dataset) -> GroupedData:
    """Group moments of rows already read by the row reader (same query, run by DuckDB).

    Parameters
    ----------
    spec : Spec
        The validated spec.
    dataset : Dataset
        The rows after the data rules.

    Returns
    -------
    GroupedData
        As `group_data` gives for the same files.
    """
    import duckdb

    roles = roles_of(spec)
    units = pd.DataFrame({"file": dataset.file_index, "s0": dataset.stratum,
                          "offer": dataset.offer, "take_up": dataset.take_up})
    strata = ("s0",)
    if spec.wave_column is not None:  # the wave as a second key (`centre_keys` knows it)
        units["s1"] = dataset.wave
        strata = ("s0", "s1")
    roles = Roles(strata=strata, outcomes=roles.outcomes, covariates=roles.covariates,
                  cluster=roles.cluster, probability=roles.probability)
    if roles.cluster:
        units["cluster"] = dataset.cluster
    for role, name in zip(roles.outcomes, spec.columns.outcome, strict=True):
        units[role] = dataset.outcomes[name]
    for role, name in zip(roles.covariates, spec.columns.covariates, strict=True):
        units[role] = dataset.covariates[name]
        units["m" + role[1:]] = np.isnan(dataset.covariates[name]).astype(float)
    if roles.probability:
        units["prob"] = dataset.offer_probability
        units["prob_missing"] = False
    for flag in roles.flags:
        units[flag] = 0
    connection = duckdb.connect()
    try:
        connection.register(UNITS_VIEW, units)
        frame = connection.execute(_query(spec, roles)).df()
    finally:
        connection.close()
    groups = frame.sort_values(list(roles.keys), kind="stable").reset_index(drop=True)
    groups = groups.rename(columns={"s0": "stratum", "s1": "wave"})
    if spec.wave_column is None and dataset.wave is not None:
        groups["wave"] = group_waves(spec, groups["file"].to_numpy(), None)
    groups["stratum"] = _integer_labels(groups["stratum"].to_numpy(dtype=object).astype(str)) \
        if not dataset.stratum_parts else groups["stratum"].to_numpy(dtype=object)
    return GroupedData(spec=spec, files=dataset.files, groups=groups, roles=roles,
                       n_read=dataset.n_read, dropped=dataset.dropped,
                       n_dropped=dataset.n_dropped, stratum_parts=dataset.stratum_parts,
                       dropped_by_arm=dataset.dropped_by_arm,
                       dataset=dataset)

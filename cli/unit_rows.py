"""The unit rows of one outcome, for the checks that need rows (randomization inference).

Clean data are summarised by one GROUP BY and never held row by row (`grouped.py`); a
check that re-draws the offers needs, per unit, the outcome, take-up, offer, stratum and
cluster. DuckDB reads just those columns from the same view of checked roles, and the stratum
of each row gets the label the run gave its group, by the same rule (`grouped._labels`). A
moment table holds no rows.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from .errors import DataError
from .grouped import GroupedData, _labels
from .loading import stratum_labels
from .units_sql import UNITS_VIEW, units_view

__all__ = ["OutcomeRows", "outcome_rows"]


@dataclass(frozen=True, slots=True, eq=False)
class OutcomeRows:
    """The kept rows that have one outcome."""

    outcome: np.ndarray
    take_up: np.ndarray
    offer: np.ndarray
    stratum: np.ndarray
    cluster: np.ndarray | None
    covariates: np.ndarray | None = None
    """(n, k) covariate values, NaN where missing; None without covariates."""


def _from_dataset(data: GroupedData, names: list[str]) -> OutcomeRows:
    rows = data.rows()
    y = np.column_stack([rows.outcomes[n] for n in names])
    keep = ~np.isnan(y).any(axis=1)
    y = y[:, 0] if len(names) == 1 else y
    covariates = None
    if data.roles.covariates:
        raw = np.column_stack([rows.covariates[c][keep] for c in data.spec.columns.covariates])
        covariates = raw
    return OutcomeRows(y[keep], rows.take_up[keep], rows.offer[keep], rows.stratum[keep],
                       None if rows.cluster is None else rows.cluster[keep], covariates)


def outcome_rows(data: GroupedData, name: str | list[str],
                 purpose: str = "randomization inference re-draws the offers of the unit rows"
                 ) -> OutcomeRows:
    """The kept rows with outcome `name`, read again by DuckDB (or taken from the row reader).

    With a list of outcomes: the rows that have all of them, the outcome an (n, m) array.
    `purpose` says, in the message for a moment table, why rows are needed.

    Raises
    ------
    DataError
        For a moment table, which holds no rows.
    """
    if data.from_moments:
        raise DataError(None, None, (), f"{purpose}, and the run reads a moment table",
                        "run the same spec on the row data (data: instead of moments:)")
    names = [name] if isinstance(name, str) else list(name)
    if data.dataset is not None:
        return _from_dataset(data, names)
    import duckdb

    spec = data.spec
    connection = duckdb.connect()
    try:
        roles = units_view(connection, spec)
        ys = [roles.outcomes[data.outcomes.index(n)] for n in names]
        parts = list(roles.strata)
        wanted = ["file", *parts, "offer", "take_up", *ys] + \
            (["cluster"] if roles.cluster else [])
        wanted += list(data.roles.covariates)
        complete = " AND ".join(f"{c} IS NOT NULL" for c in
                                [*parts, "offer", "take_up", *ys]
                                + (["cluster"] if roles.cluster else []))
        if roles.probability:
            complete += " AND NOT prob_missing"
        frame = connection.execute(
            f"SELECT {', '.join(wanted)} FROM {UNITS_VIEW} WHERE {complete}").df()
    finally:
        connection.close()
    combos = frame[["file", *parts]].drop_duplicates().reset_index(drop=True)
    combos["stratum_label"], _ = stratum_labels(
        spec, [_labels(combos, combos, p) for p in parts], combos["file"].to_numpy(),
        check=False)
    frame = frame.merge(combos, on=["file", *parts], how="left")
    cluster = None
    if roles.cluster:
        cluster = frame["cluster"].astype(str).to_numpy()
    stratum = frame["stratum_label"].to_numpy(dtype=object)
    covariates = None
    if data.roles.covariates:
        covariates = frame[list(data.roles.covariates)].to_numpy(dtype=float, na_value=np.nan)
    y = frame[ys].to_numpy(dtype=float)
    return OutcomeRows(y[:, 0] if len(ys) == 1 else y, frame["take_up"].to_numpy(dtype=float),
                       frame["offer"].to_numpy(dtype=np.int64), stratum, cluster, covariates)

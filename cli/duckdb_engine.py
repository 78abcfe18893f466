"""The DuckDB engine: runs the generated moment query over a file or a pandas frame.

This module only runs SQL: the query text comes from `strativ.estimators.moment_query` and
the statistics from `strativ.estimators.cells_from_moments`. DuckDB is imported on first use,
so importing this module loads nothing heavy.
"""

from __future__ import annotations

from collections.abc import Sequence
from pathlib import Path
from typing import TYPE_CHECKING, Any

from .errors import DataError

if TYPE_CHECKING:
    import pandas as pd

__all__ = ["SOURCE_VIEW", "moment_frame", "run_query"]

SOURCE_VIEW = "strativ_units"
"""Name of the view the rows are shown to the query under."""

_PARQUET_SUFFIXES = (".parquet", ".pq")


def _register(connection: Any, data: str | Path | pd.DataFrame) -> Path | None:
    """Show ``data`` to ``connection`` as `SOURCE_VIEW`; returns the file, if any."""
    if not isinstance(data, str | Path):
        connection.register(SOURCE_VIEW, data)
        return None
    path = Path(data)
    if path.suffix.lower() in _PARQUET_SUFFIXES:
        relation = connection.read_parquet(str(path))
    else:
        relation = connection.read_csv(str(path))
    relation.create_view(SOURCE_VIEW)
    return path


def run_query(sql: str, data: str | Path | pd.DataFrame) -> pd.DataFrame:
    """Run ``sql`` with DuckDB over ``data`` shown as the view `SOURCE_VIEW`.

    Parameters
    ----------
    sql : str
        The query; it reads the rows from `SOURCE_VIEW`.
    data : str, Path or pandas.DataFrame
        A Parquet file (``.parquet``, ``.pq``), a CSV file (anything else; DuckDB's sniffer
        finds the delimiter and types), or a frame of units.

    Returns
    -------
    pandas.DataFrame
        The query's result.

    Raises
    ------
    DataError
        When DuckDB cannot read the data or run the query (a missing column, a text value
        where a number is needed); the message is DuckDB's first line.
    """
    import duckdb

    connection = duckdb.connect()
    path = None
    try:
        path = _register(connection, data)
        return connection.execute(sql).df()
    except duckdb.Error as error:
        first_line = str(error).strip().splitlines()[0] if str(error).strip() else repr(error)
        raise DataError(
            path,
            None,
            (),
            f"the moment query failed: {first_line}",
            "check the column names in the spec and that numeric columns hold numbers.",
        ) from error
    finally:
        connection.close()


def moment_frame(
    data: str | Path | pd.DataFrame,
    *,
    outcome: str,
    take_up: str,
    offer: str,
    stratum: str,
    cluster: str | None = None,
    covariates: Sequence[str] = (),
) -> pd.DataFrame:
    """The moment table of ``data``: one row per (stratum, offer, take-up[, cluster]) group.

    Parameters
    ----------
    data : str, Path or pandas.DataFrame
        As in `run_query`.
    outcome, take_up, offer, stratum : str
        Column names in ``data``.
    cluster : str, optional
        Cluster column.
    covariates : sequence of str, default=()
        Covariate columns.

    Returns
    -------
    pandas.DataFrame
        The result of `strativ.estimators.moment_query`, ready for
        `strativ.estimators.cells_from_moments`.

    Raises
    ------
    DataError
        As in `run_query`.
    """
    from strativ.estimators import moment_query

    sql = moment_query(
        SOURCE_VIEW,
        outcome=outcome,
        take_up=take_up,
        offer=offer,
        stratum=stratum,
        cluster=cluster,
        covariates=covariates,
    )
    return run_query(sql, data)

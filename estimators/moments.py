"""Per-group moments: one GROUP BY query that any SQL engine runs, and the cell table from its
result (METHODS.md §2 and §6).

A group is (stratum, offer, take-up[, cluster]). Within a group the take-up is constant, so
the count gives every take-up moment and only the outcome (and, later, each covariate) needs
sums. Each variable is centred on its stratum's minimum before summing, so a large common
level (mean 1e9, spread 1) loses no precision; the minimum travels with the sums. The moment
columns are declared once in `moment_columns`; `moment_query` writes the SQL from that list
and `cells_from_moments` reads its result into the `CellTable` that `build_cells` gives for
the same rows.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np
import pandas as pd

from .cells import (
    CellTable,
    _as_binary,
    _cell_arrays_from_fine,
    _factorize,
    _plain,
    cluster_sums_from_totals,
)
from .errors import InputError

__all__ = [
    "KEY_COLUMNS",
    "MOMENT_COLUMNS",
    "MomentColumn",
    "cells_from_moments",
    "moment_columns",
    "moment_query",
]

KEY_COLUMNS = ("stratum", "offer", "take_up")
"""Group columns of the moment table, in order; ``cluster`` follows when there is one."""


@dataclass(frozen=True, slots=True)
class MomentColumn:
    """One column of the moment table: the sum over a group of a product of centred variables."""

    name: str
    """Column name in the query's result."""
    factors: tuple[str, ...]
    """Centred variables multiplied in each row: () is the count, one name a plain sum, two
    names a sum of products."""


def _variables(n_covariates: int) -> tuple[str, ...]:
    return ("outcome", *(f"x{j}" for j in range(1, n_covariates + 1)))


def moment_columns(n_covariates: int = 0) -> tuple[MomentColumn, ...]:
    """The moment columns of one group, declared once for the query and its reader.

    Parameters
    ----------
    n_covariates : int, default=0
        Number of covariates; they are named ``x1 .. xk`` in the order given to
        `moment_query`.

    Returns
    -------
    tuple of MomentColumn
        The count ``n``; the sum of each variable (``sum_outcome``, ``sum_x1``, ...); the sum
        of each product of two variables, squares first in each row (``sum_outcome_sq``,
        ``sum_outcome_x1``, ``sum_x1_sq``, ``sum_x1_x2``, ...).

    Notes
    -----
    Take-up is a group column, so its sums are the count times its value. METHODS.md §6 lists
    the moments covariate adjustment reads: these columns, per (stratum, offer, take-up).
    """
    variables = _variables(n_covariates)
    columns = [MomentColumn("n", ())]
    columns += [MomentColumn(f"sum_{v}", (v,)) for v in variables]
    for i, first in enumerate(variables):
        columns.append(MomentColumn(f"sum_{first}_sq", (first, first)))
        columns += [MomentColumn(f"sum_{first}_{w}", (first, w)) for w in variables[i + 1 :]]
    return tuple(columns)


MOMENT_COLUMNS = moment_columns()
"""The outcome-only moment columns: ``n``, ``sum_outcome``, ``sum_outcome_sq``."""


def _quote(identifier: str) -> str:
    """A backquoted identifier, as DuckDB and Spark SQL both read it."""
    if not isinstance(identifier, str) or not identifier:
        raise InputError("identifier", f"expected a non-empty name, got {identifier!r}.")
    if "\x00" in identifier:
        raise InputError("identifier", f"name {identifier!r} holds a NUL character; rename it.")
    return "`" + identifier.replace("`", "``") + "`"


def _source_name(source: str | Sequence[str]) -> str:
    parts = [source] if isinstance(source, str) else list(source)
    if not parts:
        raise InputError("source", "expected a table or view name, got an empty sequence.")
    return ".".join(_quote(part) for part in parts)


def moment_query(
    source: str | Sequence[str],
    *,
    outcome: str,
    take_up: str,
    offer: str,
    stratum: str,
    cluster: str | None = None,
    covariates: Sequence[str] = (),
) -> str:
    """The SQL text of the one GROUP BY query that gives the moment table.

    Parameters
    ----------
    source : str or sequence of str
        Table or view holding one row per unit; a sequence is a qualified name
        (``("catalog", "schema", "table")``).
    outcome, take_up, offer, stratum : str
        Column names in ``source``.
    cluster : str, optional
        Cluster column; the groups then split by cluster as well.
    covariates : sequence of str, default=()
        Covariate columns, named ``x1 .. xk`` in the result in this order.

    Returns
    -------
    str
        One query (two common table expressions and a GROUP BY) that DuckDB and Spark SQL
        both run unchanged. Its result has one row per (stratum, offer, take-up[, cluster])
        group with the key columns ``stratum``, ``offer``, ``take_up`` [``cluster``], then
        the columns of `moment_columns`, then for each variable ``v`` its stratum centre
        ``centre_v`` and its count of missing values ``n_missing_v``.

    Raises
    ------
    InputError
        When a name is empty or not a string, holds a NUL character, or a column is named
        twice among the roles.

    Notes
    -----
    Every identifier is backquoted (an embedded backquote doubled). Only standard SQL both
    engines accept is used: common table expressions, an inner join on ``IS NOT DISTINCT
    FROM`` (so a missing stratum label stays a group and is reported), ``GROUP BY``, ``MIN``,
    ``SUM``, ``COUNT`` and ``CAST(... AS DOUBLE)``. The per-stratum centre is a grouped
    minimum joined back to the rows, which streams over data larger than memory. Offer and
    take-up keep their type (``cells_from_moments`` checks they are 0/1). METHODS.md §2, §6.

    Examples
    --------
    >>> sql = moment_query("units", outcome="y", take_up="d", offer="z", stratum="s")
    >>> sql.splitlines()[0]
    'WITH `strativ_centres` AS ('
    """
    keys = {"stratum": stratum, "offer": offer, "take_up": take_up}
    if cluster is not None:
        keys["cluster"] = cluster
    names = [*keys.values(), outcome, *covariates]
    for name in names:
        _quote(name)
    repeated = sorted({n for n in names if names.count(n) > 1})
    if repeated:
        raise InputError("columns", f"column {repeated[0]!r} is named for two roles; name it once.")
    table = _source_name(source)
    variables = _variables(len(covariates))
    raw = dict(zip(variables, (outcome, *covariates), strict=True))
    key = _quote("stratum_key")
    centres, centred = _quote("strativ_centres"), _quote("strativ_centred")

    centre_lines = [
        f"    MIN(CAST({_quote(raw[v])} AS DOUBLE)) AS {_quote('centre_' + v)}" for v in variables
    ]
    row_lines = [f"    r.{_quote(raw_name)} AS {_quote(role)}" for role, raw_name in keys.items()]
    for v in variables:
        centre = f"c.{_quote('centre_' + v)}"
        row_lines.append(f"    CAST(r.{_quote(raw[v])} AS DOUBLE) - {centre} AS {_quote(v)}")
        row_lines.append(f"    {centre} AS {_quote('centre_' + v)}")
    groups = [_quote(k) for k in keys]
    sum_lines = []
    for column in moment_columns(len(covariates)):
        if column.factors:
            product = " * ".join(_quote(f) for f in column.factors)
            sum_lines.append(f"    SUM({product}) AS {_quote(column.name)}")
        else:
            sum_lines.append(f"    COUNT(*) AS {_quote(column.name)}")
    for v in variables:
        sum_lines.append(f"    MIN({_quote('centre_' + v)}) AS {_quote('centre_' + v)}")
        sum_lines.append(f"    COUNT(*) - COUNT({_quote(v)}) AS {_quote('n_missing_' + v)}")
    sep = ",\n"
    return (
        f"WITH {centres} AS (\n"
        f"  SELECT\n    {_quote(stratum)} AS {key},\n{sep.join(centre_lines)}\n"
        f"  FROM {table}\n"
        f"  GROUP BY {_quote(stratum)}\n"
        f"),\n"
        f"{centred} AS (\n"
        f"  SELECT\n{sep.join(row_lines)}\n"
        f"  FROM {table} AS r\n"
        f"  JOIN {centres} AS c ON r.{_quote(stratum)} IS NOT DISTINCT FROM c.{key}\n"
        f")\n"
        f"SELECT\n    {', '.join(groups)},\n{sep.join(sum_lines)}\n"
        f"FROM {centred}\n"
        f"GROUP BY {', '.join(groups)}\n"
    )


def _column(frame: pd.DataFrame, name: str) -> np.ndarray:
    values = frame[name].to_numpy(dtype=float, na_value=np.nan)
    if not np.isfinite(values).all():
        row = int(np.flatnonzero(~np.isfinite(values))[0])
        raise InputError(
            name, f"non-finite value {float(values[row])!r} at row {row} of the moment table."
        )
    return values


def cells_from_moments(frame: pd.DataFrame) -> CellTable:
    """The cell table from the result of `moment_query`.

    Parameters
    ----------
    frame : pandas.DataFrame
        One row per (stratum, offer, take-up[, cluster]) group with the columns ``stratum``,
        ``offer`` and ``take_up`` (0/1 or bool), ``n``, ``sum_outcome``, ``sum_outcome_sq``
        and ``centre_outcome`` (sums of the outcome minus ``centre_outcome``), optionally
        ``n_missing_outcome`` and ``cluster``. Other columns (covariate moments) are
        ignored. Rows with the same key are added, as partial sums of one group.

    Returns
    -------
    CellTable
        The table `build_cells` gives for the underlying rows, with `ClusterSums` when the
        frame has a ``cluster`` column.

    Raises
    ------
    InputError
        When a column is missing, the frame is empty, offer or take-up is not 0/1, a count is
        negative or not whole, a group has no units, an outcome is missing
        (``n_missing_outcome`` > 0), a sum is not finite, a stratum or cluster label is
        missing, or a cluster spans (stratum, offer) cells.

    Notes
    -----
    Each group gives its mean ``m_g`` relative to its stratum's centre ``c_s`` (the smallest
    centre among the stratum's rows, so tables aggregated apart still combine) and its
    centred sum of squares ``Σv² − (Σv)²/n``. Groups pool into (stratum, offer, take-up)
    cells exactly: ``SS = Σ ss_g + Σ n_g (m_g − M)²``; the cells then combine into
    (stratum, offer) cells as in `build_cells`. With clusters, cluster ``c`` of cell ``k``
    has size ``m_c = Σ n_g`` and deviation totals ``Σ n_g (m_g − ȳ_k)`` and
    ``Σ n_g (d_g − d̄_k)`` over its groups, which give every `ClusterSums` array.
    METHODS.md §2 and §4.
    """
    required = [*KEY_COLUMNS, *(c.name for c in MOMENT_COLUMNS), "centre_outcome"]
    missing = [c for c in required if c not in frame.columns]
    if missing:
        raise InputError("frame", f"missing columns {missing}; expected {required}.")
    if len(frame) == 0:
        raise InputError("frame", "no groups; the moment table has no rows.")
    offer = _as_binary(frame["offer"].to_numpy(), "offer")
    take_up = _as_binary(frame["take_up"].to_numpy(), "take_up")
    codes, labels = _factorize(frame["stratum"].to_numpy(), "stratum")
    n_strata = len(labels)
    count = _column(frame, "n")
    if (count <= 0).any() or (count != np.round(count)).any():
        row = int(np.flatnonzero((count <= 0) | (count != np.round(count)))[0])
        raise InputError("n", f"count {count[row]!r} at row {row}; counts are whole and >= 1.")
    if "n_missing_outcome" in frame.columns:
        absent = _column(frame, "n_missing_outcome")
        if (absent != 0).any():
            row = int(np.flatnonzero(absent != 0)[0])
            raise InputError(
                "outcome",
                f"{int(absent[row])} missing values in stratum "
                f"{_plain(labels[codes[row]])!r} (row {row} of the moment table); drop or "
                "impute them first.",
            )
    first, second = _column(frame, "sum_outcome"), _column(frame, "sum_outcome_sq")
    group_centre = _column(frame, "centre_outcome")
    centre = np.full(n_strata, np.inf)
    np.minimum.at(centre, codes, group_centre)
    mean_g = first / count + (group_centre - centre[codes])
    ss_g = np.maximum(second - first * first / count, 0.0)

    cell = codes * 2 + offer
    fine = cell * 2 + take_up
    size = 4 * n_strata
    fine_count = np.bincount(fine, weights=count, minlength=size)
    safe = np.maximum(fine_count, 1.0)
    fine_mean = np.bincount(fine, weights=count * mean_g, minlength=size) / safe
    spread = mean_g - fine_mean[fine]
    fine_ss = np.bincount(fine, weights=ss_g + count * spread * spread, minlength=size)
    arrays = _cell_arrays_from_fine(fine_count.astype(np.int64), fine_mean, fine_ss, n_strata)

    clusters = None
    if "cluster" in frame.columns:
        cluster = frame["cluster"].to_numpy()
        cluster_codes, _ = _factorize(cluster, "cluster")
        mean_y = arrays["mean_outcome"].reshape(-1)[cell]
        mean_d = arrays["mean_take_up"].reshape(-1)[cell]
        clusters = cluster_sums_from_totals(
            cluster_codes,
            cluster,
            cell,
            count,
            count * (mean_g - mean_y),
            count * (take_up - mean_d),
            2 * n_strata,
            place="row {} of the moment table",
        )
    arrays["mean_outcome"] = np.where(
        arrays["n"] > 0, arrays["mean_outcome"] + centre[:, None], 0.0
    )
    return CellTable(labels=labels, clusters=clusters, **arrays)

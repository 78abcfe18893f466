"""The grouped moment query of a whole run: every outcome, every check, one GROUP BY.

`moment_query` (moments.py) gives the moment table of one outcome. A run needs more from the
same pass over the rows: the moments of several outcomes (each over the rows where it is
present, so attrition is per outcome), the counts of values a check refuses, the largest
magnitude of each outcome, and the range of a design-probability column, all per group of
(key columns). This module writes that query once, from a list of `GroupColumn`; any SQL
engine with common table expressions, ``IS NOT DISTINCT FROM`` and ``CAST(... AS DOUBLE)``
runs it (DuckDB, Spark SQL).

Each outcome is centred on its minimum within its centring group (the stratum) before
summing, as in `moment_query`, so a large common level loses no precision.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass

from .errors import InputError
from .moments import _quote, _source_name

__all__ = ["GroupColumn", "group_columns", "group_query"]


@dataclass(frozen=True, slots=True)
class GroupColumn:
    """One result column of `group_query`."""

    name: str
    """Column name in the result."""
    aggregate: str
    """SQL aggregate over the group (the source columns quoted)."""


def group_columns(
    outcomes: Sequence[str],
    *,
    covariates: Sequence[str] = (),
    counted: Sequence[str] = (),
    ranged: Sequence[str] = (),
    total: str = "SUM",
) -> tuple[GroupColumn, ...]:
    """The result columns of `group_query`, declared once.

    Parameters
    ----------
    outcomes : sequence of str
        Outcome columns of the source (numeric or NULL).
    covariates : sequence of str, default=()
        Covariate columns of the source (numeric or NULL), centred per stratum as the
        outcomes are.
    counted : sequence of str, default=()
        Integer flag columns (0/1) whose sum per group is wanted (for example, values a
        check refuses).
    ranged : sequence of str, default=()
        Numeric columns whose smallest and largest value per group are wanted.
    total : str, default="SUM"
        The engine's aggregate for the sums of centred values: ``SUM`` anywhere, or a
        compensated sum (DuckDB's ``FSUM``), whose result does not depend on the order in
        which parallel threads add their partial sums, so two runs give the same bits.

    Returns
    -------
    tuple of GroupColumn
        ``n`` (rows); per outcome ``v``: ``n_v`` (rows where present), ``sum_v`` and
        ``sum_v_sq`` (of ``v`` minus its centre), ``centre_v`` and ``max_abs_v``; per
        covariate ``x``, over all rows: ``n_x``, ``sum_x``, ``sum_x_sq``, ``centre_x``, and
        ``cross_x_w`` (of centred ``x`` times centred ``w``, ``x`` before ``w``); per
        outcome ``v`` and covariates ``x``, ``w`` (``x`` before ``w`` in the given order),
        over the rows where ``v`` is present: ``n_v_x`` (rows where ``x`` is present too),
        ``sum_v_x``, ``sum_v_v_x`` (of centred ``v`` times centred ``x``) and ``sum_v_x_w``
        (of centred ``x`` times centred ``w``), a missing covariate counting as its centre;
        per counted flag ``f``: ``f``; per ranged column ``r``: ``min_r``, ``max_r``.

    Notes
    -----
    The covariate columns are the moments that balance, complier characteristics and
    covariate adjustment read (METHODS.md §5 and §6); their number grows with the square of
    the number of covariates.
    """
    columns = [GroupColumn("n", "COUNT(*)")]
    for v in outcomes:
        q, c = _quote(v), _quote("centred_" + v)
        columns += [
            GroupColumn(f"n_{v}", f"COUNT({q})"),
            GroupColumn(f"sum_{v}", f"{total}({c})"),
            GroupColumn(f"sum_{v}_sq", f"{total}({c} * {c})"),
            GroupColumn(f"centre_{v}", f"MIN({_quote('centre_' + v)})"),
            GroupColumn(f"max_abs_{v}", f"MAX(ABS({q}))"),
        ]
    filled = {x: f"COALESCE({_quote('centred_' + x)}, CAST(0 AS DOUBLE))" for x in covariates}
    for x in covariates:
        c = _quote("centred_" + x)
        columns += [
            GroupColumn(f"n_{x}", f"COUNT({_quote(x)})"),
            GroupColumn(f"sum_{x}", f"{total}({c})"),
            GroupColumn(f"sum_{x}_sq", f"{total}({c} * {c})"),
            GroupColumn(f"centre_{x}", f"MIN({_quote('centre_' + x)})"),
        ]
    columns += [GroupColumn(f"cross_{x}_{w}", f"{total}({filled[x]} * {filled[w]})")
                for j, x in enumerate(covariates) for w in covariates[j + 1:]]
    for v in outcomes:
        present, c = f"{_quote(v)} IS NOT NULL", _quote("centred_" + v)
        for j, x in enumerate(covariates):
            columns += [
                GroupColumn(f"n_{v}_{x}", f"COUNT(CASE WHEN {present} THEN {_quote(x)} END)"),
                GroupColumn(f"sum_{v}_{x}",
                            f"{total}(CASE WHEN {present} THEN {filled[x]} END)"),
                GroupColumn(f"sum_{v}_{v}_{x}", f"{total}({c} * {filled[x]})"),
            ]
            columns += [
                GroupColumn(f"sum_{v}_{x}_{w}",
                            f"{total}(CASE WHEN {present} THEN {filled[x]} * {filled[w]} END)")
                for w in covariates[j:]
            ]
    columns += [GroupColumn(f, f"SUM(CAST({_quote(f)} AS BIGINT))") for f in counted]
    for r in ranged:
        columns += [GroupColumn(f"min_{r}", f"MIN({_quote(r)})"),
                    GroupColumn(f"max_{r}", f"MAX({_quote(r)})")]
    return tuple(columns)


def group_query(
    source: str | Sequence[str],
    *,
    keys: Sequence[str],
    centre_keys: Sequence[str],
    outcomes: Sequence[str],
    covariates: Sequence[str] = (),
    counted: Sequence[str] = (),
    ranged: Sequence[str] = (),
    total: str = "SUM",
    centre_rows: int | None = None,
    uncentred: Sequence[str] = (),
) -> str:
    """The SQL text of the one GROUP BY that summarises a run's rows.

    Parameters
    ----------
    source : str or sequence of str
        Table or view of one row per unit (a sequence is a qualified name).
    keys : sequence of str
        Group columns, in order (e.g. file, stratum parts, offer, take-up, cluster).
    centre_keys : sequence of str
        The subset of `keys` within which each outcome is centred (the stratum parts).
    outcomes : sequence of str
        Numeric outcome columns; NULL where missing.
    covariates, counted, ranged : sequence of str, default=()
        As in `group_columns`.
    total : str, default="SUM"
        As in `group_columns`.
    centre_rows : int, optional
        Take each stratum's centre from the first `centre_rows` rows only (strata absent
        from them use the smallest value among those rows, or 0), so the source is scanned
        once instead of twice. None (default): the smallest value of the whole stratum.
    uncentred : sequence of str, default=()
        Covariates summed as they are (centre 0), for example 0/1 indicators, whose sums
        then read directly as counts.

    Returns
    -------
    str
        One query: a common table expression of per-stratum centres, the rows with each
        outcome centred, and the GROUP BY. Its result has the key columns, then the columns
        of `group_columns`.

    Raises
    ------
    InputError
        When a name is invalid (see `moment_query`), a centre key is not a key, or a column
        is named twice.
    """
    names = [*keys, *outcomes, *covariates, *counted, *ranged]
    for name in names:
        _quote(name)
    repeated = sorted({n for n in names if names.count(n) > 1})
    if repeated:
        raise InputError("columns", f"column {repeated[0]!r} is named twice; name it once.")
    if total.upper() not in ("SUM", "FSUM"):
        raise InputError("total", f"expected SUM or FSUM, got {total!r}.")
    if not keys or not set(centre_keys) <= set(keys):
        raise InputError("centre_keys", "the centring columns must be group columns.")
    if centre_rows is not None and (not isinstance(centre_rows, int) or centre_rows < 1):
        raise InputError("centre_rows", f"expected a positive whole number, got {centre_rows!r}.")
    table = _source_name(source)
    centred = _quote("strativ_centred")
    if not set(uncentred) <= set(covariates):
        raise InputError("uncentred", "only covariates can be left uncentred.")
    if outcomes or covariates:
        prefix = _centring(table, centre_keys, [*outcomes, *covariates], centre_rows,
                           set(uncentred))
        body = centred
    else:
        prefix, body = "", table
    groups = ", ".join(_quote(k) for k in keys)
    sums = ",\n".join(
        f"    {c.aggregate} AS {_quote(c.name)}"
        for c in group_columns(outcomes, covariates=covariates, counted=counted, ranged=ranged,
                               total=total)
    )
    return f"{prefix}SELECT\n    {groups},\n{sums}\nFROM {body}\nGROUP BY {groups}\n"


def _centring(table: str, centre_keys: Sequence[str], variables: Sequence[str],
              centre_rows: int | None, fixed: set[str]) -> str:
    """The common table expressions that centre each variable within its stratum (those in
    `fixed` at 0)."""
    outcomes = [v for v in variables if v not in fixed]
    centres, centred = _quote("strativ_centres"), _quote("strativ_centred")
    by = ", ".join(_quote(k) for k in centre_keys)
    centre_select = ",\n".join(
        [f"    {_quote(k)}" for k in centre_keys]
        + [f"    MIN({_quote(v)}) AS {_quote('centre_' + v)}" for v in outcomes]
    )
    join = " AND ".join(f"r.{_quote(k)} IS NOT DISTINCT FROM c.{_quote(k)}" for k in centre_keys)
    row_lines = ["    r.*"]
    if centre_rows is None:
        head = (f"WITH {centres} AS (\n  SELECT\n{centre_select}\n  FROM {table}\n"
                f"  GROUP BY {by}\n),\n")
        joins = f"  JOIN {centres} AS c ON {join}\n"
        centre_of = {v: f"c.{_quote('centre_' + v)}" for v in outcomes}
    else:
        sample, overall = _quote("strativ_first_rows"), _quote("strativ_overall")
        overall_select = ",\n".join(
            f"    MIN({_quote(v)}) AS {_quote('overall_' + v)}" for v in outcomes)
        head = (f"WITH {sample} AS (\n  SELECT * FROM {table} LIMIT {centre_rows}\n),\n"
                f"{centres} AS (\n  SELECT\n{centre_select}\n  FROM {sample}\n"
                f"  GROUP BY {by}\n),\n"
                f"{overall} AS (\n  SELECT\n{overall_select}\n  FROM {sample}\n),\n")
        joins = f"  LEFT JOIN {centres} AS c ON {join}\n  CROSS JOIN {overall} AS o\n"
        centre_of = {v: f"COALESCE(c.{_quote('centre_' + v)}, o.{_quote('overall_' + v)}, "
                        "CAST(0 AS DOUBLE))" for v in outcomes}
    centre_of.update(dict.fromkeys(fixed, "CAST(0 AS DOUBLE)"))
    for v in variables:
        row_lines += [f"    r.{_quote(v)} - {centre_of[v]} AS {_quote('centred_' + v)}",
                      f"    {centre_of[v]} AS {_quote('centre_' + v)}"]
    rows = ",\n".join(row_lines)
    return head + f"{centred} AS (\n  SELECT\n{rows}\n  FROM {table} AS r\n{joins})\n"

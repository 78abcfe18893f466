"""The moment table as a file: written from rows by `strativ cells`, read back by a run.

An analyst who may not carry unit records out of a secure room runs `strativ cells` there
(or the query `strativ cells --sql` prints, on the room's own SQL engine) and carries out
only this table; a spec whose `moments` key names it then runs every estimator, interval
and diagnostic that needs only group moments, with the same numbers as the run on rows.

Columns (one row per group; rows with the same key are parts of one group and are added):

- the spec's stratum column(s), offer column, take-up column and cluster column (if any),
  with the values of the group (offer and take-up 0/1);
- ``n``: rows in the group;
- per outcome ``y``: ``n_y`` (rows where ``y`` is present), ``sum_y`` and ``sum_y_sq`` (sums
  of ``y − centre_y`` and of its square over those rows), ``centre_y`` (any value near the
  stratum's outcomes; the query uses the stratum's smallest), ``max_abs_y`` (largest |y|);
- per covariate ``x`` (when the spec names covariates): ``n_x``, ``sum_x``, ``sum_x_sq``,
  ``centre_x`` likewise over all rows of the group, and per pair ``x``, ``w`` (spec order)
  ``cross_x_w``, the sum of the products of the centred values, a missing value counting as
  its centre; per outcome ``y`` the same over the rows where ``y`` is present: ``n_y_x``,
  ``sum_y_x``, ``sum_y_y_x`` (products with the centred outcome) and ``sum_y_x_w``; each
  covariate ``x`` also has its missing indicator ``x_missing`` (1 where missing, not centred)
  among these columns. A table without them runs everything except the covariate checks and
  adjustment.

Rows dropped for a missing offer, take-up or stratum and the row files' fingerprints are not
in the table: a run on it records the table's own fingerprint and its rows as kept rows.
Groups of one or a few units reveal those units' outcomes: check the room's disclosure
rules (for example a minimum group size) before carrying a table out.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd

from strativ.estimators import group_query

from .errors import DataError
from .files import atomic_write_bytes
from .fingerprints import file_fingerprint
from .grouped import GroupedData
from .loading import STRATUM_JOIN, _integer_labels, _label_parts
from .spec import Spec
from .units_sql import Roles, roles_of
from .values import parse_binary, parse_label, parse_number
from .waves import WAVE_PART, part_names, pools_column, splits_strata

__all__ = ["MOMENT_FIELDS", "moment_sql", "read_moment_table", "write_moment_table"]

MOMENT_FIELDS = ("n_{}", "sum_{}", "sum_{}_sq", "centre_{}", "max_abs_{}")
"""Per-outcome columns of the table, formatted with the outcome's name."""
COVARIATE_FIELDS = ("n_{}", "sum_{}", "sum_{}_sq", "centre_{}")
"""Per-covariate columns of the table (over all rows of the group)."""


def _extended(names: tuple[str, ...], roles: Roles) -> tuple[tuple[str, ...], tuple[str, ...]]:
    """Covariate names and view columns followed by their missing indicators
    (``<name>_missing``)."""
    return (tuple(names) + tuple(f"{n}_missing" for n in names),
            tuple(roles.covariates) + roles.indicators)


def _covariate_columns(names: tuple[str, ...], roles: tuple[str, ...],
                       outcomes: tuple[str, ...] = (), outcome_roles: tuple[str, ...] = ()
                       ) -> list[tuple[str, str]]:
    """(table column, grouped column) of every covariate moment: the per-covariate fields,
    ``cross_x_w`` for each pair, and per outcome ``y`` the sums over its rows: ``n_y_x``,
    ``sum_y_x``, ``sum_y_y_x`` and ``sum_y_x_w``."""
    out = [(f.format(name), f.format(role)) for name, role in zip(names, roles, strict=True)
           for f in COVARIATE_FIELDS]
    pairs = [(j, i) for j in range(len(names)) for i in range(j, len(names))]
    out += [(f"cross_{names[j]}_{names[i]}", f"cross_{roles[j]}_{roles[i]}")
            for j, i in pairs if i > j]
    for y, v in zip(outcomes, outcome_roles, strict=True):
        for name, role in zip(names, roles, strict=True):
            out += [(f"n_{y}_{name}", f"n_{v}_{role}"), (f"sum_{y}_{name}", f"sum_{v}_{role}"),
                    (f"sum_{y}_{y}_{name}", f"sum_{v}_{v}_{role}")]
        out += [(f"sum_{y}_{names[j]}_{names[i]}", f"sum_{v}_{roles[j]}_{roles[i]}")
                for j, i in pairs]
    return out


def _keys(spec: Spec) -> list[str]:
    cols = spec.columns
    return [*cols.stratum, cols.offer, cols.take_up, *([cols.cluster] if cols.cluster else [])]


def moment_sql(spec: Spec, table: str = "units") -> str:
    """The query that gives the moment table of `spec` from a table of clean unit rows.

    Parameters
    ----------
    spec : Spec
        The validated spec (its column names are the table's).
    table : str, default="units"
        The table or view holding one row per unit: offer and take-up 0/1, outcomes numeric
        and NULL where missing, no missing stratum, offer or take-up; when the spec's input
        files split the strata into waves, also a column ``wave`` holding each row's wave
        (its file's name without suffixes).

    Returns
    -------
    str
        Standard SQL (common table expressions, ``GROUP BY``, ``SUM``) for any engine.
    """
    strata = list(spec.columns.stratum)
    keys = _keys(spec)
    if splits_strata(spec):  # each input file's wave is part of the stratum
        strata.append(WAVE_PART)
        keys.insert(len(spec.columns.stratum), WAVE_PART)
    if pools_column(spec):  # the wave column is a key, but strata pool across its values
        strata = strata[:-1]
    return group_query(table, keys=keys, centre_keys=strata,
                       outcomes=list(spec.columns.outcome),
                       covariates=list(spec.columns.covariates))


def _table(data: GroupedData) -> pd.DataFrame:
    spec, g = data.spec, data.groups
    cols = spec.columns
    out: dict[str, np.ndarray | list] = {}  # one frame at the end, not column by column
    if data.stratum_parts:
        parts = [data.stratum_parts[label] for label in g["stratum"].tolist()]
        for i, name in enumerate(part_names(spec, data)):
            out[name] = [p[i] for p in parts]
    else:
        out[cols.stratum[0]] = g["stratum"].to_numpy(dtype=object)
    if pools_column(spec):
        out[spec.wave_column] = g["wave"].to_numpy(dtype=object)
    out[cols.offer] = g["offer"].to_numpy(dtype=np.int64)
    out[cols.take_up] = g["take_up"].to_numpy(dtype=np.int64)
    if cols.cluster:
        out[cols.cluster] = g["cluster"].to_numpy(dtype=object)
    out["n"] = g["n"].to_numpy(dtype=np.int64)
    for name, role in zip(cols.outcome, data.roles.outcomes, strict=True):
        for field in MOMENT_FIELDS:
            values = g[field.format(role)]
            out[field.format(name)] = values.to_numpy(dtype=np.int64) if field == "n_{}" \
                else values.to_numpy(dtype=float, na_value=np.nan)
    for name, column in _covariate_columns(*_extended(cols.covariates, data.roles), cols.outcome,
                                           data.roles.outcomes):
        out[name] = g[column].to_numpy(dtype=np.int64) if name.startswith("n_") \
            else g[column].to_numpy(dtype=float, na_value=np.nan)
    return pd.DataFrame(out)


def write_moment_table(data: GroupedData, path: Path) -> Path:
    """Write the moment table of `data` to `path` (CSV, or Parquet by suffix), atomically.

    Parameters
    ----------
    data : GroupedData
        The run's data (`grouped.group_data`).
    path : Path
        Target file; ``.parquet``/``.pq`` write Parquet, anything else CSV.

    Returns
    -------
    Path
        The file written.
    """
    table = _table(data)
    if path.suffix.lower() in (".parquet", ".pq"):
        import io

        buffer = io.BytesIO()
        for column in table.columns:
            if table[column].dtype == object:
                kinds = {type(v) for v in table[column].tolist()}
                if kinds != {str} and kinds != {int}:
                    table[column] = table[column].astype(str)
        table.to_parquet(buffer, index=False)
        payload = buffer.getvalue()
    else:
        # repr-exact floats: the table read back gives the same sums to the last bit
        payload = table.to_csv(index=False, float_format="%.17g").encode("utf-8")
    atomic_write_bytes(path, payload)
    return path


def _need(frame: pd.DataFrame, path: Path, names: list[str], spec: Spec) -> None:
    absent = [n for n in names if n not in frame.columns]
    if absent:
        raise DataError(path, absent[0], (), f"the moment table has no column '{absent[0]}'",
                        f"write it with 'strativ cells {spec.path.name} --out FILE' or the "
                        "query of 'strativ cells --sql'; columns: stratum, offer, take-up, "
                        "cluster, n, and n_/sum_/sum_..._sq/centre_/max_abs_ per outcome")


def _read(path: Path) -> pd.DataFrame:
    try:
        if path.suffix.lower() in (".parquet", ".pq"):
            return pd.read_parquet(path)
        return pd.read_csv(path, dtype=str, keep_default_na=False)
    except (OSError, ValueError) as exc:
        raise DataError(path, None, (), f"cannot read the moment table ({exc})",
                        "write it again with 'strativ cells'") from None


def _numbers(frame: pd.DataFrame, path: Path, name: str, *, whole: bool) -> np.ndarray:
    """A numeric column of the table; counts must be present and whole."""
    parsed = parse_number(frame[name].tolist())
    values = parsed.values
    bad = set(parsed.invalid.tolist())
    if whole:
        bad |= set(np.flatnonzero(parsed.missing | (values != np.round(values))).tolist())
    if bad:
        row = min(bad)
        raise DataError(path, name, (row + 1,), f"value {frame[name].iloc[row]!r} in row "
                        f"{row + 1} is not a {'whole ' if whole else ''}number",
                        "write the table again with 'strativ cells'")
    return values


def read_moment_table(spec: Spec) -> GroupedData:
    """Read the moment table(s) a spec's `moments` key names into the run's data.

    Parameters
    ----------
    spec : Spec
        A validated spec whose data are moment tables.

    Returns
    -------
    GroupedData
        As `grouped.group_data` gives for the rows the table came from (no dropped rows).

    Raises
    ------
    DataError
        On a missing column, a non-numeric count or sum, an offer or take-up other than 0/1,
        a missing key value, or an outcome count above the group's rows.
    """
    cols = spec.columns
    roles = roles_of(spec)
    covariates = _covariate_columns(*_extended(cols.covariates, roles), cols.outcome,
                                    roles.outcomes)
    pieces, files = [], []
    carried = True
    for path in spec.data:
        frame = _read(path)
        carried = carried and all(name in frame.columns for name, _ in covariates)
        wanted = _keys(spec) + ["n"] + [f.format(y) for y in cols.outcome for f in MOMENT_FIELDS]
        _need(frame, path, wanted, spec)
        piece: dict[str, np.ndarray] = {}  # one frame per file at the end
        for name in _keys(spec):
            column = frame[name].tolist()
            if name in (cols.offer, cols.take_up):
                parsed = parse_binary(column)
            else:
                parsed = parse_label(column)
            problem = parsed.invalid if parsed.invalid.size else np.flatnonzero(parsed.missing)
            if problem.size:
                row = int(problem[0])
                raise DataError(path, name, (row + 1,), f"value {column[row]!r} in row "
                                f"{row + 1} is {'missing' if parsed.missing[row] else 'not 0/1'}",
                                "a moment table holds complete groups only")
            piece[name] = parsed.values
        if WAVE_PART in frame.columns and WAVE_PART not in {c for _, c in cols.roles()}:
            piece[WAVE_PART] = parse_label(frame[WAVE_PART].tolist()).values
        piece["n"] = _numbers(frame, path, "n", whole=True)
        for name, role in zip(cols.outcome, roles.outcomes, strict=True):
            for field in MOMENT_FIELDS:
                piece[field.format(role)] = _numbers(frame, path, field.format(name),
                                                     whole=field == "n_{}")
            over = np.flatnonzero(piece[f"n_{role}"] > piece["n"])
            if over.size:
                raise DataError(path, f"n_{name}", (int(over[0]) + 1,),
                                f"row {int(over[0]) + 1} counts more rows with '{name}' than "
                                "rows in the group", "write the table again with 'strativ cells'")
        for name, column in covariates:
            if name in frame.columns:
                piece[column] = _numbers(frame, path, name, whole=name.startswith("n_"))
        pieces.append(pd.DataFrame(piece))
        files.append(file_fingerprint(path, len(frame)))
    roles = Roles(strata=("s0",), outcomes=roles.outcomes,
                  covariates=roles.covariates if carried and covariates else (),
                  cluster=roles.cluster, probability=None)
    table = pd.concat(pieces, ignore_index=True)
    names = list(cols.stratum[:-1] if pools_column(spec) else cols.stratum)
    if WAVE_PART in table.columns and WAVE_PART not in {c for _, c in cols.roles()}:
        names.append(WAVE_PART)  # written from a run whose waves split the strata
    texts = [table[name].to_numpy(dtype=object).astype(str) for name in names]
    labels = texts[0] if len(texts) == 1 else np.asarray(
        [STRATUM_JOIN.join(p) for p in zip(*texts, strict=True)], dtype=object)
    groups = pd.DataFrame({"stratum": _integer_labels(labels) if len(texts) == 1 else labels,
                           "offer": table[cols.offer].astype(np.int64),
                           "take_up": table[cols.take_up].astype(np.int64)})
    extra: dict[str, object] = {}
    if cols.cluster:
        extra["cluster"] = table[cols.cluster].to_numpy(dtype=object)
    extra["n"] = table["n"].astype(np.int64)
    for role in roles.outcomes:
        for field in MOMENT_FIELDS:
            extra[field.format(role)] = table[field.format(role)]
    if roles.covariates:
        for _, column in covariates:
            extra[column] = table[column]
    groups = pd.concat([groups, pd.DataFrame(extra, index=groups.index)], axis=1)
    return GroupedData(spec=spec, files=tuple(files), groups=groups, roles=roles,
                       n_read=int(groups["n"].sum()), dropped=(), n_dropped=0,
                       stratum_parts={} if len(texts) == 1 else _label_parts(labels, texts),
                       from_moments=True,
                       part_names=tuple(names) if len(names) > len(cols.stratum)
                       or pools_column(spec) else ())

"""Show a spec's data files to DuckDB as one view of units, each role in its checked form.

DuckDB reads CSV (plain, tab-separated, gzip), Parquet, and the Arrow tables of Stata, SPSS
and Excel files (`foreign.read_foreign`). Each role becomes one column of the view
`UNITS_VIEW`, written by the same rules as the row reader (`values.py`):

- offer and take-up: 1/0 from any number equal to 1 or 0 or from true/false; NULL where
  missing; 2 for any other value (the run then asks the row reader for the message);
- outcomes, covariates and a probability column: DOUBLE, NULL where missing, with a flag
  column ``bad_<name>`` = 1 where a value is present but not a finite plain number; per
  covariate ``x<i>`` also ``m<i>``, 1.0 where it is missing (for the missing-indicator rule);
- stratum parts and cluster: the value as read (CSV: the text as written), NULL where
  missing; the labels are made from the few distinct values in Python, by the row reader's
  rule.

DuckDB's sniffer types the other CSV columns; a column it reads as text (a gap written
"n/a ", a stray word) goes through the text rules above, and a file it cannot read as
sniffed goes to the row reader.

Text cells count as missing when, trimmed and in lower case, they are one of
`values.MISSING_TOKENS`. Nothing here computes a statistic: `grouped.py` runs the one
GROUP BY of `strativ.estimators.group_query` over the view.
"""

from __future__ import annotations

import csv
import gzip
import io
from dataclasses import dataclass
from pathlib import Path
from typing import Any

from .spec import Spec
from .values import COMMA_NUMBER, MISSING_TOKENS

__all__ = ["DUCKDB", "SPARK", "UNITS_VIEW", "Dialect", "Roles", "UnreadableError", "csv_delimiter",
           "file_select", "roles_of", "units_view", "wanted_columns"]

UNITS_VIEW = "strativ_units"
"""The view of checked units."""

_FOREIGN = (".dta", ".sav", ".xlsx")
_PARQUET = (".parquet", ".pq")
_NUMBER = r"^[-+]?([0-9]+[.]?[0-9]*|[.][0-9]+)([eE][-+]?[0-9]+)?$"
"""A plain decimal number, matched against trimmed text; no backslashes, so the pattern reads
the same in every engine's string literals."""


class UnreadableError(Exception):
    """DuckDB cannot show the files as the spec describes; the row reader says why."""


@dataclass(frozen=True, slots=True)
class Roles:
    """View column names of each role, in spec order."""

    strata: tuple[str, ...]
    outcomes: tuple[str, ...]
    covariates: tuple[str, ...]
    cluster: str | None
    probability: str | None

    @property
    def keys(self) -> tuple[str, ...]:
        """Group columns: file, stratum parts, offer, take-up[, cluster][, probability gap]."""
        out = ["file", *self.strata, "offer", "take_up"]
        if self.cluster:
            out.append(self.cluster)
        if self.probability:
            out.append("prob_missing")
        return tuple(out)

    @property
    def indicators(self) -> tuple[str, ...]:
        """Per covariate, the view column that is 1 where it is missing (``m0``, ``m1``, ...)."""
        return tuple("m" + c[1:] for c in self.covariates)

    @property
    def flags(self) -> tuple[str, ...]:
        """Counted flag columns: one per numeric role."""
        names = [*self.outcomes, *self.covariates]
        if self.probability:
            names.append(self.probability)
        return tuple(f"bad_{n}" for n in names)


def roles_of(spec: Spec) -> Roles:
    """The view's column names for the roles of `spec`."""
    cols = spec.columns
    return Roles(
        strata=tuple(f"s{i}" for i in range(len(cols.stratum))),
        outcomes=tuple(f"y{i}" for i in range(len(cols.outcome))),
        covariates=tuple(f"x{i}" for i in range(len(cols.covariates))),
        cluster="cluster" if cols.cluster else None,
        probability="prob" if spec.offer_probability.column else None,
    )


def _q(name: str) -> str:
    return '"' + name.replace('"', '""') + '"'


_LARGEST = "1.7976931348623157e308"
"""The largest finite double: ``ABS(x) <= _LARGEST`` is false for NaN, infinities and NULL in
DuckDB and Spark alike (both order NaN above every number)."""


@dataclass(frozen=True, slots=True)
class Dialect:
    """What differs between the SQL engines that build the units view: quoting of names and
    text, and a whole-string regular-expression match."""

    name: str
    """``"duckdb"`` or ``"spark"``."""

    def q(self, name: str) -> str:
        """A quoted column or view name."""
        if self.name == "spark":
            return "`" + name.replace("`", "``") + "`"
        return _q(name)

    def literal(self, text: str) -> str:
        """A string literal."""
        if self.name == "spark":
            return "'" + text.replace("\\", "\\\\").replace("'", "\\'") + "'"
        return "'" + text.replace("'", "''") + "'"

    def full_match(self, c: str, pattern: str) -> str:
        """True where the whole of `c` matches `pattern` (anchored with ^ and $)."""
        if self.name == "spark":
            return f"({c} RLIKE {self.literal(pattern)})"
        return f"regexp_full_match({c}, {self.literal(pattern)})"


DUCKDB = Dialect("duckdb")
SPARK = Dialect("spark")


def _text_missing(c: str, d: Dialect) -> str:
    tokens = ", ".join(d.literal(t) for t in sorted(MISSING_TOKENS))
    return f"({c} IS NULL OR lower(trim({c})) IN ({tokens}))"


def _is_text(kind: str) -> bool:
    return kind.upper() in ("VARCHAR", "TEXT", "STRING") or kind.upper().startswith("VARCHAR")


def _is_numeric(kind: str) -> bool:
    k = kind.upper()
    return k in ("BOOLEAN", "TINYINT", "SMALLINT", "INTEGER", "BIGINT", "HUGEINT", "UTINYINT",
                 "USMALLINT", "UINTEGER", "UBIGINT", "FLOAT", "DOUBLE", "REAL") or \
        k.startswith("DECIMAL")


def _is_integer(kind: str) -> bool:
    return kind.upper() in ("TINYINT", "SMALLINT", "INTEGER", "BIGINT", "HUGEINT", "UTINYINT",
                            "USMALLINT", "UINTEGER", "UBIGINT")


def _text_number(c: str, d: Dialect, decimal: str) -> tuple[str, str]:
    """(trimmed text with a decimal point, whether it is a plain finite number) of text `c`."""
    text = f"trim({c})" if decimal == "." else f"replace(trim({c}), ',', '.')"
    plain = f"({d.full_match(text, _NUMBER)} AND ABS(TRY_CAST({text} AS DOUBLE)) <= {_LARGEST})"
    return text, plain


def _coded(c: str, kind: str, codes: dict[str, int], d: Dialect) -> str:
    """1/0 by the spec's codes, NULL where missing, 2 for any other value."""
    if _is_text(kind):
        arms = " ".join(f"WHEN lower(trim({c})) = {d.literal(code)} THEN {value}"
                        for code, value in codes.items())
        return f"CASE WHEN {_text_missing(c, d)} THEN NULL {arms} ELSE 2 END"
    if kind.upper() == "BOOLEAN":
        return (f"CASE WHEN {c} IS NULL THEN NULL WHEN {c} THEN {codes.get('true', 2)} "
                f"ELSE {codes.get('false', 2)} END")
    if _is_numeric(kind):
        numeric = []
        for code, value in codes.items():
            try:
                numeric.append(f"WHEN CAST({c} AS DOUBLE) = {float(code)!r} THEN {value}")
            except ValueError:
                pass
        return (f"CASE WHEN {c} IS NULL OR isnan(CAST({c} AS DOUBLE)) THEN NULL "
                f"{' '.join(numeric)} ELSE 2 END")
    return "2"


def _binary(c: str, kind: str, d: Dialect = DUCKDB, codes: dict[str, int] | None = None) -> str:
    if codes is not None:
        return _coded(c, kind, codes, d)
    if _is_text(kind):
        t = f"lower(trim({c}))"
        number = f"({d.full_match(f'trim({c})', _NUMBER)} AND TRY_CAST(trim({c}) AS DOUBLE)"
        return (f"CASE WHEN {_text_missing(c, d)} THEN NULL WHEN {t} = 'true' THEN 1 "
                f"WHEN {t} = 'false' THEN 0 WHEN {number} = 1) THEN 1 "
                f"WHEN {number} = 0) THEN 0 ELSE 2 END")
    if kind.upper() == "BOOLEAN":
        return f"CAST({c} AS INTEGER)"
    if _is_integer(kind):
        return f"CASE WHEN {c} = 1 THEN 1 WHEN {c} = 0 THEN 0 WHEN {c} IS NOT NULL THEN 2 END"
    if _is_numeric(kind):
        v = f"CAST({c} AS DOUBLE)"
        return f"CASE WHEN {c} IS NULL OR isnan({v}) THEN NULL WHEN {v} = 1 THEN 1 " \
               f"WHEN {v} = 0 THEN 0 ELSE 2 END"
    return "2"


def _number(c: str, kind: str, d: Dialect = DUCKDB, decimal: str = ".") -> tuple[str, str]:
    """(value, bad flag) expressions of a numeric role."""
    if _is_text(kind):
        t = f"lower(trim({c}))"
        text, plain = _text_number(c, d, decimal)
        value = (f"CASE WHEN {_text_missing(c, d)} THEN NULL WHEN {t} = 'true' THEN 1.0 "
                 f"WHEN {t} = 'false' THEN 0.0 WHEN {plain} THEN TRY_CAST({text} AS DOUBLE) "
                 "ELSE NULL END")
        bad = (f"CASE WHEN {_text_missing(c, d)} OR {t} IN ('true', 'false') OR {plain} "
               "THEN 0 ELSE 1 END")
        return value, bad
    if _is_integer(kind) or kind.upper() == "BOOLEAN":
        return f"CAST({c} AS DOUBLE)", "0"
    if _is_numeric(kind):
        v = f"CAST({c} AS DOUBLE)"
        value = f"CASE WHEN {c} IS NULL OR isnan({v}) THEN NULL ELSE {v} END"
        bad = f"CASE WHEN {c} IS NOT NULL AND NOT isnan({v}) AND ABS({v}) > {_LARGEST} " \
              "THEN 1 ELSE 0 END"
        return value, bad
    return "NULL", f"CASE WHEN {c} IS NULL THEN 0 ELSE 1 END"


def _label(c: str, kind: str, d: Dialect = DUCKDB, decimal: str = ".") -> str:
    if _is_text(kind):
        if decimal == ",":  # a numeric id written 109,0 is the number 109, as in other formats
            return (f"CASE WHEN {_text_missing(c, d)} THEN NULL "
                    f"WHEN {d.full_match(f'trim({c})', COMMA_NUMBER)} "
                    f"THEN replace(trim({c}), ',', '.') ELSE {c} END")
        return f"CASE WHEN {_text_missing(c, d)} THEN NULL ELSE {c} END"
    if _is_numeric(kind) and kind.upper() != "BOOLEAN" and not _is_integer(kind):
        return f"CASE WHEN isnan(CAST({c} AS DOUBLE)) THEN NULL ELSE {c} END"
    return c


def _csv_header(path: Path, delimiter: str) -> list[str]:
    opener: Any = gzip.open if path.name.lower().endswith(".gz") else open
    with opener(path, "rt", encoding="utf-8-sig", newline="") as handle:
        first = handle.readline()
    return next(csv.reader(io.StringIO(first), delimiter=delimiter), [])


_NULL_TEXT = sorted({t for token in MISSING_TOKENS
                     for t in (token, token.upper(), token.capitalize())})
"""Cells DuckDB's CSV reader takes as missing, so that a column with gaps keeps its type; other
spellings of a missing token (mixed case, spaces) leave the column as text, where
`_text_missing` finds them."""


def _relation(connection: Any, path: Path, index: int, labels: list[str],
              wanted: list[str], spec: Spec) -> tuple[str, list[str]]:
    """Register file `index` as a view; return its name and header. Label columns of a CSV
    file are read as text, exactly as written; DuckDB's sniffer types the others."""
    name = f"strativ_file_{index}"
    lower = path.name.lower()
    if lower.endswith(_PARQUET):
        relation = connection.read_parquet(str(path))
        header = list(relation.columns)
    elif lower.endswith(_FOREIGN):
        from .foreign import read_foreign

        table = read_foreign(path, wanted)
        connection.register(name + "_arrow", table)
        relation = connection.table(name + "_arrow")
        header = list(table.column_names)
    else:
        delimiter = csv_delimiter(path, spec)
        header = _csv_header(path, delimiter)
        options: dict[str, Any] = {}
        if spec.reading.decimal != ".":
            options["decimal"] = spec.reading.decimal
        relation = connection.read_csv(
            str(path), header=True, delimiter=delimiter, quotechar='"', escapechar='"',
            dtype={c: "VARCHAR" for c in labels if c in header}, na_values=_NULL_TEXT,
            **options)
        if list(relation.columns) != header:
            raise UnreadableError(f"{path.name}: header read differently")
    relation.create_view(name)
    return name, header


def csv_delimiter(path: Path, spec: Spec) -> str:
    """The field separator of CSV or TSV file `path` under `spec`."""
    if spec.reading.delimiter:
        return spec.reading.delimiter
    return "\t" if path.name.lower().endswith((".tsv", ".tsv.gz")) else ","


def wanted_columns(spec: Spec) -> tuple[list[str], list[str]]:
    """(columns a CSV file gives as text, every column a role names) of `spec`: labels keep
    the text as written, and a coded offer or take-up column its codes (DuckDB's sniffer
    would read yes/no as true/false)."""
    cols = spec.columns
    labels = [*cols.stratum, *([cols.cluster] if cols.cluster else [])]
    labels += [column for role, column in (("offer", cols.offer), ("take_up", cols.take_up))
               if spec.reading.codes_of(role) is not None]
    wanted = [*cols.stratum, cols.offer, cols.take_up, *cols.outcome, *cols.covariates]
    wanted += [c for c in (cols.cluster, spec.offer_probability.column) if c]
    return labels, wanted


def file_select(index: int, view: str, kinds: dict[str, str], spec: Spec,
                d: Dialect = DUCKDB) -> str:
    """The SELECT of one file's view with every role in its checked form (`UNITS_VIEW`'s
    columns); `kinds` maps each column to its SQL type name."""
    roles = roles_of(spec)
    cols = spec.columns
    read = spec.reading
    parts = [f"{index} AS file"]
    parts += [f"{_label(d.q(c), kinds[c], d, read.decimal)} AS {s}"
              for c, s in zip(cols.stratum, roles.strata, strict=True)]
    parts.append(f"{_binary(d.q(cols.offer), kinds[cols.offer], d, read.codes_of('offer'))}"
                 " AS offer")
    parts.append(f"{_binary(d.q(cols.take_up), kinds[cols.take_up], d, read.codes_of('take_up'))}"
                 " AS take_up")
    if cols.cluster:
        parts.append(f"{_label(d.q(cols.cluster), kinds[cols.cluster], d, read.decimal)} "
                     "AS cluster")
    numeric = list(zip(cols.outcome, roles.outcomes, strict=True))
    numeric += list(zip(cols.covariates, roles.covariates, strict=True))
    if roles.probability:
        numeric.append((spec.offer_probability.column, roles.probability))
    for column, role in numeric:
        value, bad = _number(d.q(column), kinds[column], d, read.decimal)
        parts += [f"{value} AS {role}", f"{bad} AS bad_{role}"]
        if role in roles.covariates:
            parts.append(f"CASE WHEN ({value}) IS NULL THEN 1.0 ELSE 0.0 END AS "
                         f"m{role[1:]}")
    if roles.probability:
        value, _ = _number(d.q(spec.offer_probability.column),
                           kinds[spec.offer_probability.column], d, read.decimal)
        parts.append(f"({value}) IS NULL AS prob_missing")
    return f"SELECT {', '.join(parts)} FROM {d.q(view)}"


def units_view(connection: Any, spec: Spec) -> Roles:
    """Create `UNITS_VIEW` over every data file of `spec` on `connection`.

    Parameters
    ----------
    connection : duckdb.DuckDBPyConnection
        An open connection.
    spec : Spec
        The validated spec.

    Returns
    -------
    Roles
        The view's column name of each role.

    Raises
    ------
    UnreadableError
        When a file cannot be read by DuckDB or lacks a column the spec names (or names one
        twice); the row reader then gives the located message.
    """
    import duckdb

    selects = []
    labels, wanted = wanted_columns(spec)
    try:
        for index, path in enumerate(spec.data):
            name, header = _relation(connection, path, index, labels, wanted, spec)
            kinds = dict(connection.execute(
                f"SELECT column_name, column_type FROM (DESCRIBE {_q(name)})").fetchall())
            if any(header.count(w) != 1 for w in wanted):
                raise UnreadableError(f"{path.name}: a column is missing or repeated")
            selects.append(file_select(index, name, kinds, spec))
        connection.execute(f"CREATE VIEW {UNITS_VIEW} AS " + "\nUNION ALL\n".join(selects))
    except (duckdb.Error, UnicodeDecodeError, OSError, KeyError) as exc:
        raise UnreadableError(str(exc)) from None
    return roles_of(spec)

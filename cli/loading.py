"""Read the data files a spec names, check every column for its role, and stack the rows.

One file at a time: read it (`tables.read_table`: CSV with exact line numbers, Parquet with
pyarrow), check that every named column exists (listing near matches),
parse each column for its role, and report bad values with their rows. Then drop
incomplete rows when the spec allows it, and concatenate. Nothing here computes a statistic.

Row numbers in messages are 1-based data rows: row 1 is the first row after the header. For
CSV files the line in the file is given too.
"""

from __future__ import annotations

import re
from dataclasses import dataclass, field, replace
from pathlib import Path
from typing import Any

import numpy as np

from strativ.estimators import OUTCOME_LIMIT

from .counting import count
from .errors import DataError
from .fingerprints import InputFile, distinct_digests, file_fingerprint
from .spec import Spec
from .suggest import suggest
from .tables import OTHER_DELIMITERS, Table, read_table
from .values import (
    Parsed,
    decimal_label,
    decimal_point,
    parse_binary,
    parse_label,
    parse_number,
    recode,
)
from .waves import group_waves, pools_column, splits_strata, wave_part

__all__ = ["Dataset", "load_data", "stratum_labels"]

STRATUM_JOIN = " / "
"""Separator between the parts of a stratum label built from several columns."""
_SHOWN = 5
_DECIMAL_COMMA = re.compile(r"[-+]?\d*,\d+")


@dataclass(frozen=True, slots=True, eq=False)
class Dataset:
    """The rows of all data files, one array per role, after the data rules."""

    files: tuple[InputFile, ...]
    """Fingerprints of the files read."""
    outcomes: dict[str, np.ndarray]
    """Outcome name -> float array, NaN where the outcome is missing."""
    take_up: np.ndarray
    """Take-up, int8 0/1."""
    offer: np.ndarray
    """Offer, int8 0/1."""
    stratum: np.ndarray
    """Stratum label per row (int when every label is an integer, else str)."""
    cluster: np.ndarray | None
    """Cluster label per row (str), or None."""
    offer_probability: np.ndarray | None
    """Design offer probability per row, when the spec names a column for it."""
    covariates: dict[str, np.ndarray]
    """Covariate name -> float array, NaN where missing."""
    file_index: np.ndarray
    """Index into `files` of each row."""
    row: np.ndarray
    """1-based data row within its file."""
    line: np.ndarray
    """Line within its file (CSV), 0 for Parquet."""
    n_read: int
    """Rows read before any was dropped."""
    dropped: tuple[tuple[str, int], ...]
    """(column, rows dropped because it was missing there), for incomplete rows."""
    n_dropped: int
    """Incomplete rows dropped (a row missing several columns counts once)."""
    dropped_by_arm: tuple[tuple[str, int, int], ...] = ()
    """(column, offered, not offered) of the rows dropped under each column other than the
    offer."""
    stratum_parts: dict[Any, tuple[Any, ...]] = field(default_factory=dict)
    """For a stratum built from several columns: label -> the value of each stratum column,
    in the spec's order (int when every value of that column is an integer, else str). Empty
    for a stratum from one column."""
    wave: np.ndarray | None = None
    """Wave of each row (`waves.group_waves`), or None without waves."""

    @property
    def n_rows(self) -> int:
        """Rows kept."""
        return int(self.offer.size)

    def where(self, i: int) -> str:
        """Return "file, row r (line l)" for kept row `i`."""
        name = self.files[int(self.file_index[i])].path.name
        return f"{name}, {_row_text(int(self.row[i]), int(self.line[i]))}"


def _row_text(row: int, line: int) -> str:
    return f"row {row} (line {line})" if line else f"row {row}"


_GROUPED = re.compile(r"[-+]?\d{1,3}(?:,\d{3})+\.\d+|[-+]?\d{1,3}(?:\.\d{3})+,\d+")
"""A number with thousands separators and decimals: 12,345.000 or 12.345,000."""
def _spec_roles(spec: Spec) -> dict[str, tuple[str, int | None]]:
    """Column name -> (role phrase, spec line) for every column the spec names."""
    roles: dict[str, tuple[str, int | None]] = {}
    cols = spec.columns
    for role in ("outcome", "stratum", "covariates"):
        names = getattr(cols, role)
        for i, name in enumerate(names):
            line = spec.line_of("columns", role, i) if len(names) > 1 else \
                spec.line_of("columns", role)
            roles[name] = (f"columns.{role}", line)
    for role in ("take_up", "offer", "cluster"):
        name = getattr(cols, role)
        if name is not None:
            roles[name] = (f"columns.{role}", spec.line_of("columns", role))
    if spec.offer_probability.column is not None:
        roles[spec.offer_probability.column] = (
            "design.offer_probability", spec.line_of("design", "offer_probability"))
    if spec.wave_column is not None:
        roles[spec.wave_column] = ("waves.column", spec.line_of("waves", "column"))
    return roles


def _check_columns(path: Path, table: Table, spec: Spec,
                   roles: dict[str, tuple[str, int | None]]) -> None:
    present = [h for h in table.header if h]
    for name, (role, line) in roles.items():
        count = table.header.count(name)
        if count > 1:
            raise DataError(path, name, (), f"the header has {count} columns named '{name}'",
                            "rename the duplicates so that each column name is unique")
        if count == 1:
            continue
        at = f" (named as {role} in {spec.path.name}, line {line})" if line else ""
        for delim, plural in OTHER_DELIMITERS.items():
            if delim != spec.reading.delimiter and delim in table.header_line and name in [
                    f.strip() for f in table.header_line.split(delim)]:
                shown_delim = "tab" if delim == "\t" else delim
                raise DataError(path, None, (), f"the fields seem to be separated by {plural}, "
                                f"not as the spec reads them: no column '{name}'{at}",
                                "save the file as comma-separated CSV, or add  reading: "
                                f"{{delimiter: '{shown_delim}'}}  to the spec")
        # a misspelt keyword reads as a column name; suggest the keyword too
        near = suggest(name, present + (["estimated"] if role == "design.offer_probability"
                                        else []))
        shown = ", ".join(present[:20]) + (", ..." if len(present) > 20 else "")
        hint = f"{near} Columns in the file: {shown}" if near else f"columns in the file: {shown}"
        raise DataError(path, name, (), f"no column '{name}'{at}", hint)


def _bad_values(path: Path, column: str, table: Table, parsed: Parsed, cells: list[Any],
                what: str, hint: str) -> DataError:
    shown = [int(i) for i in parsed.invalid[:_SHOWN]]
    found = ", ".join(f"{cells[i]!r} in {_row_text(int(table.rows[i]), int(table.lines[i]))}"
                      for i in shown)
    more = f" ({parsed.invalid.size} rows in all)" if parsed.invalid.size > _SHOWN else ""
    return DataError(path, column, [int(table.rows[i]) for i in shown],
                     f"{what}; found {found}{more}", hint)


def _parse_file(path: Path, table: Table, spec: Spec) -> dict[str, Parsed]:
    cols = spec.columns
    out: dict[str, Parsed] = {}
    for role, name in (("offer", cols.offer), ("take_up", cols.take_up)):
        codes = spec.reading.codes_of(role)
        cells = table.columns[name] if codes is None else recode(table.columns[name], codes)
        parsed = parse_binary(cells)
        if parsed.invalid.size:
            what, hint = ("values must be 0/1 or true/false",
                          "recode the column to 0 and 1 (1 = offered / took it up), or list "
                          f"its codes under 'reading: codes: {role}:' in the spec") \
                if codes is None else \
                ("values must be one of the codes " + ", ".join(map(repr, codes)) +
                 f" listed under reading.codes.{role}", "add the code to the spec, or fix "
                 "the values")
            raise _bad_values(path, name, table, parsed, table.columns[name], what, hint)
        out[name] = parsed
    numeric = list(cols.outcome) + list(cols.covariates)
    if spec.offer_probability.column is not None:
        numeric.append(spec.offer_probability.column)
    for name in numeric:
        parsed = parse_number(decimal_point(table.columns[name], spec.reading.decimal))
        if parsed.invalid.size:
            role = "outcome" if name in cols.outcome else \
                "covariate" if name in cols.covariates else "offer probability"
            first = table.columns[name][int(parsed.invalid[0])]
            comma = isinstance(first, str) and _DECIMAL_COMMA.fullmatch(first.strip()) \
                and spec.reading.decimal == "."
            grouped = isinstance(first, str) and _GROUPED.fullmatch(first.strip())
            if grouped:
                plain = first.strip().replace("," if "," in first else ".", "", 10 ** 6) \
                    if first.count(",") and first.count(".") else first.strip()
                hint = (f"these numbers carry thousands separators ({first.strip()!r}): "
                        f"export them without grouping ({plain!r})")
            elif comma:
                hint = ("write numbers with a decimal point and no separators "
                        "(12.5 and 1000, not 12,5 or 1,000), or for a file written "
                        "with decimal commas add  reading: {delimiter: ';', decimal: ','}"
                        "  to the spec")
            else:
                hint = "fix or blank out these values (blank = missing)"
            raise _bad_values(path, name, table, parsed, table.columns[name],
                              f"the {role} column must be numeric", hint)
        out[name] = parsed
    for name in cols.outcome:
        parsed = out[name]
        huge = np.flatnonzero(~parsed.missing & ~(np.abs(parsed.values) <= OUTCOME_LIMIT))
        if huge.size:
            raise _bad_values(path, name, table, Parsed(parsed.values, parsed.missing, huge),
                              table.columns[name], f"outcome values beyond +/-{OUTCOME_LIMIT:g} "
                              "overflow sums of squares", "rescale the outcome (for example "
                              "to thousands or millions)")
    for name in list(cols.stratum) + ([cols.cluster] if cols.cluster else []):
        out[name] = parse_label(decimal_label(table.columns[name], spec.reading.decimal))
    return out


def _incomplete_columns(spec: Spec) -> list[str]:
    cols = spec.columns
    names = [cols.offer, cols.take_up, *cols.stratum]
    if cols.cluster is not None:
        names.append(cols.cluster)
    if spec.offer_probability.column is not None:
        names.append(spec.offer_probability.column)
    return names


def load_data(spec: Spec) -> Dataset:
    """Read every data file of `spec` and apply the data rules.

    Parameters
    ----------
    spec : Spec
        A validated spec.

    Returns
    -------
    Dataset
        The kept rows, role by role, with fingerprints and drop counts.

    Raises
    ------
    DataError
        On an empty, unreadable or wrongly delimited file; two files with the same content
        (the same SHA-256); a missing or duplicated column; an
        offer or take-up value other than 0/1 or true/false; a non-numeric outcome, covariate
        or probability; or a missing offer, take-up, stratum, cluster or probability value
        when the spec does not drop incomplete rows.
    """
    roles = _spec_roles(spec)
    incomplete_names = _incomplete_columns(spec)
    pieces: list[dict[str, np.ndarray]] = []
    files: list[InputFile] = []
    dropped = dict.fromkeys(incomplete_names, 0)
    arms = {name: [0, 0] for name in incomplete_names if name != spec.columns.offer}
    n_read = n_dropped = 0
    digests = distinct_digests(spec)
    for index, path in enumerate(spec.data):
        table = read_table(path, list(roles), spec.reading.delimiter)
        _check_columns(path, table, spec, roles)
        parsed = _parse_file(path, table, spec)
        n = table.rows.size
        n_read += n
        files.append(file_fingerprint(path, n, sha256=digests[index]))
        incomplete = np.zeros(n, dtype=bool)
        for name in incomplete_names:
            miss = parsed[name].missing
            if miss.any() and not spec.drop_incomplete_rows:
                first = np.flatnonzero(miss)[:_SHOWN]
                rows = ", ".join(_row_text(int(table.rows[i]), int(table.lines[i]))
                                 for i in first)
                raise DataError(path, name, [int(table.rows[i]) for i in first],
                                f"{int(miss.sum())} missing value(s), first in {rows}",
                                "fill them in, or add 'missing: {drop_incomplete_rows: true}' "
                                "to the spec to drop such rows (they are counted)")
            here = miss & ~incomplete
            dropped[name] += int(here.sum())
            if name != spec.columns.offer:
                offer = parsed[spec.columns.offer].values
                arms[name][0] += int((here & (offer == 1)).sum())
                arms[name][1] += int((here & (offer == 0)).sum())
            incomplete |= miss
        n_dropped += int(incomplete.sum())
        keep = ~incomplete
        piece = {name: p.values[keep] for name, p in parsed.items()}
        piece["__file"] = np.full(int(keep.sum()), index, dtype=np.int64)
        piece["__row"] = table.rows[keep]
        piece["__line"] = table.lines[keep]
        pieces.append(piece)
    dataset = _assemble(spec, files, pieces, n_read, dropped, n_dropped)
    return replace(dataset, dropped_by_arm=tuple(
        (name, *arms[name]) for name, count in dropped.items() if count and name in arms))


def _assemble(spec: Spec, files: list[InputFile], pieces: list[dict[str, np.ndarray]],
              n_read: int, dropped: dict[str, int], n_dropped: int) -> Dataset:
    def stack(name: str) -> np.ndarray:
        return np.concatenate([piece[name] for piece in pieces])

    cols = spec.columns
    n_kept = sum(piece["__row"].size for piece in pieces)
    if n_kept == 0:
        raise DataError(None, None, (), f"no rows left: {'the' if n_read == 1 else 'all'} "
                        f"{count(n_read, 'row')} {'misses' if n_read == 1 else 'miss'} an offer, "
                        "take-up or stratum value", "fill in the missing values")
    values = [stack(name) for name in cols.stratum]
    stratum, stratum_parts = stratum_labels(spec, values, stack("__file"))
    return Dataset(
        wave=group_waves(spec, stack("__file"), values[-1]),
        files=tuple(files),
        outcomes={name: stack(name) for name in cols.outcome},
        take_up=stack(cols.take_up),
        offer=stack(cols.offer),
        stratum=stratum,
        cluster=None if cols.cluster is None else stack(cols.cluster).astype(object),
        offer_probability=None if spec.offer_probability.column is None
        else stack(spec.offer_probability.column),
        covariates={name: stack(name) for name in cols.covariates},
        file_index=stack("__file"),
        row=stack("__row"),
        line=stack("__line"),
        n_read=n_read,
        dropped=tuple((name, count) for name, count in dropped.items() if count),
        n_dropped=n_dropped,
        stratum_parts=stratum_parts,
    )


def stratum_labels(spec: Spec, values: list[np.ndarray], file_index: np.ndarray, *,
                   check: bool = True) -> tuple[np.ndarray, dict[Any, tuple[Any, ...]]]:
    """The stratum label of each row or group, the one rule every reader follows.

    Parameters
    ----------
    spec : Spec
        The validated spec.
    values : list of ndarray
        Per stratum column, the (parsed) value of each row or group.
    file_index : ndarray
        Input file of each row or group: its wave is the last part of the label when the
        input files are waves that split the strata (`waves.splits_strata`). With
        `waves.column` the wave is the last of `values` instead, left out of the label
        when the waves are pooled (`waves.pools_column`).
    check : bool, default=True
        Refuse two different combinations that read as one label.

    Returns
    -------
    tuple of (ndarray, dict)
        Labels (int when one integer column makes them), and label -> each part's value
        (empty for a label from one column).
    """
    parts = [np.asarray(v, dtype=object).astype(str) for v in values]
    if pools_column(spec):  # the wave column is read like a stratum part, not labelled
        parts = parts[:-1]
    elif splits_strata(spec) and not spec.wave_column:
        parts.append(wave_part(spec, file_index).astype(str))
    if len(parts) == 1:
        return _integer_labels(parts[0]), {}
    labels = np.asarray([STRATUM_JOIN.join(p) for p in zip(*parts, strict=True)], dtype=object)
    if check:
        _check_joined_labels(spec, parts, labels)
    return labels, _label_parts(labels, parts)


def _label_parts(labels: np.ndarray, parts: list[np.ndarray]) -> dict[Any, tuple[Any, ...]]:
    """Combined label -> its value in each stratum column, each column typed on its own."""
    unique, first = np.unique(labels, return_index=True)
    typed = [_integer_labels(part[first]) for part in parts]
    return {label: tuple(column[i] for column in typed) for i, label in enumerate(unique)}


def _check_joined_labels(spec: Spec, parts: list[np.ndarray], labels: np.ndarray) -> None:
    """Two different combinations of stratum values must not read as one label."""
    combos = set(zip(*(p.tolist() for p in parts), strict=True))
    if len(combos) == len(set(labels.tolist())):
        return
    first: dict[str, tuple[str, ...]] = {}
    for combo in sorted(combos):
        label = STRATUM_JOIN.join(combo)
        seen = first.setdefault(label, combo)
        if seen != combo:
            raise DataError(None, " + ".join(spec.columns.stratum), (),
                            f"stratum values {seen} and {combo} both read as stratum "
                            f"'{label}'", f"remove '{STRATUM_JOIN.strip()}' from the "
                            "stratum values so that each combination keeps its own label")


_NOT_INTEGER = re.compile(r"^(?!(?:0|-?[1-9][0-9]*)$)", re.MULTILINE)


def _integer_labels(labels: np.ndarray) -> np.ndarray:
    """Turn text labels into ints when every label is a plain integer (so 2 sorts before 10)."""
    out = np.empty(labels.size, dtype=object)
    texts = labels.tolist()
    if texts and set(map(type, texts)) == {str}:
        joined = "\n".join(texts)
        if joined.count("\n") == len(texts) - 1:
            if _NOT_INTEGER.search(joined):
                return labels.astype(object)
            try:
                out[:] = list(map(int, texts))
            except ValueError:
                return labels.astype(object)
            return out
    for i, text in enumerate(labels):
        try:
            number = int(text)
        except ValueError:
            return labels.astype(object)
        if str(number) != text:
            return labels.astype(object)
        out[i] = number
    return out

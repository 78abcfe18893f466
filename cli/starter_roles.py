"""What `strativ init` reads from the data: each column's profile over all files, the role
each column is filled in (on top of the name reading of `role_guess`) with the other columns
it could have been, most likely first, and what the offered counts say about
``design.assignment``.

Offer, take-up and stratum are `role_guess`'s; outcomes and covariates are read here (with
its name stems), since a fractional measure distinct in every row is no identifier. Outcomes
are filled only when they are clear: the columns named like outcomes (outcome, post, endline,
follow-up, y, ...), else the one to three numeric or 0/1 columns left once offer, take-up and
stratum are filled and identifiers, grouping and baseline-looking columns are set aside. A
0/1 column that may still be the offer or the take-up is never filled as an outcome.
"""

from __future__ import annotations

import re
from collections import Counter
from collections.abc import Sequence
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import numpy as np

from .role_guess import _BASELINE, _DEMOGRAPHIC, _marked, guess_roles
from .tables import read_table
from .values import parse_binary, parse_label, parse_number

__all__ = ["ColumnProfile", "RoleChoice", "assignment_notes", "choose_roles", "offered_counts",
           "profile_columns", "profile_files"]

_MAX_LEVELS = 50
_MIN_IDENTIFIER = 10

_OUTCOME_WORDS = frozenset({"y", "outcome", "outcomes", "endline", "post", "after", "followup",
                            "follow", "next", "later", "result", "results"})
_MAX_LEFT = 3
"""At most this many columns left over are filled as outcomes without outcome-like names."""
_SHARE_STEPS = 20
"""Lottery shares looked for: multiples of 1/20 (halves, quarters, fifths, tenths, 5 %)."""
_TELLING = 100
"""Strata of at least this many units tell a rounded share from chance (a count near one of
the 19 shares by chance has probability of roughly 40/n or less)."""
_MIN_TELLING = 3


@dataclass(frozen=True, slots=True)
class ColumnProfile:
    """What a column looks like: its kind and how many distinct values it has."""

    name: str
    """Column name."""
    kind: str
    """``"binary"``, ``"numeric"``, ``"text"`` or ``"empty"``."""
    levels: int
    """Distinct non-missing values."""
    missing: int
    """Missing cells."""
    rows: int
    """Rows in the file (over several files: in those that have the column)."""
    absent: int = 0
    """Files, of several, without this column (such a column fills no role)."""
    whole: bool = True
    """Whether every numeric value is a whole number (an integer code can label a group)."""

    @property
    def few_levels(self) -> bool:
        """True for a text or whole-number column with 2..50 levels, each seen twice on
        average: a possible stratum."""
        return (self.kind == "text" or self.kind == "numeric" and self.whole) \
            and 2 <= self.levels <= _MAX_LEVELS and self.levels * 2 <= self.rows - self.missing

    @property
    def identifier(self) -> bool:
        """True for a text or whole-number column with a distinct value in each of at least
        10 rows (a fractional measure may be distinct in every row and is no identifier)."""
        return (self.kind == "text" or self.kind == "numeric" and self.whole) \
            and self.levels == self.rows - self.missing >= _MIN_IDENTIFIER

    def describe(self) -> str:
        """Return a short description for the spec's comment block."""
        if self.kind == "binary":
            text = "binary (0/1 or true/false)"
        elif self.kind == "empty":
            text = "empty"
        elif self.few_levels:
            text = f"{self.kind}, {self.levels} levels"
        elif self.identifier:
            text = f"{self.kind}, every value distinct (an identifier?)"
        else:
            text = f"{self.kind}, {self.levels} distinct values"
        return text + (f", {self.missing} missing" if self.missing else "") \
            + (f", absent from {self.absent} file(s)" if self.absent else "")


def profile_columns(path: Path) -> list[ColumnProfile]:
    """Classify every column of one data file.

    Parameters
    ----------
    path : Path
        The data file.

    Returns
    -------
    list of ColumnProfile
        One profile per column, in file order.

    Raises
    ------
    DataError
        When the file cannot be read (see `strativ.cli.tables.read_table`).
    """
    return profile_files([path])


_Seen = tuple[str, set[Any], int, int, bool]
"""One column in one file: kind, distinct present values, missing cells, rows, and whether
every number is whole."""


def _read_columns(path: Path) -> dict[str, _Seen]:
    table = read_table(path)
    out: dict[str, _Seen] = {}
    for name in table.header:
        cells = table.columns[name]
        binary = parse_binary(cells)
        n_missing = int(binary.missing.sum())
        present = {c.strip() if isinstance(c, str) else c
                   for c, m in zip(cells, binary.missing, strict=True) if not m}
        number = None if binary.invalid.size == 0 else parse_number(cells)
        if n_missing == len(cells):
            kind = "empty"
        elif number is None:
            kind = "binary"
        elif number.invalid.size == 0:
            kind = "numeric"
        else:
            kind = "text"
        whole = kind != "numeric" or number is None or bool(
            np.all(np.mod(number.values[~number.missing], 1) == 0))
        out[name] = (kind, present, n_missing, len(cells), whole)
    return out


def _kind(kinds: set[str]) -> str:
    """One kind for a column over several files (files where it is empty say nothing)."""
    kinds = kinds - {"empty"}
    if not kinds:
        return "empty"
    if "text" in kinds:
        return "text"
    return "binary" if kinds == {"binary"} else "numeric"


def profile_files(paths: Sequence[Path]) -> list[ColumnProfile]:
    """Classify every column over all the data files (the waves of one trial).

    Parameters
    ----------
    paths : sequence of Path
        The data files; each is read whole.

    Returns
    -------
    list of ColumnProfile
        One profile per column, in order of first appearance; levels, missing cells and rows
        are counted over the files that have the column, `absent` counts the others.

    Raises
    ------
    DataError
        When a file cannot be read (see `strativ.cli.tables.read_table`).
    """
    seen: dict[str, list[_Seen]] = {}
    for path in paths:
        for name, column in _read_columns(path).items():
            seen.setdefault(name, []).append(column)
    return [ColumnProfile(name, _kind({c[0] for c in columns}),
                          len(set().union(*(c[1] for c in columns))),
                          sum(c[2] for c in columns), sum(c[3] for c in columns),
                          len(paths) - len(columns), all(c[4] for c in columns))
            for name, columns in seen.items()]


@dataclass(frozen=True, slots=True)
class RoleChoice:
    """One role of the starter spec: the columns filled in and the alternatives."""

    filled: tuple[Any, ...]
    """Column profiles filled in (empty: the role stays a commented placeholder)."""
    alternatives: tuple[Any, ...]
    """The other columns the role could take, most likely first."""
    reason: str
    """Why these columns (or why none), for the spec's comment."""


def _outcome_named(name: str) -> bool:
    words = [w for w in re.split(r"[^a-z0-9]+", name.lower()) if w]
    return any(w in _OUTCOME_WORDS or w.startswith(("outcome", "endline", "follow"))
               for w in words)


def _unique(items: Sequence[Any], leave: Sequence[Any] = ()) -> tuple[Any, ...]:
    """`items` in order, each once, without those in `leave` (compared by identity)."""
    out: list[Any] = []
    for item in items:
        if all(item is not x for x in [*out, *leave]):
            out.append(item)
    return tuple(out)


def choose_roles(profiles: list[Any]) -> dict[str, RoleChoice]:
    """Fill offer, take-up, stratum, outcome and suggest covariates, with ranked alternatives.

    Parameters
    ----------
    profiles : list of ColumnProfile
        The columns present in every data file (`starter.profile_files`).

    Returns
    -------
    dict
        ``offer``, ``take_up``, ``stratum``, ``outcome``, ``covariates``: a `RoleChoice` each.
        ``covariates`` is a suggestion only (`filled` stays empty).
    """
    guess = guess_roles(profiles)
    binary = [p for p in profiles if p.kind == "binary"]
    offer, take_up, stratum = (guess[k].chosen for k in ("offer", "take_up", "stratum"))
    named_offer, named_take = guess["offer"].candidates, guess["take_up"].candidates
    offers = _unique([*named_offer, *[p for p in binary if p not in named_take], *named_take])
    takes = _unique([*named_take, *[p for p in binary if p not in named_offer], *named_offer])
    design = [p for p in (offer, take_up, stratum) if p is not None]
    contested = [*(offers if offer is None else ()), *(takes if take_up is None else ())]
    measured = [p for p in profiles if p.kind in ("numeric", "binary") and not p.identifier]
    covariates = _unique([p for p in measured if _marked(p.name, _BASELINE + _DEMOGRAPHIC)],
                         design)
    named = _unique([p for p in measured if _outcome_named(p.name)],
                    [*design, *contested, *covariates])
    pool = _unique([p for p in measured if not p.few_levels],
                   [*design, *contested, *covariates, *named_offer, *named_take])
    if named:
        outcomes, why = named, "named like an outcome (y, outcome, post, endline, follow-up, ...)"
    elif len(pool) == 1 or (1 < len(pool) <= _MAX_LEFT and len(design) == 3):
        outcomes, why = pool, ("the numeric or 0/1 column" if len(pool) == 1 else "the "
                               f"{len(pool)} numeric or 0/1 columns") + " left once the "\
            "other roles and identifier, grouping and baseline-looking columns are set aside"
    else:
        outcomes, why = (), "numeric or 0/1, not an identifier, baseline or design column; " \
            + ("none found" if not pool else "unclear which")
    used = [*design, *outcomes]

    def unclear(named: tuple[Any, ...], what: str) -> str:
        return f"; {len(named)} 0/1 columns are named like {what}, so it is unclear" \
            if len(named) > 1 else f"; no 0/1 column is clearly named like {what}"

    return {
        "offer": RoleChoice(
            (offer,) if offer else (), _unique(offers, used),
            "the randomized offer: 0/1, named like an offer, lottery or assignment (or the "
            "other of two 0/1 columns when one is named like take-up)"
            + ("" if offer else unclear(named_offer, "an offer"))),
        "take_up": RoleChoice(
            (take_up,) if take_up else (), _unique(takes, used),
            "receipt of the programme: 0/1, named like take-up (took, enrolled, received, ...)"
            + ("" if take_up else unclear(named_take, "take-up"))),
        "stratum": RoleChoice(
            (stratum,) if stratum else (), _unique(guess["stratum"].candidates, used),
            "the block each lottery was drawn in: few levels (2 to 50); names like site, "
            "district, round or block rank above demographic columns"
            + ("" if stratum else "; no column is clearly first")),
        "outcome": RoleChoice(outcomes, _unique([*pool, *covariates, *measured], used), why),
        "covariates": RoleChoice((), _unique(covariates, used),
                                 "named like baseline or background measures"),
    }


def offered_counts(files: Sequence[Path], offer: str, stratum: str) -> list[tuple[int, int]]:
    """Units and offered units in each stratum (each file's own, as waves are by default).

    Rows with a missing or invalid offer or stratum are left out.

    Raises
    ------
    DataError
        When a file cannot be read (see `strativ.cli.tables.read_table`).
    """
    units: Counter[tuple[int, str]] = Counter()
    offered: Counter[tuple[int, str]] = Counter()
    for i, path in enumerate(files):
        table = read_table(path, wanted=[offer, stratum])
        z = parse_binary(table.columns[offer])
        labels = parse_label(table.columns[stratum])
        keep = ~(z.missing | labels.missing)
        keep[z.invalid] = False
        for label, value, ok in zip(labels.values, z.values, keep, strict=True):
            if ok:
                units[(i, label)] += 1
                offered[(i, label)] += int(value)
    return [(units[key], offered[key]) for key in units]


def _round_share(n: int, k: int) -> bool:
    """True when `k` is within one unit of `n` times a multiple of 1/20 (a rounded share)."""
    return any(abs(k * _SHARE_STEPS - n * j) < _SHARE_STEPS for j in range(1, _SHARE_STEPS))


def assignment_notes(counts: list[tuple[int, int]] | None, strata: str) -> str:
    """The comment above ``assignment: block``: why block, what the offered counts show, and
    what to write instead when offers were drawn unit by unit.

    Parameters
    ----------
    counts : list of (units, offered), or None
        Per stratum (`offered_counts`); None when offer or stratum is not filled.
    strata : str
        How the strata are formed, for the text (e.g. ``"district x file"``).

    Returns
    -------
    str
        One paragraph of plain text (the caller wraps it into comment lines).
    """
    both = [(n, k) for n, k in counts or () if 0 < k < n]
    telling = [(n, k) for n, k in both if n >= _TELLING]
    off = [(n, k) for n, k in both if not _round_share(n, k)]
    head = "block: lotteries usually draw a fixed number of winners in each stratum"
    unit = "If each unit was offered by its own draw (a coin flip each), write independent"
    if counts is None:
        return f"{head}. {unit}."
    if not off and len(telling) >= _MIN_TELLING:
        where = "in the one stratum" if len(both) == 1 else f"in all {len(both)} strata"
        return (f"{head}, and here, {where} ({strata}) with both arms, the "
                "offered count is the stratum size times a round share (a multiple of 5 %), "
                f"rounded: the mark of such a draw. {unit}.")
    if off:
        n, k = off[0]
        return (f"{head}. Here {len(off)} of {len(both)} "
                f"{'stratum' if len(both) == 1 else 'strata'} ({strata}) offered no round "
                f"share of their units (e.g. {k} of {n}): a count set by a budget gives that, "
                f"and so do offers drawn unit by unit. {unit} (wider intervals, the cautious "
                "choice when unsure).")
    return (f"{head}; the strata ({strata}) are too small to tell from the offered counts. "
            f"{unit}.")

"""`strativ init`: inspect the data files and write a starter spec next to nothing existing.

Roles are filled in only from unambiguous evidence read from column names and values
(`role_guess`); the others stay commented placeholders that list the candidate columns, and
each filled role lists its alternatives. The file is created only if it does not exist yet.
"""

from __future__ import annotations

import json
import os
import re
from dataclasses import dataclass
from pathlib import Path

from strativ.estimators.options import (
    ASSIGNMENTS,
    DEFAULTS,
    DESCRIPTIONS,
    ESTIMATORS,
    SAMPLINGS,
    VARIANCES,
)

from .errors import UsageError
from .files import temporary_file
from .role_guess import Guess, guess_roles
from .tables import read_table
from .values import parse_binary, parse_number

__all__ = ["ColumnProfile", "data_files", "profile_columns", "starter_spec", "write_new_file"]

_MAX_LEVELS = 50
_PLAIN = re.compile(r"[A-Za-z_][A-Za-z0-9_.\-]*")
_YAML_WORDS = {"true", "false", "yes", "no", "on", "off", "null", "~"}


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
    """Rows in the file."""

    @property
    def few_levels(self) -> bool:
        """True for a non-binary column with 2..50 levels, each seen twice on average."""
        return self.kind in ("numeric", "text") and 2 <= self.levels <= _MAX_LEVELS \
            and self.levels * 2 <= self.rows - self.missing

    def describe(self) -> str:
        """Return a short description for the spec's comment block."""
        if self.kind == "binary":
            text = "binary (0/1 or true/false)"
        elif self.kind == "empty":
            text = "empty"
        elif self.few_levels:
            text = f"{self.kind}, {self.levels} levels"
        elif self.levels == self.rows - self.missing:
            text = f"{self.kind}, every value distinct (an identifier?)"
        else:
            text = f"{self.kind}, {self.levels} distinct values"
        return text + (f", {self.missing} missing" if self.missing else "")


def profile_columns(path: Path) -> list[ColumnProfile]:
    """Classify every column of a CSV or Parquet file.

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
    table = read_table(path)
    out = []
    for name in table.header:
        cells = table.columns[name]
        binary = parse_binary(cells)
        n_missing = int(binary.missing.sum())
        present = [c.strip() if isinstance(c, str) else c
                   for c, m in zip(cells, binary.missing, strict=True) if not m]
        if n_missing == len(cells):
            kind = "empty"
        elif binary.invalid.size == 0:
            kind = "binary"
        elif parse_number(cells).invalid.size == 0:
            kind = "numeric"
        else:
            kind = "text"
        out.append(ColumnProfile(name, kind, len(set(present)), n_missing, len(cells)))
    return out


def _scalar(text: str) -> str:
    """Return `text` as a YAML scalar, quoted when a plain scalar would change meaning."""
    if _PLAIN.fullmatch(text) and text.lower() not in _YAML_WORDS:
        return text
    return json.dumps(text)


def _names(profiles: list[ColumnProfile]) -> str:
    return ", ".join(_scalar(p.name) for p in profiles) or "none found"


def _described(option: str, values: tuple[str, ...], indent: int = 0) -> list[str]:
    """Comment lines describing each value of `option` (from the option vocabulary)."""
    pad = " " * indent
    return [f"# {pad}  {value}: {DESCRIPTIONS[option][value]}" for value in values]


def _option(option: str, values: tuple[str, ...], *, indent: int) -> list[str]:
    """The commented default of `option`, its choices, and one line per choice."""
    line = f"# {' ' * indent}{option}: {DEFAULTS[option]}"
    return [f"{line.ljust(34)} # {' | '.join(values)}",
            *_described(option, values, indent)]


def data_files(entries: list[str]) -> list[Path]:
    """The data files `strativ init` was given: paths or globs, each matching a regular file
    strativ reads, in the order given (a glob's matches sorted), each once.

    Raises
    ------
    UsageError
        For an entry that names no file, or a file strativ does not read.
    """
    import glob

    from .tables import DATA_SUFFIXES, FORMATS_TEXT

    out: list[Path] = []
    for entry in entries:
        path = Path(entry).expanduser()
        if path.is_file():
            matches = [path]
        elif set("*?[") & set(entry):
            matches = sorted(Path(m) for m in glob.glob(str(path)) if Path(m).is_file())
            if not matches:
                raise UsageError(f"the pattern '{entry}' matches no file",
                                 "check the folder and the pattern (quote it in the shell)")
        else:
            raise UsageError(f"{entry} is not a file", "give a data file or a quoted glob")
        for match in matches:
            if not match.name.lower().endswith(DATA_SUFFIXES):
                raise UsageError(f"{match.name} is not a data file strativ reads",
                                 f"strativ reads files ending in {FORMATS_TEXT}")
            if match.resolve() not in [p.resolve() for p in out]:
                out.append(match)
    return out


def starter_spec(files: list[Path] | Path, spec_path: Path) -> str:
    """Return the text of a starter spec for `data`, to be saved at `spec_path`.

    Parameters
    ----------
    files : list of Path, or Path
        The data files (the first is profiled; several are the trial's waves).
    spec_path : Path
        Where the spec will live (the data path is written relative to it).

    Returns
    -------
    str
        YAML text with the found roles filled in and the others as commented placeholders.
    """
    files = [files] if isinstance(files, Path) else list(files)
    data = files[0]
    profiles = [p for p in profile_columns(data) if p.name]
    binary = [p for p in profiles if p.kind == "binary"]
    numeric = [p for p in profiles if p.kind == "numeric" and not p.few_levels]
    grouped = [p for p in profiles if p.few_levels]
    shown = {p.name: _scalar(p.name) for p in profiles}  # one line each, even with "\n"
    width = max(len(text) for text in shown.values()) if profiles else 0
    guess = guess_roles(profiles)
    source = data.name if len(files) == 1 else f"{data.name} (first of {len(files)} files)"
    out = [
        f"# strativ spec: a starter written by `strativ init` from {source}",
        f"# ({profiles[0].rows if profiles else 0} rows, {len(profiles)} columns).",
        "# Roles are filled where the names and values make them clear; check each one, then:"
        "  strativ check " + spec_path.name,
        "#",
        "# Columns found:",
        *[f"#   {shown[p.name].ljust(width)}  {p.describe()}" for p in profiles],
        "",
        f"title: {_scalar(data.stem)}",
        f"data: {_data_entry(files, spec_path)}",
    ]
    if len(files) > 1:
        out.append("# each file is a wave, and each (stratum x wave) its own stratum; "
                   "waves: {pool: true} pools them")
    out += ["", "columns:"]
    out += _role_lines("outcome", guess["outcome"], numeric + binary, many=True,
                       why="numeric or 0/1 columns that are not baseline, identifier or "
                       "design columns")
    out += _role_lines("take_up", guess["take_up"], binary, why="0/1, named like take-up")
    out += _role_lines("offer", guess["offer"], binary,
                       why="the randomized offer: 0/1, named like an offer or lottery")
    out += _role_lines("stratum", guess["stratum"], grouped,
                       why="few levels, named like a randomization block; or a list, combined")
    covariates = guess["covariates"].candidates
    out += [
        "  # cluster: <column>    # optional: the unit offered as a whole; every variance "
        "flavour then reads it",
        "  # covariates: [" + (", ".join(_scalar(p.name) for p in covariates) or "<column>, ...")
        + "]   # optional: baseline columns for adjustment and balance"
        + (" (these look like baseline)" if covariates else ""),
        "",
        "design:",
        "#   offer_probability: estimated   # or a column name, or {stratum: probability, ...}",
        "  # block: a lottery drew a fixed number of winners in each stratum (the usual case);",
        "  # change to independent if each unit was offered by its own coin flip",
        "  assignment: block",
        "  # random: the units stand for a larger population of applicants (the cautious",
        "  # choice); fixed when stratum sizes were set by the design and are the target",
        "  sampling: random",
        *_described("assignment", ASSIGNMENTS, indent=2),
        *_described("sampling", SAMPLINGS, indent=2),
        f"# estimators: [{', '.join(DEFAULTS['estimators'])}]",
        *_described("estimators", ESTIMATORS),
        "# inference:",
        *_option("variance", VARIANCES, indent=2),
        f"#   level: {DEFAULTS['level']}",
        "# output:",
        "#   dir: strativ_out",
        "#   formats: [json, csv]",
        "# missing:",
        "#   drop_incomplete_rows: false",
        "",
    ]
    return "\n".join(out)


def _role_lines(role: str, guess: Guess, options: list[ColumnProfile], *, why: str,
                many: bool = False) -> list[str]:
    """The spec line of one role: filled when the guess is clear, else a commented
    placeholder; the alternatives listed in a comment either way."""
    chosen = guess.chosen
    if many and chosen:
        value = chosen[0].name if len(chosen) == 1 else None
        text = _scalar(value) if value else "[" + ", ".join(_scalar(p.name) for p in chosen) + "]"
        others = [p for p in options if p not in chosen]
        return [f"  {role}: {text}   # {why}"
                + (f"; others: {_names(others)}" if others else "")]
    if not many and chosen is not None:
        others = [p for p in guess.candidates if p is not chosen]
        return [f"  {role}: {_scalar(chosen.name)}   # {why}"
                + (f"; others: {_names(others)}" if others else "")]
    listed = list(guess.candidates) or options
    return [f"  # {role}: <column>    # {why}; candidates: {_names(listed)}"]


def _data_entry(files: list[Path], spec_path: Path) -> str:
    """One file, a glob when the files are one numbered family in one folder, else a list."""
    base = spec_path.resolve().parent
    rels = [os.path.relpath(f.resolve(), base) for f in files]
    if len(files) == 1:
        return _scalar(rels[0])
    folder = {f.resolve().parent for f in files}
    pattern = re.compile(r"^(.*?)\d+(\.[^/]+)$")
    parts = {pattern.sub(r"\1*\2", f.name) for f in files}
    if len(folder) == 1 and len(parts) == 1:
        glob_name = parts.pop()
        matched = sorted(p.resolve() for p in next(iter(folder)).glob(glob_name))
        if matched == sorted(f.resolve() for f in files):
            return _scalar(os.path.join(os.path.dirname(rels[0]), glob_name))
    return "[" + ", ".join(_scalar(r) for r in rels) + "]"


def write_new_file(path: Path, text: str) -> None:
    """Create `path` with `text` atomically; refuse if it already exists.

    Parameters
    ----------
    path : Path
        The file to create.
    text : str
        Its contents.

    Raises
    ------
    UsageError
        When `path` exists (it is never overwritten) or cannot be created.
    """
    if path.exists():
        raise UsageError(f"{path} already exists; strativ init never overwrites a file",
                         "choose another name with --output")
    directory = path.parent
    if not directory.is_dir():
        raise UsageError(f"cannot write {path}: the directory {directory} does not exist")
    try:
        fd, tmp = temporary_file(directory)
    except OSError as exc:
        raise UsageError(f"cannot write {path} ({exc.strerror})",
                         "choose a writable folder with --output") from None
    try:
        with os.fdopen(fd, "w", encoding="utf-8") as handle:
            handle.write(text)
        try:
            os.link(tmp, path)
        except FileExistsError:
            raise
        except OSError:  # no hard links here: exclusive create never overwrites either
            with path.open("x", encoding="utf-8") as handle:
                handle.write(text)
    except FileExistsError:
        raise UsageError(f"{path} already exists; strativ init never overwrites a file",
                         "choose another name with --output") from None
    except OSError as exc:
        raise UsageError(f"cannot write {path} ({exc.strerror})") from None
    finally:
        os.unlink(tmp)

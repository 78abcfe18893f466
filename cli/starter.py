"""`strativ init`: inspect the data files and write a starter spec next to nothing existing.

Every file is read and its columns profiled together (a column's kind and levels over all
files). Roles are filled in only from unambiguous evidence read from column names and values
(`role_guess`, `starter_roles`); the others stay commented placeholders that list the
candidate columns, and each filled role lists its alternatives. Several files from one
numbered family in one folder are written as a glob. The file is created only if it does not
exist yet.
"""

from __future__ import annotations

import glob
import json
import os
import re
import textwrap
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
from .files import forget_temporary, temporary_file
from .starter_roles import (
    ColumnProfile,
    RoleChoice,
    assignment_notes,
    choose_roles,
    offered_counts,
    profile_columns,
    profile_files,
)

__all__ = ["ColumnProfile", "data_files", "profile_columns", "profile_files", "starter_spec",
           "write_new_file"]

_PLAIN = re.compile(r"[A-Za-z_][A-Za-z0-9_.\-]*")
_YAML_WORDS = {"true", "false", "yes", "no", "on", "off", "null", "~"}


def _scalar(text: str) -> str:
    """Return `text` as a YAML scalar, quoted when a plain scalar would change meaning."""
    if _PLAIN.fullmatch(text) and text.lower() not in _YAML_WORDS:
        return text
    return json.dumps(text)


def _comment(text: str, indent: int = 2) -> list[str]:
    """`text` as comment lines of at most 92 characters, `indent` spaces before the "#"."""
    pad = " " * indent + "# "
    return textwrap.wrap(text, width=92, initial_indent=pad, subsequent_indent=pad,
                         break_on_hyphens=False)


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
    """Return the text of a starter spec for the data `files`, to be saved at `spec_path`.

    Parameters
    ----------
    files : list of Path, or Path
        The data files (several are the trial's waves); all are profiled.
    spec_path : Path
        Where the spec will live (the data path is written relative to its folder).

    Returns
    -------
    str
        YAML text with the clear roles filled in, the others as commented placeholders, the
        alternatives of each in comments, and ``design.assignment`` and ``design.sampling``
        written with the reasons for each.

    Raises
    ------
    DataError
        When a file cannot be read.
    """
    files = [files] if isinstance(files, Path) else list(files)
    profiles = [p for p in profile_files(files) if p.name]
    shown = {p.name: _scalar(p.name) for p in profiles}  # one line each, even with "\n"
    width = max(len(text) for text in shown.values()) if profiles else 0
    roles = choose_roles([p for p in profiles if not p.absent])
    family = _family(files, spec_path)
    several = len(files) > 1
    source = files[0].name if not several else \
        f"{len(files)} files ({files[0].name} to {files[-1].name})"
    rows = max((p.rows for p in profiles if not p.absent), default=0)
    title = f"{files[0].stem} to {files[-1].stem}" if several else files[0].stem
    out = [
        *_comment(f"strativ spec: a starter written by `strativ init` from {source} ({rows} "
                  f"rows, {len(profiles)} columns). Each role is filled where the column names "
                  "and values make it clear, with the other possible columns beside it; check "
                  "each one, then run:", indent=0),
        f"#   strativ check {_scalar(spec_path.name)}",
        "#",
        "# Columns found" + (" (over all files):" if several else ":"),
        *[f"#   {shown[p.name].ljust(width)}  {p.describe()}" for p in profiles],
        "",
        f"title: {_scalar(title)}",
        f"data: {family or _data_list(files, spec_path)}",
    ]
    if several:
        out += ["# each file is a wave of the trial; by default each (stratum x wave) is its own",
                "# stratum, as each wave drew its own lottery; waves: {pool: true} pools them"]
    out += ["", "columns:"]
    for role in ("outcome", "take_up", "offer", "stratum"):
        out += _role_lines(role, roles[role])
    suggested = roles["covariates"].alternatives
    out += [
        "  # cluster: <column>    # optional: the unit offered as a whole; every variance "
        "flavour then reads it",
        *_comment("optional: baseline columns for adjustment and balance; " + (
            "these look like baseline or background measures by their names: uncomment once "
            "each is known to be measured before the offer (never list one the offer could "
            "move)" if suggested else "none looks like one by its name")),
        "  # covariates: [" + (", ".join(_scalar(p.name) for p in suggested) or "<column>, ...")
        + "]",
        "",
        "design:",
        "#   offer_probability: estimated   # or a column name, or {stratum: probability, ...}",
        *_comment(assignment_notes(_counts(files, roles), _strata_text(roles, several))),
        "  assignment: block",
        *_comment("random: these units stand for a larger population of applicants, so "
                  "stratum sizes are random (the cautious choice). Write fixed when the stratum "
                  "sizes were set by the design and these units are the whole population of "
                  "interest."),
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


def _counts(files: list[Path], roles: dict[str, RoleChoice]) -> list[tuple[int, int]] | None:
    offer, stratum = roles["offer"].filled, roles["stratum"].filled
    if not offer or not stratum:
        return None
    return offered_counts(files, offer[0].name, stratum[0].name)


def _strata_text(roles: dict[str, RoleChoice], several: bool) -> str:
    stratum = roles["stratum"].filled
    name = _scalar(stratum[0].name) if stratum else "stratum"
    return f"{name} x file" if several else name


def _role_lines(role: str, choice: RoleChoice) -> list[str]:
    """One role: a comment with the reason, then the filled line with the alternatives beside
    it, or a commented placeholder listing the candidates, most likely first."""
    names = [_scalar(p.name) for p in choice.alternatives]
    if not choice.filled:
        listed = ", ".join(names) or "none found"
        return [*_comment(choice.reason),
                f"  # {role}: <column>   # candidates, most likely first: {listed}"]
    chosen = [_scalar(p.name) for p in choice.filled]
    value = chosen[0] if len(chosen) == 1 else "[" + ", ".join(chosen) + "]"
    others = ("others: " + ", ".join(names)) if names else "no other candidate"
    return [*_comment(choice.reason), f"  {role}: {value}   # {others}"]


def _data_list(files: list[Path], spec_path: Path) -> str:
    """One file, or a list of files, each relative to the spec's folder."""
    rels = [_relative(f, spec_path) for f in files]
    return _scalar(rels[0]) if len(rels) == 1 else "[" + ", ".join(map(_scalar, rels)) + "]"


def _relative(path: Path, spec_path: Path) -> str:
    """`path` relative to the spec's folder; absolute when they share only the root."""
    base, target = spec_path.resolve().parent, path.resolve()
    try:
        common = os.path.commonpath([base, target])
    except ValueError:  # another drive
        return str(target)
    return str(target) if common == os.path.dirname(common) else os.path.relpath(target, base)


_NUMBERED = re.compile(r"^(.*?)(\d+)((?:\.[A-Za-z0-9]+)+)$")


def _family(files: list[Path], spec_path: Path) -> str | None:
    """The `data` glob when the files are one numbered family in one folder and
    the glob matches exactly them (as the spec will read it), else None."""
    from .spec import glob_pattern

    if len(files) < 2 or len({f.resolve().parent for f in files}) != 1:
        return None
    parts = {(m.group(1), m.group(3)) if (m := _NUMBERED.match(f.name)) else None
             for f in files}
    if len(parts) != 1 or None in parts:
        return None
    stem, suffix = parts.pop()
    folder = os.path.dirname(_relative(files[0], spec_path))
    entry = os.path.join(glob.escape(folder), glob.escape(stem) + "*" + glob.escape(suffix)) \
        if folder else glob.escape(stem) + "*" + glob.escape(suffix)
    base = spec_path.resolve().parent
    matched = {Path(m).resolve() for m in glob.glob(glob_pattern(entry, base))
               if Path(m).is_file()}
    if matched != {f.resolve() for f in files}:
        return None
    return _scalar(entry)


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
        forget_temporary(tmp)

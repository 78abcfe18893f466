"""How a spec's files are read and which engine summarises them: the `reading` and `engine`
sections of the spec.

`reading` holds what a CSV export needs beyond the defaults (its field separator, a decimal
comma) and the codes of an offer or take-up column written other than 0/1. `engine` picks the
engine that runs the one GROUP BY: DuckDB in this process (the default) or Spark at a master
URL. Both are declared here once, with their defaults, and read by the row reader
(`loading.py`), the DuckDB view (`units_sql.py`) and the Spark view (`spark_units.py`).
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any

from .errors import SpecError
from .yamlmarks import KeyPath, dotted, line_of

__all__ = ["DELIMITERS", "ENGINES", "ReadOptions", "read_options"]

DELIMITERS = {",": ",", ";": ";", "|": "|", "tab": "\t", "\t": "\t"}
"""Field separators a spec may name, as written -> the character."""
DECIMALS = (".", ",")
ENGINES = ("duckdb", "spark")
DEFAULT_MASTER = "local[2]"
"""Spark master when the spec names the engine without one: two threads on this machine."""
READING_KEYS = ("delimiter", "decimal", "codes")
ENGINE_KEYS = ("name", "master")
CODED_ROLES = ("offer", "take_up")


@dataclass(frozen=True, slots=True)
class ReadOptions:
    """The spec's `reading` and `engine` sections, defaults filled in."""

    delimiter: str | None = None
    """CSV field separator; None: a comma (a tab for .tsv files)."""
    decimal: str = "."
    """Decimal mark of numbers in CSV and TSV files: ``"."`` or ``","``."""
    codes: tuple[tuple[str, tuple[tuple[str, int], ...]], ...] = ()
    """(role, ((code as written, 0 or 1), ...)) for offer and take-up columns coded other than
    0/1; a role listed here accepts only its codes (and missing values)."""
    engine: str = "duckdb"
    """``"duckdb"`` (in this process) or ``"spark"``."""
    master: str = DEFAULT_MASTER
    """Spark master URL (engine ``"spark"`` only)."""

    def codes_of(self, role: str) -> dict[str, int] | None:
        """The codes of `role` (``"offer"`` or ``"take_up"``), lower-cased, or None."""
        for name, pairs in self.codes:
            if name == role:
                return {code.lower(): value for code, value in pairs}
        return None

    def to_dict(self) -> dict[str, Any]:
        """The JSON form (spec.reading and spec.engine of results.json)."""
        return {
            "delimiter": self.delimiter,
            "decimal": self.decimal,
            "codes": {role: dict(pairs) for role, pairs in self.codes},
            "engine": self.engine,
            "master": self.master if self.engine == "spark" else None,
        }


def _error(path: Any, lines: dict[KeyPath, int], keys: KeyPath, message: str,
           hint: str | None = None) -> SpecError:
    return SpecError(path, line_of(lines, keys), dotted(keys), message, hint)


def _section(path: Any, lines: dict[KeyPath, int], value: Any, key: str,
             allowed: tuple[str, ...]) -> dict[str, Any]:
    if value is None:
        return {}
    if not isinstance(value, dict):
        raise _error(path, lines, (key,), f"'{key}' must be a mapping of keys, found "
                     f"{type(value).__name__} {value!r}",
                     "write one 'key: value' per line, indented under it")
    for name in value:
        if name not in allowed:
            raise _error(path, lines, (key, name), f"unknown key {name!r} under '{key}'",
                         "valid keys: " + ", ".join(allowed))
    return value


def _codes(path: Any, lines: dict[KeyPath, int], value: Any) -> tuple[Any, ...]:
    keys: KeyPath = ("reading", "codes")
    section = _section(path, lines, value, "reading.codes", CODED_ROLES) if value is not None \
        else {}
    out = []
    for role, mapping in section.items():
        where = keys + (role,)
        if not isinstance(mapping, dict) or not mapping:
            raise _error(path, lines, where, f"'{dotted(where)}' must map each code to 1 or 0",
                         "for example  offer: {'won': 1, 'lost': 0}")
        pairs = []
        for code, meaning in mapping.items():
            if isinstance(code, bool):
                raise _error(path, lines, where + (code,),
                             f"a code under '{dotted(where)}' was read as true/false",
                             "YAML reads yes/no/on/off unquoted as true/false: quote the "
                             "code, for example 'yes': 1")
            text = str(code).strip()
            if not text or isinstance(meaning, bool) or not isinstance(meaning, int) \
                    or meaning not in (0, 1):
                raise _error(path, lines, where + (code,),
                             f"code {text!r} under '{dotted(where)}' must map to 1 or 0, "
                             f"found {meaning!r}", "1 = offered / took it up, 0 = not")
            if any(text.lower() == seen.lower() for seen, _ in pairs):
                raise _error(path, lines, where + (code,), f"code {text!r} is listed twice "
                             f"under '{dotted(where)}' (codes ignore case)")
            pairs.append((text, int(meaning)))
        if {v for _, v in pairs} != {0, 1}:
            raise _error(path, lines, where, f"'{dotted(where)}' has no code for "
                         f"{1 - pairs[0][1]}", "list the code of each of 1 and 0")
        out.append((role, tuple(pairs)))
    return tuple(out)


def read_options(path: Any, lines: dict[KeyPath, int], reading: Any,
                 engine: Any) -> ReadOptions:
    """Validate the spec's `reading` and `engine` values.

    Parameters
    ----------
    path : Path
        The spec file (for messages).
    lines : dict
        Spec line of each key path.
    reading, engine : object
        The raw YAML values (None when absent).

    Returns
    -------
    ReadOptions
        The options, defaults filled in.

    Raises
    ------
    SpecError
        Naming the spec line of an unknown key or a value outside its choices.
    """
    section = _section(path, lines, reading, "reading", READING_KEYS)
    delimiter = section.get("delimiter")
    if delimiter is not None:
        if not isinstance(delimiter, str) or delimiter not in DELIMITERS:
            raise _error(path, lines, ("reading", "delimiter"),
                         f"'reading.delimiter' is {delimiter!r}; expected one of "
                         "',', ';', '|' or tab", "quote it in YAML: delimiter: ';'")
        delimiter = DELIMITERS[delimiter]
    decimal = section.get("decimal", ".")
    if decimal not in DECIMALS:
        raise _error(path, lines, ("reading", "decimal"),
                     f"'reading.decimal' is {decimal!r}; expected '.' or ','",
                     "quote it in YAML: decimal: ','")
    if decimal == "," and (delimiter or ",") == ",":
        raise _error(path, lines, ("reading", "decimal"),
                     "a decimal comma needs another field separator",
                     "name it too, for example  delimiter: ';'")
    if isinstance(engine, str) or engine is None:
        chosen = {"name": engine} if engine is not None else {}
    else:
        chosen = _section(path, lines, engine, "engine", ENGINE_KEYS)
    name = chosen.get("name", "duckdb")
    keys: KeyPath = ("engine", "name") if isinstance(engine, dict) else ("engine",)
    if name not in ENGINES:
        raise _error(path, lines, keys, f"'{dotted(keys)}' is {name!r}; expected one of "
                     + ", ".join(ENGINES))
    master = chosen.get("master", DEFAULT_MASTER)
    if not isinstance(master, str) or not master.strip():
        raise _error(path, lines, ("engine", "master"), "'engine.master' must be a Spark "
                     "master URL", "for example local[4] or spark://head-node:7077")
    if "master" in chosen and name != "spark":
        raise _error(path, lines, ("engine", "master"), "'engine.master' is read only by "
                     "the spark engine", "add  name: spark  or remove the master")
    return ReadOptions(delimiter=delimiter, decimal=decimal,
                       codes=_codes(path, lines, section.get("codes")),
                       engine=name, master=master.strip())

"""The YAML spec: load it with line numbers, validate every key, resolve paths.

`load_spec` is the only entry point. It returns a frozen `Spec` whose paths are absolute and
whose defaults are filled in, or raises `SpecError` naming the spec line, the key, the value
found and the nearest valid key ("did you mean").
"""

from __future__ import annotations

from collections.abc import Mapping
from dataclasses import dataclass, field, replace
from pathlib import Path
from typing import Any

from strativ.estimators.options import (
    ASSIGNMENTS,
    DEFAULTS,
    ESTIMATORS,
    SAMPLINGS,
    USES_ASSIGNMENT,
    VARIANCES,
)

from .errors import SpecError
from .files import special_file
from .spec_files import data_files, glob_pattern
from .spec_planning import PLANNING_KEYS, planning_options
from .spec_reading import READING_KEYS, ReadOptions, read_options
from .spec_sensitivity import (
    SENSITIVITY_KEYS,
    defier_shares,
    direct_effect_range,
    randomization_options,
)
from .suggest import suggest
from .waves import WAVE_KEYS, wave_options
from .yamlmarks import KeyPath, compose_with_lines, dotted, line_of

__all__ = [
    "DEFAULT_FORMATS",
    "FORMATS",
    "Columns",
    "OfferProbability",
    "Spec",
    "glob_pattern",
    "load_spec",
    "suggest",
]

FORMATS = ("json", "csv", "html", "md", "tex")
"""Result files a run can write: results.json, strata.csv and the reports."""
DEFAULT_FORMATS = ("json", "csv")
"""Result files written when the spec names none."""
DEFAULT_OUTPUT_DIR = "strativ_out"

_SECTIONS: dict[str, tuple[str, ...] | None] = {
    "title": None,
    "data": None,
    "moments": None,
    "columns": ("outcome", "take_up", "offer", "stratum", "cluster", "covariates"),
    "design": ("offer_probability", "assignment", "sampling"),
    "estimators": None,
    "inference": ("variance", "level", "randomization"),
    "output": ("dir", "formats"),
    "missing": ("drop_incomplete_rows",),
    "reading": READING_KEYS,
    "engine": None,
    "sensitivity": SENSITIVITY_KEYS,
    "waves": WAVE_KEYS,
    "planning": PLANNING_KEYS,
}
_REQUIRED_COLUMNS = ("outcome", "take_up", "offer", "stratum")


@dataclass(frozen=True, slots=True)
class Columns:
    """Column roles named in the spec."""

    outcome: tuple[str, ...]
    """Outcome columns; each is analysed separately."""
    take_up: str
    """Binary take-up (treatment received)."""
    offer: str
    """Binary randomized offer (the instrument)."""
    stratum: tuple[str, ...]
    """Columns whose combination defines the randomization stratum."""
    cluster: str | None
    """Optional cluster column (the unit of assignment)."""
    covariates: tuple[str, ...]
    """Baseline covariates: used for adjustment, balance and complier means."""

    def roles(self) -> list[tuple[str, str]]:
        """Return (role, column) pairs in spec order, one per named column."""
        pairs = [("outcome", c) for c in self.outcome]
        pairs += [("take_up", self.take_up), ("offer", self.offer)]
        pairs += [("stratum", c) for c in self.stratum]
        if self.cluster is not None:
            pairs.append(("cluster", self.cluster))
        pairs += [("covariates", c) for c in self.covariates]
        return pairs


@dataclass(frozen=True, slots=True)
class OfferProbability:
    """Where the design offer probabilities come from."""

    source: str
    """``"estimated"`` (realized offer shares), ``"column"`` or ``"mapping"``."""
    column: str | None = None
    """The column holding each unit's design probability (source ``"column"``)."""
    by_stratum: tuple[tuple[str, float], ...] = ()
    """(stratum label as written, probability) pairs (source ``"mapping"``)."""
    lines: tuple[int | None, ...] = ()
    """Spec line of each pair in `by_stratum`."""

    def to_dict(self) -> Any:
        """Return the JSON form: ``"estimated"``, ``{"column": name}`` or a label mapping."""
        if self.source == "estimated":
            return "estimated"
        if self.source == "column":
            return {"column": self.column}
        return {label: p for label, p in self.by_stratum}


@dataclass(frozen=True, slots=True)
class Spec:
    """A validated spec with defaults filled in and paths resolved."""

    path: Path
    """The spec file (absolute)."""
    title: str
    """Title shown in the report (default: the spec file's stem)."""
    data: tuple[Path, ...]
    """Data files (absolute), in the order given; glob matches sorted by name."""
    data_entries: tuple[str, ...]
    """The `data` (or `moments`) entries as written in the spec."""
    columns: Columns
    """Column roles."""
    offer_probability: OfferProbability
    """Design offer probabilities."""
    assignment: str
    """``"block"`` (fixed offer count per stratum) or ``"independent"``."""
    sampling: str
    """``"random"`` (units sampled from a population) or ``"fixed"``."""
    estimators: tuple[str, ...]
    """Estimators to fit, in report order."""
    variance: str
    """Variance flavour passed to the estimators."""
    level: float
    """Confidence level of intervals."""
    output_dir: Path
    """Directory for result files (absolute)."""
    formats: tuple[str, ...]
    """Result files to write: ``"json"`` (results.json), ``"csv"`` (strata.csv)."""
    drop_incomplete_rows: bool
    """Drop rows missing offer, take-up, stratum (or cluster, probability) instead of failing."""
    data_kind: str = "rows"
    """``"rows"`` (`data`: one row per unit) or ``"moments"`` (`moments`: moment tables
    written by `strativ cells`)."""
    reading: ReadOptions = ReadOptions()
    """How the files are read (separator, decimal mark, offer/take-up codes) and the engine."""
    direct_effect: tuple[float, float] | None = None
    """Range of direct effects of the offer to report (`sensitivity.direct_effect`)."""
    defier_shares: tuple[float, ...] = ()
    """Defier shares to tabulate (`sensitivity.defier_share`)."""
    randomization: tuple[int, int, float] | None = None
    """(draws, seed, null effect) of randomization inference (`inference.randomization`), or
    None."""
    power: float = 0.8
    """Power of the minimum detectable effect reported after each run (`planning.power`)."""
    target_effects: tuple[tuple[str, float], ...] = ()
    """(outcome, effect to plan for) pairs (`planning.target_effect`)."""
    pool_waves: bool = False
    """Whether a stratum pools its rows across the waves (`waves.pool`); by default each
    wave's part of a stratum is its own stratum (`waves.splits_strata`)."""
    wave_column: str | None = None
    """Column whose values are the waves (`waves.column`), or None: each input file is a
    wave. When set it is also the last entry of ``columns.stratum`` (read and grouped like a
    stratum column; `waves.pools_column` leaves it out of the label)."""
    lines: Mapping[KeyPath, int] = field(default_factory=dict, repr=False, compare=False)
    """Spec line of each key path, for messages raised after loading."""

    def line_of(self, *keys: Any) -> int | None:
        """Return the spec line of `keys` or of its nearest present parent key."""
        return line_of(self.lines, tuple(keys))

    def error(self, keys: KeyPath, message: str, hint: str | None = None) -> SpecError:
        """Return a `SpecError` located at the spec line of `keys`."""
        return SpecError(self.path, self.line_of(*keys), dotted(keys), message, hint)

    def to_dict(self) -> dict[str, Any]:
        """Return the resolved spec as JSON-ready data (paths as strings)."""
        cols = self.columns
        return {
            "path": str(self.path),
            "title": self.title,
            "data": list(self.data_entries),
            "data_kind": self.data_kind,
            "data_files": [str(p) for p in self.data],
            "columns": {
                "outcome": list(cols.outcome),
                "take_up": cols.take_up,
                "offer": cols.offer,
                "stratum": list(cols.stratum[:-1] if self.wave_column else cols.stratum),
                "cluster": cols.cluster,
                "covariates": list(cols.covariates),
            },
            "design": {
                "offer_probability": self.offer_probability.to_dict(),
                "assignment": self.assignment,
                "sampling": self.sampling,
            },
            "estimators": list(self.estimators),
            "inference": {"variance": self.variance, "level": self.level,
                          "randomization": None if self.randomization is None else
                          {"draws": self.randomization[0], "seed": self.randomization[1],
                           "null_effect": self.randomization[2]}},
            "output": {"dir": str(self.output_dir), "formats": list(self.formats)},
            "missing": {"drop_incomplete_rows": self.drop_incomplete_rows},
            "reading": self.reading.to_dict(),
            "sensitivity": {"direct_effect": None if self.direct_effect is None
                            else list(self.direct_effect),
                            "defier_share": list(self.defier_shares)},
            "waves": {"pool": self.pool_waves, "column": self.wave_column},
            "planning": {"power": self.power,
                         "target_effect": dict(self.target_effects) or None},
        }


class _Checker:
    """Validation helpers that know the spec path and its line table."""

    def __init__(self, path: Path, lines: dict[KeyPath, int]) -> None:
        self.path = path
        self.lines = lines

    def error(self, keys: KeyPath, message: str, hint: str | None = None) -> SpecError:
        return SpecError(self.path, line_of(self.lines, keys), dotted(keys), message, hint)

    def mapping(self, value: Any, keys: KeyPath, allowed: tuple[str, ...]) -> dict[str, Any]:
        where = f"'{dotted(keys)}'" if keys else "the spec"
        if value is None:
            return {}
        if not isinstance(value, dict):
            raise self.error(keys, f"{where} must be a mapping of keys, found {_kind(value)}",
                             "write one 'key: value' per line, indented under it")
        for key in value:
            if not isinstance(key, str):
                raise self.error(keys + (key,), f"key {key!r} under {where} is not a name")
            if key not in allowed:
                hint = suggest(key, allowed)
                home = [s for s, subs in _SECTIONS.items() if subs and key in subs]
                if home and home[0] != (keys[0] if keys else None):
                    hint = f"'{key}' belongs under '{home[0]}'"
                if hint is None:
                    hint = "valid keys: " + ", ".join(allowed)
                raise self.error(keys + (key,), f"unknown key '{key}' under {where}", hint)
        return value

    def name(self, value: Any, keys: KeyPath, what: str) -> str:
        if isinstance(value, bool) or not isinstance(value, (str, int)):
            raise self.error(keys, f"'{dotted(keys)}' must be {what}, found {_kind(value)}")
        text = str(value).strip()
        if not text:
            raise self.error(keys, f"'{dotted(keys)}' is empty", f"give {what}")
        return text

    def names(self, value: Any, keys: KeyPath, what: str) -> tuple[str, ...]:
        if isinstance(value, list):
            if not value:
                raise self.error(keys, f"'{dotted(keys)}' is an empty list", f"give {what}")
            out = tuple(self.name(v, keys + (i,), what) for i, v in enumerate(value))
        else:
            out = (self.name(value, keys, what),)
        for i, item in enumerate(out):
            if item in out[:i]:
                raise self.error(keys + (i,), f"'{item}' is listed twice in '{dotted(keys)}'")
        return out

    def choice(self, value: Any, keys: KeyPath, choices: tuple[str, ...], default: str) -> str:
        if value is None:
            return default
        if not isinstance(value, str) or value not in choices:
            hint = suggest(str(value), choices) if isinstance(value, str) else None
            raise self.error(keys, f"'{dotted(keys)}' is {value!r}; expected one of "
                             + ", ".join(choices), hint)
        return value

    def choices(self, value: Any, keys: KeyPath, choices: tuple[str, ...],
                default: tuple[str, ...]) -> tuple[str, ...]:
        if value is None:
            return default
        items = value if isinstance(value, list) else [value]
        if not items:
            raise self.error(keys, f"'{dotted(keys)}' is an empty list",
                             "list at least one of " + ", ".join(choices))
        out: list[str] = []
        for i, item in enumerate(items):
            where = keys + (i,) if isinstance(value, list) else keys
            if not isinstance(item, str) or item not in choices:
                hint = suggest(str(item), choices) if isinstance(item, str) else None
                raise self.error(where, f"'{dotted(keys)}' has {item!r}; expected one of "
                                 + ", ".join(choices), hint)
            if item in out:
                raise self.error(where, f"'{item}' is listed twice in '{dotted(keys)}'")
            out.append(item)
        return tuple(out)


def _kind(value: Any) -> str:
    if value is None:
        return "nothing"
    if isinstance(value, bool):
        return f"true/false ({value})"
    if isinstance(value, dict):
        return "a mapping"
    if isinstance(value, list):
        return "a list"
    return f"{type(value).__name__} {value!r}"


def load_spec(path: Path | str) -> Spec:
    """Read, validate and resolve a spec file.

    Parameters
    ----------
    path : Path or str
        The YAML spec. Relative paths inside it are relative to its directory.

    Returns
    -------
    Spec
        The validated spec, defaults filled in.

    Raises
    ------
    SpecError
        When the file cannot be read, is not YAML, has an unknown key, a missing required
        key, a value of the wrong type or outside its choices, or names a data file that
        does not exist.
    """
    path = Path(path).expanduser().resolve()
    kind = special_file(path)
    if kind is not None:  # opening a pipe or a device would wait or read forever
        raise SpecError(path, None, None, f"the spec is not a regular file but {kind}",
                        "name a YAML file saved on disk")
    try:
        text = path.read_text(encoding="utf-8-sig")
    except FileNotFoundError:
        raise SpecError(path, None, None, "the spec file does not exist") from None
    except UnicodeDecodeError as exc:
        line = exc.object[:exc.start].count(b"\n") + 1
        raise SpecError(path, line, None, f"the spec is not UTF-8 text: byte "
                        f"0x{exc.object[exc.start]:02x}", "save it as UTF-8 text") from None
    except OSError as exc:
        raise SpecError(path, None, None, f"cannot read the spec file ({exc.strerror})",
                        "check the path and its permissions") from None
    raw, lines = compose_with_lines(text, path)
    check = _Checker(path, lines)
    top = check.mapping(raw, (), tuple(_SECTIONS))
    kind = "moments" if "moments" in top else "data"
    if "moments" in top and "data" in top:
        raise check.error(("moments",), "the spec has both 'data' and 'moments'",
                          "name the unit rows under 'data' or a moment table written by "
                          "'strativ cells' under 'moments', not both")
    for key in (kind, "columns"):
        if key not in top:
            raise check.error((), f"the spec has no '{key}' key",
                              "a minimal spec needs 'data' and 'columns' "
                              "(outcome, take_up, offer, stratum)")
    title = path.stem if top.get("title") is None else check.name(top["title"], ("title",), "text")
    data_entries, data = data_files(check, top[kind], path.parent, kind)
    columns = _columns(check, top["columns"])
    design = check.mapping(top.get("design"), ("design",), _SECTIONS["design"])
    offer_probability = _offer_probability(check, design.get("offer_probability"), columns)
    inference = check.mapping(top.get("inference"), ("inference",), _SECTIONS["inference"])
    variance = check.choice(inference.get("variance"), ("inference", "variance"), VARIANCES,
                            str(DEFAULTS["variance"]))
    if variance == "cluster" and columns.cluster is None:
        raise check.error(("inference", "variance"),
                          "variance 'cluster' needs a cluster column",
                          "add 'cluster: <column>' under 'columns'")
    assignment = check.choice(design.get("assignment"), ("design", "assignment"),
                              ASSIGNMENTS, str(DEFAULTS["assignment"]))
    if columns.cluster is not None and variance in USES_ASSIGNMENT \
            and assignment == "independent":
        raise check.error(("design", "assignment"),
                          f"assignment 'independent' cannot be combined with the cluster column "
                          f"'{columns.cluster}' under variance '{variance}' (the cluster form)",
                          "clusters are offered as whole blocks: use assignment: block")
    output = check.mapping(top.get("output"), ("output",), _SECTIONS["output"])
    out_dir = DEFAULT_OUTPUT_DIR if output.get("dir") is None else \
        check.name(output["dir"], ("output", "dir"), "a directory path")
    missing = check.mapping(top.get("missing"), ("missing",), _SECTIONS["missing"])
    drop = missing.get("drop_incomplete_rows", False)
    if not isinstance(drop, bool):
        raise check.error(("missing", "drop_incomplete_rows"),
                          f"'missing.drop_incomplete_rows' must be true or false, "
                          f"found {_kind(drop)}")
    power, targets = planning_options(path, lines, top.get("planning"), columns.outcome)
    pool_waves, wave_column = wave_options(path, lines, top.get("waves"), columns)
    if wave_column is not None:
        if wave_column == offer_probability.column:
            raise check.error(("waves", "column"), f"wave column '{wave_column}' is already "
                              "the design.offer_probability column",
                              "name the column that holds each row's wave")
        columns = replace(columns, stratum=(*columns.stratum, wave_column))
    return Spec(
        path=path,
        title=title,
        data=data,
        data_entries=data_entries,
        columns=columns,
        offer_probability=offer_probability,
        assignment=assignment,
        sampling=check.choice(design.get("sampling"), ("design", "sampling"), SAMPLINGS,
                              str(DEFAULTS["sampling"])),
        estimators=check.choices(top.get("estimators"), ("estimators",), ESTIMATORS,
                                 tuple(DEFAULTS["estimators"])),
        variance=variance,
        level=_level(check, inference.get("level")),
        output_dir=(path.parent / Path(out_dir).expanduser()).resolve(),
        formats=check.choices(output.get("formats"), ("output", "formats"), FORMATS,
                              DEFAULT_FORMATS),
        drop_incomplete_rows=drop,
        data_kind="moments" if kind == "moments" else "rows",
        reading=read_options(path, lines, top.get("reading"), top.get("engine")),
        direct_effect=direct_effect_range(path, lines, top.get("sensitivity")),
        defier_shares=defier_shares(path, lines, top.get("sensitivity")),
        randomization=randomization_options(path, lines, inference.get("randomization")),
        pool_waves=pool_waves,
        wave_column=wave_column,
        power=power,
        target_effects=targets,
        lines=dict(lines),
    )


def _columns(check: _Checker, value: Any) -> Columns:
    cols = check.mapping(value, ("columns",), _SECTIONS["columns"])
    for key in _REQUIRED_COLUMNS:
        if cols.get(key) is None:
            raise check.error(("columns",), f"'columns' has no '{key}'",
                              f"add '{key}: <column name>' under 'columns'")
    covariates = cols.get("covariates")
    columns = Columns(
        outcome=check.names(cols["outcome"], ("columns", "outcome"), "a column name or a list"),
        take_up=check.name(cols["take_up"], ("columns", "take_up"), "a column name"),
        offer=check.name(cols["offer"], ("columns", "offer"), "a column name"),
        stratum=check.names(cols["stratum"], ("columns", "stratum"), "a column name or a list"),
        cluster=None if cols.get("cluster") is None
        else check.name(cols["cluster"], ("columns", "cluster"), "a column name"),
        covariates=() if covariates is None
        else check.names(covariates, ("columns", "covariates"), "a column name or a list"),
    )
    seen: dict[str, str] = {}
    for role, name in columns.roles():
        if name in seen:
            raise check.error(("columns", role), f"column '{name}' is used both as "
                              f"{seen[name]} and as {role}", "give each role its own column")
        seen[name] = role
    return columns


def _offer_probability(check: _Checker, value: Any, columns: Columns) -> OfferProbability:
    keys = ("design", "offer_probability")
    if value is None or value == "estimated":
        return OfferProbability("estimated")
    if isinstance(value, str):
        name = check.name(value, keys, "'estimated', a column name or a mapping")
        used = {c: r for r, c in columns.roles()}
        if name in used:
            raise check.error(keys, f"offer_probability column '{name}' is already the "
                              f"{used[name]} column", "name the column of design probabilities")
        return OfferProbability("column", column=name)
    if not isinstance(value, dict) or not value:
        raise check.error(keys, f"'design.offer_probability' must be 'estimated', a column "
                          f"name or a mapping stratum -> probability, found {_kind(value)}",
                          "for example:  offer_probability: {north: 0.25, south: 0.6}")
    pairs: list[tuple[str, float]] = []
    lines: list[int | None] = []
    for label, prob in value.items():
        where = keys + (label,)
        if isinstance(prob, bool) or not isinstance(prob, (int, float)):
            raise check.error(where, f"offer probability of stratum '{label}' is "
                              f"{_kind(prob)}; it must be a number",
                              "write the design probability, for example 0.25")
        if str(label) in dict(pairs):
            raise check.error(where, f"stratum '{label}' is given twice in "
                              "'design.offer_probability'", "keep one of them")
        pairs.append((str(label), float(prob)))
        lines.append(line_of(check.lines, where))
    return OfferProbability("mapping", by_stratum=tuple(pairs), lines=tuple(lines))


def _level(check: _Checker, value: Any) -> float:
    keys = ("inference", "level")
    if value is None:
        return float(DEFAULTS["level"])
    if isinstance(value, bool) or not isinstance(value, (int, float)) or not 0 < value < 1:
        hint = f"write {value / 100:g} for {value:g} %" \
            if isinstance(value, (int, float)) and not isinstance(value, bool) \
            and 50 <= value < 100 else "for example 0.95"
        raise check.error(keys, f"'inference.level' is {value!r}; it must be a number "
                          "strictly between 0 and 1", hint)
    return float(value)

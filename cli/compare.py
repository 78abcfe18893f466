"""`strativ compare OLD NEW`: what changed between two results files, and by how much.

Nothing is fitted here. Two results.json files written by `strativ run` are read and set side
by side: the input files added, removed or changed (same name, another SHA-256), the rows and
strata used, every estimate's shift from the old file to the new (also in the old file's
standard errors), the top-level spec keys that differ, and the strativ versions. A
`ResultsComparison` turns a shift beyond a number of standard errors into `EXIT_SHIFT`.
"""

from __future__ import annotations

import json
import math
from dataclasses import dataclass, fields, is_dataclass
from importlib import resources
from pathlib import Path
from typing import Any

from .errors import UsageError

__all__ = ["EXIT_SHIFT", "CountChange", "EstimateOnly", "EstimateShift", "InputChanges",
           "InputFile", "ResultsComparison", "ResultsFile", "SpecChanges", "compare_documents",
           "compare_files", "load_results"]

EXIT_SHIFT = 4
"""Exit code when an estimate moved by more than the allowed number of standard errors."""


def _plain(value: Any) -> Any:
    if is_dataclass(value):
        return {f.name: _plain(getattr(value, f.name)) for f in fields(value)}
    if isinstance(value, (tuple, list)):
        return [_plain(v) for v in value]
    return value


@dataclass(frozen=True, slots=True)
class ResultsFile:
    """One of the two results files: its path as given, layout and strativ version, date."""

    path: str
    schema_version: str
    tool_version: str
    created: str | None


@dataclass(frozen=True, slots=True)
class InputFile:
    """The fingerprint of one input file of a run."""

    name: str
    """File name (the full path when two inputs of a run share a name)."""
    sha256: str
    rows: int | None


@dataclass(frozen=True, slots=True)
class InputChanges:
    """Input files of the new run against the old, matched by name."""

    added: tuple[InputFile, ...]
    removed: tuple[InputFile, ...]
    changed: tuple[tuple[InputFile, InputFile], ...]
    """(old, new) pairs: same name, another SHA-256."""
    unchanged: int


@dataclass(frozen=True, slots=True)
class CountChange:
    """One count in both files: the run's rows, or an outcome's rows and strata."""

    what: str
    """``rows read``, ``rows kept``, ``rows used``, ``strata used`` or ``strata excluded``."""
    outcome: str | None
    """None for the run's rows."""
    old: int | None
    """None when the old file lacks it (an outcome it does not have)."""
    new: int | None
    difference: int | None
    """New minus old; None when either is missing."""


@dataclass(frozen=True, slots=True)
class EstimateShift:
    """One estimate present in both files, and how far it moved."""

    outcome: str
    estimator: str
    adjusted: bool
    """True for the fit with the spec's covariates (adjusted_estimates)."""
    old: float | None
    """None when undefined (likewise below)."""
    new: float | None
    old_std_error: float | None
    new_std_error: float | None
    shift: float | None
    """New minus old estimate."""
    shift_in_std_errors: float | None
    """`shift` divided by the old standard error; None with a `reason`."""
    reason: str | None
    """Why `shift_in_std_errors` is None; None when it is defined."""
    old_interval: tuple[float, float] | None
    new_interval: tuple[float, float] | None


@dataclass(frozen=True, slots=True)
class EstimateOnly:
    """An estimate in one file only (an outcome, estimator or covariate fit added or
    dropped)."""

    outcome: str
    estimator: str
    adjusted: bool
    estimate: float | None
    std_error: float | None
    interval: tuple[float, float] | None


@dataclass(frozen=True, slots=True)
class SpecChanges:
    """Top-level keys of the resolved spec that differ: in both with other values, only in
    the new spec, only in the old."""

    changed: tuple[str, ...]
    added: tuple[str, ...]
    removed: tuple[str, ...]


@dataclass(frozen=True, slots=True)
class ResultsComparison:
    """Two results files side by side: inputs, counts, estimate shifts, spec and version."""

    old: ResultsFile
    new: ResultsFile
    inputs: InputChanges
    counts: tuple[CountChange, ...]
    """Rows read and kept, then per outcome rows used, strata used and strata excluded."""
    estimates: tuple[EstimateShift, ...]
    """Estimates in both files: the old file's order, unadjusted before adjusted."""
    added_estimates: tuple[EstimateOnly, ...]
    removed_estimates: tuple[EstimateOnly, ...]
    spec: SpecChanges

    @property
    def tool_changed(self) -> bool:
        """Whether the two files were written by different strativ versions."""
        return self.old.tool_version != self.new.tool_version

    def beyond(self, threshold: float) -> tuple[EstimateShift, ...]:
        """The estimates whose |shift| exceeds `threshold` old standard errors.

        Estimates whose shift in standard errors is undefined are never among them; they are
        listed with their reason in `estimates`.
        """
        if not (isinstance(threshold, (int, float)) and math.isfinite(threshold)
                and threshold >= 0):
            raise UsageError(f"the threshold must be a number of standard errors, 0 or more; "
                             f"got {threshold}", "for example --fail-beyond 2")
        return tuple(e for e in self.estimates if e.shift_in_std_errors is not None
                     and abs(e.shift_in_std_errors) > threshold)

    def exit_code(self, *, fail_beyond: float | None) -> int:
        """0, or `EXIT_SHIFT` when any estimate moved by more than `fail_beyond` old standard
        errors (|shift| / old standard error > fail_beyond); always 0 when it is None.

        Raises
        ------
        UsageError
            When `fail_beyond` is negative or not finite.
        """
        if fail_beyond is None:
            return 0
        return EXIT_SHIFT if self.beyond(fail_beyond) else 0

    def to_dict(self) -> dict[str, Any]:
        """JSON-ready form (with ``tool_changed``)."""
        return {**_plain(self), "tool_changed": self.tool_changed}


def _schema_major() -> str:
    """The major results layout this strativ reads, from the schema it ships."""
    text = resources.files("strativ.cli").joinpath("results.schema.json").read_text("utf-8")
    return str(json.loads(text)["properties"]["schema_version"]["const"]).split(".")[0]


def load_results(path: Path, *, role: str = "results") -> dict[str, Any]:
    """Read a results.json written by `strativ run`; a run's output folder stands for its
    results.json, and `role` (``old``, ``new``) names the file in messages.

    Raises
    ------
    UsageError
        When the file is missing or unreadable, not JSON, not a strativ results file, or of
        another major results layout than this strativ reads.
    """
    where = f"{role} file {path}"
    fix = "give a results.json written by 'strativ run SPEC --out DIR' (DIR/results.json)"
    target = path / "results.json" if path.is_dir() else path
    from .files import special_file

    kind = special_file(target)
    if kind is not None:  # a pipe would wait forever
        raise UsageError(f"{where}: not a regular file but {kind}", fix)
    try:
        text = target.read_text(encoding="utf-8")
    except FileNotFoundError:
        raise UsageError(f"{where}: not found" if target == path
                         else f"{where}: the folder holds no results.json", fix) from None
    except UnicodeDecodeError:
        raise UsageError(f"{where}: not a text file, so not a strativ results file", fix) from None
    except OSError as exc:
        raise UsageError(f"{where}: cannot be read ({exc.strerror})",
                         "check the path and its permissions") from None
    try:
        doc = json.loads(text)
    except ValueError as exc:
        line = f" (line {exc.lineno}, column {exc.colno})" if hasattr(exc, "lineno") else ""
        raise UsageError(f"{where}: not JSON{line}", fix) from None
    tool = doc.get("tool") if isinstance(doc, dict) else None
    if not (isinstance(tool, dict) and tool.get("name") == "strativ"
            and isinstance(doc.get("schema_version"), str)):
        raise UsageError(f"{where}: JSON, but not a strativ results file (no schema_version "
                         "and tool)", fix)
    major = _schema_major()
    found = doc["schema_version"]
    if found.split(".")[0] != major:
        raise UsageError(f"{where}: results layout {found}, but this strativ reads layout "
                         f"{major}.x", f"run its spec again with this strativ to rewrite it, "
                         f"or compare with strativ {tool.get('version', '')} that wrote it")
    return doc


def _number(value: Any) -> float | None:
    ok = isinstance(value, (int, float)) and not isinstance(value, bool) and math.isfinite(value)
    return float(value) if ok else None


def _whole(value: Any) -> int:
    if isinstance(value, bool) or not isinstance(value, int):
        raise TypeError(f"{value!r} is not a count")
    return value


def _damage(exc: Exception) -> str:
    return f"'{exc.args[0]}' missing" if isinstance(exc, KeyError) else str(exc)


def _interval(value: Any) -> tuple[float, float] | None:
    if not isinstance(value, list) or len(value) != 2:
        return None
    low, high = _number(value[0]), _number(value[1])
    return None if low is None or high is None else (low, high)


_Key = tuple[str, str, bool]


@dataclass(frozen=True, slots=True)
class _Side:
    """What the comparison reads from one document; inputs are (name, path, sha256, rows)."""

    file: ResultsFile
    inputs: tuple[tuple[str, str, str, int | None], ...]
    counts: dict[tuple[str, str | None], int]
    outcomes: tuple[str, ...]
    estimates: dict[_Key, EstimateOnly]
    spec: dict[str, Any]


def _side(doc: dict[str, Any], path: str, role: str) -> _Side:
    try:
        inputs = tuple((str(f["file"]), str(f["path"]), str(f["sha256"]), f.get("rows"))
                       for f in doc["inputs"])
        rows = doc["rows"]
        counts: dict[tuple[str, str | None], int] = {
            ("rows read", None): _whole(rows["read"]), ("rows kept", None): _whole(rows["kept"])}
        outcomes = tuple(dict.fromkeys(str(c["outcome"]) for c in doc["comparisons"]))
        for c in doc["comparisons"]:
            counts["rows used", str(c["outcome"])] = _whole(c["rows_used"])
        for outcome in outcomes:
            for what, section in (("strata used", "strata"), ("strata excluded", "exclusions")):
                counts[what, outcome] = sum(s["outcome"] == outcome for s in doc[section])
        estimates: dict[_Key, EstimateOnly] = {}
        for adjusted, section in ((False, "estimates"), (True, "adjusted_estimates")):
            for e in doc.get(section) or []:
                fit = e["fit"] if adjusted else e
                key = (str(e["outcome"]), str(e["estimator"]), adjusted)
                estimates[key] = EstimateOnly(*key, _number(fit.get("estimate")),
                                              _number(fit.get("std_error")),
                                              _interval(fit.get("interval")))
        spec = doc["spec"]
        if not isinstance(spec, dict):
            raise TypeError("spec is not a mapping")
        file = ResultsFile(path, doc["schema_version"], str(doc["tool"].get("version")),
                           doc.get("created"))
    except (KeyError, TypeError, AttributeError, ValueError) as exc:
        raise UsageError(f"{role} file {path}: a strativ results file, but damaged "
                         f"({_damage(exc)})", "write it again with 'strativ run'") from None
    return _Side(file, inputs, counts, outcomes, estimates, spec)


def _input_changes(old: _Side, new: _Side) -> InputChanges:
    names = [f[0] for f in old.inputs], [f[0] for f in new.inputs]
    by_path = any(len(set(n)) < len(n) for n in names)  # two inputs share a name: use paths

    def files(side: _Side) -> dict[str, InputFile]:
        return {f[1] if by_path else f[0]: InputFile(f[1] if by_path else f[0], f[2], f[3])
                for f in side.inputs}

    before, after = files(old), files(new)
    return InputChanges(
        added=tuple(f for k, f in after.items() if k not in before),
        removed=tuple(f for k, f in before.items() if k not in after),
        changed=tuple((f, after[k]) for k, f in before.items()
                      if k in after and after[k].sha256 != f.sha256),
        unchanged=sum(k in after and after[k].sha256 == f.sha256 for k, f in before.items()))


def _shift(old: EstimateOnly, new: EstimateOnly) -> EstimateShift:
    shift = units = reason = None
    if old.estimate is None or new.estimate is None:
        reason = f"the estimate is undefined in the {'old' if old.estimate is None else 'new'} file"
    else:
        shift = new.estimate - old.estimate
        if old.std_error is None:
            reason = "the old standard error is undefined"
        elif old.std_error == 0:
            reason = "the old standard error is zero"
        else:
            units = shift / old.std_error
    return EstimateShift(old.outcome, old.estimator, old.adjusted, old.estimate, new.estimate,
                         old.std_error, new.std_error, shift, units, reason, old.interval,
                         new.interval)


def compare_documents(old: dict[str, Any], new: dict[str, Any], *, old_path: str = "old",
                      new_path: str = "new") -> ResultsComparison:
    """Compare two results documents already read (`load_results`); `old_path` and
    `new_path` name them in the report. Raises `UsageError` when one lacks a section read."""
    a, b = _side(old, old_path, "old"), _side(new, new_path, "new")
    outcomes = a.outcomes + tuple(o for o in b.outcomes if o not in a.outcomes)
    keys = [("rows read", None), ("rows kept", None)] + [
        (what, o) for o in outcomes for what in ("rows used", "strata used", "strata excluded")]
    counts = []
    for what, outcome in keys:
        before, after = a.counts.get((what, outcome)), b.counts.get((what, outcome))
        counts.append(CountChange(what, outcome, before, after, None if before is None or
                                  after is None else after - before))
    order = sorted(a.estimates, key=lambda k: k[2])  # stable: unadjusted first
    spec_keys = set(a.spec) | set(b.spec)
    return ResultsComparison(
        old=a.file, new=b.file, inputs=_input_changes(a, b), counts=tuple(counts),
        estimates=tuple(_shift(a.estimates[k], b.estimates[k]) for k in order
                        if k in b.estimates),
        added_estimates=tuple(e for k, e in sorted(b.estimates.items(), key=lambda i: i[0][2])
                              if k not in a.estimates),
        removed_estimates=tuple(a.estimates[k] for k in order if k not in b.estimates),
        spec=SpecChanges(
            changed=tuple(sorted(k for k in spec_keys if k in a.spec and k in b.spec
                                 and a.spec[k] != b.spec[k])),
            added=tuple(sorted(k for k in spec_keys if k not in a.spec)),
            removed=tuple(sorted(k for k in spec_keys if k not in b.spec))))


def compare_files(old: Path, new: Path) -> ResultsComparison:
    """Read two results files (or run output folders), the earlier first, and compare them.

    Raises
    ------
    UsageError
        When either cannot be read as a strativ results file; the message names it.
    """
    return compare_documents(load_results(old, role="old"), load_results(new, role="new"),
                             old_path=str(old), new_path=str(new))


# ---- rendering ---------------------------------------------------------------------------

"""A locked analysis plan: the spec, the code version and the baseline files, fixed before the
outcomes are seen, and every later run's deviations from it.

`strativ lock SPEC` writes ``<spec name>.lock.json`` beside the spec (never over an existing
one): the time, the strativ version, the analysis part of the resolved spec, and the size and
SHA-256 of each data file present then (the baseline files). Every later `strativ run` of that
spec reads the lock and lists each deviation: an outcome, covariate or estimator added or
removed, another variance, level, design or stratum definition, a baseline file whose bytes
changed, another strativ version. Files added after the lock (new waves) are not deviations.
"""

from __future__ import annotations

import json
from dataclasses import dataclass
from datetime import datetime, timezone
from pathlib import Path
from typing import Any

from strativ.estimators.rebuild import rebuildable

from .errors import UsageError
from .files import atomic_write_bytes

__all__ = ["LOCK_SUFFIX", "PlanCheck", "check_plan", "lock_path", "write_lock"]

LOCK_SUFFIX = ".lock.json"
"""Suffix of the lock file, after the spec's name without its suffix."""

_PLANNED = ("columns", "design", "estimators", "inference", "missing", "waves", "sensitivity")
"""Sections of the resolved spec that make the analysis plan (not files, title or output)."""


def lock_path(spec_path: Path) -> Path:
    """The lock file of the spec at `spec_path`."""
    return spec_path.with_name(spec_path.stem + LOCK_SUFFIX)


def _plan_of(resolved: dict[str, Any]) -> dict[str, Any]:
    return {key: resolved.get(key) for key in _PLANNED}


def write_lock(spec: Any, inputs: list[tuple[Path, int, str]], version: str) -> Path:
    """Write the lock of `spec`; refuse when one exists.

    Parameters
    ----------
    spec : Spec
        The validated spec.
    inputs : list of (Path, int, str)
        Each data file present now: path, size in bytes, SHA-256.
    version : str
        The strativ version.

    Returns
    -------
    Path
        The lock file written.

    Raises
    ------
    UsageError
        When the spec already has a lock, or the folder cannot be written.
    """
    target = lock_path(spec.path)
    if target.exists():
        raise UsageError(f"{target.name} exists: the plan of {spec.path.name} is locked "
                         "already", "a lock is never replaced; to lock a new plan, save the "
                         "spec under a new name and lock that")
    document = {
        "locked": datetime.now(timezone.utc).isoformat(timespec="seconds"),
        "tool_version": version,
        "spec_file": spec.path.name,
        "plan": _plan_of(spec.to_dict()),
        "baseline_files": [{"file": p.name, "size_bytes": size, "sha256": digest}
                           for p, size, digest in inputs],
    }
    text = json.dumps(document, indent=2, ensure_ascii=False, allow_nan=False) + "\n"
    try:
        atomic_write_bytes(target, text.encode("utf-8"))
    except OSError as exc:
        raise UsageError(f"cannot write {target} ({exc.strerror})",
                         "make the spec's folder writable") from None
    return target


@rebuildable
@dataclass(frozen=True, slots=True)
class PlanCheck:
    """A run against its locked plan."""

    lock: str
    """The lock file's name."""
    locked: str
    """When the plan was locked (ISO 8601, UTC)."""
    deviations: tuple[str, ...]
    """One plain sentence per deviation from the plan; empty when the run follows it."""

    def to_dict(self) -> dict[str, Any]:
        """Return the JSON form."""
        return {"lock": self.lock, "locked": self.locked, "deviations": list(self.deviations)}


def _listed(name: str, old: list[Any], new: list[Any]) -> list[str]:
    added = [x for x in new if x not in old]
    removed = [x for x in old if x not in new]
    out = []
    if added:
        out.append(f"{name} added after the lock: " + ", ".join(map(str, added)))
    if removed:
        out.append(f"{name} in the plan but not run: " + ", ".join(map(str, removed)))
    if not added and not removed and old != new:
        out.append(f"{name} reordered: planned {old}, run {new}")
    return out


def _compare(path: str, old: Any, new: Any) -> list[str]:
    """Deviations between two values of the plan at dotted `path`."""
    lists = {"columns.outcome": "outcomes", "columns.covariates": "covariates",
             "estimators": "estimators", "columns.stratum": "stratum columns"}
    if path in lists and isinstance(old, list) and isinstance(new, list):
        return _listed(lists[path], old, new)
    if isinstance(old, dict) and isinstance(new, dict):
        out = []
        for key in dict.fromkeys([*old, *new]):
            out += _compare(f"{path}.{key}" if path else key, old.get(key), new.get(key))
        return out
    if old != new:
        return [f"{path}: planned {json.dumps(old)}, run {json.dumps(new)}"]
    return []


def check_plan(spec: Any, inputs: list[tuple[str, str]], version: str) -> PlanCheck | None:
    """Compare a run with the locked plan of its spec (None when the spec has no lock).

    Parameters
    ----------
    spec : Spec
        The validated spec.
    inputs : list of (str, str)
        (file name, SHA-256) of each data file of the run.
    version : str
        The strativ version running.

    Returns
    -------
    PlanCheck or None

    Raises
    ------
    UsageError
        When the lock file cannot be read or is not a strativ lock.
    """
    target = lock_path(spec.path)
    if not target.exists():
        return None
    try:
        lock = json.loads(target.read_text(encoding="utf-8"))
        plan, files = lock["plan"], lock["baseline_files"]
        locked = str(lock["locked"])
    except (OSError, ValueError, KeyError, TypeError):
        raise UsageError(f"{target} is not a readable strativ lock",
                         "restore it from version control; a lock is never rewritten") from None
    deviations = _compare("", plan, _plan_of(spec.to_dict()))
    now = dict(inputs)
    for entry in files:
        name = entry.get("file")
        if name in now and now[name] != entry.get("sha256"):
            deviations.append(f"baseline file {name} changed since the lock (SHA-256 "
                              f"{str(entry.get('sha256'))[:12]}... then, {now[name][:12]}... now)")
        elif name not in now:
            deviations.append(f"baseline file {name} is not among the run's inputs")
    if lock.get("tool_version") != version:
        deviations.append(f"strativ version: planned {lock.get('tool_version')}, run {version}")
    return PlanCheck(target.name, locked, tuple(deviations))

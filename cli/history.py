"""The run history of an output folder: one JSON line per run, appended, never rewritten.

Every `strativ run` appends one record to ``history.jsonl`` in its output folder: when it
ran, the tool version, a hash of the resolved spec, each input file's fingerprint, the rows
kept, and each main estimate with its interval. `strativ run --if-changed` reads the last
record to decide whether anything changed since.

A record is one ``os.write`` of one line to a file opened with ``O_APPEND``, so concurrent
runs never interleave within a record, and earlier records are never rewritten. A run killed
while writing, or a full disk, can leave the last line incomplete: reading reports it (line
number and the reason) and keeps it; the next append starts on a new line, so the damage
stays visible and no record is lost silently.
"""

from __future__ import annotations

import hashlib
import json
import os
from dataclasses import dataclass
from pathlib import Path
from typing import Any

__all__ = ["HISTORY_NAME", "History", "append_record", "read_history", "run_record",
           "spec_hash", "state_of"]

HISTORY_NAME = "history.jsonl"
"""File name of the history in the output folder."""

_ESTIMATE_KEYS = ("outcome", "estimator", "estimate", "std_error", "interval")


def spec_hash(resolved_spec: dict[str, Any]) -> str:
    """SHA-256 of the resolved spec's canonical JSON (sorted keys, no spaces)."""
    text = json.dumps(resolved_spec, sort_keys=True, separators=(",", ":"), ensure_ascii=True)
    return hashlib.sha256(text.encode("ascii")).hexdigest()


def state_of(resolved_spec: dict[str, Any], inputs: list[tuple[str, str]],
             version: str, *, blinded: int | None = None) -> dict[str, Any]:
    """What decides whether a rerun can change anything: spec hash, inputs, version.

    Parameters
    ----------
    resolved_spec : dict
        The spec as results.json records it (output folder and formats as used).
    inputs : list of (str, str)
        (file name, sha256) of each input, in the spec's order.
    version : str
        The strativ version.
    blinded : int, optional
        The permutation seed of a blinded rehearsal (None: the real outcomes).

    Returns
    -------
    dict
        ``{"spec_sha256": ..., "inputs": [[name, sha256], ...], "tool_version": ...,
        "blinded_seed": ...}``.
    """
    return {"spec_sha256": spec_hash(resolved_spec),
            "inputs": [[name, digest] for name, digest in inputs],
            "tool_version": version, "blinded_seed": blinded}


def run_record(document: dict[str, Any]) -> dict[str, Any]:
    """The history record of one run, from its results document.

    Parameters
    ----------
    document : dict
        The run's results.json content (`results.results_document`).

    Returns
    -------
    dict
        Time, state (`state_of`), input fingerprints, rows, main and adjusted estimates.
    """
    inputs = document["inputs"]
    blinded = document.get("blinded")
    state = state_of(document["spec"], [(f["file"], f["sha256"]) for f in inputs],
                     document["tool"]["version"],
                     blinded=None if blinded is None else blinded["seed"])
    return {
        "created": document["created"],
        **state,
        "files": [{k: f[k] for k in ("file", "size_bytes", "sha256", "rows")} for f in inputs],
        "rows_kept": document["rows"]["kept"],
        "estimates": [{k: e[k] for k in _ESTIMATE_KEYS} for e in document["estimates"]],
        "adjusted_estimates": [
            {"outcome": e["outcome"], "estimator": e["fit"]["estimator"],
             "estimate": e["fit"]["estimate"], "std_error": e["fit"]["std_error"],
             "interval": e["fit"]["interval"]}
            for e in document.get("adjusted_estimates") or []],
    }


@dataclass(frozen=True, slots=True)
class History:
    """The readable records of a history file, and what could not be read."""

    path: Path
    """The history file."""
    records: tuple[dict[str, Any], ...]
    """Records in file order (damaged lines left out)."""
    damaged: tuple[tuple[int, str], ...]
    """(line number, why) of each line that is not a complete record."""
    ends_cleanly: bool
    """Whether the file is empty or ends with a line break (else the next record starts on
    a new line)."""

    @property
    def last(self) -> dict[str, Any] | None:
        """The last readable record, or None."""
        return self.records[-1] if self.records else None


def read_history(out_dir: Path) -> History:
    """Read the history of `out_dir` (an absent file is an empty history).

    Parameters
    ----------
    out_dir : Path
        The output folder.

    Returns
    -------
    History
        The records, with the line number and reason of every damaged line.

    Raises
    ------
    OSError
        When the file exists but cannot be read.
    """
    path = out_dir / HISTORY_NAME
    try:
        raw = path.read_bytes()
    except FileNotFoundError:
        return History(path, (), (), True)
    records, damaged = [], []
    lines = raw.split(b"\n")
    complete = lines[:-1]  # the part after the last line break is an unfinished line
    for number, line in enumerate(complete, start=1):
        if not line.strip():
            continue
        why = _check(line)
        if why is None:
            records.append(json.loads(line))
        else:
            damaged.append((number, why))
    if lines[-1].strip():
        damaged.append((len(lines), "the line is incomplete (a run stopped while writing it)"))
    return History(path, tuple(records), tuple(damaged), raw.endswith(b"\n") or not raw)


def _check(line: bytes) -> str | None:
    """Why `line` is not a history record, or None."""
    try:
        value = json.loads(line)
    except (ValueError, UnicodeDecodeError):
        return "the line is not valid JSON"
    if not isinstance(value, dict) or "spec_sha256" not in value or "inputs" not in value:
        return "the line is not a strativ run record"
    return None


def append_record(out_dir: Path, record: dict[str, Any], *, ends_cleanly: bool = True) -> Path:
    """Append `record` as one line to the history of `out_dir`, in one write.

    Parameters
    ----------
    out_dir : Path
        The output folder (must exist).
    record : dict
        JSON-ready record (`run_record`).
    ends_cleanly : bool, optional
        False when the file ends inside a damaged line: the record then starts on a new
        line, leaving the damaged one as it is.

    Returns
    -------
    Path
        The history file.

    Raises
    ------
    OSError
        When the file cannot be opened or written in full.
    """
    path = out_dir / HISTORY_NAME
    line = json.dumps(record, sort_keys=True, ensure_ascii=False, allow_nan=False,
                      separators=(",", ":"))
    payload = ("" if ends_cleanly else "\n").encode() + line.encode("utf-8") + b"\n"
    fd = os.open(path, os.O_WRONLY | os.O_CREAT | os.O_APPEND | getattr(os, "O_CLOEXEC", 0),
                 0o666)
    try:
        written = os.write(fd, payload)
        if written != len(payload):
            raise OSError(28, "the history record was only partly written", str(path))
        os.fsync(fd)
    finally:
        os.close(fd)
    return path

"""Fingerprints of the input files: size, SHA-256 and the check that no two are the same.

Every data file is read once, in chunks, for its SHA-256 (recorded in results.json and the
history, compared by `strativ compare` and the locked plan). The same pass refuses a NUL byte
in a text file past the first 64 KiB (earlier ones make the reader call the file binary), and
`distinct_digests` refuses two files with the same bytes (a wave sent again under a new name).
"""

from __future__ import annotations

import hashlib
from collections.abc import Mapping
from dataclasses import dataclass
from pathlib import Path
from typing import TYPE_CHECKING, Any

from .errors import DataError

if TYPE_CHECKING:
    from .spec import Spec

__all__ = ["BINARY_SNIFF", "InputFile", "distinct_digests", "file_digest", "file_fingerprint"]


@dataclass(frozen=True, slots=True)
class InputFile:
    """Fingerprint of one data file."""

    path: Path
    """Absolute path."""
    size: int
    """Size in bytes."""
    sha256: str
    """Hex SHA-256 of the file's bytes."""
    rows: int
    """Data rows read (header and blank lines not counted)."""

    def to_dict(self) -> dict[str, Any]:
        """Return the JSON form of the fingerprint."""
        return {"file": self.path.name, "path": str(self.path), "size_bytes": self.size,
                "sha256": self.sha256, "rows": self.rows}

    @classmethod
    def from_dict(cls, data: Mapping[str, Any]) -> InputFile:
        """Rebuild the fingerprint from its JSON form (`to_dict`)."""
        return cls(Path(data["path"]), int(data["size_bytes"]), str(data["sha256"]),
                   int(data["rows"]))


BINARY_SNIFF = 65536
"""Bytes at the start of a text file in which a NUL marks the file as binary (`tables`); a
NUL further on is refused by `file_digest` with its line."""


def _refuse_nul(path: Path, at: int) -> None:
    """Refuse a text file with a NUL byte at offset `at`, naming its line and data row."""
    with path.open("rb") as handle:
        before = handle.read(at)
    line = before.count(b"\n") + 1
    column = at - before.rfind(b"\n")
    raise DataError(path, None, (max(line - 1, 1),) if line > 1 else (),
                    f"a NUL byte (\\x00) at line {line} (data row {line - 1}), byte "
                    f"{column}: a text file holds none, and a reader could "
                    "split or merge fields there", "export the file again as plain text, or "
                    "remove the NUL bytes (for example: tr -d '\\000' < in.csv > out.csv)")


def file_digest(path: Path) -> str:
    """Return the hex SHA-256 of the bytes of `path`, read in chunks.

    Parameters
    ----------
    path : Path
        The file.

    Returns
    -------
    str
        64 lowercase hex digits.

    Raises
    ------
    DataError
        When the file cannot be read.
    """
    digest = hashlib.sha256()
    text = path.name.lower().endswith((".csv", ".tsv"))  # binary formats hold NULs legitimately
    try:
        with path.open("rb") as handle:
            offset = 0
            for chunk in iter(lambda: handle.read(1 << 20), b""):
                digest.update(chunk)
                if text and b"\x00" in chunk:
                    at = offset + chunk.index(b"\x00")
                    if at >= BINARY_SNIFF:  # earlier ones: the reader's "not text" message
                        _refuse_nul(path, at)
                offset += len(chunk)
    except OSError as exc:
        raise DataError(path, None, (), f"cannot read the file ({exc.strerror})",
                        "check that the file exists and is readable") from None
    return digest.hexdigest()


def file_fingerprint(path: Path, rows: int, *, sha256: str | None = None) -> InputFile:
    """Return the size and SHA-256 of `path`.

    Parameters
    ----------
    path : Path
        The file.
    rows : int
        Data rows it holds (recorded, not counted here).
    sha256 : str, optional
        Its digest when already computed (by `file_digest`); computed here otherwise.

    Returns
    -------
    InputFile
        The fingerprint.
    """
    digest = file_digest(path) if sha256 is None else sha256
    return InputFile(path, path.stat().st_size, digest, rows)


def distinct_digests(spec: Spec) -> list[str]:
    """Return the SHA-256 of every data file; refuse two files with the same bytes.

    A wave sent again under a new name would otherwise be stacked and count every row twice.
    Empty files are left to the reader, which refuses them with its own message.
    """
    digests: list[str] = []
    seen: dict[str, Path] = {}
    for path in spec.data:
        digest = file_digest(path)
        digests.append(digest)
        first = seen.setdefault(digest, path) if path.stat().st_size else path
        if first != path:
            this = f"this file ({path}) has " if first.name == path.name else ""
            other = str(first) if first.name == path.name else first.name
            raise DataError(path, None, (), f"{this}the same content as {other} (SHA-256 "
                            f"{digest[:12]}...), so its rows would be counted twice",
                            f"list each file once in 'data' of {spec.path.name} (or narrow "
                            "the pattern); if they should be two different waves, export the "
                            "second one again")
    return digests

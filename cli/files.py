"""New files beside their final place: the first half of every atomic write of strativ.

A file is written under a temporary name in its target folder, then renamed over the target
(`os.replace`), so a reader never sees half a file. Unlike `tempfile.mkstemp`, which always
creates mode 0600, the temporary file here is created with mode 0666 less the umask, like any
file the user creates: results written under umask 022 are readable by the group and others.
"""

from __future__ import annotations

import errno
import os
import secrets
from pathlib import Path

__all__ = ["atomic_write_bytes", "temporary_file"]

_PREFIX = ".strativ-"
_SUFFIX = ".tmp"
_TRIES = 100
_FLAGS = os.O_WRONLY | os.O_CREAT | os.O_EXCL | getattr(os, "O_CLOEXEC", 0) \
    | getattr(os, "O_BINARY", 0)


def temporary_file(directory: Path) -> tuple[int, Path]:
    """Create a new, empty, uniquely named file in `directory`, open for writing.

    Parameters
    ----------
    directory : Path
        The folder of the final file (a rename stays atomic only within one file system).

    Returns
    -------
    tuple of (int, Path)
        The open file descriptor and the file's path. The caller closes the descriptor and
        renames or removes the file.

    Raises
    ------
    OSError
        When the folder cannot be written, or (``EEXIST``) when no free name was found.

    Notes
    -----
    The file is created exclusively (``O_CREAT | O_EXCL``, so never through a symbolic link)
    with mode 0666; the kernel applies the umask and any default ACL of the folder.
    """
    for _ in range(_TRIES):
        candidate = directory / f"{_PREFIX}{secrets.token_hex(8)}{_SUFFIX}"
        try:
            return os.open(candidate, _FLAGS, 0o666), candidate
        except FileExistsError:
            continue
    raise FileExistsError(errno.EEXIST, "no free temporary file name", str(directory))


def atomic_write_bytes(target: Path, payload: bytes) -> None:
    """Write `payload` to `target` atomically: a temporary file beside it, then a rename.

    Parameters
    ----------
    target : Path
        The final file; its folder must exist.
    payload : bytes
        The whole content.

    Raises
    ------
    OSError
        When the folder cannot be written; the temporary file is then removed.
    """
    fd, tmp = temporary_file(target.parent)
    try:
        with os.fdopen(fd, "wb") as handle:
            handle.write(payload)
            handle.flush()
            os.fsync(handle.fileno())
        os.replace(tmp, target)
    except BaseException:
        tmp.unlink(missing_ok=True)
        raise

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
import stat
from pathlib import Path

__all__ = ["atomic_write_bytes", "forget_temporary", "remove_own_temporaries",
           "remove_stale_temporaries", "special_file", "temporary_file"]

_OWN: set[str] = set()
"""Temporary files this process created and has not yet renamed or removed."""

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
        candidate = directory / f"{_PREFIX}{os.getpid()}-{secrets.token_hex(8)}{_SUFFIX}"
        try:
            fd = os.open(candidate, _FLAGS, 0o666)
        except FileExistsError:
            continue
        _OWN.add(str(candidate))
        return fd, candidate
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
    finally:
        forget_temporary(tmp)


def special_file(path: Path) -> str | None:
    """What `path` is when it is not a regular file ("a named pipe", "a device", ...), or
    None for a regular file or a path that does not exist (symbolic links are followed)."""
    try:
        mode = os.stat(path).st_mode
    except OSError:
        return None
    if stat.S_ISREG(mode):
        return None
    if stat.S_ISFIFO(mode):
        return "a named pipe"
    if stat.S_ISCHR(mode) or stat.S_ISBLK(mode):
        return "a device"
    if stat.S_ISSOCK(mode):
        return "a socket"
    if stat.S_ISDIR(mode):
        return "a directory"
    return "a special file"


STALE_AFTER = 3600.0
"""Seconds after which a temporary file whose writer cannot be told is taken as stale."""


def _alive(pid: int) -> bool:
    try:
        os.kill(pid, 0)
    except ProcessLookupError:
        return False
    except OSError:  # exists, owned by someone else
        return True
    return True


def remove_stale_temporaries(directory: Path) -> list[Path]:
    """Remove strativ's temporary files that a killed run left in `directory`.

    A temporary file is ``.strativ-<pid>-<random>.tmp``: it is stale when no process has that
    id any more (SIGKILL, a power cut), or, for a name without an id, when it is older than
    `STALE_AFTER`. Files of a run still going are left alone; nothing else is touched.

    Parameters
    ----------
    directory : Path
        An output folder.

    Returns
    -------
    list of Path
        The files removed.
    """
    import time

    removed = []
    try:
        candidates = list(directory.glob(f"{_PREFIX}*{_SUFFIX}"))
    except OSError:
        return removed
    for path in candidates:
        middle = path.name[len(_PREFIX):-len(_SUFFIX)]
        pid_text = middle.split("-", 1)[0] if "-" in middle else ""
        try:
            if pid_text.isdigit():
                stale = int(pid_text) != os.getpid() and not _alive(int(pid_text))
            else:
                stale = time.time() - path.stat().st_mtime > STALE_AFTER
            if stale and path.is_file():
                path.unlink()
                removed.append(path)
        except OSError:
            continue
    return removed


def forget_temporary(path: Path) -> None:
    """`path` was renamed into place or removed: no longer this process's to clean up."""
    _OWN.discard(str(path))


def remove_own_temporaries() -> None:
    """Remove every temporary file this process still has (a signal is ending it). Safe to
    call from a signal handler: plain system calls, errors ignored."""
    for name in list(_OWN):
        try:
            os.unlink(name)
        except OSError:
            pass
        _OWN.discard(name)

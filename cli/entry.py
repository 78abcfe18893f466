"""The `strativ` console entry point: signals are handled before anything else is imported.

`timeout`, make and schedulers stop a run with SIGTERM, a user with Ctrl-C (SIGINT), at any
moment: while the command line is imported, during a fit in compiled code, or while the
result files are written. The handler installed first thing does the same at every moment:
it removes the temporary files this process has open (the result files are only ever
renamed into place whole, so the previous results stay), prints one line and exits 130
(SIGINT) or 143 (SIGTERM). It acts at once, so a fit in compiled code cannot delay or
swallow it.
"""

from __future__ import annotations

import os
import signal
from typing import Any

__all__ = ["EXIT_INTERRUPTED", "EXIT_TERMINATED", "main"]

EXIT_INTERRUPTED = 130
"""Exit code after Ctrl-C (SIGINT): 128 + 2."""
EXIT_TERMINATED = 143
"""Exit code after SIGTERM (what `timeout`, make and schedulers send): 128 + 15."""


def _stop(signum: int, frame: Any) -> None:  # noqa: ARG001 - signal handler signature
    """Remove this process's temporary files, say why in one line, and leave."""
    from .files import remove_own_temporaries

    remove_own_temporaries()
    interrupted = signum == signal.SIGINT
    os.write(2, b"interrupted\n" if interrupted else b"terminated\n")
    os._exit(EXIT_INTERRUPTED if interrupted else EXIT_TERMINATED)


def main() -> None:
    """Run the `strativ` command with the signal handling described above."""
    signal.signal(signal.SIGINT, _stop)
    signal.signal(signal.SIGTERM, _stop)
    from .app import main as run

    run()

"""The `strativ` console entry point: signals are handled before anything else is imported.

Importing the command line (typer, rich) takes a moment; a Ctrl-C in that moment would
otherwise end in a Python traceback. Until the commands are ready, SIGINT prints one line and
exits 130 and SIGTERM exits 143, both without a traceback. From then on SIGINT is Python's
`KeyboardInterrupt` and SIGTERM raises `Terminated`, which the command boundary turns into
the same line and exit code after the open temporary files are removed.
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


def _quit_now(signum: int, frame: Any) -> None:  # noqa: ARG001 - signal handler signature
    """Before the commands are ready nothing is open: say so in one line and leave."""
    interrupted = signum == signal.SIGINT
    os.write(2, b"interrupted\n" if interrupted else b"terminated\n")
    os._exit(EXIT_INTERRUPTED if interrupted else EXIT_TERMINATED)


def _terminate(signum: int, frame: Any) -> None:  # noqa: ARG001 - signal handler signature
    from .errors import Terminated

    raise Terminated()


def main() -> None:
    """Run the `strativ` command with the signal handling described above."""
    signal.signal(signal.SIGINT, _quit_now)
    signal.signal(signal.SIGTERM, _quit_now)
    from .app import main as run

    signal.signal(signal.SIGINT, signal.default_int_handler)
    signal.signal(signal.SIGTERM, _terminate)
    run()

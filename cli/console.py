"""The terminal consoles and the one-line error message, kept free of the numerical stack.

`strativ --help`, `--version` and every error message go through this module alone, so they
start without importing numpy, pandas or the estimators. Results go to a stdout console,
warnings and errors to a stderr console.
"""

from __future__ import annotations

import io
import os
import re
from collections.abc import Callable, Iterator
from contextlib import contextmanager
from typing import Any

from rich.console import Console
from rich.segment import Segment
from rich.text import Text

from .errors import CliError, safe_text

__all__ = ["make_console", "render_error"]

_TRAILING = re.compile(r"[ \t]+(?=\n|$)")
"""Spaces and tabs at the end of a line."""


class _Console(Console):
    """A console that stops printing, instead of exiting, when its reader goes away, and
    writes no trailing spaces when its output is not a terminal.

    `strativ run ... | head` closes the pipe early; the run must still write its result
    files and exit 0, so the rest of the report is dropped rather than the run aborted.
    Padded blocks (the reading, the notes) end their lines with spaces up to the block's
    width; in a file or a pipe those spaces only get in the way of diffs and greps.
    """

    def _render_buffer(self, buffer: Any) -> str:
        # a user's string (a label, a column or file name) never acts on the terminal: its
        # control characters are shown escaped; rich's own codes are control segments
        safe = (s if s.control or s.text == "\n" else Segment(safe_text(s.text), s.style)
                for s in buffer)
        text = super()._render_buffer(safe)
        if self.is_terminal:
            return text
        return _TRAILING.sub("", text)

    def on_broken_pipe(self) -> None:
        self.quiet = True
        try:  # later flushes (also at interpreter exit) go nowhere instead of failing
            target = self.file.fileno()
        except (OSError, ValueError, AttributeError, io.UnsupportedOperation):
            return
        devnull = os.open(os.devnull, os.O_WRONLY)
        try:
            os.dup2(devnull, target)
        finally:
            os.close(devnull)


def make_console(*, stderr: bool = False) -> Console:
    """Return a console on stdout (or stderr) without syntax highlighting.

    Width and colour follow the terminal; ``COLUMNS`` and ``NO_COLOR`` override them. The
    stderr console does not hard-wrap, so that each message stays one line in a log. A
    closed pipe silences the console instead of ending the program.

    Parameters
    ----------
    stderr : bool, default=False
        Write to stderr instead of stdout.

    Returns
    -------
    Console
        The console.
    """
    return _Console(stderr=stderr, highlight=False, soft_wrap=stderr)


def render_error(console: Console, error: CliError) -> None:
    """Print a typed error on the stderr console; its text enters rich as `Text`, not markup.

    Parameters
    ----------
    console : Console
        The stderr console.
    error : CliError
        The error to report.
    """
    console.print(Text.assemble(Text("error: ", style="bold red"), Text(error.render())))


@contextmanager
def draw_progress(console: Console, *,
                  enabled: bool) -> Iterator[Callable[[int, int], None] | None]:
    """A transient progress bar for the re-drawn offers of randomization inference.

    Yields a callback ``(done, total)`` when `enabled` and `console` is a terminal, else None
    (nothing is drawn into a log or a pipe); the bar disappears when the block ends.
    """
    if not enabled or not console.is_terminal:
        yield None
        return
    from rich.progress import BarColumn, MofNCompleteColumn, Progress, TextColumn

    with Progress(TextColumn("re-drawing offers"), BarColumn(), MofNCompleteColumn(),
                  console=console, transient=True) as bar:
        task = bar.add_task("draws", total=None)

        def update(done: int, total: int) -> None:
            bar.update(task, completed=done, total=total)

        yield update

"""Fixtures of the command-line tests: a small study in a tmp dir and a pinned CLI runner."""

from __future__ import annotations

from collections.abc import Callable
from pathlib import Path

import pytest
from cli_support import ENV, MINIMAL_SPEC, Study, study_rows, write_csv
from typer.testing import CliRunner, Result

from strativ.cli.app import app


@pytest.fixture
def study(tmp_path: Path) -> Study:
    """A minimal runnable study: data.csv from `study_rows` and the minimal spec."""
    s = Study(tmp_path)
    write_csv(s.data, study_rows())
    s.write_spec(MINIMAL_SPEC)
    return s


@pytest.fixture
def invoke() -> Callable[..., Result]:
    """Invoke the app with a pinned 120-column, colourless console."""
    runner = CliRunner()

    def _invoke(*args: str | Path) -> Result:
        return runner.invoke(app, [str(a) for a in args], env=ENV)

    return _invoke

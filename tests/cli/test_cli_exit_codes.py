"""The exit codes the README documents that no other test reaches: 1 (an internal error,
without a traceback), 130 (interrupted) and 143 (terminated; its subprocess tests are in
test_cli_faults.py)."""

from __future__ import annotations

import re

import pytest
from cli_support import REPO, Study

import strativ.cli.runs


def _raise(exc: BaseException):
    def run_command(*args, **kwargs):
        raise exc
    return run_command


def test_an_internal_error_exits_1_without_a_traceback(study: Study, invoke,
                                                       monkeypatch: pytest.MonkeyPatch) -> None:
    monkeypatch.setattr(strativ.cli.runs, "run_command", _raise(RuntimeError("boom")))
    result = invoke("run", study.spec, "--out", study.out)
    # source: README exit codes, 1 = unexpected internal error
    assert result.exit_code == 1
    assert "internal error: RuntimeError: boom" in result.stderr
    assert "Traceback" not in result.stderr and not study.out.exists()


def test_ctrl_c_exits_130_with_one_line(study: Study, invoke,
                                         monkeypatch: pytest.MonkeyPatch) -> None:
    monkeypatch.setattr(strativ.cli.runs, "run_command", _raise(KeyboardInterrupt()))
    result = invoke("run", study.spec, "--out", study.out)
    # source: README exit codes, 130 = interrupted
    assert result.exit_code == 130
    assert result.stderr.strip() == "interrupted"


def test_the_readme_lists_every_exit_code() -> None:
    readme = (REPO / "README.md").read_text(encoding="utf-8")
    block = readme[readme.index("**Exit codes:**"):].split("\n\n")[0]
    # by construction: the codes app.py, entry.py and gates.py define
    assert re.findall(r"`(\d+)`", block) == ["0", "1", "2", "3", "4", "130", "143"]

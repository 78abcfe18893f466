"""Start-up: `strativ --help` and `--version` load no numerical library, and the version falls
back to the source tree when strativ was never installed.

No timing here (speed is measured outside the tests): the checks read `sys.modules` of a fresh
interpreter.
"""

from __future__ import annotations

import json
import re
import subprocess
import sys
from importlib import metadata
from pathlib import Path

import pytest
from cli_support import REPO

import strativ.cli as cli_package

HEAVY = ("numpy", "pandas", "scipy", "numba", "pyarrow", "jsonschema", "linearmodels",
         "strativ.estimators")
"""Packages that take most of a second to import and that help and version must not need."""

_REPORT = "import json, sys\nprint(json.dumps(sorted(sys.modules)))\n"


def _modules_after(code: str) -> set[str]:
    """Run `code` in a fresh interpreter, then return the names in its sys.modules."""
    done = subprocess.run([sys.executable, "-c", code + "\n" + _REPORT], capture_output=True,
                          text=True, timeout=120, check=False, cwd=REPO)
    assert done.returncode == 0, done.stderr
    return set(json.loads(done.stdout.splitlines()[-1]))


def _heavy_in(modules: set[str]) -> list[str]:
    return [h for h in HEAVY if h in modules or any(m.startswith(h + ".") for m in modules)]


def test_importing_the_app_loads_no_numerical_library() -> None:
    modules = _modules_after("import strativ.cli.app")
    assert "strativ.cli.app" in modules
    assert _heavy_in(modules) == []


@pytest.mark.parametrize("argv", [["--help"], ["--version"], []])
def test_help_and_version_load_no_numerical_library(argv: list[str]) -> None:
    code = (
        "import contextlib, io, sys\n"
        f"sys.argv = ['strativ', *{argv!r}]\n"
        "from strativ.cli.app import main\n"
        "with contextlib.redirect_stdout(io.StringIO()):\n"
        "    try:\n"
        "        main()\n"
        "    except SystemExit as exc:\n"
        "        assert exc.code in (0, 2, None), exc.code\n"
    )
    assert _heavy_in(_modules_after(code)) == []


def test_a_command_still_loads_its_dependencies_when_it_runs() -> None:
    # the guard above must be able to fail: `run --help` lists the option vocabulary, which
    # lives in the estimators
    code = (
        "import contextlib, io, sys\n"
        "sys.argv = ['strativ', 'run', '--help']\n"
        "from strativ.cli.app import main\n"
        "with contextlib.redirect_stdout(io.StringIO()):\n"
        "    try:\n"
        "        main()\n"
        "    except SystemExit:\n"
        "        pass\n"
    )
    assert "strativ.estimators" in _heavy_in(_modules_after(code))


def test_the_public_names_of_the_cli_package_still_resolve() -> None:
    for name in cli_package.__all__:
        assert getattr(cli_package, name) is not None, name
    with pytest.raises(AttributeError, match="no attribute 'nothing_here'"):
        _ = cli_package.nothing_here


def test_version_falls_back_to_the_source_tree_when_not_installed(monkeypatch) -> None:
    def not_installed(name: str) -> str:
        raise metadata.PackageNotFoundError(name)

    monkeypatch.setattr(metadata, "version", not_installed)
    tree = Path(cli_package.__file__).resolve().parent.parent / "pyproject.toml"
    expected = "unknown"  # an installed copy outside a source tree has no file to read
    if tree.exists():
        # source: pyproject.toml, [project] version
        text = tree.read_text(encoding="utf-8")
        expected = re.search(r'^version = "([^"]+)"', text, re.MULTILINE).group(1)
    assert cli_package._package_version() == expected


def test_run_help_reads_the_option_vocabulary_without_numerical_libraries() -> None:
    code = (
        "import contextlib, io, sys\n"
        "sys.argv = ['strativ', 'run', '--help']\n"
        "from strativ.cli.app import main\n"
        "with contextlib.redirect_stdout(io.StringIO()):\n"
        "    try:\n"
        "        main()\n"
        "    except SystemExit:\n"
        "        pass\n"
    )
    loaded = _heavy_in(_modules_after(code))
    # common practice, no source: the package imports its submodules on first use, so the
    # options module alone pulls in no numerical library
    assert not [m for m in loaded if m != "strativ.estimators"], loaded

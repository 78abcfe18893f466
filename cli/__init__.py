"""strativ.cli: the `strativ` command (run, check, init) over the estimator core.

The command line reads a YAML spec, loads and checks the data, calls
`strativ.estimators.fit_all` per outcome, prints the comparison and writes results.json and
strata.csv. It computes no statistics of its own.

The public names below are imported on first use, so that `strativ --help` and
`strativ --version` start without loading numpy, pandas or the estimators.
"""

from __future__ import annotations

import re
from importlib import import_module
from typing import TYPE_CHECKING, Any

from .errors import CliError, DataError, SpecError, UsageError

if TYPE_CHECKING:
    from .loading import Dataset, load_data
    from .runner import Run, run_spec
    from .spec import Spec, load_spec

_LAZY = {
    "Dataset": "loading",
    "load_data": "loading",
    "Run": "runner",
    "run_spec": "runner",
    "Spec": "spec",
    "load_spec": "spec",
}
"""Public name -> module that defines it, imported when the name is first read."""

__all__ = [
    "__version__",
    "CliError",
    "DataError",
    "SpecError",
    "UsageError",
    "Dataset",
    "Run",
    "Spec",
    "load_data",
    "load_spec",
    "run_spec",
]


_PROJECT_VERSION = re.compile(
    r'^\[project\]\s*$(?:(?!^\[).)*?^name\s*=\s*"strativ"\s*$(?:(?!^\[).)*?'
    r'^version\s*=\s*"([^"]+)"', re.MULTILINE | re.DOTALL)


def _package_version() -> str:
    """Return the version of strativ.

    Returns
    -------
    str
        The installed version from the package metadata; for a source tree that was never
        installed, the version in the tree's pyproject.toml; "unknown" when neither exists.
    """
    from importlib.metadata import PackageNotFoundError, version
    from pathlib import Path

    try:
        return version("strativ")
    except PackageNotFoundError:
        pass
    project = Path(__file__).resolve().parent.parent / "pyproject.toml"
    try:
        found = _PROJECT_VERSION.search(project.read_text(encoding="utf-8"))
    except (OSError, UnicodeDecodeError):
        found = None
    return found.group(1) if found else "unknown"


def __getattr__(name: str) -> Any:
    """Import a public name from its module on first use (PEP 562); `__version__` is read
    from the package metadata on first use."""
    if name == "__version__":
        value = globals()["__version__"] = _package_version()
        return value
    module = _LAZY.get(name)
    if module is None:
        raise AttributeError(f"module {__name__!r} has no attribute {name!r}")
    value = getattr(import_module(f".{module}", __name__), name)
    globals()[name] = value
    return value


def __dir__() -> list[str]:
    return sorted(set(globals()) | set(_LAZY) | {"__version__"})

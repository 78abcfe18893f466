"""The demo generator for tests: demo_data/generate.py imported by path (not a package)."""

from __future__ import annotations

import importlib.util
import sys
from pathlib import Path
from types import ModuleType

DEMO_DIR = Path(__file__).resolve().parents[1] / "demo_data"


def load_generator(name: str = "strativ_demo_generate") -> ModuleType:
    """Import demo_data/generate.py under `name`."""
    spec = importlib.util.spec_from_file_location(name, DEMO_DIR / "generate.py")
    assert spec is not None and spec.loader is not None
    module = importlib.util.module_from_spec(spec)
    sys.modules[spec.name] = module
    spec.loader.exec_module(module)
    return module

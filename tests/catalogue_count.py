"""Print how many hostile-input and fault cases the test catalogue covers.

Reads `CASES` from every test module under tests/cli whose name starts with
``test_cli_hostile`` or ``test_cli_faults``, and counts the property-based fuzz tests of
``test_cli_fuzz``. Run: ``python tests/catalogue_count.py``.
"""

from __future__ import annotations

import importlib
import sys
from pathlib import Path

HERE = Path(__file__).resolve().parent / "cli"


def main() -> None:
    sys.path.insert(0, str(HERE))
    total = 0
    for path in sorted(HERE.glob("test_cli_*.py")):
        if not path.stem.startswith(("test_cli_hostile", "test_cli_faults")):
            continue
        cases = importlib.import_module(path.stem).CASES
        print(f"{path.name}: {len(cases)} cases")
        total += len(cases)
    fuzz = importlib.import_module("test_cli_fuzz")
    properties = [name for name in dir(fuzz) if name.startswith("test_")]
    print(f"test_cli_fuzz.py: {len(properties)} fuzzed properties")
    print(f"total: {total} catalogued cases")


if __name__ == "__main__":
    main()

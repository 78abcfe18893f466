"""Helpers of the command-line tests: a small deterministic study and failure checks."""

from __future__ import annotations

import json
import sys
from collections.abc import Sequence
from dataclasses import dataclass
from pathlib import Path
from typing import Any

from typer.testing import Result

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))
from core_support import assert_close  # noqa: E402

REPO = Path(__file__).resolve().parents[2]
DEMO_SPEC = REPO / "specs" / "demo.yaml"
ENV = {"COLUMNS": "120", "NO_COLOR": "1", "TERM": "dumb"}
HEADER = ("unit", "site", "offer", "take_up", "y", "age")

# Four strata with different offer shares (0.3, 0.5, 0.7, 0.5) and two-sided non-compliance.
SITES = (("north", 20, 6), ("south", 20, 10), ("east", 20, 14), ("west", 16, 8))


def study_rows() -> list[dict[str, Any]]:
    """Deterministic rows: per site, the first k units are offered; take-up and outcome follow
    fixed arithmetic patterns (no random numbers), so every test sees the same data."""
    rows = []
    unit = 0
    for s, (site, n, k) in enumerate(SITES):
        for i in range(n):
            offer = int(i < k)
            take_up = int((i % 5 != 4) if offer else (i % 7 == 3))
            effect = 1.0 + s
            y = round(10 + effect * take_up + ((unit * 7) % 11) / 4 - s / 3, 4)
            rows.append(
                {
                    "unit": f"u{unit:03d}",
                    "site": site,
                    "offer": offer,
                    "take_up": take_up,
                    "y": y,
                    "age": 30 + unit % 9,
                }
            )
            unit += 1
    return rows


def write_csv(
    path: Path, rows: Sequence[dict[str, Any]], header: Sequence[str] = HEADER, delimiter: str = ","
) -> Path:
    """Write `rows` as CSV text with `header` (values written with str())."""
    lines = [delimiter.join(header)]
    for row in rows:
        lines.append(delimiter.join("" if row.get(h) is None else str(row[h]) for h in header))
    path.write_text("\n".join(lines) + "\n", encoding="utf-8")
    return path


MINIMAL_SPEC = """\
data: data.csv
columns:
  outcome: y
  take_up: take_up
  offer: offer
  stratum: site
"""


@dataclass
class Study:
    """A tmp directory holding data.csv and spec.yaml."""

    root: Path

    @property
    def spec(self) -> Path:
        return self.root / "spec.yaml"

    @property
    def data(self) -> Path:
        return self.root / "data.csv"

    @property
    def out(self) -> Path:
        return self.root / "out"

    def write_spec(self, text: str) -> Path:
        self.spec.write_text(text, encoding="utf-8")
        return self.spec

    def results(self) -> dict[str, Any]:
        return json.loads((self.out / "results.json").read_text(encoding="utf-8"))


def assert_clean_failure(result: Result, code: int, *fragments: str) -> None:
    """The command failed with `code`, said each fragment on stderr, and showed no traceback."""
    assert result.exit_code == code, (result.exit_code, result.stdout, result.stderr)
    assert isinstance(result.exception, SystemExit), repr(result.exception)
    assert "Traceback" not in result.output
    flat = " ".join(result.stderr.split())
    for fragment in fragments:
        assert fragment in flat, (fragment, result.stderr)


def assert_same_numbers(actual: Any, expected: Any) -> None:
    """Recursive comparison of a run's numbers with the core's on the same rows.

    The command line reads group moments that DuckDB sums in its own order, the reference
    `build_cells` sums rows in theirs: the two agree to rounding, 1e-12 relative (absolute
    below 1), and every label, count and flag exactly.
    """
    assert_close(actual, expected, rtol=1e-12)

"""Whole-process time and peak memory of the reports (not a test).

1,000,000 invented units in 1,000 strata (the generator of `data_path.units_query`, one
outcome) in a temporary Parquet file; ``/usr/bin/time -v`` of, in one run:

- ``strativ run`` writing results.json;
- ``strativ report`` of that results.json in each format (html with its figures, md, tex).

Reports read only results.json, so their cost grows with the strata, not the rows. Run:
``python benchmarks/reports.py [--rows N]``.
"""

from __future__ import annotations

import argparse
import sys
import tempfile
from pathlib import Path

import duckdb
from data_path import timed, units_query

SPEC = """\
data: {data}
columns:
  outcome: use
  take_up: took_up
  offer: offered
  stratum: district
output:
  dir: {out}
  formats: [json]
"""


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__)
    parser.add_argument("--rows", type=int, default=1_000_000)
    args = parser.parse_args()
    folder = Path(tempfile.mkdtemp(prefix="strativ-bench-report-"))
    data = folder / "units.parquet"
    duckdb.sql(f"COPY ({units_query(args.rows)}) TO '{data}' (FORMAT parquet)")
    strativ = str(Path(sys.executable).with_name("strativ"))
    spec = folder / "spec.yaml"
    spec.write_text(SPEC.format(data=data, out=folder / "out"))
    rows = [("strativ run (json)", timed([strativ, "run", str(spec), "--quiet"]))]
    results = str(folder / "out" / "results.json")
    for fmt in ("html", "md", "tex"):
        rows.append((f"strativ report -f {fmt}",
                     timed([strativ, "report", results, "-f", fmt])))
    print(f"{args.rows:,} rows, 1,000 strata")
    print("| command | wall | peak memory | ratio to the run |")
    print("|---|---|---|---|")
    base = rows[0][1][0]
    for name, (wall, memory) in rows:
        print(f"| {name} | {wall:.2f} s | {memory:,.0f} MiB | {wall / base:.2f} |")


if __name__ == "__main__":
    main()

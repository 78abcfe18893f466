"""Whole-process time and peak memory of randomization inference (not a test).

1,000,000 invented units in 1,000 strata (the generator of `data_path.units_query`, one
outcome) in a temporary Parquet file; ``/usr/bin/time -v`` of, in one run:

- ``strativ run`` without randomization inference;
- the same spec with ``inference: randomization: {draws: 2000}``.

The target is the second within 10 times the first. Run:
``python benchmarks/randomization.py [--rows N] [--draws R]``.
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
"""


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__)
    parser.add_argument("--rows", type=int, default=1_000_000)
    parser.add_argument("--draws", type=int, default=2000)
    args = parser.parse_args()
    folder = Path(tempfile.mkdtemp(prefix="strativ-bench-ri-"))
    data = folder / "units.parquet"
    duckdb.sql(f"COPY ({units_query(args.rows)}) TO '{data}' (FORMAT parquet)")
    strativ = str(Path(sys.executable).with_name("strativ"))
    plain = folder / "plain.yaml"
    plain.write_text(SPEC.format(data=data, out=folder / "plain"))
    drawn = folder / "drawn.yaml"
    drawn.write_text(SPEC.format(data=data, out=folder / "drawn")
                     + f"inference:\n  randomization: {{draws: {args.draws}}}\n")
    base = timed([strativ, "run", str(plain), "--quiet"])
    with_draws = timed([strativ, "run", str(drawn), "--quiet"])
    print(f"{args.rows:,} rows, 1,000 strata, {args.draws:,} re-draws")
    print("| command | wall | peak memory | ratio |")
    print("|---|---|---|---|")
    print(f"| strativ run | {base[0]:.2f} s | {base[1]:,.0f} MiB | 1 |")
    print(f"| strativ run with randomization | {with_draws[0]:.2f} s | "
          f"{with_draws[1]:,.0f} MiB | {with_draws[0] / base[0]:.1f}x |")


if __name__ == "__main__":
    main()

"""Whole-process time and peak memory of `strativ run` against one DuckDB GROUP BY (not a test).

Generates N rows (default 10 million) in 1,000 strata in a temporary folder, as Parquet with
text strata and as CSV with integer strata, and times with ``/usr/bin/time -v``, in one run:

- ``strativ run`` on a spec naming the file (two outcomes, the default estimators);
- one DuckDB GROUP BY over the same file (count, sum and sum of squares of the outcome per
  stratum, offer and take-up), the floor any reader of that file pays.

Disk: about 24 bytes a row for Parquet and 28 for CSV (10 M rows: 0.25 + 0.3 GB; 100 M rows:
about 5 GB in all). Run: ``python benchmarks/data_path.py [--rows N] [--keep DIR]``.
"""

from __future__ import annotations

import argparse
import re
import subprocess
import sys
import tempfile
from pathlib import Path

import duckdb

SPEC = """\
data: {data}
columns:
  outcome: [use, arrears]
  take_up: took_up
  offer: offered
  stratum: district
output:
  dir: {out}
"""

GROUP_BY = """\
import duckdb, sys
path = sys.argv[1]
source = f"read_parquet('{path}')" if path.endswith('.parquet') else f"read_csv('{path}')"
duckdb.sql(f'''SELECT district, offered, took_up, COUNT(*), SUM(use), SUM(use * use)
               FROM {source} GROUP BY ALL''').fetchall()
"""


TEXT_DISTRICT = "'district ' || lpad(CAST(k AS VARCHAR), 4, '0')"
"""SQL of a text stratum label ("district 0042") from the stratum number k."""


def units_query(rows: int, district: str = TEXT_DISTRICT) -> str:
    """The SELECT that draws `rows` invented units in 1,000 strata (DuckDB's hash, no seed
    needed): offer shares 0.15-0.85 by stratum, two-sided non-compliance, two outcomes."""
    draw = f"""
        SELECT i % 1000 AS k,
               (hash(i, 1) % 1000) / 1000.0 AS u1,
               (hash(i, 2) % 1000) / 1000.0 AS u2,
               (hash(i, 3) % 1000) / 1000.0 AS u3
        FROM range({rows}) t(i)"""
    units = f"""
        SELECT k, CAST(u1 < 0.15 + 0.7 * (k % 97) / 97.0 AS INTEGER) AS offered, u2, u3
        FROM ({draw})"""
    return f"""
        SELECT {district} AS district, offered,
               CASE WHEN u2 < 0.1 THEN 1 WHEN u2 < 0.3 THEN 0 ELSE offered END AS took_up,
               100 + 10 * u3 - 5 * offered AS use,
               CASE WHEN u3 < 0.02 THEN NULL ELSE CAST(u3 < 0.3 AS INTEGER) END AS arrears
        FROM ({units})"""


def generate(folder: Path, rows: int) -> tuple[Path, Path]:
    """Write the Parquet (text strata) and CSV (integer strata) files with DuckDB."""
    parquet, csv = folder / "units.parquet", folder / "units.csv"
    con = duckdb.connect()
    con.execute(f"COPY ({units_query(rows)}) TO '{parquet}' (FORMAT parquet)")
    con.execute(f"COPY ({units_query(rows, 'k')}) TO '{csv}' (HEADER, DELIMITER ',')")
    con.close()
    return parquet, csv


def timed(command: list[str]) -> tuple[float, float]:
    """(wall seconds, peak resident MiB) of one whole process, from /usr/bin/time -v."""
    done = subprocess.run(["/usr/bin/time", "-v", *command], capture_output=True, text=True)
    if done.returncode != 0:
        raise SystemExit(f"{command} failed:\n{done.stderr[-2000:]}")
    wall = re.search(r"Elapsed \(wall clock\) time.*: (?:(\d+):)?(\d+):([\d.]+)", done.stderr)
    assert wall is not None
    hours, minutes, seconds = wall.groups()
    total = int(hours or 0) * 3600 + int(minutes) * 60 + float(seconds)
    peak = re.search(r"Maximum resident set size \(kbytes\): (\d+)", done.stderr)
    assert peak is not None
    return total, int(peak.group(1)) / 1024


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__)
    parser.add_argument("--rows", type=int, default=10_000_000)
    parser.add_argument("--keep", type=Path, default=None)
    args = parser.parse_args()
    folder = args.keep or Path(tempfile.mkdtemp(prefix="strativ-bench-"))
    folder.mkdir(parents=True, exist_ok=True)
    parquet, csv = generate(folder, args.rows)
    strativ = str(Path(sys.executable).with_name("strativ"))
    print(f"{args.rows:,} rows, 1,000 strata; files in {folder}")
    print("| file | strativ run | one DuckDB GROUP BY | ratio (time) |")
    print("|---|---|---|---|")
    for data in (parquet, csv):
        spec = folder / f"{data.suffix[1:]}.yaml"
        spec.write_text(SPEC.format(data=data, out=folder / f"out_{data.suffix[1:]}"))
        run = timed([strativ, "run", str(spec), "--quiet"])
        floor = timed([sys.executable, "-c", GROUP_BY, str(data)])
        print(f"| {data.name} ({data.stat().st_size / 2**20:,.0f} MiB) | {run[0]:.2f} s, "
              f"{run[1]:,.0f} MiB | {floor[0]:.2f} s, {floor[1]:,.0f} MiB | "
              f"{run[0] / floor[0]:.2f}x |")


if __name__ == "__main__":
    main()

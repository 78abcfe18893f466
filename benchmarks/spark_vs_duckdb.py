"""Whole-process time and memory of the moment table from Spark (local mode) and DuckDB, on one
Parquet file (not a test).

Generates N rows (default 10 million) in 1,000 text strata with an outcome and 0/1 offer and
take-up, as Parquet in a temporary folder (about 24 bytes a row), then runs the same moment
query (`strativ.estimators.moment_query`) through each engine in its own process,
``/usr/bin/time -v python -c ...``, several times:

- wall time and the peak resident memory ``/usr/bin/time`` reports (the largest single
  process: Python, or the JVM that Python starts and waits for);
- the peak resident memory of the whole process tree (Python plus the JVM), sampled every
  50 ms from /proc;
- where the time goes, timed inside the process: imports, starting the session (for Spark, the
  JVM), the first query, and the same query again in the warm process.

Run: ``python benchmarks/spark_vs_duckdb.py [--rows N] [--repeat R] [--master local[2]]
[--keep DIR]``. Needs ``pip install 'strativ[spark]'`` and a Java runtime 17 or newer.
"""

from __future__ import annotations

import argparse
import json
import re
import statistics
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import duckdb
from data_path import units_query  # the same invented units in both benchmarks

ROLES = {"outcome": "use", "take_up": "took_up", "offer": "offered", "stratum": "district"}

CHILD = """\
import json, sys, time
start = time.perf_counter()
engine_name, path, master = sys.argv[1], sys.argv[2], sys.argv[3]
roles = json.loads(sys.argv[4])
marks = {}
if engine_name == "spark":
    import pyspark.sql
    from strativ.cli import spark_engine as engine
    marks["import"] = time.perf_counter() - start
    t = time.perf_counter()
    session = engine.spark_session(master)
    marks["session (JVM start)"] = time.perf_counter() - t
    run = lambda: engine.moment_frame(path, master=master, **roles)
else:
    import duckdb, pandas
    from strativ.cli import duckdb_engine as engine
    marks["import"] = time.perf_counter() - start
    marks["session (JVM start)"] = 0.0
    run = lambda: engine.moment_frame(path, **roles)
t = time.perf_counter()
first = run()
marks["first query"] = time.perf_counter() - t
t = time.perf_counter()
second = run()
marks["same query again"] = time.perf_counter() - t
assert len(first) == len(second)
if engine_name == "spark":
    t = time.perf_counter()
    from pyspark import SparkContext
    gateway = SparkContext._gateway
    session.stop()
    gateway.shutdown()
    gateway.proc.stdin.close()
    gateway.proc.wait()  # reap the JVM, so that /usr/bin/time counts it
    marks["stop (JVM exit)"] = time.perf_counter() - t
marks["groups"] = len(first)
print(json.dumps(marks))
"""


def generate(path: Path, rows: int) -> None:
    """Write ``rows`` units in 1,000 text strata to ``path`` with DuckDB (the units of
    `data_path.py`)."""
    con = duckdb.connect()
    con.execute(f"COPY ({units_query(rows)}) TO '{path}' (FORMAT parquet)")
    con.close()


def _tree_rss_kib(root: int) -> int:
    """Resident memory of ``root`` and all its descendants, in KiB, from /proc."""
    children: dict[int, list[int]] = {}
    for stat in Path("/proc").glob("[0-9]*/stat"):
        try:
            fields = stat.read_text().rsplit(")", 1)[1].split()
        except OSError:
            continue
        children.setdefault(int(fields[1]), []).append(int(stat.parent.name))
    total, stack = 0, [root]
    while stack:
        pid = stack.pop()
        stack.extend(children.get(pid, []))
        try:
            status = Path(f"/proc/{pid}/status").read_text()
        except OSError:
            continue
        found = re.search(r"^VmRSS:\s+(\d+) kB", status, re.MULTILINE)
        total += int(found.group(1)) if found else 0
    return total


def timed(engine: str, path: Path, master: str) -> dict[str, float]:
    """One process: wall seconds and peak MiB from /usr/bin/time -v, the sampled peak of the
    process tree, and the marks the process printed."""
    command = ["/usr/bin/time", "-v", sys.executable, "-c", CHILD, engine, str(path), master,
               json.dumps(ROLES)]
    with tempfile.TemporaryFile("w+") as err:
        process = subprocess.Popen(command, stdout=subprocess.PIPE, stderr=err, text=True)
        peak_tree = 0
        while process.poll() is None:
            peak_tree = max(peak_tree, _tree_rss_kib(process.pid))
            time.sleep(0.05)
        out = process.stdout.read() if process.stdout else ""
        err.seek(0)
        report = err.read()
    if process.returncode != 0:
        raise SystemExit(f"{engine} failed:\n{report[-3000:]}")
    wall = re.search(r"Elapsed \(wall clock\) time.*: (?:(\d+):)?(\d+):([\d.]+)", report)
    peak = re.search(r"Maximum resident set size \(kbytes\): (\d+)", report)
    assert wall is not None and peak is not None
    hours, minutes, seconds = wall.groups()
    result = json.loads(out.strip().splitlines()[-1])
    result["wall"] = int(hours or 0) * 3600 + int(minutes) * 60 + float(seconds)
    result["peak MiB (time -v)"] = int(peak.group(1)) / 1024
    result["peak MiB (tree)"] = peak_tree / 1024
    return result


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__)
    parser.add_argument("--rows", type=int, default=10_000_000)
    parser.add_argument("--repeat", type=int, default=3)
    parser.add_argument("--master", default="local[2]")
    parser.add_argument("--keep", type=Path, default=None)
    args = parser.parse_args()
    folder = args.keep or Path(tempfile.mkdtemp(prefix="strativ-bench-"))
    folder.mkdir(parents=True, exist_ok=True)
    path = folder / "units.parquet"
    if not path.exists():
        generate(path, args.rows)
    print(f"{args.rows:,} rows, 1,000 text strata; {path} ({path.stat().st_size / 2**20:,.0f} "
          f"MiB); Spark master {args.master}; medians of {args.repeat} processes each")
    runs = {
        engine: [timed(engine, path, args.master) for _ in range(args.repeat)]
        for engine in ("duckdb", "spark")
    }
    keys = ["wall", "peak MiB (time -v)", "peak MiB (tree)", "import", "session (JVM start)",
            "first query", "same query again", "stop (JVM exit)", "groups"]
    print("| measure (median, range) | DuckDB | Spark |")
    print("|---|---|---|")
    for key in keys:
        cells = []
        for engine in ("duckdb", "spark"):
            values = [run[key] for run in runs[engine] if key in run]
            cells.append(
                f"{statistics.median(values):,.2f} ({min(values):,.2f} to {max(values):,.2f})"
                if values
                else ""
            )
        print(f"| {key} | {cells[0]} | {cells[1]} |")


if __name__ == "__main__":
    main()

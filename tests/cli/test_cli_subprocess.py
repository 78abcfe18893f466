"""The installed `strativ` command, run as a separate process on the demo and on a bad spec."""

from __future__ import annotations

import json
import os
import shutil
import subprocess
import sys
from pathlib import Path

import jsonschema
from cli_support import DEMO_SPEC, MINIMAL_SPEC, study_rows, write_csv

from strativ.cli.results import load_schema


def _command() -> list[str]:
    beside = Path(sys.executable).parent / "strativ"
    if beside.exists():
        return [str(beside)]
    found = shutil.which("strativ")
    return [found] if found else [sys.executable, "-m", "strativ.cli"]


def _run(*args: str | Path, cwd: Path) -> subprocess.CompletedProcess:
    env = {**os.environ, "COLUMNS": "120", "NO_COLOR": "1"}
    return subprocess.run([*_command(), *map(str, args)], cwd=cwd, env=env, capture_output=True,
                          text=True, timeout=120, check=False)


def test_installed_command_runs_the_demo_and_refuses_a_bad_spec(tmp_path: Path) -> None:
    out = tmp_path / "out"
    done = _run("run", DEMO_SPEC, "--out", out, cwd=tmp_path)
    assert done.returncode == 0, done.stderr
    assert "fixed effects" in done.stdout and "Traceback" not in done.stderr
    jsonschema.Draft202012Validator(load_schema()).validate(
        json.loads((out / "results.json").read_text()))

    write_csv(tmp_path / "data.csv", study_rows())
    (tmp_path / "spec.yaml").write_text(MINIMAL_SPEC.replace("offer: offer", "ofer: offer"))
    bad = _run("run", "spec.yaml", "--out", "bad_out", cwd=tmp_path)
    # source: issue 4 exit codes (2 = spec error)
    assert bad.returncode == 2
    assert "spec.yaml, line 5: unknown key 'ofer' under 'columns'" in bad.stderr
    assert "Traceback" not in bad.stderr + bad.stdout
    assert not (tmp_path / "bad_out").exists()


def test_a_closed_stdout_pipe_still_writes_the_results(tmp_path: Path) -> None:
    write_csv(tmp_path / "data.csv", study_rows())
    (tmp_path / "spec.yaml").write_text(MINIMAL_SPEC)
    read_end, write_end = os.pipe()
    os.close(read_end)  # like `strativ run ... | head` once head has exited
    env = {**os.environ, "COLUMNS": "120", "NO_COLOR": "1"}
    try:
        done = subprocess.run([*_command(), "run", "spec.yaml", "--out", "out"], cwd=tmp_path,
                              env=env, stdout=write_end, stderr=subprocess.PIPE, text=True,
                              timeout=120, check=False)
    finally:
        os.close(write_end)
    # source: README exit codes (0 = success); the report has no reader, the files still do
    assert done.returncode == 0, done.stderr
    assert "Traceback" not in done.stderr
    assert sorted(p.name for p in (tmp_path / "out").iterdir()) == [
        "history.jsonl", "results.json", "strata.csv"]

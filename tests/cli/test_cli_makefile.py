"""The README's Makefile runs as written: make fits once, skips when nothing changed, reruns
when a wave arrives, and its gate step passes on the demo data."""

from __future__ import annotations

import json
import os
import re
import shutil
import subprocess
import sys
from pathlib import Path

import pytest
from cli_support import DEMO_SPEC, REPO

pytestmark = pytest.mark.skipif(shutil.which("make") is None, reason="make is not installed")


def _readme_makefile() -> str:
    readme = (REPO / "README.md").read_text(encoding="utf-8")
    blocks = re.findall(r"```make\n(.*?)```", readme, flags=re.S)
    assert len(blocks) == 1, "the README shows one Makefile"
    assert "\t" in blocks[0], "make recipes start with a tab"
    return blocks[0]


def _make(folder: Path) -> subprocess.CompletedProcess[str]:
    env = {**os.environ, "PATH": f"{Path(sys.executable).parent}{os.pathsep}"
           f"{os.environ.get('PATH', '')}", "NO_COLOR": "1"}
    return subprocess.run(["make"], cwd=folder, env=env, capture_output=True, text=True,
                          timeout=300)


def test_readme_makefile_runs_as_written(tmp_path: Path) -> None:
    (tmp_path / "specs").mkdir()
    (tmp_path / "data").mkdir()
    rounds = sorted((REPO / "demo_data").glob("round_*.csv"))
    for number, path in enumerate(rounds, start=1):
        shutil.copy(path, tmp_path / "data" / f"wave_{number}.csv")
    # the README's folder layout: the spec names paths relative to its own folder
    spec = DEMO_SPEC.read_text(encoding="utf-8")
    spec = spec.replace("../demo_data/round_*.csv", "../data/wave_*.csv")
    spec = spec.replace("dir: ../out/demo", "dir: ../results")
    assert "../data/wave_*.csv" in spec and "../results" in spec
    (tmp_path / "specs" / "trial.yaml").write_text(spec, encoding="utf-8")
    (tmp_path / "Makefile").write_text(_readme_makefile(), encoding="utf-8")

    first = _make(tmp_path)
    assert first.returncode == 0, first.stdout + first.stderr
    assert "Traceback" not in first.stderr
    history = tmp_path / "results" / "history.jsonl"
    assert len(history.read_text().splitlines()) == 1
    assert json.loads((tmp_path / "results" / "results.json").read_text())["inputs"]

    again = _make(tmp_path)
    assert again.returncode == 0 and "up to date" in again.stdout
    assert len(history.read_text().splitlines()) == 1

    # a new wave (here: the first wave's rows without its last ten, so its bytes differ)
    lines = (tmp_path / "data" / "wave_1.csv").read_text().splitlines(keepends=True)
    (tmp_path / "data" / "wave_4.csv").write_text("".join(lines[:-10]))
    third = _make(tmp_path)
    assert third.returncode == 0, third.stdout + third.stderr
    records = [json.loads(line) for line in history.read_text().splitlines()]
    assert len(records) == 2
    assert [f["file"] for f in records[1]["files"]] == [f"wave_{i}.csv" for i in range(1, 5)]

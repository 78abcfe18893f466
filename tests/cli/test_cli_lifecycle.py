"""A trial's waves arriving: the demo's rounds run as waves, a fourth round from the demo
generator makes `--if-changed` rerun, `compare` names the new file and the shifts, and the
history holds both runs."""

from __future__ import annotations

import json
import shutil
import subprocess
import sys
from pathlib import Path

from cli_support import DEMO_SPEC, ENV, REPO
from typer.testing import CliRunner

from strativ.cli.app import app
from strativ.cli.compare import EXIT_SHIFT


def _invoke(*args: object):
    return CliRunner().invoke(app, [str(a) for a in args], env=ENV)


def test_a_fourth_round_arrives(tmp_path: Path) -> None:
    data = tmp_path / "data"
    data.mkdir()
    for path in sorted((REPO / "demo_data").glob("round_*.csv")):
        shutil.copy(path, data / path.name)
    spec = tmp_path / "trial.yaml"
    spec.write_text(DEMO_SPEC.read_text(encoding="utf-8")
                    .replace("../demo_data/round_*.csv", "data/round_*.csv")
                    .replace("dir: ../out/demo", "dir: results"), encoding="utf-8")
    out = tmp_path / "results"

    first = _invoke("run", spec, "--quiet", "--if-changed")
    assert first.exit_code == 0, first.output
    doc = json.loads((out / "results.json").read_text())
    # source: demo_data/README.md, three lottery rounds drawn separately: three waves
    assert doc["waves"]["names"] == ["round_1", "round_2", "round_3"]
    assert doc["waves"]["strata"] == "separate"
    assert len({s["label"] for s in doc["strata"]}) == 30
    shutil.copy(out / "results.json", tmp_path / "before.json")

    same = _invoke("run", spec, "--quiet", "--if-changed")
    assert same.exit_code == 0 and "unchanged since the run of" in same.stderr

    made = subprocess.run([sys.executable, str(REPO / "demo_data" / "generate.py"),
                           "--round", "4", "--out", str(data)],
                          capture_output=True, text=True, timeout=120)
    assert made.returncode == 0, made.stderr
    rerun = _invoke("run", spec, "--quiet", "--if-changed")
    assert rerun.exit_code == 0, rerun.output
    assert "unchanged" not in rerun.stderr
    after = json.loads((out / "results.json").read_text())
    assert after["waves"]["names"][-1] == "round_4"
    lines = (data / "round_4.csv").read_text().splitlines()
    # reference: the data lines of the generated file
    assert after["rows"]["kept"] == doc["rows"]["kept"] + len(lines) - 1

    records = [json.loads(line) for line in (out / "history.jsonl").read_text().splitlines()]
    assert [len(r["files"]) for r in records] == [3, 4]
    assert records[1]["files"][-1]["file"] == "round_4.csv"

    shown = _invoke("compare", tmp_path / "before.json", out / "results.json")
    assert shown.exit_code == 0, shown.output
    assert "round_4.csv" in shown.stdout
    old = {(e["outcome"], e["estimator"]): e for e in doc["estimates"]}
    new = {(e["outcome"], e["estimator"]): e for e in after["estimates"]}
    key = ("gas_therms", "interacted")
    shift = (new[key]["estimate"] - old[key]["estimate"]) / old[key]["std_error"]
    assert shift != 0
    # reference: the two files' own numbers; the gate trips below the largest shift only
    gated = _invoke("compare", tmp_path / "before.json", out / "results.json",
                    "--fail-beyond", f"{abs(shift) / 2:.6f}")
    assert gated.exit_code == EXIT_SHIFT == 4
    old.update({(e["outcome"], e["estimator"], "adjusted"): e["fit"]
                for e in doc["adjusted_estimates"]})
    new.update({(e["outcome"], e["estimator"], "adjusted"): e["fit"]
                for e in after["adjusted_estimates"]})
    largest = max(abs((new[k]["estimate"] - old[k]["estimate"]) / old[k]["std_error"])
                  for k in old if old[k]["std_error"])
    passed = _invoke("compare", tmp_path / "before.json", out / "results.json",
                     "--fail-beyond", f"{largest * 1.001:.6f}")
    assert passed.exit_code == 0, passed.output
    bad = _invoke("compare", tmp_path / "missing.json", out / "results.json")
    assert bad.exit_code == 2 and "not found" in bad.stderr

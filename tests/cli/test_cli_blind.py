"""`strativ run --blind`: a rehearsal on outcomes permuted within strata, said on every output."""

from __future__ import annotations

import csv
import io
import json

from cli_support import Study


def test_every_output_of_a_blinded_run_says_blinded(study: Study, invoke) -> None:
    result = invoke("run", study.spec, "--out", study.out, "--blind", "--blind-seed", "7")
    assert result.exit_code == 0, result.output
    lines = result.stdout.splitlines()
    assert lines[0].startswith("BLINDED rehearsal") and "(seed 7)" in lines[0]
    assert any(line.startswith("BLINDED rehearsal") for line in lines[-3:])
    assert "BLINDED rehearsal" in result.stderr
    doc = study.results()
    assert doc["blinded"]["seed"] == 7 and "BLINDED" in doc["blinded"]["note"]
    assert doc["warnings"][0].startswith("BLINDED rehearsal")
    rows = list(csv.DictReader(io.StringIO((study.out / "strata.csv").read_text())))
    assert rows and all(r["blinded"] == "true" for r in rows)
    record = json.loads((study.out / "history.jsonl").read_text().splitlines()[-1])
    assert record["blinded_seed"] == 7


def test_a_blinded_run_differs_from_the_real_one_and_if_changed_tells_them_apart(
        study: Study, invoke) -> None:
    assert invoke("run", study.spec, "--out", study.out, "-q").exit_code == 0
    real = study.results()
    assert real["blinded"] is None
    assert invoke("run", study.spec, "--out", study.out, "-q", "--blind").exit_code == 0
    blind = study.results()
    pairs = zip(real["estimates"], blind["estimates"], strict=True)
    assert any(r["estimate"] != b["estimate"] for r, b in pairs)
    # the same rows, offers and strata: only the outcomes moved
    assert blind["rows"] == real["rows"]
    again = invoke("run", study.spec, "--out", study.out, "-q", "--if-changed")
    assert again.exit_code == 0 and "unchanged" not in again.stderr
    assert study.results()["blinded"] is None
    same_seed = invoke("run", study.spec, "--out", study.out, "-q", "--blind", "--blind-seed",
                       "3")
    assert same_seed.exit_code == 0
    first = study.results()["estimates"]
    assert invoke("run", study.spec, "--out", study.out, "-q", "--blind", "--blind-seed",
                  "3").exit_code == 0
    # seeded: the same seed gives the same blinded numbers
    assert study.results()["estimates"] == first

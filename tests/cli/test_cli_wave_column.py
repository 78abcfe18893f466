"""Waves from a column (`waves.column`): the same strata, per-wave fits and pooled-share test as
waves from files, for data delivered in one file with a wave column."""

from __future__ import annotations

import json
from pathlib import Path

import jsonschema
import pandas as pd
import pytest
from cli_support import ENV
from test_cli_waves import SPEC, TRUE_EFFECT, _estimates, _run, _study, _waves
from typer.testing import CliRunner

from strativ.cli.app import app
from strativ.cli.grouped import from_rows, group_data
from strativ.cli.loading import load_data
from strativ.cli.results import load_schema
from strativ.cli.spec import load_spec

ONE_FILE = SPEC.replace("[wave_a.csv, wave_b.csv]", "all.csv") + "waves:\n  column: batch\n"


def _one_file(root: Path, frames: dict[str, pd.DataFrame], text: str = ONE_FILE) -> Path:
    """Every wave's rows in one file, shuffled, with the wave in column `batch`."""
    root.mkdir(exist_ok=True)
    joined = pd.concat([f.assign(batch=name) for name, f in frames.items()])
    joined.sample(frac=1.0, random_state=3).to_csv(root / "all.csv", index=False)
    (root / "spec.yaml").write_text(text, encoding="utf-8")
    return root / "spec.yaml"


@pytest.mark.parametrize("pool", [False, True])
def test_a_wave_column_gives_what_wave_files_give(tmp_path, pool) -> None:
    frames = _waves(31)
    extra = "waves:\n  pool: true\n" if pool else ""
    _, by_files = _run(_study(tmp_path, frames, SPEC + extra), tmp_path / "out")
    text = ONE_FILE + ("  pool: true\n" if pool else "")
    _, by_column = _run(_one_file(tmp_path / "col", frames, text), tmp_path / "col" / "out")
    jsonschema.Draft202012Validator(load_schema()).validate(by_column)
    waves = by_column["waves"]
    assert waves["column"] == "batch" and waves["names"] == ["wave_a", "wave_b"]
    assert waves["strata"] == ("pooled" if pool else "separate")
    for name in ("fixed_effects", "weighted", "interacted"):
        got, ref = _estimates(by_column)[name], _estimates(by_files)[name]
        # reference: the same rows delivered as one file per wave
        assert got["estimate"] == pytest.approx(ref["estimate"], rel=1e-12, abs=1e-12)
        assert got["std_error"] == pytest.approx(ref["std_error"], rel=1e-10)
        assert got["n_strata"] == ref["n_strata"] == (4 if pool else 8)
    for got, ref in zip(waves["by_wave"], by_files["waves"]["by_wave"], strict=True):
        assert (got["wave"], got["rows"]) == (ref["wave"], ref["rows"])
        for e, r in zip(got["estimates"], ref["estimates"], strict=True):
            # reference: each wave's own file fitted alone
            assert e["estimate"] == pytest.approx(r["estimate"], rel=1e-12)
    if pool:
        got, ref = waves["offer_share_test"], by_files["waves"]["offer_share_test"]
        # reference: the same test with the waves as files
        assert got["statistic"] == pytest.approx(ref["statistic"], rel=1e-12)
        assert got["df"] == ref["df"] == 4
    else:
        assert by_column["strata"][0]["stratum_columns"] == {"site": "east", "batch": "wave_a"}


def test_pooling_a_wave_column_with_different_odds_warns(tmp_path) -> None:
    frames = _waves(37)
    result, doc = _run(_one_file(tmp_path, frames, ONE_FILE + "  pool: true\n"),
                       tmp_path / "out")
    flat = " ".join(result.stderr.split())
    assert "strata pooled across the values of batch (waves.pool: true) had offer shares " \
           "that differ between waves beyond noise" in flat
    split_result, split = _run(_one_file(tmp_path / "split", frames), tmp_path / "split" / "o")
    assert "beyond noise" not in split_result.stderr
    got = _estimates(split)["interacted"]
    # source: the simulation's constant effect (TRUE_EFFECT); 4 standard errors
    assert abs(got["estimate"] - TRUE_EFFECT) < 4 * got["std_error"]
    assert _estimates(doc)["interacted"]["estimate"] - TRUE_EFFECT > 10 * got["std_error"]


@pytest.mark.parametrize("pool", [False, True])
def test_the_row_reader_groups_a_wave_column_as_the_query_does(tmp_path, pool) -> None:
    spec = load_spec(_one_file(tmp_path, _waves(41, n=400),
                               ONE_FILE + ("  pool: true\n" if pool else "")))
    fast, slow = group_data(spec), from_rows(spec, load_data(spec))
    key = ["stratum", "wave", "offer", "take_up"]
    a = fast.groups.groupby(key)[["n", "n_y0", "sum_y0"]].sum().sort_index()
    b = slow.groups.groupby(key)[["n", "n_y0", "sum_y0"]].sum().sort_index()
    # reference: the same rows grouped by the DuckDB query and by the row reader
    assert a.index.equals(b.index)
    assert a["n"].tolist() == b["n"].tolist()
    assert a["sum_y0"].to_numpy() == pytest.approx(b["sum_y0"].to_numpy(), rel=1e-9, abs=1e-6)
    for outcome in (None, "y"):
        f, s = fast.cells(outcome), slow.cells(outcome)
        assert f.n_units == s.n_units


def test_a_probability_per_stratum_holds_in_each_value_of_the_wave_column(tmp_path) -> None:
    text = ONE_FILE + "design:\n  offer_probability: {north: 0.3, south: 0.45, east: 0.5, " \
        "west: 0.6, 'north / wave_b': 0.7}\n  assignment: independent\n"
    _, doc = _run(_one_file(tmp_path, _waves(43), text), tmp_path / "out")
    given = {p["stratum"]: p["probability"] for p in doc["offer_probability"]}
    # by construction: a stratum's probability applies to both waves unless one wave is named
    assert given["north / wave_a"] == 0.3 and given["north / wave_b"] == 0.7
    assert given["west / wave_a"] == given["west / wave_b"] == 0.6


@pytest.mark.parametrize(("waves", "says", "line"), [
    ("  column: z\n", "wave column 'z' is already the offer column", 9),
    ("  column: site\n", "wave column 'site' is already the stratum column", 9),
    ("  column: [batch]\n", "'waves.column' must be a column name", 9),
    ("  column: batch\n  split: true\n", "unknown key 'split' under 'waves'", 10),
])
def test_a_wrong_wave_column_is_a_spec_error_at_its_line(tmp_path, waves, says, line) -> None:
    spec = _one_file(tmp_path, _waves(47, n=40), ONE_FILE.replace("  column: batch\n", waves))
    result = CliRunner().invoke(app, ["run", str(spec)], env=ENV)
    assert result.exit_code == 2, result.output
    assert says in " ".join(result.stderr.split())
    assert f"line {line}:" in result.stderr


def test_a_missing_or_absent_wave_column_names_the_spec_key(tmp_path) -> None:
    frames = _waves(53, n=40)
    spec = _one_file(tmp_path, frames, ONE_FILE.replace("batch", "round"))
    result = CliRunner().invoke(app, ["run", str(spec)], env=ENV)
    assert result.exit_code == 3, result.output
    flat = " ".join(result.stderr.split())
    assert "no column 'round' (named as waves.column in spec.yaml, line 9)" in flat
    frame = pd.read_csv(tmp_path / "all.csv")
    frame.loc[5, "batch"] = None
    frame.to_csv(tmp_path / "all.csv", index=False)
    (tmp_path / "spec.yaml").write_text(ONE_FILE, encoding="utf-8")
    result = CliRunner().invoke(app, ["run", str(spec)], env=ENV)
    assert result.exit_code == 3, result.output
    assert "batch" in result.stderr and "missing" in result.stderr


def test_resolved_spec_keeps_the_strata_as_written(tmp_path) -> None:
    spec = _one_file(tmp_path, _waves(59, n=40))
    _, doc = _run(spec, tmp_path / "out")
    assert doc["spec"]["columns"]["stratum"] == ["site"]
    assert doc["spec"]["waves"] == {"pool": False, "column": "batch"}
    assert json.loads(json.dumps(doc["waves"]))["files"] == ["all.csv", "all.csv"]

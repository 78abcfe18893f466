"""`strativ check`, `strativ init`, `--version` and `--help`."""

from __future__ import annotations

from pathlib import Path

from cli_support import DEMO_SPEC, REPO, Study, assert_clean_failure, study_rows, write_csv

from strativ.cli import __version__
from strativ.cli.spec import load_spec


def test_check_prints_the_design_summary_without_writing(study: Study, invoke) -> None:
    rows = study_rows()
    for row in rows:
        if row["site"] == "west":
            row["offer"] = 0
    write_csv(study.data, rows)
    result = invoke("check", study.spec)
    assert result.exit_code == 0, result.stderr
    lines = result.stdout.splitlines()
    # source: study_rows, offer shares 6/20, 10/20, 14/20; west offered to no one
    assert "strata    4 (3 with both arms); offer share 30.0% to 70.0%" in lines
    assert any(line.startswith("take-up ") and "of the offered" in line for line in lines)
    assert "  west (n = 16): no unit was offered (offer share 0)" in lines
    assert any(
        line.startswith("runnable: fixed_effects, weighted, interacted on y") for line in lines
    )
    assert not (study.root / "strativ_out").exists()


def test_check_on_the_demo_exits_0(invoke) -> None:
    result = invoke("check", DEMO_SPEC)
    assert result.exit_code == 0, result.stderr
    # source: demo_data/README.md, ten districts with odds 0.20 to 0.80 drawn separately in
    # each of three rounds (one file each), so 30 strata; realized shares round around the odds
    assert "strata    30 (30 with both arms); offer share 19.6% to 80.1%" in result.stdout


def test_version_prints_the_package_version(invoke) -> None:
    result = invoke("--version")
    # reference: importlib.metadata version of the installed package
    assert result.exit_code == 0 and result.stdout.strip() == f"strativ {__version__}"


def test_every_command_has_help_with_an_example(invoke) -> None:
    for command in ([], ["run"], ["check"], ["init"]):
        result = invoke(*command, "--help")
        assert result.exit_code == 0
        assert "Example:" in result.stdout and "strativ" in result.stdout, command


def test_unknown_option_is_a_usage_error(study: Study, invoke) -> None:
    result = invoke("run", study.spec, "--format", "xml")
    # source: issue 4 exit codes (2 = usage error)
    assert result.exit_code == 2 and "Traceback" not in result.output


NO_AGE = ("unit", "site", "offer", "take_up", "y")


def test_init_fills_the_roles_names_and_values_make_clear(study: Study, invoke) -> None:
    write_csv(study.data, study_rows(), header=NO_AGE)
    target = study.root / "start.yaml"
    result = invoke("init", study.data, "--output", target)
    assert result.exit_code == 0, result.stderr
    text = target.read_text()
    spec = load_spec(target)
    # by construction: study_rows names its 0/1 columns offer and take_up, 'site' is the only
    # column with few levels, 'unit' is an identifier and y the one numeric column left
    assert (spec.columns.offer, spec.columns.take_up) == ("offer", "take_up")
    assert (spec.columns.stratum, spec.columns.outcome) == (("site",), ("y",))
    assert (spec.assignment, spec.sampling) == ("block", "random")
    assert "data: data.csv" in text
    # the starter runs as written
    assert invoke("check", target).exit_code == 0


def test_init_leaves_offer_and_take_up_open_when_names_do_not_tell(study: Study,
                                                                    invoke) -> None:
    rows = [dict(r, a=r["offer"], b=r["take_up"]) for r in study_rows()]
    write_csv(study.data, rows, header=("unit", "site", "a", "b", "y"))
    target = study.root / "start.yaml"
    assert invoke("init", study.data, "-o", target).exit_code == 0
    lines = target.read_text().splitlines()
    # by construction: two 0/1 columns named a and b say nothing about their roles
    assert any(line.startswith("  # offer: <column>") and "candidates: a, b" in line
               for line in lines)
    assert any(line.startswith("  # take_up: <column>") and "candidates: a, b" in line
               for line in lines)


def test_init_ranks_design_blocks_above_demographic_columns(study: Study, invoke) -> None:
    rows = [dict(r, sex=("f", "m")[i % 2], age_group=f"g{i % 6}")
            for i, r in enumerate(study_rows())]
    write_csv(study.data, rows, header=("unit", "sex", "age_group", "site", "offer", "take_up",
                                        "y"))
    target = study.root / "start.yaml"
    assert invoke("init", study.data, "-o", target).exit_code == 0
    line = next(x for x in target.read_text().splitlines() if x.startswith("  stratum:"))
    # by construction: site (4 levels) is named like a block; sex and age_group are
    # demographic columns with few levels, listed as the alternatives
    assert line.startswith("  stratum: site ") and "others: age_group, sex" in line


def test_init_on_the_demo_rounds_writes_a_spec_that_runs(tmp_path, invoke) -> None:
    target = tmp_path / "trial.yaml"
    done = invoke("init", str(REPO / "demo_data" / "round_*.csv"), "-o", target)
    assert done.exit_code == 0, done.output
    spec = load_spec(target)
    # source: demo_data/README.md, the columns of the invented insulation lottery
    assert (spec.columns.offer, spec.columns.take_up, spec.columns.stratum) == (
        "won_lottery", "retrofitted", ("district",))
    assert spec.columns.outcome == ("gas_therms", "behind_on_bills")
    assert [p.name for p in spec.data] == ["round_1.csv", "round_2.csv", "round_3.csv"]
    assert "round_*.csv" in target.read_text()
    assert invoke("check", target, "-q").exit_code == 0
    ran = invoke("run", target, "-q", "--out", tmp_path / "out")
    assert ran.exit_code == 0, ran.output


def test_init_spec_runs_once_the_placeholders_are_filled(study: Study, invoke) -> None:
    write_csv(study.data, study_rows(), header=NO_AGE)
    target = study.root / "start.yaml"
    assert invoke("init", study.data, "-o", target).exit_code == 0
    text = target.read_text()
    text = (
        text.replace("  # outcome: <column>", "  outcome: y  #")
        .replace("  # take_up: <column>", "  take_up: take_up  #")
        .replace("  # offer: <column>", "  offer: offer  #")
    )
    target.write_text(text)
    spec = load_spec(target)
    assert (spec.columns.outcome, spec.columns.stratum) == (("y",), ("site",))
    assert invoke("check", target).exit_code == 0


def test_init_leaves_a_placeholder_when_the_stratum_is_ambiguous(study: Study, invoke) -> None:
    rows = study_rows()
    for i, row in enumerate(rows):
        row["wave"] = f"w{i % 3}"
    write_csv(study.data, rows, header=("unit", "site", "wave", "offer", "take_up", "y", "age"))
    target = study.root / "start.yaml"
    assert invoke("init", study.data, "-o", target).exit_code == 0
    lines = target.read_text().splitlines()
    # source: study_rows, site (4 levels) and wave (3) are both named like blocks, age (9)
    assert any(line.startswith("  # stratum: <column>") and "candidates: site, wave, age"
               in line for line in lines)
    assert not any(line.startswith("  stratum:") for line in lines)


def test_init_never_overwrites(study: Study, invoke) -> None:
    before = study.spec.read_bytes()
    result = invoke("init", study.data, "--output", study.spec)
    # source: issue 4, init never overwrites an existing file; exit 2 = usage error
    assert_clean_failure(result, 2, "already exists; strativ init never overwrites a file")
    assert study.spec.read_bytes() == before


def test_init_refuses_other_file_types(tmp_path: Path, invoke) -> None:
    data = tmp_path / "data.txt"
    data.write_bytes(b"PK")
    result = invoke("init", data, "-o", tmp_path / "s.yaml")
    assert_clean_failure(result, 2, "data.txt is not a data file strativ reads")
    assert not (tmp_path / "s.yaml").exists()


def test_init_on_a_bad_file_is_a_data_error(tmp_path: Path, invoke) -> None:
    data = tmp_path / "empty.csv"
    data.write_text("")
    result = invoke("init", data, "-o", tmp_path / "s.yaml")
    # source: issue 4 exit codes (3 = data error)
    assert_clean_failure(result, 3, "empty.csv: the file is empty")
    assert not (tmp_path / "s.yaml").exists()


def test_init_quotes_column_names_that_yaml_would_change(tmp_path: Path, invoke) -> None:
    rows = [
        {"yes": i % 2, "score: total": float(i), "on": i % 2, "g": "ab"[i % 2]} for i in range(12)
    ]
    data = write_csv(tmp_path / "d.csv", rows, header=("yes", "score: total", "on", "g"))
    target = tmp_path / "s.yaml"
    assert invoke("init", data, "-o", target).exit_code == 0
    text = target.read_text()
    assert '"yes", "on"' in text and '"score: total"' in text

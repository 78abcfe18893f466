"""`strativ check`, `strativ init`, `--version` and `--help`."""

from __future__ import annotations

import shutil
from pathlib import Path
from typing import Any

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


def _lottery_rows(strata: dict[str, tuple[int, int]], **extra: Any) -> list[dict[str, Any]]:
    """Rows of a lottery: per stratum (units, offered), the first `offered` units offered;
    take-up and outcome follow fixed arithmetic patterns. Each `extra` column is a function
    of the row number."""
    rows: list[dict[str, Any]] = []
    for site, (n, k) in strata.items():
        for i in range(n):
            offer = int(i < k)
            take_up = int((i % 5 != 4) if offer else (i % 7 == 3))
            row = {"unit": f"u{len(rows):04d}", "site": site, "offer": offer,
                   "take_up": take_up, "y": round(10 + 2 * take_up + (i * 7 % 11) / 4, 2)}
            row.update({name: make(len(rows)) for name, make in extra.items()})
            rows.append(row)
    return rows


def _line(text: str, start: str) -> str:
    return next(x for x in text.splitlines() if x.startswith(start))


def _prose(text: str) -> str:
    """The spec's text with comment marks and line breaks taken out, to find wrapped prose."""
    return " ".join(" ".join(x.strip().lstrip("#").split()) for x in text.splitlines())


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
    # by construction: strata of 16 to 20 units cannot tell a fixed count from coin flips
    assert "too small to tell from the offered counts" in _prose(text)
    # the starter runs as written
    assert invoke("check", target).exit_code == 0


def test_init_leaves_offer_and_take_up_open_when_names_do_not_tell(study: Study,
                                                                    invoke) -> None:
    rows = [dict(r, a=r["offer"], b=r["take_up"]) for r in study_rows()]
    write_csv(study.data, rows, header=("unit", "site", "a", "b", "y"))
    target = study.root / "start.yaml"
    done = invoke("init", study.data, "-o", target)
    assert done.exit_code == 0
    # by construction: the message names the roles left to fill (it used to say "fill in
    # the commented roles" whether or not any was left)
    assert "fill in the commented roles (take_up, offer)" in " ".join(done.stderr.split())
    text = target.read_text()
    # by construction: two 0/1 columns named a and b say nothing about their roles, so both
    # stay placeholders listing both (the line format replaced "candidates: a, b" when the
    # candidates came to be ranked)
    assert _line(text, "  # offer: <column>").endswith("candidates, most likely first: a, b")
    assert _line(text, "  # take_up: <column>").endswith("candidates, most likely first: a, b")
    assert not any(x.startswith(("  offer:", "  take_up:")) for x in text.splitlines())
    # by construction: a and b may still be the offer and take-up, so they are no outcome
    # (before, the starter filled outcome: [a, b, y]); y is the one column left
    assert _line(text, "  outcome:") == "  outcome: y   # others: a, b"


def test_init_ranks_design_blocks_above_demographic_columns(tmp_path: Path, invoke) -> None:
    strata = {f"s{j}": (12, 6) for j in range(5)}
    rows = _lottery_rows(strata, sex=lambda i: ("f", "m")[i % 2],
                         age_group=lambda i: f"g{i % 6}")
    data = write_csv(tmp_path / "d.csv", rows,
                     header=("unit", "sex", "age_group", "site", "offer", "take_up", "y"))
    target = tmp_path / "start.yaml"
    assert invoke("init", data, "-o", target).exit_code == 0
    text = target.read_text()
    # by construction: site (5 levels) is named like a block; sex (2 levels) and age_group
    # (6 levels) are demographic columns with few levels, listed after it as alternatives
    assert _line(text, "  stratum:") == "  stratum: site   # others: age_group, sex"
    assert "#   site       text, 5 levels" in text
    assert "#   age_group  text, 6 levels" in text and "#   sex        text, 2 levels" in text


def test_init_on_the_demo_rounds_writes_a_spec_that_runs(tmp_path: Path, invoke) -> None:
    (tmp_path / "demo_data").mkdir()
    for name in ("round_1.csv", "round_2.csv", "round_3.csv"):
        shutil.copyfile(REPO / "demo_data" / name, tmp_path / "demo_data" / name)
    (tmp_path / "specs").mkdir()
    target = tmp_path / "specs" / "trial.yaml"
    done = invoke("init", str(tmp_path / "demo_data" / "round_*.csv"), "-o", target)
    assert done.exit_code == 0, done.output
    assert "every required role is filled" in " ".join(done.stderr.split())
    text = target.read_text()
    spec = load_spec(target)
    # source: demo_data/README.md, the columns of the invented insulation lottery
    assert (spec.columns.offer, spec.columns.take_up, spec.columns.stratum) == (
        "won_lottery", "retrofitted", ("district",))
    assert spec.columns.outcome == ("gas_therms", "behind_on_bills")
    # source: demo_data/README.md, 1,840 + 2,000 + 2,160 rows in three round files, read
    # together; the glob is relative to the spec's folder
    assert "(6000 rows, 9 columns)" in text
    assert 'data: "../demo_data/round_*.csv"' in text.splitlines()
    assert [p.name for p in spec.data] == ["round_1.csv", "round_2.csv", "round_3.csv"]
    # source: demo_data/README.md and generate.py, baseline_therms, home_age_years and
    # household_size are the covariates, offered as a commented suggestion
    assert "  # covariates: [baseline_therms, home_age_years, household_size]" in text
    assert "each (stratum x wave) is its own" in text and "waves: {pool: true}" in text
    # source: demo_data/README.md, exactly round(odds x applicants) winners in each of the
    # ten districts in each of three rounds, odds 0.20 to 0.80 in steps of 0.05 (generate.py)
    flat = _prose(text)
    assert "in all 30 strata (district x file) with both arms, the offered count" in flat
    assert (spec.assignment, spec.sampling) == ("block", "random")
    assert invoke("check", target, "-q").exit_code == 0
    ran = invoke("run", target, "-q", "--out", tmp_path / "out")
    assert ran.exit_code == 0, ran.output


def test_init_writes_a_glob_only_for_exactly_one_numbered_family(tmp_path: Path,
                                                                 invoke) -> None:
    folder = tmp_path / "data"
    folder.mkdir()
    waves = [write_csv(folder / f"wave_{w}.csv",
                       [dict(r, y=r["y"] + w) for r in study_rows()], header=NO_AGE)
             for w in (1, 2, 3)]
    target = tmp_path / "specs" / "a.yaml"
    target.parent.mkdir()
    assert invoke("init", *waves, "-o", target).exit_code == 0
    # by construction: wave_1..3.csv alone in data/, named one by one on the command line
    assert 'data: "../data/wave_*.csv"' in target.read_text().splitlines()
    assert [p.name for p in load_spec(target).data] == ["wave_1.csv", "wave_2.csv",
                                                        "wave_3.csv"]
    assert invoke("check", target, "-q").exit_code == 0
    # by construction: a fourth wave in the folder, not given, would be read by the glob
    write_csv(folder / "wave_4.csv", study_rows(), header=NO_AGE)
    other = tmp_path / "specs" / "b.yaml"
    assert invoke("init", *waves, "-o", other).exit_code == 0
    assert ('data: ["../data/wave_1.csv", "../data/wave_2.csv", "../data/wave_3.csv"]'
            in other.read_text().splitlines())


def test_init_profiles_every_file_not_only_the_first(tmp_path: Path, invoke) -> None:
    first = [dict(r, won_prize=i % 2, post_bill=1.5 * i) for i, r in enumerate(study_rows())]
    second = [dict(r, y=r["y"] + 1, won_prize=i % 4) for i, r in enumerate(study_rows())]
    files = [write_csv(tmp_path / "w1.csv", first, header=(*NO_AGE, "won_prize", "post_bill")),
             write_csv(tmp_path / "w2.csv", second, header=(*NO_AGE, "won_prize"))]
    target = tmp_path / "s.yaml"
    assert invoke("init", *files, "-o", target).exit_code == 0
    text = target.read_text()
    # by construction: won_prize is 0/1 in w1.csv but takes 0..3 in w2.csv, so it is no
    # offer candidate; post_bill (named like an outcome) is missing from w2.csv, so it fills
    # no role
    assert "#   won_prize  numeric, 4 levels" in text
    assert "#   post_bill  numeric, 76 distinct values, absent from 1 file(s)" in text
    spec = load_spec(target)
    assert (spec.columns.offer, spec.columns.outcome) == ("offer", ("y",))
    # by construction: 76 rows in each file
    assert "(152 rows, 7 columns)" in _prose(text)
    assert invoke("check", target, "-q").exit_code == 0


def test_init_reads_round_shares_in_the_offered_counts(tmp_path: Path, invoke) -> None:
    round_rows = _lottery_rows({"n": (120, 36), "s": (120, 54), "e": (120, 72)})
    odd_rows = _lottery_rows({"n": (120, 37), "s": (120, 53), "e": (120, 71)})
    texts = []
    for name, rows in (("round", round_rows), ("odd", odd_rows)):
        data = write_csv(tmp_path / f"{name}.csv", rows, header=NO_AGE)
        assert invoke("init", data, "-o", tmp_path / f"{name}.yaml").exit_code == 0
        texts.append(_prose((tmp_path / f"{name}.yaml").read_text()))
    # by construction: 36, 54 and 72 of 120 are 30 %, 45 % and 60 % exactly
    assert "in all 3 strata (site) with both arms, the offered count is the stratum size " \
        "times a round share" in texts[0]
    # by construction: 37, 53 and 71 of 120 are one unit off every multiple of 5 %
    assert "Here 3 of 3 strata (site) offered no round share of their units (e.g. 37 of " \
        "120)" in texts[1]
    assert "write independent (wider intervals, the cautious choice when unsure)" in texts[1]
    for name in ("round", "odd"):
        # by construction: block stays written either way, the comment says how to change it
        assert load_spec(tmp_path / f"{name}.yaml").assignment == "block"


def test_init_fills_outcomes_only_when_they_are_clear(tmp_path: Path, invoke) -> None:
    strata = {f"s{j}": (20, 10) for j in range(3)}
    rows = _lottery_rows(strata, x1=lambda i: i * 0.37, x2=lambda i: i * 1.3,
                         x3=lambda i: i * 2.1, u1=lambda i: 5 + i * 0.7)
    named = [dict(r, post_score=r["y"] * 2) for r in rows]
    unclear = write_csv(tmp_path / "u.csv", rows, header=("site", "offer", "take_up", "x1",
                                                          "x2", "x3", "y"))
    clear = write_csv(tmp_path / "c.csv", named, header=("site", "offer", "take_up", "x1",
                                                         "post_score", "x2"))
    for data in (unclear, clear):
        assert invoke("init", data, "-o", data.with_suffix(".yaml")).exit_code == 0
    text = (tmp_path / "u.yaml").read_text()
    # by construction: four numeric columns and none named like a baseline; y is named like
    # an outcome, so it is filled and the others stay listed
    assert _line(text, "  outcome:") == "  outcome: y   # others: x1, x2, x3"
    rows_no_y = write_csv(tmp_path / "n.csv", rows, header=("site", "offer", "take_up", "x1",
                                                            "x2", "x3", "u1"))
    assert invoke("init", rows_no_y, "-o", tmp_path / "n.yaml").exit_code == 0
    # by construction: x1, x2, x3 and u1 (four columns, no name saying which) are too many
    assert _line((tmp_path / "n.yaml").read_text(), "  # outcome: <column>").endswith(
        "candidates, most likely first: x1, x2, x3, u1")
    # by construction: post_score is named like an outcome
    assert _line((tmp_path / "c.yaml").read_text(), "  outcome:") == \
        "  outcome: post_score   # others: x1, x2"


def test_init_spec_runs_once_the_placeholders_are_filled(study: Study, invoke) -> None:
    rows = [dict(r, a=r["offer"], b=r["take_up"]) for r in study_rows()]
    write_csv(study.data, rows, header=("unit", "site", "a", "b", "y"))
    target = study.root / "start.yaml"
    assert invoke("init", study.data, "-o", target).exit_code == 0
    text = target.read_text()
    # by construction: a is the offer and b the take-up; an analyst who knows that uncomments
    # the two placeholders (this test used to fill the outcome too, which is now filled)
    text = text.replace("  # take_up: <column>", "  take_up: b  #").replace(
        "  # offer: <column>", "  offer: a  #")
    target.write_text(text)
    spec = load_spec(target)
    assert (spec.columns.offer, spec.columns.take_up, spec.columns.outcome,
            spec.columns.stratum) == ("a", "b", ("y",), ("site",))
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
    # a demographic column ranked last
    assert any(line.startswith("  # stratum: <column>")
               and line.endswith("candidates, most likely first: site, wave, age")
               for line in lines)
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

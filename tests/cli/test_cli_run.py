"""`strativ run` end to end: the demo, the results files, and their numbers against the core."""

from __future__ import annotations

import csv
import hashlib
import io
import json
from pathlib import Path

import jsonschema
import numpy as np
import pandas as pd
import pytest
from cli_support import (
    DEMO_SPEC,
    MINIMAL_SPEC,
    REPO,
    Study,
    assert_clean_failure,
    assert_same_numbers,
    study_rows,
    write_csv,
)

from strativ.cli.results import STRATA_COLUMNS, load_schema
from strativ.estimators import build_cells, fit_all


def _validate(doc: dict) -> None:
    schema = load_schema()
    jsonschema.Draft202012Validator.check_schema(schema)
    jsonschema.Draft202012Validator(schema).validate(doc)


def _roundtrip(data):
    return json.loads(json.dumps(data))


@pytest.fixture(scope="module")
def demo(tmp_path_factory: pytest.TempPathFactory):
    """One run of the demo spec into a temporary directory, shared by the tests below."""
    from typer.testing import CliRunner

    from strativ.cli.app import app

    out = tmp_path_factory.mktemp("demo_out")
    result = CliRunner().invoke(
        app, ["run", str(DEMO_SPEC), "--out", str(out)], env={"COLUMNS": "120", "NO_COLOR": "1"}
    )
    return result, out


def test_demo_runs_and_prints_the_comparison(demo) -> None:
    result, _ = demo
    assert result.exit_code == 0, result.output
    lines = result.stdout.splitlines()
    assert "Insulation lottery demo (invented data)" in lines[0]
    # source: demo_data/README.md, three rounds of 1,840 + 2,000 + 2,160 rows
    assert any(
        line.startswith(
            "data      round_1.csv (1,840 rows), round_2.csv (2,000 rows), round_3.csv (2,160 rows)"
        )
        for line in lines
    )
    # source: demo_data/README.md, ten districts, each drawn separately in three rounds
    assert any(line.startswith("6,000 rows used in 30 strata; 0 strata excluded (0 rows)")
               for line in lines)
    for name in ("fixed effects", "weighted (IPW)", "interacted"):
        assert any(line.startswith(name + " ") for line in lines), name
    flat = " ".join(result.stdout.split())
    assert "it differs beyond noise at the 95% level" in flat
    assert "Strata that pull it most: Willow Creek" in flat
    assert "no one takes up because they were not offered" in flat
    assert "These numbers support, not replace, expert review" in flat
    # by construction: the demo's covariates are complete and used, so nothing to warn about
    assert "warning" not in result.stderr
    assert "with covariates (baseline_therms, home_age_years, household_size):" in flat
    # by construction: the demo names three covariates; each gets a row in the balance table
    for name in ("baseline_therms", "home_age_years", "household_size"):
        assert any(line.startswith(name + " ") for line in lines), name
    assert "joint balance test: chi-squared" in flat


def test_demo_results_validate_against_the_shipped_schema(demo) -> None:
    _, out = demo
    doc = json.loads((out / "results.json").read_text())
    _validate(doc)
    # source: specs/demo.yaml names two outcomes and three estimators
    assert [(e["outcome"], e["estimator"]) for e in doc["estimates"]] == [
        (o, e)
        for o in ("gas_therms", "behind_on_bills")
        for e in ("fixed_effects", "weighted", "interacted")
    ]


def test_demo_complier_weighted_intervals_cover_the_true_late(demo) -> None:
    _, out = demo
    doc = json.loads((out / "results.json").read_text())
    truth = json.loads((REPO / "demo_data" / "truth.json").read_text())
    for outcome in ("gas_therms", "behind_on_bills"):
        # reference: demo_data/truth.json, the generator's true overall LATE
        late = truth["overall"][outcome]["late"]
        for e in doc["estimates"]:
            if e["outcome"] == outcome and e["estimator"] in ("weighted", "interacted"):
                low, high = e["interval"]
                assert low <= late <= high, (outcome, e["estimator"], e["interval"], late)
    gas = next(c for c in doc["comparisons"] if c["outcome"] == "gas_therms")
    low, high = gas["gap"]["interval"]
    # source: demo_data/README.md, fixed effects misses the LATE by about 20 therms
    assert low > 0


def test_demo_inputs_are_fingerprinted(demo) -> None:
    _, out = demo
    doc = json.loads((out / "results.json").read_text())
    for entry in doc["inputs"]:
        path = Path(entry["path"])
        # reference: hashlib.sha256 and os.stat of the same file
        assert entry["sha256"] == hashlib.sha256(path.read_bytes()).hexdigest()
        assert entry["size_bytes"] == path.stat().st_size
        assert entry["rows"] == len(path.read_text().splitlines()) - 1
    assert doc["spec"]["columns"]["stratum"] == ["district"]
    assert doc["tool"]["name"] == "strativ" and doc["schema_version"] == "2.1"


def _core(frame: pd.DataFrame, outcome: str, **options):
    cells = build_cells(
        frame[outcome].to_numpy(float),
        frame["take_up"].to_numpy(),
        frame["offer"].to_numpy(),
        frame["site"].to_numpy(object),
    )
    return fit_all(cells, **options)


def test_results_numbers_equal_the_core_exactly(study: Study, invoke) -> None:
    result = invoke("run", study.spec, "--out", study.out)
    assert result.exit_code == 0, result.stderr
    doc = study.results()
    _validate(doc)
    # reference: strativ.estimators.fit_all on the same rows, read independently with pandas
    comparison = _core(pd.read_csv(study.data), "y")
    expected = _roundtrip(comparison.to_dict())
    assert_same_numbers([{k: v for k, v in e.items() if k != "outcome"}
                         for e in doc["estimates"]], expected["estimates"])
    assert_same_numbers([{k: v for k, v in r.items() if k != "outcome"}
                         for r in doc["strata"]], expected["strata"]["rows"])
    assert_same_numbers(doc["comparisons"][0]["gap"], expected["gap"])
    assert_same_numbers(doc["comparisons"][0]["size_weighted"], expected["size_weighted"])


def test_strata_csv_holds_the_core_table_in_full_precision(study: Study, invoke) -> None:
    assert invoke("run", study.spec, "--out", study.out).exit_code == 0
    table = list(csv.DictReader(io.StringIO((study.out / "strata.csv").read_text())))
    assert tuple(table[0]) == STRATA_COLUMNS
    # reference: strativ.estimators.fit_all on the same rows
    rows = _core(pd.read_csv(study.data), "y").strata.rows
    assert [r["stratum"] for r in table] == [r.label for r in rows]
    for line, row in zip(table, rows, strict=True):
        assert_same_numbers(float(line["effect"]), row.effect)
        assert_same_numbers(float(line["weight_fixed_effects"]), row.weight_fixed_effects)
        assert int(line["n_offered"]) == row.n_offered and line["used"] == "true"


def test_options_reach_the_core(study: Study, invoke) -> None:
    study.write_spec(
        MINIMAL_SPEC + "estimators: [weighted, fixed_effects]\ninference:\n"
        "  variance: robust_scaled\n  level: 0.9\ndesign:\n"
        "  assignment: independent\n  sampling: fixed\n"
    )
    assert invoke("run", study.spec, "--out", study.out).exit_code == 0
    # reference: strativ.estimators.fit_all with the spec's options
    expected = _core(
        pd.read_csv(study.data),
        "y",
        estimators=("weighted", "fixed_effects"),
        variance="robust_scaled",
        level=0.9,
        assignment="independent",
        sampling="fixed",
    )
    got = [{k: v for k, v in e.items() if k != "outcome"} for e in study.results()["estimates"]]
    assert_same_numbers(got, _roundtrip(expected.to_dict())["estimates"])


def test_design_probabilities_from_mapping_and_column_agree(study: Study, invoke) -> None:
    design = {"north": 0.25, "south": 0.5, "east": 0.75, "west": 0.5}
    mapping = "".join(f"    {k}: {v}\n" for k, v in design.items())
    study.write_spec(MINIMAL_SPEC + "design:\n  offer_probability:\n" + mapping)
    assert invoke("run", study.spec, "--out", study.out).exit_code == 0
    from_mapping = study.results()
    rows = study_rows()
    for row in rows:
        row["p"] = design[row["site"]]
    write_csv(study.data, rows, header=("unit", "site", "offer", "take_up", "y", "p"))
    study.write_spec(MINIMAL_SPEC + "design:\n  offer_probability: p\n")
    assert invoke("run", study.spec, "--out", study.out).exit_code == 0
    from_column = study.results()
    # reference: strativ.estimators.fit_all with the design probabilities
    expected = _core(pd.read_csv(study.data), "y", offer_probability=design)
    for doc in (from_mapping, from_column):
        assert_same_numbers([{k: v for k, v in e.items() if k != "outcome"}
                             for e in doc["estimates"]],
                            _roundtrip(expected.to_dict())["estimates"])
    # by construction: one entry per stratum, in label order as in the strata table
    assert from_column["offer_probability"] == [
        {"stratum": k, "probability": design[k]} for k in sorted(design)
    ]


def test_mapping_with_unknown_stratum_is_a_spec_error(study: Study, invoke) -> None:
    study.write_spec(
        MINIMAL_SPEC + "design:\n  offer_probability:\n    north: 0.3\n"
        "    sout: 0.5\n    east: 0.7\n    west: 0.5\n"
    )
    result = invoke("run", study.spec, "--out", study.out)
    # source: issue 4 exit codes (2 = spec error); 'sout' is on line 10
    assert_clean_failure(
        result,
        2,
        "spec.yaml, line 10: offer_probability names stratum 'sout'",
        "did you mean 'south'?",
    )
    study.write_spec(MINIMAL_SPEC + "design:\n  offer_probability:\n    north: 0.3\n")
    assert_clean_failure(
        invoke("run", study.spec, "--out", study.out),
        2,
        "offer_probability gives no probability for stratum(s) 'east', 'south', 'west'",
    )
    assert not study.out.exists()


def test_hand_written_minimal_spec_runs_with_defaults(study: Study, invoke) -> None:
    result = invoke("run", study.spec)
    assert result.exit_code == 0, result.stderr
    out = study.root / "strativ_out"
    # source: issue 4, output.dir defaults to strativ_out next to the spec, formats to both
    assert sorted(p.name for p in out.iterdir()) == [
        "history.jsonl", "results.json", "strata.csv"]


def test_several_outcomes_and_combined_strata(study: Study, invoke) -> None:
    rows = study_rows()
    for i, row in enumerate(rows):
        row["wave"] = i % 2
    write_csv(study.data, rows, header=("unit", "site", "wave", "offer", "take_up", "y", "age"))
    study.write_spec(
        MINIMAL_SPEC.replace("outcome: y", "outcome: [y, age]").replace(
            "stratum: site", "stratum: [site, wave]"
        )
    )
    assert invoke("run", study.spec, "--out", study.out).exit_code == 0
    doc = study.results()
    labels = sorted({r["label"] for r in doc["strata"]})
    # source: stratum parts joined with " / " (cli/loading.py STRATUM_JOIN)
    assert labels[:2] == ["east / 0", "east / 1"] and len(labels) == 8
    assert {e["outcome"] for e in doc["estimates"]} == {"y", "age"}


def test_parquet_input_gives_the_csv_numbers(study: Study, invoke) -> None:
    assert invoke("run", study.spec, "--out", study.out).exit_code == 0
    from_csv = study.results()["estimates"]
    frame = pd.read_csv(study.data)
    frame["offer"] = frame["offer"].astype(bool)
    frame.to_parquet(study.root / "data.parquet")
    study.write_spec(MINIMAL_SPEC.replace("data.csv", "data.parquet"))
    assert invoke("run", study.spec, "--out", study.out).exit_code == 0
    # reference: the same rows read from CSV, run just above
    assert study.results()["estimates"] == from_csv


def test_format_option_limits_the_files(study: Study, invoke) -> None:
    assert invoke("run", study.spec, "--out", study.out, "--format", "csv").exit_code == 0
    assert sorted(p.name for p in study.out.iterdir()) == ["history.jsonl", "strata.csv"]


def test_quiet_prints_nothing_and_still_writes(study: Study, invoke) -> None:
    result = invoke("run", study.spec, "--out", study.out, "--quiet")
    assert result.exit_code == 0 and result.stdout == "" and result.stderr == ""
    assert (study.out / "results.json").exists()


def test_output_never_overwrites_an_input(study: Study, invoke) -> None:
    (study.root / "strata.csv").write_text(study.data.read_text())
    study.write_spec(MINIMAL_SPEC.replace("data.csv", "strata.csv"))
    before = (study.root / "strata.csv").read_bytes()
    result = invoke("run", study.spec, "--out", study.root)
    # source: issue 4, never write into or over an input file; exit 2 = usage error
    assert_clean_failure(result, 2, "would overwrite an input file")
    assert (study.root / "strata.csv").read_bytes() == before
    assert not (study.root / "results.json").exists()


def test_output_matching_the_data_glob_is_refused(study: Study, invoke) -> None:
    study.write_spec(MINIMAL_SPEC.replace("data: data.csv", "data: '*.csv'"))
    result = invoke("run", study.spec, "--out", study.root)
    assert_clean_failure(result, 2, "would match the data pattern '*.csv'")
    assert sorted(p.name for p in study.root.iterdir()) == ["data.csv", "spec.yaml"]


def test_rerun_replaces_results_atomically_without_leftovers(study: Study, invoke) -> None:
    for _ in range(2):
        assert invoke("run", study.spec, "--out", study.out, "-q").exit_code == 0
    assert sorted(p.name for p in study.out.iterdir()) == [
        "history.jsonl", "results.json", "strata.csv"]


def test_markup_in_labels_is_printed_literally(study: Study, invoke) -> None:
    rows = study_rows()
    for row in rows:
        row["site"] = {"north": "[bold]north[/bold]", "south": "score[site]"}.get(
            row["site"], row["site"]
        )
    write_csv(study.data, rows)
    result = invoke("run", study.spec, "--out", study.out)
    assert result.exit_code == 0, result.stderr
    assert "[bold]north[/bold]" in result.stdout and "score[site]" in result.stdout


def test_many_strata_are_summarised(tmp_path: Path, invoke) -> None:
    rows = []
    for s in range(40):
        for i in range(10):
            offer = int(i < 3 + s % 5)
            take_up = int(offer and i != 0)
            rows.append(
                {
                    "unit": f"{s}-{i}",
                    "site": f"s{s:02d}",
                    "offer": offer,
                    "take_up": take_up,
                    "y": float(s % 3 + take_up * (1 + s % 4) + i % 3),
                }
            )
    study = Study(tmp_path)
    write_csv(study.data, rows, header=("unit", "site", "offer", "take_up", "y"))
    study.write_spec(MINIMAL_SPEC)
    result = invoke("run", study.spec, "--out", study.out)
    assert result.exit_code == 0, result.stderr
    # source: cli/render.py, full table up to 30 strata, 15 shown beyond
    assert "15 of 40 strata shown" in " ".join(result.stdout.split())
    assert len(study.results()["strata"]) == 40


def test_excluded_strata_are_listed_with_their_reason(study: Study, invoke) -> None:
    rows = study_rows()
    for row in rows:
        if row["site"] == "west":
            row["offer"] = 1
    write_csv(study.data, rows)
    result = invoke("run", study.spec, "--out", study.out)
    assert result.exit_code == 0, result.stderr
    flat = " ".join(result.stdout.split())
    assert "excluded strata (1): west (n = 16): every unit was offered" in flat
    doc = study.results()
    # source: study_rows, west has 16 units
    assert doc["exclusions"] == [
        {
            "outcome": "y",
            "label": "west",
            "n": 16,
            "reason": "every unit was offered (offer share 1)",
        }
    ]
    strata = list(csv.DictReader(io.StringIO((study.out / "strata.csv").read_text())))
    assert strata[-1]["stratum"] == "west" and strata[-1]["used"] == "false"


def test_internal_error_is_reported_without_traceback(study: Study, invoke, monkeypatch) -> None:
    import strativ.cli.runner as runner_module

    def broken(*args, **kwargs):
        raise RuntimeError("simulated bug")

    # the run command imports run_spec from the runner when it runs
    monkeypatch.setattr(runner_module, "run_spec", broken)
    result = invoke("run", study.spec, "--out", study.out)
    # source: cli/app.py boundary, exit 1 = unexpected internal error
    assert_clean_failure(
        result, 1, "internal error: RuntimeError: simulated bug", "This is a bug in strativ"
    )
    assert not study.out.exists()


def test_integer_strata_sort_numerically(study: Study, invoke) -> None:
    rows = study_rows()
    codes = {"north": 10, "south": 2, "east": 3, "west": 1}
    for row in rows:
        row["site"] = codes[row["site"]]
    write_csv(study.data, rows)
    assert invoke("run", study.spec, "--out", study.out).exit_code == 0
    # source: cli/loading.py, all-integer labels become ints so that 2 sorts before 10
    assert [r["label"] for r in study.results()["strata"]] == [1, 2, 3, 10]
    assert np.isfinite([r["effect"] for r in study.results()["strata"]]).all()


def test_resolved_spec_records_the_output_actually_used(study: Study, invoke) -> None:
    assert invoke("run", study.spec, "--out", study.out, "-f", "json").exit_code == 0
    # source: the --out and --format given on the command line above
    assert study.results()["spec"]["output"] == {"dir": str(study.out.resolve()),
                                                 "formats": ["json"]}


def test_cluster_variance_passes_clusters_to_the_core(study: Study, invoke) -> None:
    rows = study_rows()
    for i, row in enumerate(rows):
        row["household"] = f"{row['site']}-{row['offer']}-{i // 2}"
    header = ("unit", "site", "household", "offer", "take_up", "y", "age")
    write_csv(study.data, rows, header=header)
    study.write_spec(MINIMAL_SPEC + "  cluster: household\n  covariates: age\n"
                     "inference:\n  variance: cluster\n")
    result = invoke("run", study.spec, "--out", study.out)
    assert result.exit_code == 0, result.stderr
    frame = pd.read_csv(study.data)
    cells = build_cells(frame["y"].to_numpy(float), frame["take_up"].to_numpy(),
                        frame["offer"].to_numpy(), frame["site"].to_numpy(object),
                        cluster=frame["household"].to_numpy(object))
    # reference: strativ.estimators.fit_all with the cluster variance on the same rows
    expected = _roundtrip(fit_all(cells, variance="cluster").to_dict())["estimates"]
    doc = study.results()
    assert_same_numbers([{k: v for k, v in e.items() if k != "outcome"}
                         for e in doc["estimates"]], expected)
    # by construction: age is a covariate, so each estimator is refitted with it, in the
    # cluster form too
    assert [a["estimator"] for a in doc["adjusted_estimates"]] == \
        [e["estimator"] for e in doc["estimates"]]
    assert {a["fit"]["variance"] for a in doc["adjusted_estimates"]} == {"cluster"}


def test_non_numeric_covariate_is_a_data_error(study: Study, invoke) -> None:
    rows = study_rows()
    rows[4]["age"] = "forty"
    write_csv(study.data, rows)
    study.write_spec(MINIMAL_SPEC + "  covariates: [age]\n")
    result = invoke("run", study.spec, "--out", study.out)
    # source: issue 4 exit codes (3 = data error)
    assert_clean_failure(result, 3, "column 'age': the covariate column must be numeric",
                         "'forty' in row 5 (line 6)")
    assert not study.out.exists()

"""Spec validation: every error names the spec line and key, and suggests the valid name."""

from __future__ import annotations

from pathlib import Path

import pytest
from cli_support import MINIMAL_SPEC, Study, assert_clean_failure

from strativ.cli.errors import SpecError
from strativ.cli.spec import DEFAULT_FORMATS, load_spec
from strativ.estimators.options import ESTIMATORS


def _spec(study: Study, text: str):
    study.write_spec(text)
    return load_spec(study.spec)


def test_minimal_spec_gets_every_default(study: Study) -> None:
    spec = load_spec(study.spec)
    # source: issue 4 spec keys and their documented defaults
    assert spec.estimators == ESTIMATORS
    assert spec.variance == "stratified" and spec.level == 0.95
    assert spec.assignment == "block" and spec.sampling == "random"
    assert spec.offer_probability.source == "estimated"
    assert spec.formats == DEFAULT_FORMATS == ("json", "csv") and not spec.drop_incomplete_rows
    assert spec.output_dir == study.root.resolve() / "strativ_out"
    assert spec.data == (study.data.resolve(),)
    assert spec.title == "spec"


def test_unknown_nested_key_names_line_and_nearest_key(study: Study) -> None:
    text = MINIMAL_SPEC.replace("  stratum: site", "  stratam: site")
    # source: spec text above, 'stratam' sits on line 6
    with pytest.raises(SpecError, match=r"line 6: unknown key 'stratam' under 'columns'") as err:
        _spec(study, text)
    assert "did you mean 'stratum'?" in err.value.render()
    assert err.value.key == "columns.stratam"


def test_unknown_top_level_key_is_an_error_not_ignored(study: Study) -> None:
    # source: spec text, 'estimator' is appended as line 7
    with pytest.raises(SpecError, match=r"line 7: unknown key 'estimator' under the spec") as err:
        _spec(study, MINIMAL_SPEC + "estimator: [weighted]\n")
    assert "did you mean 'estimators'?" in err.value.render()


def test_key_in_the_wrong_section_says_where_it_belongs(study: Study) -> None:
    with pytest.raises(SpecError, match=r"line 7: unknown key 'variance'") as err:
        _spec(study, MINIMAL_SPEC + "variance: robust\n")
    assert "'variance' belongs under 'inference'" in err.value.render()


def test_bad_choice_suggests_the_nearest_value(study: Study) -> None:
    text = MINIMAL_SPEC + "inference:\n  variance: robus\n"
    with pytest.raises(SpecError, match=r"line 8: 'inference.variance' is 'robus'") as err:
        _spec(study, text)
    assert "did you mean 'robust'" in err.value.render()


def test_unknown_estimator_in_list_names_its_line(study: Study) -> None:
    text = MINIMAL_SPEC + "estimators:\n  - fixed_effects\n  - interacteed\n"
    with pytest.raises(SpecError, match=r"line 9: 'estimators' has 'interacteed'") as err:
        _spec(study, text)
    assert "did you mean 'interacted'?" in err.value.render()


def test_level_given_in_percent_gets_a_hint(study: Study) -> None:
    with pytest.raises(SpecError, match=r"line 8: 'inference.level' is 95") as err:
        _spec(study, MINIMAL_SPEC + "inference:\n  level: 95\n")
    assert "write 0.95 for 95 %" in err.value.render()


def test_missing_required_key_is_named(study: Study) -> None:
    text = MINIMAL_SPEC.replace("  offer: offer\n", "")
    with pytest.raises(SpecError, match=r"line 2: 'columns' has no 'offer'"):
        _spec(study, text)
    with pytest.raises(SpecError, match=r"the spec has no 'columns' key"):
        _spec(study, "data: data.csv\n")


def test_missing_data_file_names_line_and_near_file(study: Study) -> None:
    with pytest.raises(SpecError, match=r"line 1: data file 'dta.csv' does not exist") as err:
        _spec(study, MINIMAL_SPEC.replace("data: data.csv", "data: dta.csv"))
    assert "did you mean 'data.csv'?" in err.value.render()


def test_glob_without_match_is_an_error(study: Study) -> None:
    with pytest.raises(SpecError, match=r"the pattern 'round_\*.csv' matches no file"):
        _spec(study, MINIMAL_SPEC.replace("data: data.csv", "data: round_*.csv"))


def test_list_of_files_and_glob_resolve_relative_to_the_spec(study: Study) -> None:
    sub = study.root / "sub"
    sub.mkdir()
    (sub / "b.csv").write_text(study.data.read_text())
    (sub / "a.csv").write_text(study.data.read_text())
    (sub / "spec.yaml").write_text(MINIMAL_SPEC.replace("data: data.csv", "data: '*.csv'"))
    spec = load_spec(sub / "spec.yaml")
    # source: glob matches are sorted by name
    assert [p.name for p in spec.data] == ["a.csv", "b.csv"]
    (sub / "spec.yaml").write_text(
        MINIMAL_SPEC.replace("data: data.csv", "data: [b.csv, ../data.csv]")
    )
    spec = load_spec(sub / "spec.yaml")
    assert spec.data == ((sub / "b.csv").resolve(), study.data.resolve())


def test_file_listed_twice_is_refused(study: Study) -> None:
    with pytest.raises(SpecError, match=r"'data.csv' is named twice in 'data'"):
        _spec(study, MINIMAL_SPEC.replace("data: data.csv", "data: [data.csv, ./data.csv]"))


def test_invalid_yaml_names_the_line(study: Study) -> None:
    text = "data: data.csv\ncolumns:\n  outcome: y\n take_up: [oops\n"
    with pytest.raises(SpecError, match=r"line \d+: not valid YAML"):
        _spec(study, text)


def test_tab_indentation_gets_a_hint(study: Study) -> None:
    with pytest.raises(SpecError, match=r"not valid YAML") as err:
        _spec(study, "data: data.csv\ncolumns:\n\toutcome: y\n")
    assert "tabs" in err.value.render()


def test_duplicate_key_is_refused_with_both_lines(study: Study) -> None:
    with pytest.raises(SpecError, match=r"line 7: key 'data' appears twice \(lines 1 and 7\)"):
        _spec(study, MINIMAL_SPEC + "data: other.csv\n")


def test_empty_spec_is_refused(study: Study) -> None:
    with pytest.raises(SpecError, match=r"the spec is empty"):
        _spec(study, "# nothing here\n")


def test_one_column_in_two_roles_is_refused(study: Study) -> None:
    text = MINIMAL_SPEC.replace("take_up: take_up", "take_up: offer")
    with pytest.raises(SpecError, match=r"column 'offer' is used both as take_up and as offer"):
        _spec(study, text)


def test_cluster_variance_needs_a_cluster_column(study: Study) -> None:
    with pytest.raises(SpecError, match=r"line 8: variance 'cluster' needs a cluster column"):
        _spec(study, MINIMAL_SPEC + "inference:\n  variance: cluster\n")


def test_offer_probability_mapping_values_must_be_numbers(study: Study) -> None:
    text = MINIMAL_SPEC + "design:\n  offer_probability:\n    north: 0.3\n    south: high\n"
    with pytest.raises(SpecError, match=r"line 10: offer probability of stratum 'south' is "
                       r"str 'high'; it must be a number"):
        _spec(study, text)


def test_offer_probability_forms(study: Study) -> None:
    spec = _spec(study, MINIMAL_SPEC + "design:\n  offer_probability: design_p\n")
    # source: issue 4, offer_probability may be a column name
    assert (spec.offer_probability.source, spec.offer_probability.column) == ("column", "design_p")
    spec = _spec(study, MINIMAL_SPEC + "design:\n  offer_probability: {3: 0.25, b: 0.5}\n")
    assert spec.offer_probability.by_stratum == (("3", 0.25), ("b", 0.5))
    with pytest.raises(SpecError, match=r"must be 'estimated', a column name or a mapping"):
        _spec(study, MINIMAL_SPEC + "design:\n  offer_probability: 0.5\n")


def test_drop_incomplete_rows_must_be_boolean(study: Study) -> None:
    with pytest.raises(SpecError, match=r"'missing.drop_incomplete_rows' must be true or false"):
        _spec(study, MINIMAL_SPEC + "missing:\n  drop_incomplete_rows: sometimes\n")


def test_spec_errors_exit_2_on_the_command_line(study: Study, invoke) -> None:
    study.write_spec(MINIMAL_SPEC.replace("  stratum: site", "  stratam: site"))
    for command in ("run", "check"):
        result = invoke(command, study.spec)
        # source: issue 4 exit codes (2 = usage or spec error)
        assert_clean_failure(
            result, 2, "spec.yaml, line 6: unknown key 'stratam'", "did you mean 'stratum'?"
        )
    assert not (study.root / "strativ_out").exists()


def test_missing_spec_file_is_a_usage_error(tmp_path: Path, invoke) -> None:
    result = invoke("run", tmp_path / "absent.yaml")
    # source: issue 4 exit codes (2 = usage error), typer's path check
    assert result.exit_code == 2
    assert "Invalid value for 'SPEC'" in result.output and "Traceback" not in result.output


def test_a_mapping_probability_outside_0_1_is_refused_by_the_core_at_its_spec_line(
        study: Study, invoke) -> None:
    study.write_spec(MINIMAL_SPEC + "design:\n  offer_probability:\n    north: 0.3\n"
                     "    south: 1.5\n    east: 0.7\n    west: 0.5\n")
    for command in ("check", "run"):
        result = invoke(command, study.spec, *(["--out", study.out] if command == "run" else []))
        # source: spec text above, 'south: 1.5' is on line 10; the range rule is the core's
        assert_clean_failure(result, 2, "spec.yaml, line 10: design offer probability refused: "
                             "stratum 'south' has probability 1.5")
    assert not study.out.exists()


def test_clusters_with_independent_offers_are_refused_under_the_cluster_form(
        study: Study) -> None:
    text = MINIMAL_SPEC + "  cluster: unit\ndesign:\n  assignment: independent\n"
    # source: issue 7, a cluster column turns 'stratified' into the cluster form, which
    # assumes whole clusters offered as blocks; spec text above, 'assignment' on line 9
    with pytest.raises(SpecError, match=r"line 9: assignment 'independent' cannot be combined "
                       r"with the cluster column 'unit' under variance 'stratified'"):
        _spec(study, text)

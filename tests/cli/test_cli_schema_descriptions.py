"""results.schema.json tells an analyst what every field is: each property schema carries a
description, and every key of the results.json of a real run is a described property."""

from __future__ import annotations

import csv
import json
from collections.abc import Iterator
from pathlib import Path
from typing import Any

import jsonschema
import pytest
from cli_support import DEMO_SPEC, ENV, REPO
from typer.testing import CliRunner

from strativ.cli.app import app
from strativ.cli.results import load_schema

BRANCHES = ("oneOf", "anyOf", "allOf")

# The demo rows with each lottery round as a second stratum column and a design probability
# column, so that the optional parts of results.json appear (see _variant_rows).
VARIANT_SPEC = """\
title: Insulation lottery demo by district and round (invented data)
data: rounds.csv
columns:
  outcome: [gas_therms, behind_on_bills]
  take_up: retrofitted
  offer: won_lottery
  stratum: [district, round]
design:
  offer_probability: design_probability
missing:
  drop_incomplete_rows: true
reading:
  delimiter: ';'
  decimal: ','
  codes:
    offer: {won: 1, lost: 0}
    take_up: {'yes': 1, 'no': 0}
sensitivity:
  direct_effect: [-50, 50]
  defier_share: [0.01, 0.05]
inference:
  randomization: {draws: 99, seed: 3}
"""


def _described(node: Any) -> bool:
    return isinstance(node, dict) and isinstance(node.get("description"), str) \
        and node["description"].strip() != ""


def _missing_descriptions(node: dict[str, Any], path: str,
                          inherited: frozenset[str] = frozenset()) -> Iterator[str]:
    """Yield the path of every property schema, object-like array item and $defs entry under
    `node` that has no description.

    A branch of oneOf/anyOf/allOf may restate a property of the object it sits in to narrow
    it (the confidence set's shapes); such a restatement shares the described property's
    meaning, and only names in `inherited` (the enclosing object's described properties)
    qualify.
    """
    properties = node.get("properties", {})
    for name, sub in properties.items():
        if not (_described(sub) or name in inherited):
            yield f"{path}.properties.{name}"
        yield from _missing_descriptions(sub, f"{path}.properties.{name}")
    extra = node.get("additionalProperties")
    if isinstance(extra, dict):
        if not _described(extra):
            yield f"{path}.additionalProperties"
        yield from _missing_descriptions(extra, f"{path}.additionalProperties")
    items = node.get("items")
    if isinstance(items, dict):
        if (items.get("type") == "object" or "properties" in items) and not _described(items):
            yield f"{path}.items"
        yield from _missing_descriptions(items, f"{path}.items")
    for name, sub in node.get("$defs", {}).items():
        if not _described(sub):
            yield f"{path}.$defs.{name}"
        yield from _missing_descriptions(sub, f"{path}.$defs.{name}")
    narrowed = frozenset(name for name, sub in properties.items() if _described(sub))
    for keyword in BRANCHES:
        for i, branch in enumerate(node.get(keyword, [])):
            yield from _missing_descriptions(branch, f"{path}.{keyword}[{i}]", narrowed)


def _declared(node: dict[str, Any], path: str) -> Iterator[str]:
    """Yield the path of every property the schema declares, restatements in branches aside."""
    for name, sub in node.get("properties", {}).items():
        yield f"{path}.properties.{name}"
        yield from _declared(sub, f"{path}.properties.{name}")
    for key in ("additionalProperties", "items"):
        if isinstance(node.get(key), dict):
            yield from _declared(node[key], f"{path}.{key}")
    for name, sub in node.get("$defs", {}).items():
        yield from _declared(sub, f"{path}.$defs.{name}")
    for keyword in BRANCHES:
        for i, branch in enumerate(node.get(keyword, [])):
            if "properties" not in node:
                yield from _declared(branch, f"{path}.{keyword}[{i}]")


def _location(schema: dict[str, Any], node: dict[str, Any], path: str) -> tuple[dict, str]:
    """Follow ``$ref`` (only local ``#/$defs/...`` references occur) to the schema it names;
    return that schema and its path."""
    while "$ref" in node:
        ref = node["$ref"]
        assert ref.startswith("#/$defs/"), ref
        node, path = schema["$defs"][ref.removeprefix("#/$defs/")], "#" + ref[1:].replace("/", ".")
    return node, path


def _branch_for(schema: dict[str, Any], node: dict[str, Any], path: str,
                value: Any) -> tuple[dict, str]:
    """For a schema of alternatives without its own properties or items, the branch that
    `value` is valid against (the first, when several are)."""
    node, path = _location(schema, node, path)
    if "properties" in node or "items" in node:
        return node, path
    for keyword in BRANCHES:
        for i, branch in enumerate(node.get(keyword, [])):
            alone = {"$defs": schema["$defs"], **branch}
            if jsonschema.Draft202012Validator(alone).is_valid(value):
                return _branch_for(schema, branch, f"{path}.{keyword}[{i}]", value)
    return node, path


def _walk_document(schema: dict[str, Any], node: dict[str, Any], path: str, value: Any,
                   where: str, seen: set[str]) -> Iterator[str]:
    """Yield `where` for every key of `value` that the schema does not declare with a
    description; add the schema path of every property reached to `seen`."""
    node, path = _branch_for(schema, node, path, value)
    if isinstance(value, dict):
        properties = node.get("properties", {})
        for key, item in value.items():
            if key in properties:
                sub, sub_path = properties[key], f"{path}.properties.{key}"
            elif isinstance(node.get("additionalProperties"), dict):
                sub, sub_path = node["additionalProperties"], f"{path}.additionalProperties"
            else:
                yield f"{where}.{key} (not declared)"
                continue
            seen.add(sub_path)
            if not _described(sub):
                yield f"{where}.{key} (no description)"
            yield from _walk_document(schema, sub, sub_path, item, f"{where}.{key}", seen)
    elif isinstance(value, list) and isinstance(node.get("items"), dict):
        for i, item in enumerate(value):
            yield from _walk_document(schema, node["items"], f"{path}.items", item,
                                      f"{where}[{i}]", seen)


def _variant_rows() -> list[dict[str, Any]]:
    """The demo rows of all three rounds with a ``round`` column and each district's realized
    offer share (two decimals) as ``design_probability``, written as a semicolon export with
    decimal commas and worded offer and take-up codes; one offer left empty (a dropped
    row), every 97th outcome left empty (attrition), every unit of Lakeshore in round 2
    offered (an excluded stratum) and take-up flipped in Millbrook round 3 (a negative first
    stage)."""
    rows = []
    for path in sorted((REPO / "demo_data").glob("round_*.csv")):
        with path.open(newline="", encoding="utf-8") as handle:
            for row in csv.DictReader(handle):
                rows.append({**row, "round": int(path.stem.removeprefix("round_"))})
    counts: dict[str, list[int]] = {}
    for row in rows:
        tally = counts.setdefault(row["district"], [0, 0])
        tally[0] += 1
        tally[1] += int(row["won_lottery"])
    for i, row in enumerate(rows):
        n, offered = counts[row["district"]]
        row["design_probability"] = round(offered / n, 2)
        if (row["district"], row["round"]) == ("Lakeshore", 2):
            row["won_lottery"] = "1"
        if (row["district"], row["round"]) == ("Millbrook", 3):
            row["retrofitted"] = str(1 - int(row["retrofitted"]))
        if i % 97 == 0:
            row["gas_therms"] = ""
    rows[5]["won_lottery"] = ""
    for row in rows:  # a semicolon export with decimal commas and worded codes
        row["gas_therms"] = str(row["gas_therms"]).replace(".", ",")
        row["design_probability"] = str(row["design_probability"]).replace(".", ",")
        row["won_lottery"] = {"1": "won", "0": "lost", "": ""}[row["won_lottery"]]
        row["retrofitted"] = {"1": "yes", "0": "no"}[row["retrofitted"]]
    return rows


def _run(spec: Path, out: Path, *extra: str) -> dict[str, Any]:
    result = CliRunner().invoke(app, ["run", str(spec), "--out", str(out), *extra], env=ENV)
    assert result.exit_code == 0, result.output
    return json.loads((out / "results.json").read_text(encoding="utf-8"))


@pytest.fixture(scope="module")
def documents(tmp_path_factory: pytest.TempPathFactory) -> dict[str, dict[str, Any]]:
    """results.json of the demo spec and of the demo rows cut by district and round."""
    root = tmp_path_factory.mktemp("described")
    rows = _variant_rows()
    with (root / "rounds.csv").open("w", newline="", encoding="utf-8") as handle:
        writer = csv.DictWriter(handle, fieldnames=list(rows[0]), delimiter=";")
        writer.writeheader()
        writer.writerows(rows)
    (root / "rounds.yaml").write_text(VARIANT_SPEC, encoding="utf-8")
    locked = CliRunner().invoke(app, ["lock", str(root / "rounds.yaml")], env=ENV)
    assert locked.exit_code == 0, locked.output  # the run then reports against the plan
    # the demo with its rounds pooled into district strata, blinded: the offer-share test and
    # the blinding record are filled
    pooled = DEMO_SPEC.read_text(encoding="utf-8").replace(
        "../demo_data/", f"{DEMO_SPEC.parent.parent / 'demo_data'}/") + "waves:\n  pool: true\n" \
        "planning:\n  target_effect: {gas_therms: -5}\n"
    (root / "pooled.yaml").write_text(pooled, encoding="utf-8")
    return {"demo": _run(DEMO_SPEC, root / "demo_out"),
            "rounds": _run(root / "rounds.yaml", root / "rounds_out"),
            "pooled": _run(root / "pooled.yaml", root / "pooled_out", "--blind")}


def test_every_property_of_the_schema_has_a_description() -> None:
    schema = load_schema()
    jsonschema.Draft202012Validator.check_schema(schema)
    # by construction: the walk visits properties, additionalProperties, items, $defs and
    # oneOf/anyOf/allOf branches, so no property schema escapes it
    assert _described(schema)
    assert list(_missing_descriptions(schema, "#")) == []


def test_the_walk_finds_a_missing_description() -> None:
    schema = load_schema()
    del schema["$defs"]["estimate"]["properties"]["itt"]["description"]
    schema["$defs"]["confidence_set"]["oneOf"][0]["properties"]["extra"] = {"type": "null"}
    # by construction: the two entries just stripped of their description, and no other
    assert sorted(_missing_descriptions(schema, "#")) == [
        "#.$defs.confidence_set.oneOf[0].properties.extra",
        "#.$defs.estimate.properties.itt",
    ]


@pytest.mark.parametrize("name", ["demo", "rounds", "pooled"])
def test_every_key_of_a_real_results_file_is_described(documents, name: str) -> None:
    schema = load_schema()
    doc = documents[name]
    jsonschema.Draft202012Validator(schema).validate(doc)
    # by construction: the walk follows the document key by key into the property, item or
    # branch that validates it, so every key present meets the schema entry that governs it
    assert list(_walk_document(schema, schema, "#", doc, "results", set())) == []


def test_the_document_walk_finds_an_undeclared_or_undescribed_key(documents) -> None:
    schema = load_schema()
    del schema["$defs"]["stratum"]["properties"]["itt"]["description"]
    doc = json.loads(json.dumps(documents["demo"]))
    doc["estimates"][1]["extra"] = 1.0
    jsonschema.Draft202012Validator(schema).validate(doc)
    found = list(_walk_document(schema, schema, "#", doc, "results", set()))
    # by construction: an estimate may carry keys the schema does not list, so only the
    # walk sees the added key; the stripped description shows on every stratum row
    assert found[0] == "results.estimates[1].extra (not declared)"
    assert found[1:] == [f"results.strata[{i}].itt (no description)"
                         for i in range(len(doc["strata"]))]


def test_the_real_results_files_reach_every_declared_property(documents) -> None:
    schema = load_schema()
    seen: set[str] = set()
    for doc in documents.values():
        list(_walk_document(schema, schema, "#", doc, "results", seen))
    # by construction: the two runs write every optional part (design probabilities, several
    # stratum columns, dropped rows, attrition, an excluded stratum, a negative first
    # stage), so the key check above covered the whole layout
    assert sorted(set(_declared(schema, "#")) - seen) == []
    rounds = documents["rounds"]
    # by construction: _variant_rows leaves one offer empty, empties outcomes, offers all
    # of Lakeshore round 2 and flips take-up in Millbrook round 3
    assert rounds["rows"]["dropped_by_column"] == [{"column": "won_lottery", "rows": 1,
                                                    "offered": None, "not_offered": None}]
    assert rounds["attrition"] and rounds["exclusions"] and rounds["offer_probability"]
    assert rounds["comparisons"][0]["offer_counts"] is not None
    assert [r["label"] for r in rounds["comparisons"][0]["negative_first_stage"]] == \
        ["Millbrook / 3"]

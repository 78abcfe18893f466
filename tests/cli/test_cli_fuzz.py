"""Property-based fuzzing of the spec and the reader: whatever the bytes, strativ answers with
one of its own errors (exit 2 or 3) or a result, never an uncaught exception."""

from __future__ import annotations

import tempfile
from pathlib import Path

from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from strativ.cli.errors import CliError
from strativ.cli.grouped import group_data
from strativ.cli.spec import load_spec

KEYS = ["data", "columns", "outcome", "take_up", "offer", "stratum", "design", "estimators",
        "inference", "variance", "level", "waves", "pool", "column", "output", "dir",
        "reading", "codes", "missing", "title", "planning", "sensitivity"]
SCALARS = st.one_of(st.none(), st.booleans(), st.integers(-10, 10**6),
                    st.floats(allow_nan=True, allow_infinity=True),
                    st.text(max_size=30), st.sampled_from(["data.csv", "y", "d", "z", "s",
                                                           "*.csv", "estimated", "block"]))
VALUES = st.recursive(SCALARS, lambda inner: st.one_of(
    st.lists(inner, max_size=4), st.dictionaries(st.sampled_from(KEYS), inner, max_size=4)),
    max_leaves=12)
SETTINGS = settings(max_examples=60, deadline=None,
                    suppress_health_check=[HealthCheck.function_scoped_fixture,
                                           HealthCheck.too_slow])
GOOD = "s,z,d,y\n" + "".join(f"s{i % 3},{(i // 3) % 2},{(i // 3) % 2},{i * 0.5}\n"
                             for i in range(36))


def _load(spec_text: bytes, data: bytes = GOOD.encode()) -> None:
    with tempfile.TemporaryDirectory() as folder:
        root = Path(folder)
        (root / "spec.yaml").write_bytes(spec_text)
        (root / "data.csv").write_bytes(data)
        try:
            group_data(load_spec(root / "spec.yaml"))
        except CliError:
            pass  # a located message for the user: the property holds


@SETTINGS
@given(st.dictionaries(st.sampled_from(KEYS), VALUES, max_size=6))
def test_any_yaml_shape_is_a_spec_error_or_a_spec(shape) -> None:
    import yaml

    _load(yaml.safe_dump(shape, allow_unicode=True).encode("utf-8"))


@SETTINGS
@given(st.binary(max_size=300))
def test_any_bytes_as_a_spec_are_a_spec_error(raw) -> None:
    _load(raw)


SPEC = b"data: data.csv\ncolumns: {outcome: y, take_up: d, offer: z, stratum: s}\n"


@SETTINGS
@given(st.binary(max_size=400))
def test_any_bytes_as_data_are_a_data_error_or_a_table(raw) -> None:
    _load(SPEC, raw)


@SETTINGS
@given(st.lists(st.lists(st.sampled_from(["0", "1", "", "s1", "2", "x", "1e309", "-0",
                                          "\"", ",", " 1", "nan", "\u00e9", "\x00"]),
                         min_size=3, max_size=5), max_size=30))
def test_any_csv_cells_are_a_data_error_or_a_table(rows) -> None:
    text = "s,z,d,y\n" + "\n".join(",".join(r) for r in rows) + "\n"
    _load(SPEC, text.encode("utf-8"))

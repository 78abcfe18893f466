"""Shared constants and comparisons of the estimator-core tests."""

from __future__ import annotations

from typing import Any

ESTIMATORS = ("fixed_effects", "weighted", "interacted")
# (variance, assignment, sampling); the robust flavours ignore assignment and sampling.
FLAVOURS = (
    ("stratified", "block", "fixed"),
    ("stratified", "block", "random"),
    ("stratified", "independent", "fixed"),
    ("stratified", "independent", "random"),
    ("robust", "block", "random"),
    ("robust_scaled", "block", "random"),
)
FLAVOUR_IDS = [f"{v}-{a}-{s}" for v, a, s in FLAVOURS]


def assert_close(
    actual: Any, expected: Any, *, rtol: float = 1e-10, floor: float = 1.0, path: str = ""
) -> None:
    """Recursive comparison of to_dict() output: floats to rtol * max(|expected|, floor)."""
    if isinstance(expected, dict):
        assert set(actual) == set(expected), path
        for key in expected:
            assert_close(actual[key], expected[key], rtol=rtol, floor=floor, path=f"{path}.{key}")
    elif isinstance(expected, list):
        assert len(actual) == len(expected), path
        for i, (a, e) in enumerate(zip(actual, expected, strict=True)):
            assert_close(a, e, rtol=rtol, floor=floor, path=f"{path}[{i}]")
    elif isinstance(expected, float):
        assert isinstance(actual, float), (path, actual, expected)
        assert abs(actual - expected) <= rtol * max(abs(expected), floor), (path, actual, expected)
    else:
        assert actual == expected, (path, actual, expected)

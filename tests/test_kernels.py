"""The compiled single-pass kernel and the numpy kernel build the same cell table."""

from __future__ import annotations

import numpy as np
import pytest

from strativ.estimators import InputError, build_cells, fit_all, kernels

pytestmark = pytest.mark.skipif(not kernels.fused_available(), reason="numba not installed")

SEED = 11


def _rows(n: int = 5000, level: float = 0.0):
    rng = np.random.default_rng(SEED)
    s = rng.integers(0, 12, n) * 3 + 100  # integer labels with gaps
    z = rng.integers(0, 2, n)
    d = np.where(rng.random(n) < 0.7, z, rng.integers(0, 2, n))
    y = level + rng.normal(size=n) + 2.0 * d
    return y, d, z, s


def _both(monkeypatch, *arrays):
    monkeypatch.setattr("strativ.estimators.cells.FUSED_MIN_ROWS", 1)
    fused = build_cells(*arrays)
    monkeypatch.setattr("strativ.estimators.cells.FUSED_MIN_ROWS", 10**12)
    plain = build_cells(*arrays)
    return fused, plain


def test_fused_and_numpy_kernels_give_the_same_cells(monkeypatch):
    # common practice, no source: two exact algorithms for the same sums agree to rounding
    fused, plain = _both(monkeypatch, *_rows())
    assert fused.labels == plain.labels
    np.testing.assert_array_equal(fused.n, plain.n)
    for name in ("mean_outcome", "mean_take_up", "ss_outcome", "ss_cross", "ss_take_up"):
        np.testing.assert_allclose(getattr(fused, name), getattr(plain, name), rtol=1e-12)


def test_fused_kernel_keeps_precision_at_a_large_mean(monkeypatch):
    # common practice, no source: shifted-data sums match sums of the shifted outcome
    y, d, z, s = _rows(level=1e9)
    fused, _ = _both(monkeypatch, y, d, z, s)
    monkeypatch.setattr("strativ.estimators.cells.FUSED_MIN_ROWS", 1)
    shifted = build_cells(y - 1e9, d, z, s)
    np.testing.assert_allclose(fused.ss_outcome, shifted.ss_outcome, rtol=1e-6)
    a, b = fit_all(fused), fit_all(shifted)
    for x, y_ in zip(a.estimates, b.estimates, strict=True):
        assert x.estimate == pytest.approx(y_.estimate, abs=1e-6)
        assert x.std_error == pytest.approx(y_.std_error, rel=1e-6)


def test_fused_kernel_reports_bad_codes_with_the_same_error(monkeypatch):
    # common practice, no source: the compiled pass defers to the checked path on bad input
    y, d, z, s = _rows()
    z = z.astype(float)
    z[17] = 2.0
    monkeypatch.setattr("strativ.estimators.cells.FUSED_MIN_ROWS", 1)
    with pytest.raises(InputError, match=r"offer: expected only 0 and 1, found 2\.0 at index 17"):
        build_cells(y, d, z, s)
    y[3] = np.nan
    z[17] = 1.0
    with pytest.raises(InputError, match="non-finite value nan at index 3"):
        build_cells(y, d, z, s)


def test_boolean_codes_work_in_the_fused_kernel(monkeypatch):
    # common practice, no source: true/false equals 1/0
    y, d, z, s = _rows()
    fused, plain = _both(monkeypatch, y, d.astype(bool), z.astype(bool), s)
    np.testing.assert_allclose(fused.ss_cross, plain.ss_cross, rtol=1e-12)


def test_integer_labels_are_coded_in_sorted_order():
    # common practice, no source
    codes, labels = kernels.integer_codes(np.array([7, 3, 7, 11, 3]))
    assert labels == (3, 7, 11)
    assert codes.tolist() == [1, 0, 1, 2, 0]
    assert kernels.integer_codes(np.array([0, 10**9])) is None

"""Row-level kernels: unit arrays to per-(stratum, offer, take-up) sums. No error checking.

Two implementations give the same table: a numpy one (two passes of ``np.bincount``) and a
fused single pass compiled with numba, used for large inputs where the passes dominate. The
fused pass shifts each outcome by the first value seen in its stratum (the shifted-data
algorithm), so sums of squares keep their precision at large means, and checks the codes and
finiteness on the way so the arrays are read once.
"""

from __future__ import annotations

from typing import Any

import numpy as np

try:  # numba is a declared dependency; the numpy path keeps working without it
    import numba
except ImportError:  # pragma: no cover - exercised only where numba is missing
    numba = None

__all__ = [
    "FUSED_MIN_ROWS",
    "fused_available",
    "integer_codes",
    "integer_lookup",
    "fine_cell_sums",
    "fine_cell_sums_fused",
]

FUSED_MIN_ROWS = 1_000_000
"""Row count from which `build_cells` uses the fused kernel (below it, compiling costs more
than it saves)."""


def fused_available() -> bool:
    """Whether the compiled single-pass kernel can be used."""
    return numba is not None


def integer_codes(values: np.ndarray) -> tuple[np.ndarray, tuple[Any, ...]] | None:
    """Sorted codes for integer labels with a modest span, without hashing.

    Returns None when the labels are not integers or span more than ``4 n + 1024`` values
    (the caller then factorizes by hashing).
    """
    if values.dtype.kind not in "iu" or values.size == 0:
        return None
    lo, hi = int(values.min()), int(values.max())
    span = hi - lo + 1
    if span > 4 * values.size + 1024:
        return None
    offset = values - lo
    present = np.bincount(offset, minlength=span) > 0
    labels = tuple(int(v) for v in np.flatnonzero(present) + lo)
    if present.all():
        return offset.astype(np.int64, copy=False), labels
    lookup = np.cumsum(present) - 1
    return lookup[offset].astype(np.int64), labels


def fine_cell_sums(
    outcome: np.ndarray, fine: np.ndarray, size: int
) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Count, mean and centred sum of squares of the outcome per fine cell (numpy).

    Two passes: a rough mean per cell, then sums of the deviations from it; the second pass
    also corrects the rough mean.
    """
    count = np.bincount(fine, minlength=size).astype(np.int64)
    safe = np.maximum(count, 1)
    rough = np.bincount(fine, weights=outcome, minlength=size) / safe
    shifted = outcome - rough[fine]
    first = np.bincount(fine, weights=shifted, minlength=size)
    second = np.bincount(fine, weights=shifted * shifted, minlength=size)
    mean = rough + first / safe
    ss = np.maximum(second - first * first / safe, 0.0)
    return count, mean, ss


def _span_pass(values):  # pragma: no cover - compiled
    lo = values[0]
    hi = values[0]
    for v in values:
        if v < lo:
            lo = v
        elif v > hi:
            hi = v
    return lo, hi


def _presence_pass(values, lo, span):  # pragma: no cover - compiled
    present = np.zeros(span, np.bool_)
    for v in values:
        present[v - lo] = True
    return present


def _fused_pass(outcome, take_up, offer, raw, lookup, lo, n_strata):  # pragma: no cover
    # one interleaved accumulator row per fine cell: count, sum and sum of squares of the
    # outcome shifted by the first value seen in its stratum
    acc = np.zeros((4 * n_strata, 3))
    shift = np.full(n_strata, np.nan)
    bad = 0
    for i in range(outcome.size):
        y = outcome[i]
        z = int(offer[i])
        d = int(take_up[i])
        bad |= (z | d) & ~1
        k = lookup[raw[i] - lo]
        centre = shift[k]
        if centre != centre:
            shift[k] = y
            centre = y
        v = y - centre
        c = k * 4 + z * 2 + d
        acc[c, 0] += 1.0
        acc[c, 1] += v
        acc[c, 2] += v * v
    return acc, shift, bad


if numba is not None:
    _jit = numba.njit(cache=True, nogil=True)
    _span, _presence, _fused = _jit(_span_pass), _jit(_presence_pass), _jit(_fused_pass)


def integer_lookup(values: np.ndarray) -> tuple[np.ndarray, int, tuple[Any, ...]] | None:
    """A lookup from integer label minus its minimum to a sorted code, in compiled passes.

    Returns ``(lookup, lo, labels)``, or None when the labels are not integers or span more
    than ``4 n + 1024`` values.
    """
    if values.dtype.kind not in "iu" or values.size == 0:
        return None
    lo, hi = (int(v) for v in _span(values))
    span = hi - lo + 1
    if span > 4 * values.size + 1024:
        return None
    present = _presence(values, values.dtype.type(lo), span)
    lookup = (np.cumsum(present) - 1).astype(np.int64)
    labels = tuple(int(v) for v in np.flatnonzero(present) + lo)
    return lookup, lo, labels


def fine_cell_sums_fused(
    outcome: np.ndarray,
    take_up: np.ndarray,
    offer: np.ndarray,
    raw: np.ndarray,
    lookup: np.ndarray,
    lo: int,
    n_strata: int,
) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray] | None:
    """Count, mean relative to the stratum shift, centred sum of squares per fine cell, and
    the per-stratum shift, in one compiled pass.

    ``raw`` holds integer stratum values whose code is ``lookup[raw - lo]`` (for codes
    already made, pass ``lookup = arange(K)`` and ``lo = 0``); ``take_up`` and ``offer``
    must be integer arrays. Returns None when a row has a non-finite outcome or a code other
    than 0/1, so the caller can run its checks and raise a precise error.
    """
    acc, shift, bad = _fused(outcome, take_up, offer, raw, lookup, raw.dtype.type(lo), n_strata)
    # a non-finite outcome leaves a non-finite sum in its cell (or a NaN shift)
    if bad or not np.isfinite(acc).all():
        return None
    count = acc[:, 0].astype(np.int64)
    first, second = acc[:, 1], acc[:, 2]
    safe = np.maximum(count, 1)
    mean = np.where(count > 0, first / safe, 0.0)  # relative to the stratum's shift
    ss = np.maximum(second - first * first / safe, 0.0)
    return count, mean, ss, np.nan_to_num(shift)

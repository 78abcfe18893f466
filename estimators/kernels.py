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


def _fused_pass(outcome, take_up, offer, codes, n_strata):  # pragma: no cover - compiled
    size = 4 * n_strata
    count = np.zeros(size, np.int64)
    first = np.zeros(size)
    second = np.zeros(size)
    shift = np.zeros(n_strata)
    seen = np.zeros(n_strata, np.bool_)
    for i in range(outcome.size):
        y = outcome[i]
        z = offer[i]
        d = take_up[i]
        if not (np.isfinite(y) and (z == 0 or z == 1) and (d == 0 or d == 1)):
            return count, first, second, shift, i
        k = codes[i]
        if not seen[k]:
            seen[k] = True
            shift[k] = y
        v = y - shift[k]
        c = k * 4 + int(z) * 2 + int(d)
        count[c] += 1
        first[c] += v
        second[c] += v * v
    return count, first, second, shift, -1


_fused = numba.njit(cache=True, nogil=True)(_fused_pass) if numba is not None else None


def fine_cell_sums_fused(
    outcome: np.ndarray,
    take_up: np.ndarray,
    offer: np.ndarray,
    codes: np.ndarray,
    n_strata: int,
) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray] | None:
    """Count, mean relative to the stratum shift, centred sum of squares per fine cell, and
    the per-stratum shift, in one compiled pass.

    Returns None when a row has a non-finite outcome or a code other than 0/1, so the
    caller can run its checks and raise a precise error.
    """
    count, first, second, shift, bad = _fused(outcome, take_up, offer, codes, n_strata)
    if bad >= 0:
        return None
    safe = np.maximum(count, 1)
    mean = np.where(count > 0, first / safe, 0.0)  # relative to the stratum's shift
    ss = np.maximum(second - first * first / safe, 0.0)
    return count, mean, ss, shift

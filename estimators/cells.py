"""Cell table: the sufficient statistics of every estimator (METHODS.md §2).

A cell is (stratum, offer). Per cell the table keeps the unit count, the mean outcome and mean
take-up, and the centred within-cell sums of squares and cross-products of (outcome, take-up).
Every estimate and variance in this package is O(K) arithmetic on these arrays.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any

import numpy as np
import pandas as pd

from .errors import InputError
from .kernels import (
    FUSED_MIN_ROWS,
    fine_cell_sums,
    fine_cell_sums_fused,
    fused_available,
    integer_codes,
    integer_lookup,
)

__all__ = ["CellTable", "ClusterSums", "build_cells", "cells_from_frame"]

FRAME_COLUMNS = (
    "stratum",
    "offer",
    "n",
    "sum_outcome",
    "sum_take_up",
    "sum_outcome_sq",
    "sum_take_up_sq",
    "sum_cross",
)


@dataclass(frozen=True, slots=True, eq=False)
class ClusterSums:
    """Cluster-level sums of squares per cell, for the cluster variance (METHODS.md §4)."""

    count: np.ndarray
    """Number of clusters per cell, shape (K, 2)."""
    q_outcome: np.ndarray
    """Sum over clusters of (cluster outcome total minus size times cell mean) squared, (K, 2)."""
    q_cross: np.ndarray
    """The matching cross-product of the outcome and take-up cluster deviations, (K, 2)."""
    q_take_up: np.ndarray
    """The matching sum of squared take-up cluster deviations, (K, 2)."""
    size_sq: np.ndarray
    """Sum over clusters of the squared cluster size, (K, 2)."""
    size_dev_outcome: np.ndarray
    """Sum over clusters of cluster size times the cluster's outcome deviation total, (K, 2);
    the cluster-robust sandwich needs it when cluster sizes differ."""
    size_dev_take_up: np.ndarray
    """The same for take-up, (K, 2)."""


@dataclass(frozen=True, slots=True, eq=False)
class CellTable:
    """Per-(stratum, offer) sufficient statistics.

    Column 0 of every (K, 2) array is the not-offered arm, column 1 the offered arm.
    """

    labels: tuple[Any, ...]
    """Stratum labels, as given (sorted when they can be sorted)."""
    n: np.ndarray
    """Unit counts, int64 (K, 2)."""
    mean_outcome: np.ndarray
    """Mean outcome per cell (0 for an empty cell), (K, 2)."""
    mean_take_up: np.ndarray
    """Mean take-up per cell (0 for an empty cell), (K, 2)."""
    ss_outcome: np.ndarray
    """Centred within-cell sum of squared outcome deviations, (K, 2)."""
    ss_cross: np.ndarray
    """Centred within-cell sum of outcome-by-take-up deviation products, (K, 2)."""
    ss_take_up: np.ndarray
    """Centred within-cell sum of squared take-up deviations, (K, 2)."""
    clusters: ClusterSums | None = None
    """Cluster-level sums when the table was built with a cluster column."""

    @property
    def n_units(self) -> int:
        """Total number of units in the table."""
        return int(self.n.sum())

    @property
    def n_strata(self) -> int:
        """Number of strata in the table (including ones that will be excluded)."""
        return len(self.labels)


def _as_vector(values: Any, argument: str) -> np.ndarray:
    array = np.asarray(values)
    if array.ndim != 1:
        raise InputError(argument, f"expected a one-dimensional array, got shape {array.shape}.")
    return array


def _as_labels(values: Any, argument: str) -> np.ndarray:
    """Labels as given: numpy turns a list such as ["a", 1, 2.5] into strings; keep objects."""
    array = _as_vector(values, argument)
    if array.dtype.kind == "U" and not isinstance(values, np.ndarray):
        array = _as_vector(np.asarray(values, dtype=object), argument)
    return array


def _as_binary(values: Any, argument: str) -> np.ndarray:
    array = _as_vector(values, argument)
    if array.dtype == bool:
        return array.astype(np.int8)
    if not np.issubdtype(array.dtype, np.number):
        raise InputError(
            argument, f"expected 0/1 or true/false values, got dtype {array.dtype}; recode it."
        )
    bad = ~((array == 0) | (array == 1))
    if bad.any():
        rows = np.flatnonzero(bad)[:5]
        found = ", ".join(f"{array[i].item()!r} at index {i}" for i in rows)
        raise InputError(argument, f"expected only 0 and 1, found {found}; recode it to 0/1.")
    return array.astype(np.int8)


def _plain(value: Any) -> Any:
    """A numpy scalar as the Python value it holds, so messages show 'g1', not np.str_('g1')."""
    return value.item() if isinstance(value, np.generic) else value


def _factorize(values: np.ndarray, argument: str) -> tuple[np.ndarray, tuple[Any, ...]]:
    """Integer codes 0..K-1 and labels; labels sorted when sortable."""
    fast = integer_codes(values)
    if fast is not None:
        return fast
    try:
        codes, uniques = pd.factorize(values, sort=True)
    except TypeError:
        codes, uniques = pd.factorize(values, sort=False)
    if (codes < 0).any():
        row = int(np.flatnonzero(codes < 0)[0])
        raise InputError(argument, f"missing label at index {row}; every unit needs a {argument}.")
    labels = tuple(v.item() if isinstance(v, np.generic) else v for v in np.asarray(uniques))
    return codes.astype(np.int64), labels


OUTCOME_LIMIT = 1e150
"""Largest outcome magnitude accepted: beyond it sums of squares overflow."""


def _check_outcome(y: np.ndarray) -> None:
    finite = np.isfinite(y)
    if not finite.all():
        row = int(np.flatnonzero(~finite)[0])
        raise InputError(
            "outcome",
            f"non-finite value {float(y[row])!r} at index {row}; drop or impute it first.",
        )
    huge = np.abs(y) > OUTCOME_LIMIT
    if huge.any():
        row = int(np.flatnonzero(huge)[0])
        raise InputError(
            "outcome",
            f"value {float(y[row])!r} at index {row} is beyond +/-{OUTCOME_LIMIT:g}, where sums "
            "of squares overflow; rescale the outcome (for example to thousands).",
        )


def _fused_sums(
    y: np.ndarray,
    d: np.ndarray,
    z: np.ndarray,
    raw: np.ndarray,
    lookup: np.ndarray,
    lo: int,
    n_strata: int,
) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray] | None:
    """The compiled single pass; float codes are checked and converted first."""
    arrays = []
    for values, name in ((d, "take_up"), (z, "offer")):
        if values.dtype == bool:
            values = values.view(np.uint8)
        elif values.dtype.kind == "f":
            values = _as_binary(values, name)
        elif values.dtype.kind not in "iu":
            return None
        arrays.append(values)
    sums = fine_cell_sums_fused(y, arrays[0], arrays[1], raw, lookup, lo, n_strata)
    if sums is not None and (np.abs(sums[3]).max() > OUTCOME_LIMIT or sums[2].max() > 1e300):
        return None  # the checked path names the offending row
    return sums


def _cell_arrays_from_fine(
    count: np.ndarray, mean: np.ndarray, ss: np.ndarray, n_strata: int
) -> dict[str, np.ndarray]:
    """Combine (stratum, offer, take-up) cells into (stratum, offer) cells exactly."""
    count = count.reshape(n_strata, 2, 2)
    mean = mean.reshape(n_strata, 2, 2)
    ss = ss.reshape(n_strata, 2, 2)
    n0, n1 = count[..., 0], count[..., 1]
    n = n0 + n1
    safe = np.maximum(n, 1)
    gap = np.where((n0 > 0) & (n1 > 0), mean[..., 1] - mean[..., 0], 0.0)
    mix = n0 * n1 / safe
    mean_outcome = np.where(n > 0, (n0 * mean[..., 0] + n1 * mean[..., 1]) / safe, 0.0)
    return {
        "n": n.astype(np.int64),
        "mean_outcome": mean_outcome,
        "mean_take_up": n1 / safe,
        "ss_outcome": ss[..., 0] + ss[..., 1] + mix * gap * gap,
        "ss_cross": mix * gap,
        "ss_take_up": mix.astype(float),
    }


def cluster_sums_from_totals(
    codes: np.ndarray,
    cluster: np.ndarray,
    cell: np.ndarray,
    count: np.ndarray,
    dev_outcome: np.ndarray,
    dev_take_up: np.ndarray,
    n_cells: int,
    *,
    place: str,
) -> ClusterSums:
    """Cluster sums from per-record totals (a unit, or a group of units of one cluster).

    ``codes`` are the records' cluster codes, ``cell`` their (stratum, offer) cell,
    ``count`` their units and ``dev_*`` their deviation totals from the cell mean; ``place``
    names a record in the refusal, with ``{}`` for its position ("index {}"). Both the row
    route (`build_cells`) and the moment route (`cells_from_moments`) end here, so the
    nesting rule and the sums are written once.
    """
    n_clusters = int(codes.max()) + 1
    first_cell = np.full(n_clusters, -1, dtype=np.int64)
    first_cell[codes[::-1]] = cell[::-1]
    if (first_cell[codes] != cell).any():
        row = int(np.flatnonzero(first_cell[codes] != cell)[0])
        raise InputError(
            "cluster",
            f"cluster {_plain(cluster[row])!r} ({place.format(row)}) spans more than one "
            "(stratum, offer) cell; clusters must be nested in strata and offered as a whole.",
        )
    size = np.bincount(codes, weights=count, minlength=n_clusters)
    dev_y = np.bincount(codes, weights=dev_outcome, minlength=n_clusters)
    dev_d = np.bincount(codes, weights=dev_take_up, minlength=n_clusters)

    def per_cell(weights: np.ndarray | None) -> np.ndarray:
        return np.bincount(first_cell, weights=weights, minlength=n_cells).reshape(-1, 2)

    return ClusterSums(
        count=per_cell(None).astype(np.int64),
        q_outcome=per_cell(dev_y * dev_y),
        q_cross=per_cell(dev_y * dev_d),
        q_take_up=per_cell(dev_d * dev_d),
        size_sq=per_cell(size**2),
        size_dev_outcome=per_cell(size * dev_y),
        size_dev_take_up=per_cell(size * dev_d),
    )


def _cluster_sums(
    outcome: np.ndarray,
    take_up: np.ndarray,
    cell: np.ndarray,
    cluster: np.ndarray,
    arrays: dict[str, np.ndarray],
    n_cells: int,
) -> ClusterSums:
    codes, _ = _factorize(cluster, "cluster")
    mean_y = arrays["mean_outcome"].reshape(-1)[cell]
    mean_d = arrays["mean_take_up"].reshape(-1)[cell]
    return cluster_sums_from_totals(codes, cluster, cell, np.ones(cell.size), outcome - mean_y,
                                    take_up - mean_d, n_cells, place="index {}")


def build_cells(
    outcome: Any,
    take_up: Any,
    offer: Any,
    stratum: Any,
    *,
    cluster: Any | None = None,
) -> CellTable:
    """Build the (stratum, offer) cell table from unit-level arrays in one vectorised pass.

    Parameters
    ----------
    outcome : array-like of float, shape (n,)
        Outcome ``Y``; must be finite.
    take_up : array-like of {0, 1} or bool, shape (n,)
        Take-up ``D``.
    offer : array-like of {0, 1} or bool, shape (n,)
        Offer ``Z``.
    stratum : array-like of hashable, shape (n,)
        Randomization block of each unit; any hashable labels (kept for display).
    cluster : array-like of hashable, shape (n,), optional
        Unit of randomization when offers went to groups; clusters must be nested in
        (stratum, offer) cells.

    Returns
    -------
    CellTable
        Counts, means and centred within-cell sums of squares per (stratum, offer).

    Raises
    ------
    InputError
        When an array is not one-dimensional, lengths differ, the input is empty, the outcome
        has a non-finite value, take-up or offer is not 0/1, a stratum or cluster label is
        missing, or a cluster spans cells.

    Notes
    -----
    Within a (stratum, offer, take-up) cell the take-up is constant, so counts give every
    take-up moment; only the outcome needs sums. The outcome's sum of squares is taken
    around a first-pass cell mean, so a large common level (mean 1e9, spread 1) loses no
    precision. From ``kernels.FUSED_MIN_ROWS`` rows on (and without clusters) one compiled
    pass reads every array once, shifting each outcome by its stratum's first value; both
    paths give the same table. Integer stratum labels are coded without hashing.
    METHODS.md §2.

    Examples
    --------
    >>> cells = build_cells([1.0, 2.0, 3.0, 5.0], [0, 1, 0, 1], [0, 1, 0, 1], ["a"] * 4)
    >>> cells.n.tolist()
    [[2, 2]]
    """
    y = _as_vector(outcome, "outcome")
    d_raw = _as_vector(take_up, "take_up")
    z_raw = _as_vector(offer, "offer")
    s = _as_labels(stratum, "stratum")
    lengths = {"outcome": y.size, "take_up": d_raw.size, "offer": z_raw.size, "stratum": s.size}
    if cluster is not None:
        cluster = _as_labels(cluster, "cluster")
        lengths["cluster"] = cluster.size
    if len(set(lengths.values())) != 1:
        raise InputError("arrays", f"lengths differ: {lengths}; pass one value per unit.")
    if y.size == 0:
        raise InputError("arrays", "no units; pass at least one row.")
    if not np.issubdtype(y.dtype, np.number) or y.dtype == bool:
        raise InputError("outcome", f"expected numbers, got dtype {y.dtype}.")
    y = y.astype(np.float64, copy=False)
    sums = None
    if cluster is None and y.size >= FUSED_MIN_ROWS and fused_available():
        coded = integer_lookup(s)
        if coded is None:
            codes, labels = _factorize(s, "stratum")
            coded = (np.arange(len(labels)), 0, labels)
            raw = codes
        else:
            raw = s
        lookup, lo, labels = coded
        n_strata = len(labels)
        sums = _fused_sums(y, d_raw, z_raw, raw, lookup, lo, n_strata)
    if sums is None:
        codes, labels = _factorize(s, "stratum")
        n_strata = len(labels)
        d = _as_binary(d_raw, "take_up")
        z = _as_binary(z_raw, "offer")
        _check_outcome(y)
        cell = codes * 2 + z
        # centre on one value of each stratum (any will do), so no sum sees a large level
        first_row = np.full(n_strata, -1, dtype=np.int64)
        first_row[codes[::-1]] = np.arange(y.size - 1, -1, -1)
        centre = y[first_row]
        y = y - centre[codes]
        sums = (*fine_cell_sums(y, cell * 2 + d, 4 * n_strata), centre)
    *fine, centre = sums
    arrays = _cell_arrays_from_fine(*fine, n_strata)
    clusters = None
    if cluster is not None:
        clusters = _cluster_sums(y, d, cell, cluster, arrays, 2 * n_strata)
    arrays["mean_outcome"] = np.where(
        arrays["n"] > 0, arrays["mean_outcome"] + centre[:, None], 0.0
    )
    return CellTable(labels=labels, clusters=clusters, **arrays)


def cells_from_frame(frame: pd.DataFrame) -> CellTable:
    """Build a cell table from precomputed per-(stratum, offer) sums.

    Lets aggregation happen elsewhere (a database, another machine) and only the sums travel.

    Parameters
    ----------
    frame : pandas.DataFrame
        One row per (stratum, offer) with columns ``stratum``, ``offer`` (0/1), ``n``,
        ``sum_outcome``, ``sum_take_up``, ``sum_outcome_sq``, ``sum_take_up_sq`` and
        ``sum_cross`` (sum of outcome times take-up). A missing (stratum, offer) row means
        an empty cell.

    Returns
    -------
    CellTable
        The same table `build_cells` gives for the underlying rows (up to the precision of
        raw sums: centre the outcome before summing when its mean is large).

    Raises
    ------
    InputError
        When a column is missing, a (stratum, offer) pair repeats, offer is not 0/1, a count
        is negative or not whole, or the sums are inconsistent (negative centred variance).
    """
    missing = [c for c in FRAME_COLUMNS if c not in frame.columns]
    if missing:
        raise InputError("frame", f"missing columns {missing}; expected {list(FRAME_COLUMNS)}.")
    offer = _as_binary(frame["offer"].to_numpy(), "offer")
    codes, labels = _factorize(frame["stratum"].to_numpy(), "stratum")
    cell = codes * 2 + offer
    if np.unique(cell).size != cell.size:
        raise InputError("frame", "a (stratum, offer) pair appears more than once; sum it first.")
    count = frame["n"].to_numpy(dtype=float)
    if (count < 0).any() or (count != np.round(count)).any():
        raise InputError("n", "counts must be whole non-negative numbers.")
    size = 2 * len(labels)

    def place(column: str) -> np.ndarray:
        out = np.zeros(size)
        out[cell] = frame[column].to_numpy(dtype=float)
        return out.reshape(-1, 2)

    n = place("n")
    safe = np.maximum(n, 1.0)
    sy, sd = place("sum_outcome"), place("sum_take_up")
    ss_y = place("sum_outcome_sq") - sy * sy / safe
    ss_d = place("sum_take_up_sq") - sd * sd / safe
    ss_yd = place("sum_cross") - sy * sd / safe
    scale = np.maximum(place("sum_outcome_sq"), 1.0)
    if (ss_y < -1e-9 * scale).any() or (ss_d < -1e-9).any():
        raise InputError("frame", "sums of squares are smaller than the squared sums allow.")
    return CellTable(
        labels=labels,
        n=n.astype(np.int64),
        mean_outcome=sy / safe,
        mean_take_up=sd / safe,
        ss_outcome=np.maximum(ss_y, 0.0),
        ss_cross=ss_yd,
        ss_take_up=np.maximum(ss_d, 0.0),
    )

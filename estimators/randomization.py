"""Randomization inference for the effect of take-up: offers re-drawn within strata as the
lottery drew them (METHODS.md §5).

Under the sharp null that take-up changes every unit's outcome by θ0, ``u = y − θ0 d`` is
the outcome each unit would have had without take-up, whatever its offer (Imbens & Rosenbaum
2005). The statistic is the intention-to-treat effect on u with complier weights,

    T(θ0) = Σ_s (n_s / n) (ū_s1 − ū_s0) = A − θ0 B,

with A and B the same contrast of y and of d. Re-drawing the offers within strata (the same
number offered per stratum; whole clusters when offers went to clusters) gives the null
distribution of T; since A and B are linear in the outcome, one set of draws serves every θ0,
so the p-value ``(1 + #{|T*| ≥ |T|}) / (1 + R)`` and the randomization interval (the θ0 not
rejected, found on the exact breakpoints of the p-value) come from the same R draws. When the
design has no more assignments than draws, they are all enumerated and the p-value is exact.
"""

from __future__ import annotations

import itertools
import math
from collections.abc import Callable
from dataclasses import dataclass
from typing import Any

import numpy as np
import pandas as pd

from .errors import InputError
from .rebuild import rebuildable

__all__ = ["RandomizationDraws", "RandomizationFamily", "RandomizationTest", "randomization_draws",
           "randomization_family", "randomization_test", "westfall_young"]



@dataclass(frozen=True, slots=True, eq=False)
class RandomizationDraws:
    """The contrasts A (of y) and B (of take-up) for the observed offers and for each re-draw."""

    observed: tuple[float, float]
    """(A, B) of the offers as drawn."""
    a: np.ndarray
    """A of each re-draw (R,)."""
    b: np.ndarray
    """B of each re-draw (R,)."""
    exact: bool
    """Whether the re-draws are every assignment of the design (enumeration)."""
    seed: int | None
    """Seed of the random re-draws (None when enumerated)."""


@rebuildable
@dataclass(frozen=True, slots=True)
class RandomizationTest:
    """Randomization p-value of a sharp null and the interval by test inversion."""

    null_effect: float
    """θ0 of the sharp null tested."""
    p_value: float
    """Share of re-draws whose |T| reaches the observed (the observed counted once)."""
    interval: tuple[float, float] | None
    """The θ0 not rejected at the level, when they form a bounded interval; None otherwise
    (see `interval_reason`)."""
    interval_reason: str | None
    """Why no bounded interval is given (unbounded or split set), or None."""
    draws: int
    """Number of re-draws (assignments when exact)."""
    exact: bool
    """Whether every assignment was enumerated."""
    seed: int | None
    """Seed of the random re-draws."""
    level: float
    """Level of the interval."""

    def to_dict(self) -> dict[str, Any]:
        """Return the JSON form."""
        out = {name: getattr(self, name) for name in self.__slots__}
        out["interval"] = None if self.interval is None else list(self.interval)
        return out


@rebuildable
@dataclass(frozen=True, slots=True)
class RandomizationFamily:
    """Randomization p-values of several outcomes from the same re-draws, with the
    Westfall–Young step-down adjustment."""

    outcomes: tuple[str, ...]
    """Outcome names."""
    rows: int
    """Rows with every outcome (the re-drawn units)."""
    p_value: tuple[float, ...]
    """Each outcome's randomization p-value on these rows."""
    westfall_young: tuple[float, ...]
    """Adjusted p-values (family-wise error rate, keeping the outcomes' dependence)."""
    draws: int
    """Re-draws (assignments when enumerated)."""
    exact: bool
    """Whether every assignment was enumerated."""
    seed: int | None
    """Seed of the re-draws."""
    null_effect: float
    """θ0 of the sharp null, for every outcome."""

    def to_dict(self) -> dict[str, Any]:
        """Return the JSON form."""
        out = {name: getattr(self, name) for name in self.__slots__}
        for key in ("outcomes", "p_value", "westfall_young"):
            out[key] = list(out[key])
        return out


def _groups(stratum: Any, cluster: Any, n_units: int) -> tuple[np.ndarray, np.ndarray]:
    codes, _ = pd.factorize(pd.Series(list(stratum), dtype=object), sort=True)
    if cluster is None:
        return codes, np.arange(n_units)
    units, _ = pd.factorize(pd.Series(list(cluster), dtype=object), sort=True)
    return codes, units


def randomization_draws(
    outcome: Any,
    take_up: Any,
    offer: Any,
    stratum: Any,
    *,
    cluster: Any = None,
    draws: int = 2000,
    seed: int = 20261203,
    progress: Callable[[int, int], None] | None = None,
) -> RandomizationDraws:
    """Re-draw the offers within strata and record the contrasts A and B of each draw.

    Parameters
    ----------
    outcome, take_up, offer, stratum : array_like, shape (n,)
        Unit rows (offer and take-up 0/1), without missing values.
    cluster : array_like, optional
        Unit of assignment: whole clusters are re-drawn (each must sit in one stratum and
        one arm).
    draws : int, default=2000
        Random re-draws; when the design has at most this many assignments, all are used.
    seed : int
        Seed of the random re-draws.
    progress : callable, optional
        Called with (draws done, draws) after each block.

    Returns
    -------
    RandomizationDraws

    Raises
    ------
    InputError
        When a cluster spans strata or arms, or no stratum has both arms.
    """
    return _draws(np.asarray(outcome, dtype=float)[:, None], take_up, offer, stratum,
                  cluster, draws, seed, progress)[0]


def randomization_family(
    outcomes: Any,
    take_up: Any,
    offer: Any,
    stratum: Any,
    *,
    cluster: Any = None,
    draws: int = 2000,
    seed: int = 20261203,
    progress: Callable[[int, int], None] | None = None,
) -> tuple[RandomizationDraws, ...]:
    """`randomization_draws` for several outcomes of the same rows, from the same re-draws
    (what a joint adjustment across outcomes needs).

    Parameters
    ----------
    outcomes : array_like, shape (n, m)
        One column per outcome, no missing values.
    take_up, offer, stratum, cluster, draws, seed, progress
        As in `randomization_draws`.

    Returns
    -------
    tuple of RandomizationDraws
        One per outcome; B and the assignments are shared.
    """
    return _draws(np.asarray(outcomes, dtype=float), take_up, offer, stratum, cluster, draws,
                  seed, progress)


def _draws(Y: np.ndarray, take_up: Any, offer: Any, stratum: Any, cluster: Any, draws: int,
           seed: int, progress: Callable[[int, int], None] | None
           ) -> tuple[RandomizationDraws, ...]:
    d = np.asarray(take_up, dtype=float)
    z = np.asarray(offer, dtype=np.int64)
    codes, units = _groups(stratum, cluster, Y.shape[0])
    m_out = Y.shape[1]
    # aggregate to the unit of assignment: sums of y, d and the count per cluster
    g = units.max() + 1
    size = np.bincount(units, minlength=g).astype(float)
    sum_y = np.column_stack([np.bincount(units, weights=Y[:, j], minlength=g)
                             for j in range(m_out)])
    sum_d = np.bincount(units, weights=d, minlength=g)
    g_stratum = np.zeros(g, dtype=np.int64)
    g_stratum[units] = codes
    g_offer = np.zeros(g, dtype=np.int64)
    g_offer[units] = z
    if np.any(g_stratum[units] != codes) or np.any(g_offer[units] != z):
        raise InputError("cluster", "each cluster must sit in one stratum and one offer arm.")
    k = codes.max() + 1
    by_stratum = np.argsort(g_stratum, kind="stable")
    members = np.split(by_stratum, np.cumsum(np.bincount(g_stratum, minlength=k))[:-1])
    offered = [int(g_offer[m].sum()) for m in members]
    kept = [s for s in range(k) if 0 < offered[s] < members[s].size]
    if not kept:
        raise InputError("offer", "no stratum has both offered and not-offered units.")
    stratum_size = np.bincount(codes, minlength=k).astype(float)
    weight = stratum_size[kept] / stratum_size[kept].sum()
    values = np.column_stack([sum_y, sum_d, size])  # y columns, then d, then size

    def contrasts(assign: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        """(A (R, m), B (R,)) for assignments `assign` (R, g) of 0/1 per assignment unit."""
        sums = np.stack([assign[:, members[s]].astype(float) @ values[members[s]]
                         for s in kept], axis=1)
        return _contrasts_from_sums(sums, members, kept, weight, values)

    observed = contrasts(g_offer[None, :])
    # the number of assignments, on a log scale first (it can have thousands of digits)
    log_total = sum(math.lgamma(members[s].size + 1) - math.lgamma(offered[s] + 1)
                    - math.lgamma(members[s].size - offered[s] + 1) for s in kept)
    total = math.prod(math.comb(members[s].size, offered[s]) for s in kept) \
        if log_total < math.log(draws) + 1 else draws + 1
    exact = total <= draws
    if exact:
        choices = [list(itertools.combinations(range(members[s].size), offered[s]))
                   for s in kept]
        assign = np.zeros((total, g), dtype=np.int8)
        for r, picks in enumerate(itertools.product(*choices)):
            for s, pick in zip(kept, picks, strict=True):
                assign[r, members[s][list(pick)]] = 1
        a, b = contrasts(assign)
    else:
        sums = _offered_sums(members, kept, offered, values, draws, seed, progress)
        a, b = _contrasts_from_sums(sums, members, kept, weight, values)
    return tuple(RandomizationDraws((float(observed[0][0, j]), float(observed[1][0])),
                                    a[:, j], b, exact, None if exact else seed)
                 for j in range(m_out))


def _contrasts_from_sums(sums: np.ndarray, members: list[np.ndarray], kept: list[int],
                         weight: np.ndarray, values: np.ndarray
                         ) -> tuple[np.ndarray, np.ndarray]:
    """(A (R, m), B (R,)) from the offered arm's sums (R, strata, [y..., d, size])."""
    totals = np.array([values[members[s]].sum(axis=0) for s in kept])  # (strata, C)
    n1 = sums[:, :, -1]
    n0 = totals[None, :, -1] - n1
    rest = totals[None] - sums
    means = sums[:, :, :-1] / n1[:, :, None] - rest[:, :, :-1] / n0[:, :, None]
    contrast = (means * weight[None, :, None]).sum(axis=1)  # (R, m + 1)
    return contrast[:, :-1], contrast[:, -1]


def _offered_sums(members: list[np.ndarray], kept: list[int], offered: list[int],
                  values: np.ndarray, draws: int, seed: int,
                  progress: Callable[[int, int], None] | None) -> np.ndarray:
    """Sums of `values` (columns per assignment unit: outcomes, d, size) over a uniformly random
    offered set of each kept stratum's size, per draw: (draws, strata, columns).

    Each draw picks the smaller arm of every stratum by a partial Fisher-Yates shuffle of
    the stratum's units (uniform whatever order the buffer is left in), so a draw costs the
    smaller arms' units, compiled with numba; without numba, numpy ranks random keys.
    """
    order = np.concatenate([members[s] for s in kept])
    starts = np.cumsum([0] + [members[s].size for s in kept])[:-1].astype(np.int64)
    sizes = np.array([members[s].size for s in kept], dtype=np.int64)
    picks = np.array([offered[s] for s in kept], dtype=np.int64)
    flip = picks > sizes - picks
    take = np.where(flip, sizes - picks, picks)
    ordered = values[order]
    totals = np.add.reduceat(ordered, starts, axis=0)
    out = np.empty((draws, len(kept), values.shape[1]))
    block = max(1, min(draws, 500))
    for start in range(0, draws, block):
        r = min(block, draws - start)
        if _subset_sums is not None:
            part = _subset_sums(ordered, starts, sizes, take, r, seed + start)
        else:  # pragma: no cover - numba is a declared dependency
            rng = np.random.default_rng([seed, start])
            part = np.empty((r, len(kept), values.shape[1]))
            for j in range(len(kept)):
                chunk = ordered[starts[j]:starts[j] + sizes[j]]
                keys = rng.random((r, sizes[j]))
                chosen = np.argpartition(keys, take[j] - 1, axis=1)[:, :take[j]]
                part[:, j, :] = chunk[chosen].sum(axis=1)
        out[start:start + r] = np.where(flip[None, :, None], totals[None] - part, part)
        if progress is not None:
            progress(start + r, draws)
    return out


try:  # numba is a declared dependency (see kernels.py)
    import numba

    @numba.njit(cache=False)
    def _stream_sums(ordered, starts, sizes, take, draws, seed, out, first):  # pragma: no cover
        # xorshift64* seeded by splitmix64 (Vigna 2016): a few cycles a number, where a
        # draw needs one per unit of the smaller arms
        state = numba.uint64(seed) + numba.uint64(0x9E3779B97F4A7C15)
        state = (state ^ (state >> numba.uint64(30))) * numba.uint64(0xBF58476D1CE4E5B9)
        state = (state ^ (state >> numba.uint64(27))) * numba.uint64(0x94D049BB133111EB)
        state = state ^ (state >> numba.uint64(31))
        if state == 0:
            state = numba.uint64(1)
        scale = 1.0 / 9007199254740992.0  # 2**-53
        # rows swapped in place: each stratum stays contiguous
        buffer = ordered.copy()
        columns = ordered.shape[1]
        acc = np.zeros(columns)
        for r in range(first, first + draws):
            for j in range(starts.size):
                base, n = starts[j], sizes[j]
                acc[:] = 0.0
                for i in range(take[j]):
                    state ^= state >> numba.uint64(12)
                    state ^= state << numba.uint64(25)
                    state ^= state >> numba.uint64(27)
                    u = ((state * numba.uint64(0x2545F4914F6CDD1D)) >> numba.uint64(11)) * scale
                    here = base + i
                    pick = here + numba.int64(u * (n - i))
                    for c in range(columns):
                        held = buffer[pick, c]
                        buffer[pick, c] = buffer[here, c]
                        buffer[here, c] = held
                        acc[c] += held
                for c in range(columns):
                    out[r, j, c] = acc[c]

    @numba.njit(cache=False, parallel=True)
    def _subset_sums(ordered, starts, sizes, take, draws, seed):  # pragma: no cover - compiled
        # a fixed number of independent streams, whatever the number of threads, so that a
        # seed gives the same draws on every machine
        out = np.zeros((draws, starts.size, ordered.shape[1]))
        per = (draws + _STREAMS - 1) // _STREAMS
        for stream in numba.prange(_STREAMS):
            first = stream * per
            count = min(per, draws - first)
            if count > 0:
                _stream_sums(ordered, starts, sizes, take, count, seed * _STREAMS + stream,
                             out, first)
        return out
except ImportError:  # pragma: no cover - exercised only where numba is missing
    _subset_sums = None


_STREAMS = 4
"""Independent random streams of the compiled re-draws (run in parallel)."""


def _p_value(draws: RandomizationDraws, theta: float) -> float:
    t_obs = abs(draws.observed[0] - theta * draws.observed[1])
    t = np.abs(draws.a - theta * draws.b)
    # a re-draw ties the observed when equal to rounding of the contrasts
    reach = np.count_nonzero(t >= t_obs * (1 - 1e-12) - 1e-300)
    if draws.exact:
        return reach / draws.a.size
    return (1 + reach) / (1 + draws.a.size)


def randomization_test(draws: RandomizationDraws, *, null_effect: float = 0.0,
                       level: float = 0.95) -> RandomizationTest:
    """The p-value of the sharp null θ0 = `null_effect` and the randomization interval.

    The p-value changes only where some re-draw's |A* − θB*| crosses |A − θB|; those θ are
    roots of linear equations, so the set of θ0 not rejected is found exactly from them.

    Parameters
    ----------
    draws : RandomizationDraws
        From `randomization_draws`.
    null_effect : float, default=0.0
        θ0 of the reported p-value.
    level : float, default=0.95
        Level of the interval.

    Returns
    -------
    RandomizationTest
    """
    a0, b0 = draws.observed
    roots = []
    for sign in (1.0, -1.0):
        # A* - θB* = ±(A - θB)  ->  θ = (A* ∓ A) / (B* ∓ B)
        denominator = draws.b - sign * b0
        ok = np.abs(denominator) > 1e-15
        roots.append((draws.a[ok] - sign * a0) / denominator[ok])
    points = np.unique(np.concatenate(roots))
    points = points[np.isfinite(points)]
    alpha = round(1.0 - level, 12)  # 1 - 0.9 is 0.0999...98 in binary
    interval = reason = None
    if points.size == 0:
        reason = "the p-value does not change with the effect (no first stage in any re-draw)"
    else:
        # open segments between breakpoints: (-inf, p0), (p0, p1), ..., (p_last, inf)
        mids = np.concatenate(([points[0] - 1.0], (points[:-1] + points[1:]) / 2,
                               [points[-1] + 1.0]))
        segment = [_p_value(draws, m) > alpha for m in mids]
        at_point = [_p_value(draws, p) > alpha for p in points]
        if segment[0] or segment[-1]:
            reason = "the effects not rejected reach without bound (a weak first stage)"
        else:
            lows = [points[i - 1] for i in range(1, points.size) if segment[i]]
            highs = [points[i] for i in range(1, points.size) if segment[i]]
            lows += [p for p, keep in zip(points, at_point, strict=True) if keep]
            highs += [p for p, keep in zip(points, at_point, strict=True) if keep]
            if not lows:
                reason = "every effect is rejected at this level"
            else:
                interval = (float(min(lows)), float(max(highs)))
                if any(not segment[i] for i in range(1, points.size)
                       if points[i - 1] >= interval[0] and points[i] <= interval[1]):
                    reason = "the effects not rejected form several pieces; the interval " \
                             "spans them"
    return RandomizationTest(float(null_effect), _p_value(draws, null_effect), interval,
                             reason, int(draws.a.size), draws.exact, draws.seed, float(level))


def westfall_young(family: tuple[RandomizationDraws, ...],
                   null_effects: tuple[float, ...] | None = None) -> tuple[float, ...]:
    """Westfall–Young step-down (minP) adjusted p-values across the outcomes of one family.

    Each outcome's statistic ``|A − θ0 B|`` is compared with its own re-draws; in every draw,
    each outcome's statistic becomes a p-value against the same draws, and the adjusted
    p-value of the i-th smallest raw p-value is the share of draws whose smallest p-value
    among the outcomes ranked i and after reaches it (Westfall & Young 1993, algorithm 2.8),
    made monotone. Using the same draws keeps the dependence between outcomes, so the
    adjustment is less severe than Holm's when outcomes move together.

    Parameters
    ----------
    family : tuple of RandomizationDraws
        From `randomization_family` (the same draws for every outcome).
    null_effects : tuple of float, optional
        θ0 per outcome (default 0).

    Returns
    -------
    tuple of float
        Adjusted p-values, in the order of `family`.
    """
    m = len(family)
    thetas = null_effects or (0.0,) * m
    exact = family[0].exact
    size = family[0].a.size
    drawn = np.stack([np.abs(f.a - t * f.b) for f, t in zip(family, thetas, strict=True)])
    tolerance = 1 - 1e-12
    # p-value of every draw's own statistic against the draws, per outcome: the share of
    # draws at least as large (ties included), counting the observed assignment as a draw
    star = np.empty_like(drawn)
    for k in range(m):
        order = np.sort(drawn[k])
        at_least = size - np.searchsorted(order, drawn[k] * tolerance, side="left")
        star[k] = at_least / size if exact else (1 + at_least) / (1 + size)
    raw = np.array([_p_value(f, t) for f, t in zip(family, thetas, strict=True)])
    ranked = np.argsort(raw, kind="stable")
    adjusted = np.empty(m)
    running = 0.0
    for i, k in enumerate(ranked):
        smallest = star[ranked[i:]].min(axis=0)
        reach = np.count_nonzero(smallest <= raw[k] * (1 + 1e-12))
        value = reach / size if exact else (1 + reach) / (1 + size)
        running = max(running, min(value, 1.0))
        adjusted[k] = running
    return tuple(float(v) for v in adjusted)

"""Speed of the cell path, as ratios measured in one run (not a test).

1. 10 million rows, 1,000 strata: build the cell table and fit all three estimators with
   stratified inference, as a ratio to one ``np.bincount`` pass over the same rows.
2. 1 million rows, 100 strata: strativ's fixed-effects fit with robust standard errors against
   linearmodels IV2SLS with explicit stratum dummies, with both numbers printed to show they
   agree.

Run: ``python benchmarks/speed.py [--rows N] [--strata K] [--repeat R]``.
"""

from __future__ import annotations

import argparse
import time
from collections.abc import Callable

import numpy as np

from strativ.estimators import build_cells, fit, fit_all

SEED = 7


def _best(func: Callable[[], object], repeat: int) -> float:
    times = []
    for _ in range(repeat):
        start = time.perf_counter()
        func()
        times.append(time.perf_counter() - start)
    return min(times)


def _data(rows: int, strata: int, seed: int = SEED):
    rng = np.random.default_rng(seed)
    s = rng.integers(0, strata, rows)
    p = rng.uniform(0.15, 0.85, strata)[s]
    z = (rng.random(rows) < p).astype(np.int8)
    kind = rng.random(rows)
    d = np.where(kind < 0.1, 1, np.where(kind < 0.3, 0, z)).astype(np.int8)
    y = rng.normal(size=rows) + (1.0 + p) * d
    return y, d, z, s


def bincount_ratio(rows: int, strata: int, repeat: int) -> None:
    y, d, z, s = _data(rows, strata)
    base = _best(lambda: np.bincount(s, weights=y, minlength=strata), repeat)
    cells_only = _best(lambda: build_cells(y, d, z, s), repeat)
    cells = build_cells(y, d, z, s)
    fits = _best(lambda: fit_all(cells), repeat)
    full = _best(lambda: fit_all(build_cells(y, d, z, s)), repeat)
    print(f"{rows:,} rows, {strata:,} strata (best of {repeat})")
    print(f"  one np.bincount pass            {base * 1e3:9.1f} ms   1.0x")
    print(f"  build_cells                     {cells_only * 1e3:9.1f} ms "
          f"{cells_only / base:6.1f}x")
    print(f"  fit_all on the cells            {fits * 1e3:9.1f} ms {fits / base:6.1f}x")
    print(f"  build_cells + fit_all           {full * 1e3:9.1f} ms {full / base:6.1f}x")


def linearmodels_ratio(rows: int, strata: int, repeat: int) -> None:
    import pandas as pd
    from linearmodels.iv import IV2SLS

    y, d, z, s = _data(rows, strata)
    dummies = pd.get_dummies(pd.Series(s, name="s"), prefix="s", dtype=float)
    frame = pd.DataFrame({"y": y, "d": d.astype(float), "z": z.astype(float)})

    def reference():
        return IV2SLS(frame["y"], dummies, frame["d"], frame["z"]).fit(
            cov_type="robust", debiased=False
        )

    def ours():
        return fit(build_cells(y, d, z, s), estimator="fixed_effects", variance="robust")

    start = time.perf_counter()
    ref = reference()  # one run: it takes about a minute
    t_ref = time.perf_counter() - start
    t_ours = _best(ours, repeat)
    est = ours()
    print(f"{rows:,} rows, {strata} strata: fixed effects with robust standard errors")
    print(f"  linearmodels IV2SLS + dummies   {t_ref * 1e3:9.1f} ms")
    print(f"  strativ build_cells + fit       {t_ours * 1e3:9.1f} ms   "
          f"{t_ref / t_ours:6.1f}x faster")
    print(f"  estimate   {ref.params['d']:.15g}  vs  {est.estimate:.15g}")
    print(f"  std error  {ref.std_errors['d']:.15g}  vs  {est.std_error:.15g}")


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--rows", type=int, default=10_000_000)
    parser.add_argument("--strata", type=int, default=1_000)
    parser.add_argument("--repeat", type=int, default=5)
    args = parser.parse_args()
    bincount_ratio(args.rows, args.strata, args.repeat)
    linearmodels_ratio(1_000_000, 100, args.repeat)


if __name__ == "__main__":
    main()

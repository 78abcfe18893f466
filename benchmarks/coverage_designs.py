"""Larger runs of the declared-design coverage studies (METHODS.md §4-§5); not a test.

The designs of tests/test_simulation_clusters.py, test_simulation_gap.py and
test_simulation_constant_effect.py (one-sided non-compliance), with more replications, so
that each share carries a Monte Carlo standard error of about 0.4 points:

- clusters: 40 strata of 3-5 classes with one offered, and of 4 classes with two offered,
  class sizes fixed or random, interacted estimator under ``cluster``;
- gap: 6 strata of 100 with offer shares 0.05-0.6, fixed effects minus the LATE, t reference;
- constant-effect test: size with cells of 6 and of 20 under a common effect.

Seed 20261212 by default (study j uses ``default_rng([seed, j])``), 3,000 replications by
default. Run: ``python benchmarks/coverage_designs.py [--replications R] [--seed S]``.
"""

from __future__ import annotations

import argparse
import sys
import time
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parent.parent / "tests"))

from simulate import coverage_se  # noqa: E402
from simulate_designs import (  # noqa: E402
    class_lottery,
    cluster_study,
    constant_effect_study,
    gap_study,
    one_sided_lottery,
    spread_share_lottery,
)

CLUSTER_DESIGNS = {
    "one offered class of 3-5": (np.resize([3, 4, 5], 40), np.ones(40, dtype=np.int64)),
    "two of four classes": (np.full(40, 4), np.full(40, 2)),
}
GAP_SHARES = np.array([0.05, 0.15, 0.25, 0.35, 0.45, 0.6])


def _line(label: str, share: float, replications: int, seconds: float) -> str:
    se = 100 * coverage_se(share, replications)
    return f"  {label:<48} {100 * share:6.2f} %  (MC se {se:.2f})  {seconds:6.1f} s"


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--replications", type=int, default=3000)
    parser.add_argument("--seed", type=int, default=20261212)
    args = parser.parse_args()
    r, study = args.replications, 0
    print(f"{r:,} replications per study, seed {args.seed}")
    print("clusters: interacted, variance 'cluster', coverage of the LATE")
    for name, (classes, offered) in CLUSTER_DESIGNS.items():
        for sampling in ("fixed", "random"):
            study += 1
            design = class_lottery(classes, offered, np.random.default_rng([args.seed, study]))
            start = time.perf_counter()
            tally = cluster_study(design, np.random.default_rng([args.seed, study, 1]),
                                  replications=r, sampling=sampling)
            print(_line(f"{name}, sizes {sampling}", tally.share("cluster"), r,
                        time.perf_counter() - start))
            print(_line("  same data without clusters", tally.share("unclustered"), r, 0.0))
    print("gap: fixed effects minus the LATE, 6 strata of 100, shares 0.05-0.6")
    study += 1
    start = time.perf_counter()
    tally = gap_study(spread_share_lottery(100, GAP_SHARES),
                      np.random.default_rng([args.seed, study]), replications=r)
    print(_line("t on Welch-Satterthwaite degrees of freedom", tally.share("covered"), r,
                time.perf_counter() - start))
    print("constant-effect test: rejections at 5 % under a common effect of 2")
    for cell in (6, 20):
        study += 1
        start = time.perf_counter()
        tally = constant_effect_study(one_sided_lottery(cell, np.full(10, 2.0)),
                                      np.random.default_rng([args.seed, study]),
                                      replications=r)
        print(_line(f"cells of {cell}, one-sided non-compliance", tally.share("rejected"), r,
                    time.perf_counter() - start))


if __name__ == "__main__":
    main()

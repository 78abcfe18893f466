"""Larger coverage study of the 95 % `stratified` intervals (METHODS.md §4); not a test.

The same design as tests/test_simulation_coverage.py (complier effects ``20 (p_s - 0.4)``,
complier shares 0.9 to 0.5, offer probabilities 0.15 to 0.85, two-sided non-compliance,
endogenous take-up), in two layouts of about 2,000 units: 10 strata of 160 to 240 units,
and 100 strata of 20 units (the 10 offer probabilities repeated ten times). Every
combination of {block, independent} assignment x {fixed, random} stratum sizes, analysed
with the matching ``assignment=`` and ``sampling=``. Seed 20240920 by default
(configuration uses ``default_rng([seed, layout, configuration])``), 5,000 replications by
default.

Columns: coverage (%) of fixed effects, weighted, interacted and the fixed-effects minus
LATE gap; the two controls that leave a term out (``-assign``: independent offers analysed
as block; ``-between``: random sizes analysed as fixed); Monte Carlo bias of fixed effects
and of the LATE estimate; strata excluded per replication (offer share 0 or 1).

Reading the gap column with 20-unit strata: under block assignment with random sizes the
offers are ``round(p_s n_s)``, so the realized share misses ``p_s`` by up to ``1 / (2 n_s)``
and varies with ``n_s``; the truth uses the design ``p_s`` (it comes from the parameters),
so this rounding adds spread that no interval models. It is negligible with 200-unit
strata. Under independent assignment 20-unit strata often have one or two offered units,
where the plug-in ``Delta_s^2`` of the assignment term is inflated by its own noise.

Run: ``/tmp/venv/bin/python benchmarks/coverage_large.py [--replications R] [--seed S]``.
"""

from __future__ import annotations

import argparse
import sys
import time
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parent.parent / "tests"))

from simulate import (  # noqa: E402
    CONTROLS,
    coverage_se,
    coverage_study,
    fixed_effects_target,
    heterogeneous_lottery,
    late,
)

OFFER_PROBABILITY = np.array([0.15, 0.15, 0.2, 0.25, 0.3, 0.35, 0.5, 0.6, 0.75, 0.85])
LAYOUTS = {
    "10 x ~200": (np.array([200, 240, 180, 220, 200, 160, 240, 200, 160, 200]),
                  OFFER_PROBABILITY),
    "100 x 20": (np.full(100, 20), np.tile(OFFER_PROBABILITY, 10)),
}
CONFIGURATIONS = (
    ("block", "fixed"),
    ("block", "random"),
    ("independent", "fixed"),
    ("independent", "random"),
)


def _cell(value: float | None, digits: int = 1) -> str:
    return "" if value is None else f"{value:.{digits}f}"


def main(argv: list[str] | None = None) -> int:
    """Run every layout and configuration and print one table row each."""
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--replications", type=int, default=5000)
    parser.add_argument("--seed", type=int, default=20240920)
    args = parser.parse_args(argv)
    print(f"seed {args.seed}, {args.replications} replications per row; "
          f"Monte Carlo se of a 95 % coverage: "
          f"{100 * coverage_se(0.95, args.replications):.2f} points")
    header = (f"{'layout':<10} {'assignment':<11} {'sampling':<8} {'FE':>6} {'IPW':>6} "
              f"{'inter':>6} {'gap':>6} {'-assign':>8} {'-between':>9} {'biasFE':>8} "
              f"{'biasLATE':>9} {'excl/rep':>8} {'sec':>6}")
    print(header)
    print("-" * len(header))
    for li, (layout, (size, probability)) in enumerate(LAYOUTS.items()):
        pop = heterogeneous_lottery(size, probability)
        for ci, (assignment, sampling) in enumerate(CONFIGURATIONS):
            start = time.perf_counter()
            study = coverage_study(
                pop, np.random.default_rng([args.seed, li, ci]),
                replications=args.replications, assignment=assignment, sampling=sampling,
            )
            seconds = time.perf_counter() - start
            share = {n: 100 * study.share(n) for n in (*study.covered, *study.controls)}
            print(
                f"{layout:<10} {assignment:<11} {sampling:<8} "
                f"{share['fixed_effects']:6.2f} {share['weighted']:6.2f} "
                f"{share['interacted']:6.2f} {share['gap']:6.2f} "
                f"{_cell(share.get(CONTROLS[0]), 2):>8} {_cell(share.get(CONTROLS[1]), 2):>9} "
                f"{study.mean_error('fixed_effects'):8.4f} {study.mean_error('interacted'):9.4f} "
                f"{study.excluded_strata / study.replications:8.3f} {seconds:6.1f}",
                flush=True,
            )
        print(f"{layout:<10} truths: LATE {late(pop):.4f}, "
              f"fixed-effects target {fixed_effects_target(pop):.4f}")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())

"""Sensitivity to a direct effect of the offer (METHODS.md §7).

References: the estimators refitted by `build_cells` on rows whose outcome is shifted by
δ Z (the definition); the identity θ(δ) = (N − δ Σ a_s)/D; a grid of δ for the union of
intervals. Data: one seeded draw of `simulate.heterogeneous_lottery` (invented, identities
only).
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from simulate import draw, heterogeneous_lottery

from strativ.estimators import build_cells, cells_from_moments, fit
from strativ.estimators.sensitivity import direct_effect_sensitivity, shift_by_offer

SEED = 20261208


@pytest.fixture(scope="module")
def rows():
    pop = heterogeneous_lottery(np.array([120, 300, 200, 80]), np.array([0.2, 0.5, 0.7, 0.4]))
    d = draw(pop, np.random.default_rng(SEED), replications=1, assignment="block",
             sampling="fixed")
    return d.outcome[0], d.take_up[0], d.offer[0], d.stratum[0]


def _frame(y, d, z, s) -> pd.DataFrame:
    frame = pd.DataFrame({"stratum": s, "offer": z, "take_up": d, "y": y})
    frame["centre"] = frame.groupby("stratum")["y"].transform("min")
    frame["e"] = frame["y"] - frame["centre"]
    frame["e2"] = frame["e"] ** 2
    g = frame.groupby(["stratum", "offer", "take_up"], as_index=False).agg(
        n=("y", "size"), sum_outcome=("e", "sum"), sum_outcome_sq=("e2", "sum"),
        centre_outcome=("centre", "first"))
    return g


@pytest.mark.parametrize("estimator", ["fixed_effects", "weighted", "interacted"])
def test_shifted_sums_equal_the_shifted_rows(rows, estimator) -> None:
    y, d, z, s = rows
    delta = 0.7
    got = fit(cells_from_moments(shift_by_offer(_frame(y, d, z, s), delta)), estimator=estimator)
    # reference: the definition, the estimator on the rows' outcome y - delta Z
    want = fit(build_cells(y - delta * z, d, z, s), estimator=estimator)
    assert got.estimate == pytest.approx(want.estimate, rel=1e-12)
    assert got.std_error == pytest.approx(want.std_error, rel=1e-10)
    base = fit(build_cells(y, d, z, s), estimator=estimator)
    # source: METHODS.md §7, theta(delta) = (N - delta sum a_s) / D, i.e. (ITT - delta) / FS
    assert got.estimate == pytest.approx((base.itt - delta) / base.first_stage, rel=1e-12)


def test_the_interval_reaches_zero_at_the_reported_delta(rows) -> None:
    y, d, z, s = rows
    frame = _frame(y, d, z, s)

    def fit_at(delta):
        return fit(cells_from_moments(shift_by_offer(frame, delta)), estimator="interacted")

    base = fit_at(0.0)
    assert not base.interval[0] <= 0 <= base.interval[1], "the design must have a clear effect"
    result = direct_effect_sensitivity(fit_at, "interacted")
    at = fit_at(result.delta_to_zero).interval
    width = at[1] - at[0]
    # by construction: one end of the interval sits at zero there ...
    assert min(abs(at[0]), abs(at[1])) < 1e-9 * width
    # ... and a direct effect 1 % smaller leaves zero outside
    before = fit_at(0.99 * result.delta_to_zero).interval
    assert not before[0] <= 0 <= before[1]


def test_the_union_spans_every_interval_of_the_range(rows) -> None:
    y, d, z, s = rows
    frame = _frame(y, d, z, s)

    def fit_at(delta):
        return fit(cells_from_moments(shift_by_offer(frame, delta)), estimator="weighted")

    result = direct_effect_sensitivity(fit_at, "weighted", (-0.5, 1.5))
    grid = [fit_at(delta).interval for delta in np.linspace(-0.5, 1.5, 41)]
    low, high = result.union
    # reference: the intervals on a grid of 41 direct effects over the range
    assert low == pytest.approx(min(g[0] for g in grid), rel=1e-12)
    assert high == pytest.approx(max(g[1] for g in grid), rel=1e-12)
    assert [r.delta for r in result.rows] == [-0.5, 0.0, 1.5]


def test_the_defier_table_follows_the_wald_ratio_with_defiers() -> None:
    from strativ.estimators.sensitivity import defier_table

    # a population written out: compliers 0.5 with effect 2, defiers 0.1 with effect -1,
    # always-takers 0.2, never-takers 0.2
    complier, defier, beta_c, beta_d = 0.5, 0.1, 2.0, -1.0
    first_stage = complier - defier  # P(D=1|Z=1) - P(D=1|Z=0) = (0.5 + 0.2) - (0.1 + 0.2)
    wald = (complier * beta_c - defier * beta_d) / first_stage
    row = defier_table(first_stage, [defier])[0]
    # source: de Chaisemartin (2017): Wald = beta_C + (rho / FS)(beta_C - beta_D)
    assert wald == pytest.approx(beta_c + row.bias_factor * (beta_c - beta_d), rel=1e-12)
    assert row.complier_share == pytest.approx(complier, rel=1e-12)
    assert row.comvivor_share == pytest.approx(first_stage / complier, rel=1e-12)
    assert defier_table(0.0, [0.1]) == ()

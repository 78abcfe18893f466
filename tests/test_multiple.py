"""Holm and Benjamini-Hochberg adjustments equal statsmodels' exactly."""

from __future__ import annotations

import numpy as np
import pytest
from statsmodels.stats.multitest import multipletests

from strativ.estimators.multiple import adjust_p_values

SEED = 20261206


@pytest.mark.parametrize("m", [1, 2, 3, 7, 25])
def test_adjusted_p_values_equal_statsmodels(m: int) -> None:
    rng = np.random.default_rng(SEED + m)
    p = rng.uniform(0, 0.2, m) ** 2
    if m > 2:
        p[1] = p[2]  # a tie
    got = adjust_p_values(p.tolist())
    # reference: statsmodels.stats.multitest.multipletests, methods holm and fdr_bh
    assert list(got.holm) == multipletests(p, method="holm")[1].tolist()
    assert list(got.benjamini_hochberg) == multipletests(p, method="fdr_bh")[1].tolist()


def test_undefined_p_values_stay_out_of_the_family() -> None:
    got = adjust_p_values([0.01, None, 0.04])
    # reference: statsmodels on the two defined p-values
    assert got.holm[1] is None and got.benjamini_hochberg[1] is None
    assert [got.holm[0], got.holm[2]] == multipletests([0.01, 0.04], method="holm")[1].tolist()
    assert [got.benjamini_hochberg[0], got.benjamini_hochberg[2]] == \
        multipletests([0.01, 0.04], method="fdr_bh")[1].tolist()

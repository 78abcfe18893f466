"""Balance and complier means from group moments (`covariate_profile`, METHODS.md §5).

References: standardized differences computed by hand from unit values written out below
(Austin 2009's definition); κ-weighted complier means against the closed form for a binary
covariate (Abadie 2003) on a design whose offer shares are exact within covariate groups;
the joint test's size in a seeded null simulation.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from strativ.estimators.errors import InputError
from strativ.estimators.profile import SMD_FLAG, covariate_profile

SEED = 20261203


def _moments(frame: pd.DataFrame, names: list[str]) -> dict:
    """Group moments of unit rows, written here independently of the engines' query: each
    covariate centred on its stratum's first present value, a missing value counted as the
    centre."""
    s_codes, _ = pd.factorize(frame["s"], sort=True)
    key = (s_codes * 2 + frame["z"].to_numpy()) * 2 + frame["d"].to_numpy()
    groups, index = np.unique(key, return_inverse=True)
    G, k = groups.size, len(names)
    values = frame[names].to_numpy(dtype=float)
    first = frame.groupby("s", sort=True)[names].first().to_numpy(dtype=float)  # skips NaN
    centre = first[s_codes]
    dev = np.nan_to_num(values - centre, nan=0.0)

    def total(v):
        return np.bincount(index, weights=v, minlength=G)

    labels = np.array(sorted(frame["s"].unique()), dtype=object)
    return {
        "stratum": list(labels[groups // 4]), "offer": (groups // 2) % 2,
        "take_up": groups % 2, "n": np.bincount(index, minlength=G),
        "n_x": np.column_stack([total(~np.isnan(values[:, j])) for j in range(k)]),
        "sum_x": np.column_stack([total(dev[:, j]) for j in range(k)]),
        "sum_x_sq": np.column_stack([total(dev[:, j] ** 2) for j in range(k)]),
        "centre_x": first[groups // 4],
        "cross": np.stack([np.stack([total(dev[:, j] * dev[:, i]) for i in range(k)], axis=1)
                           for j in range(k)], axis=1),
    }


def _profile(frame: pd.DataFrame, names: list[str], **kwargs):
    m = _moments(frame, names)
    return covariate_profile(names, m["stratum"], m["offer"], m["take_up"], m["n"], m["n_x"],
                             m["sum_x"], m["sum_x_sq"], m["centre_x"], m["cross"], **kwargs)


# stratum A: offered x = 1, 2, 3; not offered 2, 4.  stratum B: offered 10; not offered 8, 9, 13
SMALL = pd.DataFrame({
    "s": ["A"] * 5 + ["B"] * 4,
    "z": [1, 1, 1, 0, 0, 1, 0, 0, 0],
    "d": [1, 1, 0, 0, 0, 1, 0, 0, 1],
    "x": [1.0, 2.0, 3.0, 2.0, 4.0, 10.0, 8.0, 9.0, 13.0],
})


def test_standardized_differences_equal_the_hand_computation() -> None:
    row = _profile(SMALL, ["x"]).rows[0]
    # by hand (Austin 2009): offered mean (1+2+3+10)/4 = 4, variance 50/3; not offered mean
    # 36/5 = 7.2, variance 74.8/4 = 18.7; pooled sd sqrt((50/3 + 18.7)/2)
    scale = np.sqrt((50 / 3 + 18.7) / 2)
    assert row.mean_offered == pytest.approx(4.0, abs=1e-12)
    assert row.mean_not_offered == pytest.approx(7.2, abs=1e-12)
    assert row.smd_raw == pytest.approx((4.0 - 7.2) / scale, rel=1e-12)
    # by hand: within A 2 - 3 = -1 over 5 units, within B 10 - 10 = 0 over 4 units
    assert row.smd_within == pytest.approx((5 * -1.0 + 4 * 0.0) / 9 / scale, rel=1e-12)
    # by construction: with realized shares the weighted arm means are the within average
    assert row.smd_weighted == pytest.approx(row.smd_within, rel=1e-12)
    assert row.flagged == (abs(row.smd_within) > SMD_FLAG)
    assert row.mean_all == pytest.approx(52 / 9, rel=1e-12)


def test_design_probabilities_weight_the_arm_means() -> None:
    row = _profile(SMALL, ["x"], probability={"A": 0.5, "B": 0.4}).rows[0]
    # by hand: offered weights 3/0.5 = 6 (mean 2) and 1/0.4 = 2.5 (mean 10); not offered
    # 2/0.5 = 4 (mean 3) and 3/0.6 = 5 (mean 10)
    offered = (6 * 2.0 + 2.5 * 10.0) / 8.5
    not_offered = (4 * 3.0 + 5 * 10.0) / 9.0
    scale = np.sqrt((50 / 3 + 18.7) / 2)
    assert row.smd_weighted == pytest.approx((offered - not_offered) / scale, rel=1e-12)


def _exact_design(rng: np.random.Generator) -> pd.DataFrame:
    """Three strata; in each, half the units have X = 1, and the offer share is the same
    among X = 1 and X = 0 units (exact, by design); take-up depends on X."""
    pieces = []
    for s, (size, share) in enumerate(((40, 0.5), (60, 0.25), (80, 0.75))):
        for x in (0, 1):
            half = size // 2
            z = np.zeros(half, dtype=int)
            z[: int(half * share)] = 1
            complier = rng.random(half) < (0.7 if x else 0.4)
            always = rng.random(half) < 0.1
            d = np.where(complier, z, always.astype(int))
            pieces.append(pd.DataFrame({"s": s, "z": z, "d": d, "x": float(x)}))
    return pd.concat(pieces, ignore_index=True)


def test_complier_means_equal_the_closed_form_for_a_binary_covariate() -> None:
    frame = _exact_design(np.random.default_rng(SEED))
    got = _profile(frame, ["x"]).rows[0].mean_compliers
    top = bottom = 0.0
    for _, rows in frame.groupby("s"):
        fs = rows[rows.z == 1].d.mean() - rows[rows.z == 0].d.mean()
        ones = rows[rows.x == 1]
        fs1 = ones[ones.z == 1].d.mean() - ones[ones.z == 0].d.mean()
        top += len(rows) * (len(ones) / len(rows)) * fs1
        bottom += len(rows) * fs
    # source: Abadie (2003): E[κX]/E[κ] = P(X=1) FS_{X=1} / FS within a stratum when the
    # offer share is the same among X = 1 and X = 0 units; strata add their complier counts
    assert got == pytest.approx(top / bottom, rel=1e-10)


def test_complier_means_equal_the_unit_level_kappa_mean() -> None:
    rng = np.random.default_rng(SEED + 1)
    n = 3_000
    s = rng.integers(0, 5, n)
    z = (rng.random(n) < 0.2 + 0.15 * s).astype(int)
    d = np.where(rng.random(n) < 0.6, z, (rng.random(n) < 0.2).astype(int))
    x = 50 + 3 * s + 2 * d + rng.normal(0, 1, n)
    x[rng.random(n) < 0.05] = np.nan
    frame = pd.DataFrame({"s": s, "z": z, "d": d, "x": x})
    got = _profile(frame, ["x"]).rows[0]
    p = frame.groupby("s").z.transform("mean")
    kappa = 1 - d * (1 - z) / (1 - p) - (1 - d) * z / p
    present = ~np.isnan(x)
    # source: Abadie (2003), κ = 1 − D(1−Z)/(1−p) − (1−D)Z/p, averaged over the rows
    assert got.mean_compliers == pytest.approx(
        (kappa[present] * x[present]).sum() / kappa[present].sum(), rel=1e-12)
    assert got.n_present == present.sum()


def test_the_joint_test_holds_its_size_under_balance() -> None:
    rng = np.random.default_rng(SEED + 2)
    rejections = 0
    replications = 300
    for _ in range(replications):
        n = 600
        s = rng.integers(0, 4, n)
        z = np.zeros(n, dtype=int)
        for stratum, share in enumerate((0.2, 0.4, 0.5, 0.8)):
            members = np.flatnonzero(s == stratum)
            z[rng.choice(members, int(round(share * members.size)), replace=False)] = 1
        d = z * (rng.random(n) < 0.7)
        common = rng.normal(0, 1, n)
        frame = pd.DataFrame({"s": s, "z": z, "d": d, "a": s + common + rng.normal(0, 1, n),
                              "b": 2 * common + rng.normal(0, 1, n)})
        test = _profile(frame, ["a", "b"]).joint
        rejections += test.p_value < 0.05
    # common practice, no source: a 5 % test rejects 3-8 % of 300 null replications
    # (binomial spread about 1.3 points)
    assert 0.02 <= rejections / replications <= 0.085, rejections


def test_the_joint_test_detects_an_imbalance() -> None:
    rng = np.random.default_rng(SEED + 3)
    n = 2_000
    s = rng.integers(0, 4, n)
    z = (rng.random(n) < 0.5).astype(int)
    frame = pd.DataFrame({"s": s, "z": z, "d": z, "a": rng.normal(0, 1, n) + 0.3 * z,
                          "b": rng.normal(0, 1, n)})
    profile = _profile(frame, ["a", "b"])
    # by construction: a shifts by 0.3 sd in the offered arm
    assert profile.joint.p_value < 1e-6
    assert profile.rows[0].flagged and not profile.rows[1].flagged


def test_collinear_covariates_make_the_joint_test_undefined() -> None:
    rng = np.random.default_rng(SEED + 4)
    frame = pd.DataFrame({"s": rng.integers(0, 3, 300), "z": rng.integers(0, 2, 300),
                          "x": rng.normal(0, 1, 300)})
    frame["d"] = frame["z"]
    frame["x2"] = 2 * frame["x"] + 1
    joint = _profile(frame, ["x", "x2"]).joint
    # by construction: x2 is a linear function of x
    assert joint.statistic is None and "collinear" in joint.reason
    single = _profile(SMALL, ["x"]).joint
    # by construction: stratum B has one offered unit
    assert single.statistic is None and "single unit" in single.reason


def test_no_stratum_with_both_arms_is_refused() -> None:
    with pytest.raises(InputError, match="both offered and not-offered"):
        _profile(SMALL[SMALL.z == 1], ["x"])

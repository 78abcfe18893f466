"""Realized against design offer counts, and the assignment rule they imply (METHODS.md §4-§5).

With design offer probabilities ``pi_s`` the realized offered count ``n_s1`` tells which
assignment happened. Under block (complete) assignment at ``pi_s`` the count is ``n_s pi_s``
rounded, and then ``n_s1 / n_s`` is each unit's exact offer probability: the rounded design
value would weight the arms inconsistently and bias the weighted estimator. Under
independent (Bernoulli) assignment the count is binomial, the ratio means per arm have random
denominators, and the variance needs the assignment term.
"""

from __future__ import annotations

import numpy as np

from .design import Design
from .results import OfferCountCheck, OfferCounts

__all__ = ["offer_counts"]


def offer_counts(design: Design, probability: np.ndarray, *, assignment: str,
                 level: float) -> OfferCounts:
    """Check the offered counts against the design probabilities and choose the assignment.

    Parameters
    ----------
    design : Design
        The analysis sample.
    probability : numpy.ndarray
        Design offer probability per stratum of the design, (K,), in (0, 1).
    assignment : {"block", "independent"}
        The assignment the caller declared.
    level : float
        Confidence level; strata whose binomial p-value is below ``1 - level`` are listed.

    Returns
    -------
    OfferCounts
        Rule: declared ``block`` and every ``|n_s1 - n_s pi_s| < 1``: block is kept and the
        realized shares replace the design probabilities (``realized_shares_used``).
        Declared ``block`` with any count further away: the counts cannot come from block
        assignment at these probabilities, so ``independent`` is used (``switched``) and
        the binomial tests are reported. Declared ``independent``: kept, with the tests.

    Notes
    -----
    The binomial p-value is scipy's exact two-sided test of ``n_s1`` against
    ``Binomial(n_s, pi_s)``.
    """
    n = design.n_stratum.astype(int)
    offered = design.n[:, 1].astype(int)
    expected = n * probability
    within = np.abs(offered - expected) < 1.0
    switched = assignment == "block" and not bool(within.all())
    used = "independent" if switched else assignment
    rows = []
    for k, label in enumerate(design.labels):
        p_value = None
        if used == "independent":
            from scipy.stats import binomtest  # imported here: scipy.stats loads in ~0.4 s

            p_value = float(binomtest(int(offered[k]), int(n[k]), float(probability[k])).pvalue)
        rows.append(OfferCountCheck(
            label=label,
            n=int(n[k]),
            n_offered=int(offered[k]),
            design_probability=float(probability[k]),
            expected_offered=float(expected[k]),
            within_rounding=bool(within[k]),
            p_value=p_value,
        ))
    rejected = tuple(r.label for r in rows if r.p_value is not None and r.p_value < 1.0 - level)
    return OfferCounts(
        assignment_declared=assignment,
        assignment_used=used,
        switched=switched,
        realized_shares_used=used == "block",
        rows=tuple(rows),
        rejected=rejected,
    )

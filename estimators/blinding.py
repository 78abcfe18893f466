"""Blinded rehearsal: outcomes permuted within strata, so a pipeline can run before unblinding.

Permuting the outcomes among the units of each stratum keeps every stratum's outcome values
(their mean, spread and missing share) and the design (offers, take-up, covariates, strata)
as they are, while breaking any link between outcome and offer: under the permutation every
estimator targets zero, so a rehearsal shows the pipeline, the tables and the diagnostics
without showing the effect. One permutation per stratum moves all outcomes of a unit
together, so their relations (and the adjustment across outcomes) keep their shape.
"""

from __future__ import annotations

import numpy as np

__all__ = ["blind_outcomes"]


def blind_outcomes(stratum: np.ndarray, outcomes: dict[str, np.ndarray], *,
                   seed: int) -> dict[str, np.ndarray]:
    """Permute the outcome rows within each stratum (seeded); inputs are not modified.

    Parameters
    ----------
    stratum : array_like
        Stratum label of each row.
    outcomes : dict of str to ndarray
        Outcome name -> values per row (NaN where missing), all of the same length.
    seed : int
        Seed of ``numpy.random.default_rng``.

    Returns
    -------
    dict of str to ndarray
        New arrays: row ``i`` holds the outcomes of another row of its stratum, one
        permutation per stratum shared by every outcome.
    """
    labels = np.asarray(stratum, dtype=object)
    _, codes = np.unique(labels.astype(str), return_inverse=True)
    key = np.random.default_rng(seed).random(codes.size)
    by_stratum = np.lexsort((np.arange(codes.size), codes))  # rows of each stratum, in order
    shuffled = np.lexsort((key, codes))  # the same strata, rows in random order
    source = np.empty(codes.size, dtype=np.int64)
    source[by_stratum] = shuffled
    return {name: np.asarray(values)[source].copy() for name, values in outcomes.items()}

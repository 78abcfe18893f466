"""strativ.estimators: the numerical core.

Pure functions on arrays and cell tables; no I/O, no printing. Build a cell table once with
`build_cells` (or `cells_from_frame`), then `fit` one estimator or `fit_all` side by side.
"""

from .cells import OUTCOME_LIMIT, CellTable, ClusterSums, build_cells, cells_from_frame
from .design import excluded_strata
from .errors import DegenerateDesignError, EstimatorError, InputError
from .fit import ESTIMATORS, fit, fit_all
from .results import (
    Comparison,
    ConfidenceSet,
    ConstantEffectTest,
    Estimate,
    ExcludedStratum,
    Gap,
    NegativeFirstStage,
    SizeWeighted,
    StratumRow,
    StratumTable,
)

__all__ = [
    "ESTIMATORS",
    "OUTCOME_LIMIT",
    "CellTable",
    "ClusterSums",
    "Comparison",
    "ConfidenceSet",
    "ConstantEffectTest",
    "DegenerateDesignError",
    "Estimate",
    "EstimatorError",
    "ExcludedStratum",
    "Gap",
    "InputError",
    "NegativeFirstStage",
    "SizeWeighted",
    "StratumRow",
    "StratumTable",
    "build_cells",
    "cells_from_frame",
    "excluded_strata",
    "fit",
    "fit_all",
]

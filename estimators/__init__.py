"""strativ.estimators: the numerical core.

Pure functions on arrays and cell tables; no I/O, no printing. Build a cell table once with
`build_cells` (or `cells_from_frame`), then `fit` one estimator or `fit_all` side by side.
"""

from __future__ import annotations

from importlib import import_module
from typing import TYPE_CHECKING, Any

if TYPE_CHECKING:
    from .cells import OUTCOME_LIMIT, CellTable, ClusterSums, build_cells, cells_from_frame
    from .design import excluded_strata
    from .errors import DegenerateDesignError, EstimatorError, InputError
    from .fitting import fit, fit_all
    from .group_sql import group_query
    from .moments import cells_from_moments, moment_query
    from .options import ESTIMATORS
    from .results import (
        Comparison,
        ConfidenceSet,
        ConstantEffectTest,
        Estimate,
        ExcludedStratum,
        Gap,
        NegativeFirstStage,
        OfferCountCheck,
        OfferCounts,
        SizeWeighted,
        StratumRow,
        StratumTable,
    )

_LAZY = {
    "OUTCOME_LIMIT": "cells",
    "CellTable": "cells",
    "ClusterSums": "cells",
    "build_cells": "cells",
    "cells_from_frame": "cells",
    "excluded_strata": "design",
    "DegenerateDesignError": "errors",
    "EstimatorError": "errors",
    "InputError": "errors",
    "ESTIMATORS": "options",
    "fit": "fitting",
    "fit_all": "fitting",
    "cells_from_moments": "moments",
    "group_query": "group_sql",
    "moment_query": "moments",
    "Comparison": "results",
    "ConfidenceSet": "results",
    "ConstantEffectTest": "results",
    "Estimate": "results",
    "ExcludedStratum": "results",
    "Gap": "results",
    "NegativeFirstStage": "results",
    "OfferCountCheck": "results",
    "OfferCounts": "results",
    "SizeWeighted": "results",
    "StratumRow": "results",
    "StratumTable": "results",
}
"""Public name -> module that defines it, imported when the name is first read (the options
module and `strativ --help` then load no numerical library)."""

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
    "OfferCountCheck",
    "OfferCounts",
    "SizeWeighted",
    "StratumRow",
    "StratumTable",
    "build_cells",
    "cells_from_frame",
    "cells_from_moments",
    "group_query",
    "excluded_strata",
    "fit",
    "fit_all",
    "moment_query",
]


def __getattr__(name: str) -> Any:
    """Import a public name from its module on first use."""
    if name not in _LAZY:
        raise AttributeError(f"module {__name__!r} has no attribute {name!r}")
    value = getattr(import_module(f".{_LAZY[name]}", __name__), name)
    globals()[name] = value
    return value


def __dir__() -> list[str]:
    return sorted(__all__)

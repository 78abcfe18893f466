"""The core's typed errors as located command-line errors.

Each data rule (offer and take-up codes, cluster nesting, design probabilities in (0, 1),
strata with both arms) and each option rule is checked once, in `strativ.estimators`. This
module only finds where the user can fix what the core refused: the spec line of an option
or of a stratum's probability, or the data file and row of an offending value.
"""

from __future__ import annotations

import re
from typing import Any

import numpy as np

from strativ.estimators import DegenerateDesignError, EstimatorError, InputError

from .errors import CliError, DataError
from .loading import Dataset
from .spec import Spec

__all__ = ["located_error"]

_SPEC_KEYS = {
    "variance": ("inference", "variance"),
    "assignment": ("design", "assignment"),
    "sampling": ("design", "sampling"),
    "level": ("inference", "level"),
    "estimators": ("estimators",),
    "estimator": ("estimators",),
}
"""Core argument -> spec key path of the option it came from."""
_INDEX = re.compile(r"\(index (\d+)\)")


def located_error(exc: EstimatorError, spec: Spec, dataset: Dataset,
                  rows: np.ndarray | None = None,
                  probabilities: dict[Any, float] | None = None) -> CliError:
    """Return the command-line error for an error of the core, located where it is fixed.

    Parameters
    ----------
    exc : EstimatorError
        What the core raised.
    spec : Spec
        The validated spec.
    dataset : Dataset
        The loaded rows.
    rows : ndarray of int, optional
        Dataset row of each array element the core saw (default: every row, in order), so
        that an index in the core's message can be turned into a file and row.
    probabilities : dict, optional
        The design probabilities passed to the core, by stratum label.

    Returns
    -------
    CliError
        A `SpecError` at the spec line of an option or probability, or a `DataError`
        naming the column and, where the core points at a unit, its file and row.
    """
    cols = spec.columns
    if isinstance(exc, DegenerateDesignError):
        return DataError(None, " + ".join(cols.stratum), (), exc.message,
                         "each stratum needs both offered and not-offered rows")
    if not isinstance(exc, InputError):
        return DataError(None, None, (), str(exc))
    if exc.argument in _SPEC_KEYS:
        return spec.error(_SPEC_KEYS[exc.argument], exc.message.rstrip("."))
    if exc.argument == "offer_probability":
        return _probability_error(exc, spec, dataset, probabilities or {})
    if exc.argument == "cluster" and cols.cluster is not None:
        return _cluster_error(exc, cols.cluster, dataset, rows)
    column = {"take_up": cols.take_up, "offer": cols.offer, "cluster": cols.cluster,
              "stratum": " + ".join(cols.stratum)}.get(exc.argument)
    return DataError(None, column, (), exc.message)


def _quoted_label(message: str, labels: list[Any]) -> Any | None:
    """The label whose repr the core quoted as ``stratum <label>`` in `message`, or None."""
    for label in labels:
        if f"stratum {label!r}" in message:
            return label
    return None


def _probability_error(exc: InputError, spec: Spec, dataset: Dataset,
                       probabilities: dict[Any, float]) -> CliError:
    source = spec.offer_probability
    label = _quoted_label(exc.message, list(probabilities))
    message = exc.message.rstrip(".")
    if source.source == "mapping":
        keys: tuple[Any, ...] = ("design", "offer_probability")
        if label is not None:
            written = [text for text, _ in source.by_stratum if text == str(label)]
            keys += tuple(written[:1])
        return spec.error(keys, f"design offer probability refused: {message}",
                          "give each stratum its probability of being offered, strictly "
                          "between 0 and 1")
    if label is None:
        return DataError(None, source.column, (), message)
    first = int(np.flatnonzero(dataset.stratum == label)[0]) \
        if np.any(dataset.stratum == label) else None
    where = "" if first is None else f" (first row of that stratum: {dataset.where(first)})"
    rows = () if first is None else (int(dataset.row[first]),)
    return DataError(None, source.column, rows, f"design offer probability refused: "
                     f"{message}{where}", "give each row its stratum's probability of being "
                     "offered, strictly between 0 and 1")


def _cluster_error(exc: InputError, column: str, dataset: Dataset,
                   rows: np.ndarray | None) -> DataError:
    hint = "clusters must be nested in strata and offered as a whole"
    found = _INDEX.search(exc.message)
    if found is None or dataset.cluster is None:
        return DataError(None, column, (), exc.message.rstrip("."), hint)
    index = int(found.group(1))
    seen = np.arange(dataset.n_rows) if rows is None else rows
    if index >= seen.size:
        return DataError(None, column, (), exc.message.rstrip("."), hint)
    i = int(seen[index])
    name = dataset.cluster[i]
    j = int(seen[np.flatnonzero(dataset.cluster[seen] == name)[0]])

    def cell(k: int) -> str:
        return f"stratum '{dataset.stratum[k]}', offer {int(dataset.offer[k])} in " \
            f"{dataset.where(k)}"

    return DataError(None, column, (int(dataset.row[j]), int(dataset.row[i])),
                     f"cluster '{name}' spans more than one (stratum, offer) cell: {cell(j)} "
                     f"but {cell(i)}", hint)

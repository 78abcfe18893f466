"""The design's offer probabilities by stratum, as the spec gives them and the data name them.

`design.offer_probability` is `estimated` (None here: the estimators use each stratum's offer
share), a column (constant within each stratum), or a mapping of stratum to probability; a
probability given for a stratum holds in each of its waves unless a wave's stratum is named
itself.
"""

from __future__ import annotations

from typing import TYPE_CHECKING, Any

from .errors import DataError
from .loading import STRATUM_JOIN
from .suggest import suggest
from .waves import splits_strata

if TYPE_CHECKING:
    from .grouped import GroupedData
    from .spec import Spec

__all__ = ["design_probabilities"]


def _sorted(labels: list[Any]) -> list[Any]:
    try:
        return sorted(labels)
    except TypeError:
        return labels


def design_probabilities(spec: Spec, data: GroupedData) -> dict[Any, float] | None:
    """Resolve the spec's `design.offer_probability` into {stratum label: probability}.

    Parameters
    ----------
    spec : Spec
        The validated spec.
    data : GroupedData
        The run's data.

    Returns
    -------
    dict or None
        None when probabilities are estimated; else one probability per stratum label.

    Raises
    ------
    SpecError
        When the mapping names a stratum that is not in the data, or leaves out a stratum
        that has both offered and not-offered rows.
    DataError
        When the probability column is not constant within a stratum.
    """
    source = spec.offer_probability
    labels = _sorted(data.labels)
    if source.source == "estimated":
        return None
    if source.source == "column":
        return _column_probabilities(spec, data, labels)
    by_text = {str(label): [label] for label in labels}
    if splits_strata(spec):  # a probability given for a stratum holds in each of its waves
        for label in labels:
            base = STRATUM_JOIN.join(str(p) for p in data.stratum_parts[label][:-1])
            by_text.setdefault(base, []).append(label)
    out: dict[Any, float] = {}
    exact: set[Any] = set()
    for key, prob in source.by_stratum:
        if key not in by_text:
            hint = suggest(key, list(by_text)) or "strata in the data: " + ", ".join(
                sorted(by_text)[:12])
            raise spec.error(("design", "offer_probability", key),
                             f"offer_probability names stratum '{key}', which is not in the "
                             "data", hint)
        for label in by_text[key]:
            if label not in exact:  # a stratum of one wave named in full wins
                out[label] = prob
        if key in map(str, labels):
            exact.add(by_text[key][0])
    arms = data.arms()
    absent = [str(label) for label in labels if label not in out and len(arms[label]) == 2]
    if absent:
        raise spec.error(("design", "offer_probability"),
                         "offer_probability gives no probability for stratum(s) "
                         + ", ".join(f"'{a}'" for a in absent[:5])
                         + (f" and {len(absent) - 5} more" if len(absent) > 5 else ""),
                         "give every stratum its design probability")
    return out


def _column_probabilities(spec: Spec, data: GroupedData, labels: list[Any]) -> dict[Any, float]:
    ranges = data.probability_ranges()
    if all(lo == hi for lo, hi in ranges.values()):
        return {label: ranges[label][0] for label in labels}
    dataset = data.rows()
    column = spec.offer_probability.column
    values = dataset.offer_probability
    assert values is not None and column is not None
    first: dict[Any, int] = {}
    for i, label in enumerate(dataset.stratum.tolist()):
        j = first.setdefault(label, i)
        if values[i] != values[j]:
            raise DataError(None, column, (), "the design probability differs within stratum "
                            f"'{label}': {float(values[j])!r} in {dataset.where(j)} but "
                            f"{float(values[i])!r} in {dataset.where(i)}",
                            "give every row of a stratum the same design probability")
    raise DataError(None, column, (), "the design probability differs within a stratum",
                    "give every row of a stratum the same design probability")

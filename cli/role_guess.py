"""`strativ init`'s reading of column names and values: which role each column plays.

A role is filled only on unambiguous evidence: a 0/1 column named like an offer (offer,
lottery, won, assigned, invited, ...) or like take-up (took, enrolled, participated,
received, retrofitted, ...), and exactly one of each; a column with few levels named like a
randomization block (site, district, school, cohort, round, ...) ranked above demographic
columns (age, sex, household size, ...); outcomes are the numeric and 0/1 columns left when
identifiers, baseline-looking columns (baseline, pre, prior, age, size, ...) and the other
roles are set aside. Every guess keeps the alternatives for the spec's comments.
"""

from __future__ import annotations

import re
from dataclasses import dataclass
from typing import Any

__all__ = ["Guess", "guess_roles"]

_OFFER = ("offer", "lottery", "won", "win", "winner", "assign", "invite", "invited",
          "eligib", "selected", "voucher")
_TAKE_UP = ("take", "took", "uptake", "enrol", "particip", "receiv", "retrofit", "treated",
            "joined", "adopt", "accept", "used", "got")
_STRATUM = ("stratum", "strata", "block", "site", "district", "region", "cohort", "school",
            "village", "branch", "round", "wave", "county", "centre", "center", "area",
            "zone", "office", "clinic", "city", "province", "state")
_DEMOGRAPHIC = ("age", "sex", "gender", "female", "male", "race", "ethnic", "educ",
                "income", "household", "hh", "size", "child", "married", "religion",
                "language")
_BASELINE = ("baseline", "pre", "prior", "before", "bl", "lag", "initial")


def _words(name: str) -> list[str]:
    return [w for w in re.split(r"[^a-z0-9]+", name.lower()) if w]


def _marked(name: str, stems: tuple[str, ...]) -> bool:
    return any(w.startswith(s) for w in _words(name) for s in stems)


@dataclass(frozen=True, slots=True)
class Guess:
    """A role's column when unambiguous, with every candidate in rank order."""

    chosen: Any
    """The column profile chosen, or None."""
    candidates: tuple[Any, ...]
    """All candidates, best first."""


def _one(candidates: list[Any]) -> Guess:
    return Guess(candidates[0] if len(candidates) == 1 else None, tuple(candidates))


def _identifier(p: Any) -> bool:
    return p.kind in ("numeric", "text") and p.levels == p.rows - p.missing and p.levels > 50


def guess_roles(profiles: list[Any]) -> dict[str, Guess]:
    """Guess offer, take-up, stratum, outcomes and covariates from column profiles.

    Parameters
    ----------
    profiles : list of ColumnProfile
        The columns of the data (`starter.profile_columns`).

    Returns
    -------
    dict
        ``offer``, ``take_up``, ``stratum``: a `Guess` each; ``outcome`` and
        ``covariates``: a `Guess` whose `chosen` is a list (possibly empty).
    """
    binary = [p for p in profiles if p.kind == "binary"]
    offer = _one([p for p in binary if _marked(p.name, _OFFER)])
    take_up = _one([p for p in binary if _marked(p.name, _TAKE_UP) and p is not offer.chosen])
    if offer.chosen is None and take_up.chosen is not None and len(binary) == 2:
        offer = _one([p for p in binary if p is not take_up.chosen])

    def score(p: Any) -> int:
        return 2 * _marked(p.name, _STRATUM) - 2 * _marked(p.name, _DEMOGRAPHIC)

    grouped = sorted((p for p in profiles if p.few_levels), key=lambda p: (-score(p), p.name))
    top = grouped[0] if grouped else None
    clear = top is not None and score(top) >= 0 and (
        score(top) > 0 and (len(grouped) == 1 or score(grouped[1]) < score(top))
        or len(grouped) == 1)
    stratum = Guess(top if clear else None, tuple(grouped))
    taken = {id(g.chosen) for g in (offer, take_up, stratum) if g.chosen is not None}
    rest = [p for p in profiles if id(p) not in taken and p.kind in ("numeric", "binary")
            and not _identifier(p)]
    covariates = [p for p in rest if _marked(p.name, _BASELINE + _DEMOGRAPHIC)]
    offer_like = offer.candidates + take_up.candidates
    outcomes = [p for p in rest if p not in covariates and p not in offer_like
                and not (p.few_levels and p.kind != "binary")]
    return {"offer": offer, "take_up": take_up, "stratum": stratum,
            "outcome": Guess(outcomes if 0 < len(outcomes) <= 5 else [], tuple(outcomes)),
            "covariates": Guess(covariates, tuple(covariates))}

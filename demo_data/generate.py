"""Write strativ's demo scenario: invented home-insulation lottery data and its truth.

INVENTED DATA. The households, districts, programme and numbers below are made up for
strativ's demo; they describe no real people, utility or study.

Scenario: a state energy office offers free home-insulation retrofits by lottery, run
separately in each utility service district. Each district's budget sets its offer odds
(0.20 to 0.80), the same in every round. Some winners decline (never-takers) and a few
non-winners retrofit through another programme (always-takers). Outcomes: next-winter gas
use in therms and whether the household fell behind on its bills (0/1). The budget formula
gave the highest odds to districts with older, draftier homes, where a retrofit saves the
most, so the effect is largest where the offer share is highest; the fixed-effects 2SLS
estimate (weights n_s p_s (1 - p_s) FS_s) over-weights the districts near even odds and
misses the complier-weighted LATE (weights n_s FS_s).

Usage::

    python demo_data/generate.py [--out DIR] [--round N]

writes ``round_1.csv``, ``round_2.csv``, ``round_3.csv`` and ``truth.json`` into DIR
(default: the directory of this script); with ``--round N`` (4 to 9) only ``round_N.csv``, a
later round drawn with its own seed, as a new wave of data arriving. The output depends only
on ``SEED``; CSV floats use a fixed format and every truth number is a correctly rounded sum
(``math.fsum``), so the files are byte-stable.
"""

from __future__ import annotations

import argparse
import json
import math
import os
import sys
import tempfile
from dataclasses import dataclass, replace
from pathlib import Path

import numpy as np

__all__ = [
    "DISTRICTS",
    "OUTCOMES",
    "ROUND_FILES",
    "SEED",
    "District",
    "Sample",
    "generate",
    "later_round",
    "main",
    "round_csv",
    "simulate",
    "truth",
    "truth_json",
]

SEED = 20_240_917
"""Seed of the numpy ``Generator`` (PCG64) behind every random draw."""

ROUND_FILES = ("round_1.csv", "round_2.csv", "round_3.csv")
"""One CSV file per lottery round, in round order."""

OUTCOMES = ("gas_therms", "behind_on_bills")
"""Outcome columns, in the order they appear in the files and in truth.json."""

COLUMNS = (
    "building_id",
    "district",
    "won_lottery",
    "retrofitted",
    "gas_therms",
    "behind_on_bills",
    "baseline_therms",
    "home_age_years",
    "household_size",
)

_ROUND_SCALE = (0.92, 1.00, 1.08)
_HOUSEHOLD_SIZE_SHARES = (0.22, 0.32, 0.18, 0.16, 0.08, 0.04)
_COMPLIER, _ALWAYS, _NEVER = 0, 1, 2


@dataclass(frozen=True, slots=True)
class District:
    """One invented utility service district and its lottery design."""

    name: str
    """Display name (invented)."""
    offer_probability: float
    """Design odds of winning the lottery, set by the district's budget; same every round."""
    households_per_round: int
    """Applicants in a round of average size; rounds are scaled by ``_ROUND_SCALE``."""
    mean_home_age: float
    """Mean age of the district's homes in years."""
    mean_baseline_therms: float
    """Mean gas use in the winter before the lottery."""
    always_taker_share: float
    """Share who retrofit whether or not they win (through another programme)."""
    never_taker_share: float
    """Share who decline the retrofit even when they win."""
    savings_therms: float
    """Typical gas saved by a retrofit in an average home of the district."""


DISTRICTS = (
    District("Lakeshore", 0.20, 100, 24.0, 620.0, 0.04, 0.18, 70.0),
    District("North Ridge", 0.30, 110, 28.0, 650.0, 0.05, 0.17, 70.0),
    District("Cedar Flats", 0.45, 230, 33.0, 690.0, 0.04, 0.16, 35.0),
    District("Millbrook", 0.50, 250, 35.0, 710.0, 0.05, 0.15, 30.0),
    District("Eastvale", 0.50, 240, 36.0, 720.0, 0.04, 0.17, 30.0),
    District("Granite Hollow", 0.55, 220, 40.0, 740.0, 0.05, 0.16, 40.0),
    District("Pine Terrace", 0.65, 150, 48.0, 780.0, 0.06, 0.15, 120.0),
    District("Riverbend", 0.75, 180, 58.0, 830.0, 0.05, 0.14, 280.0),
    District("Stonebridge", 0.80, 250, 66.0, 860.0, 0.06, 0.15, 340.0),
    District("Willow Creek", 0.80, 270, 72.0, 880.0, 0.05, 0.14, 360.0),
)
"""The invented districts, ordered by offer odds (budget)."""


@dataclass(frozen=True, slots=True)
class Sample:
    """Every generated household, with both potential outcomes (one entry per household)."""

    round_number: np.ndarray
    """Lottery round, 1 to 3."""
    building_id: np.ndarray
    """Integer building number, unique across rounds (written as ``B-00017``)."""
    district: np.ndarray
    """Index into ``DISTRICTS``."""
    compliance: np.ndarray
    """0 complier, 1 always-taker, 2 never-taker."""
    won_lottery: np.ndarray
    """Offer (0/1)."""
    retrofitted: np.ndarray
    """Take-up (0/1)."""
    baseline_therms: np.ndarray
    """Gas use the winter before, rounded to 0.1 therm."""
    home_age_years: np.ndarray
    """Age of the home in whole years."""
    household_size: np.ndarray
    """Number of people in the household."""
    gas_therms_untreated: np.ndarray
    """Next-winter gas use without a retrofit, rounded to 0.1 therm."""
    gas_therms_treated: np.ndarray
    """Next-winter gas use with a retrofit, rounded to 0.1 therm."""
    behind_untreated: np.ndarray
    """Fell behind on bills without a retrofit (0/1)."""
    behind_treated: np.ndarray
    """Fell behind on bills with a retrofit (0/1)."""

    def observed(self, outcome: str) -> np.ndarray:
        """Return the observed outcome: the potential outcome under realized take-up."""
        untreated, treated = self.potential(outcome)
        return np.where(self.retrofitted == 1, treated, untreated)

    def potential(self, outcome: str) -> tuple[np.ndarray, np.ndarray]:
        """Return ``(Y(0), Y(1))`` for ``outcome`` (one of ``OUTCOMES``)."""
        if outcome == "gas_therms":
            return self.gas_therms_untreated, self.gas_therms_treated
        if outcome == "behind_on_bills":
            return self.behind_untreated, self.behind_treated
        raise ValueError(f"unknown outcome {outcome!r}; expected one of {OUTCOMES}")


def _round_half_up(values: np.ndarray) -> np.ndarray:
    return np.floor(values + 0.5)


def _block_sizes() -> np.ndarray:
    """Households per (round, district) block, shape (3, K)."""
    base = np.array([d.households_per_round for d in DISTRICTS], dtype=float)
    return np.array([_round_half_up(base * s) for s in _ROUND_SCALE], dtype=np.int64)


def simulate(seed: int = SEED) -> Sample:
    """Draw the invented households of all three rounds.

    Parameters
    ----------
    seed : int, default=SEED
        Seed of ``numpy.random.default_rng``.

    Returns
    -------
    Sample
        Households in block order (round, then district), with both potential outcomes.

    Notes
    -----
    Offers are assigned by block randomization within each (round, district): exactly
    ``round(p_s * n)`` winners, drawn without replacement. Only ``Generator.random`` and
    ``Generator.standard_normal`` are used, and the outcome model is plain arithmetic, so
    the draws do not depend on platform maths libraries.
    """
    rng = np.random.default_rng(seed)
    sizes = _block_sizes()
    n_districts = len(DISTRICTS)
    block = np.repeat(np.arange(sizes.size), sizes.ravel())
    round_number = block // n_districts + 1
    district = block % n_districts
    n = block.size

    def per_district(field: str) -> np.ndarray:
        return np.array([getattr(d, field) for d in DISTRICTS], dtype=float)[district]

    mean_age = per_district("mean_home_age")
    mean_baseline = per_district("mean_baseline_therms")
    always_share = per_district("always_taker_share")
    never_share = per_district("never_taker_share")
    savings_typical = per_district("savings_therms")

    # Offers: exactly round(p * n_block) winners per block, chosen by a random key.
    key = rng.random(n)
    order = np.lexsort((key, block))
    block_start = np.concatenate(([0], np.cumsum(sizes.ravel())[:-1]))
    rank = np.empty(n, dtype=np.int64)
    rank[order] = np.arange(n) - block_start[block[order]]
    winners = _round_half_up(
        np.array([d.offer_probability for d in DISTRICTS] * len(_ROUND_SCALE)) * sizes.ravel()
    ).astype(np.int64)
    won_lottery = (rank < winners[block]).astype(np.int64)

    # Baseline covariates.
    home_age_years = np.maximum(1.0, _round_half_up(mean_age + 12.0 * rng.standard_normal(n)))
    size_cut = np.cumsum(_HOUSEHOLD_SIZE_SHARES)[:-1]
    household_size = np.searchsorted(size_cut, rng.random(n), side="right") + 1
    baseline = (
        mean_baseline
        + 1.6 * (home_age_years - mean_age)
        + 25.0 * (household_size - 2.5)
        + 70.0 * rng.standard_normal(n)
    )
    baseline_therms = np.round(np.maximum(baseline, 250.0), 1)

    # Compliance types (defiers ruled out).
    u_type = rng.random(n)
    compliance = np.where(
        u_type < always_share,
        _ALWAYS,
        np.where(u_type < always_share + never_share, _NEVER, _COMPLIER),
    )
    retrofitted = (compliance == _ALWAYS) | ((compliance == _COMPLIER) & (won_lottery == 1))
    retrofitted = retrofitted.astype(np.int64)

    # Gas use: always-takers run warmer homes, never-takers cooler (selection on type).
    type_shift = np.where(compliance == _ALWAYS, 35.0, np.where(compliance == _NEVER, -20.0, 0.0))
    untreated = 0.97 * baseline_therms + 15.0 + type_shift + 35.0 * rng.standard_normal(n)
    savings = savings_typical * baseline_therms / mean_baseline + 25.0 * rng.standard_normal(n)
    untreated = np.maximum(untreated, 150.0)
    treated = np.maximum(untreated - savings, 100.0)
    gas_therms_untreated = np.round(untreated, 1)
    gas_therms_treated = np.round(treated, 1)

    # Arrears: a retrofit lowers the chance of falling behind in step with the gas saved.
    u_bills = rng.random(n)
    risk_untreated = np.clip(
        0.16
        + 0.0003 * (baseline_therms - 750.0)
        + 0.025 * (household_size - 2.5)
        + 0.06 * (compliance == _NEVER),
        0.02,
        0.70,
    )
    risk_treated = np.maximum(risk_untreated - np.clip(0.0003 * savings, 0.0, 0.3), 0.0)
    behind_untreated = (u_bills < risk_untreated).astype(np.int64)
    behind_treated = (u_bills < risk_treated).astype(np.int64)

    building_id = np.argsort(rng.random(n), kind="stable") + 1

    return Sample(
        round_number=round_number,
        building_id=building_id,
        district=district,
        compliance=compliance,
        won_lottery=won_lottery,
        retrofitted=retrofitted,
        baseline_therms=baseline_therms,
        home_age_years=home_age_years.astype(np.int64),
        household_size=household_size.astype(np.int64),
        gas_therms_untreated=gas_therms_untreated,
        gas_therms_treated=gas_therms_treated,
        behind_untreated=behind_untreated,
        behind_treated=behind_treated,
    )


def round_csv(sample: Sample, round_number: int) -> str:
    """Return the CSV text of one lottery round (rows sorted by building id).

    Parameters
    ----------
    sample : Sample
        Output of ``simulate``.
    round_number : int
        1, 2 or 3.

    Returns
    -------
    str
        Header plus one line per household, ``\\n`` line ends, therms with one decimal.
    """
    rows = np.flatnonzero(sample.round_number == round_number)
    rows = rows[np.argsort(sample.building_id[rows], kind="stable")]
    gas = sample.observed("gas_therms")
    behind = sample.observed("behind_on_bills")
    lines = [",".join(COLUMNS)]
    for i in rows:
        lines.append(
            f"B-{sample.building_id[i]:05d},{DISTRICTS[sample.district[i]].name},"
            f"{sample.won_lottery[i]},{sample.retrofitted[i]},{gas[i]:.1f},{behind[i]},"
            f"{sample.baseline_therms[i]:.1f},{sample.home_age_years[i]},"
            f"{sample.household_size[i]}"
        )
    return "\n".join(lines) + "\n"


def _ratio(numerator: list[float], denominator: list[float]) -> float:
    return math.fsum(numerator) / math.fsum(denominator)


def truth(sample: Sample, seed: int = SEED) -> dict:
    """Return the true estimands of the generated sample.

    Parameters
    ----------
    sample : Sample
        Output of ``simulate``.
    seed : int, default=SEED
        Recorded in the result.

    Returns
    -------
    dict
        ``strata``: per district the counts, realized offer share and true LATE per outcome
        (mean of Y(1) - Y(0) over the district's compliers in the sample); ``overall``: per
        outcome the complier-weighted LATE, the fixed-effects (Angrist & Imbens 1995)
        target and the stratum-size-weighted average.

    Notes
    -----
    With ``c_s`` the district's complier count and ``h_s = p_s (1 - p_s)`` its realized
    offer share variance: LATE ``= sum c_s beta_s / sum c_s`` (METHODS.md section 1);
    fixed-effects target ``= sum h_s c_s beta_s / sum h_s c_s`` (section 3, weights
    ``n_s p_s (1 - p_s) FS_s`` with ``FS_s = c_s / n_s``); size-weighted
    ``= sum n_s beta_s / sum n_s``.
    """
    strata = []
    sums: dict[str, list[float]] = {name: [] for name in OUTCOMES}
    for index, spec in enumerate(DISTRICTS):
        in_district = sample.district == index
        n = int(in_district.sum())
        n_offered = int(sample.won_lottery[in_district].sum())
        complier = in_district & (sample.compliance == _COMPLIER)
        compliers = int(complier.sum())
        late = {}
        for name in OUTCOMES:
            untreated, treated = sample.potential(name)
            effect_sum = math.fsum((treated[complier] - untreated[complier]).tolist())
            sums[name].append(effect_sum)
            late[name] = effect_sum / compliers
        strata.append(
            {
                "district": spec.name,
                "design_offer_probability": spec.offer_probability,
                "n": n,
                "n_offered": n_offered,
                "offer_share": n_offered / n,
                "compliers": compliers,
                "always_takers": int((in_district & (sample.compliance == _ALWAYS)).sum()),
                "never_takers": int((in_district & (sample.compliance == _NEVER)).sum()),
                "late": late,
            }
        )
    counts = [float(s["compliers"]) for s in strata]
    share_variance = [s["offer_share"] * (1.0 - s["offer_share"]) for s in strata]
    sizes = [float(s["n"]) for s in strata]
    overall = {}
    for name in OUTCOMES:
        overall[name] = {
            "late": _ratio(sums[name], counts),
            "fixed_effects_target": _ratio(
                [h * e for h, e in zip(share_variance, sums[name], strict=True)],
                [h * c for h, c in zip(share_variance, counts, strict=True)],
            ),
            "stratum_size_weighted": _ratio(
                [n * s["late"][name] for n, s in zip(sizes, strata, strict=True)], sizes
            ),
        }
    return {
        "note": (
            "INVENTED DATA for the strativ demo. The households, districts, programme and "
            "numbers are made up; they describe no real people, utility or study."
        ),
        "generator": "demo_data/generate.py",
        "seed": seed,
        "files": list(ROUND_FILES),
        "stratum_column": "district",
        "effect_definition": (
            "Y(1) - Y(0): gas_therms in therms (negative = gas saved), behind_on_bills in "
            "probability points. Stratum LATE = mean over the district's compliers in this "
            "sample; overall late = complier-weighted mean of the stratum LATEs; "
            "fixed_effects_target = Angrist & Imbens (1995) weights "
            "n_s p_s (1 - p_s) FS_s with realized offer shares and complier shares; "
            "stratum_size_weighted = n_s-weighted mean of the stratum LATEs."
        ),
        "overall": overall,
        "strata": strata,
    }


def truth_json(sample: Sample, seed: int = SEED) -> str:
    """Return ``truth(sample, seed)`` as the JSON text written to truth.json."""
    return json.dumps(truth(sample, seed), indent=2) + "\n"


def _write_atomic(path: Path, text: str) -> None:
    handle, temporary = tempfile.mkstemp(dir=path.parent, prefix=f".{path.name}.", suffix=".tmp")
    try:
        with os.fdopen(handle, "wb") as stream:
            stream.write(text.encode("utf-8"))
        os.chmod(temporary, 0o644)
        os.replace(temporary, path)
    except BaseException:
        Path(temporary).unlink(missing_ok=True)
        raise


def generate(out_dir: Path, *, seed: int = SEED) -> None:
    """Write the three round CSVs and truth.json into ``out_dir``.

    Parameters
    ----------
    out_dir : Path
        Target directory; created if missing. Each file is written atomically.
    seed : int, default=SEED
        Seed of the draw. The committed files use ``SEED``.

    Raises
    ------
    NotADirectoryError
        If ``out_dir`` exists and is not a directory.
    """
    out_dir = Path(out_dir)
    if out_dir.exists() and not out_dir.is_dir():
        raise NotADirectoryError(f"{out_dir} exists and is not a directory; pass --out DIR")
    out_dir.mkdir(parents=True, exist_ok=True)
    sample = simulate(seed)
    for number, file_name in enumerate(ROUND_FILES, start=1):
        _write_atomic(out_dir / file_name, round_csv(sample, number))
    _write_atomic(out_dir / "truth.json", truth_json(sample, seed))


def later_round(number: int, *, seed: int = SEED) -> str:
    """Return the CSV text of a later lottery round (4, 5, ...), as a new wave of data.

    The round is the third round's design (same districts, odds and sizes) drawn with the
    seed ``seed + number``, so every later round differs from the first three and from each
    other. Building ids start at ``number × 10,000`` to stay unique across rounds.

    Parameters
    ----------
    number : int
        Round number, 4 or more (at most 9, to keep five-digit building ids).
    seed : int, default=SEED
        Base seed.

    Returns
    -------
    str
        As `round_csv`.
    """
    if not 4 <= number <= 9:
        raise ValueError(f"later rounds are numbered 4 to 9, not {number}")
    sample = simulate(seed + number)
    later = replace(sample, building_id=sample.building_id + number * 10_000)
    return round_csv(later, len(ROUND_FILES))


def main(argv: list[str] | None = None) -> int:
    """Command-line entry point; returns the exit code."""
    parser = argparse.ArgumentParser(
        description="Write strativ's invented insulation-lottery demo data and truth.json."
    )
    parser.add_argument(
        "--out",
        type=Path,
        default=Path(__file__).resolve().parent,
        help="output directory (default: the directory of this script)",
    )
    parser.add_argument(
        "--round",
        type=int,
        default=None,
        metavar="N",
        help="write only round_N.csv, a later round (4 to 9) arriving as a new wave",
    )
    args = parser.parse_args(argv)
    try:
        if args.round is not None:
            try:
                text = later_round(args.round)
            except ValueError as error:
                print(f"generate.py: {error}", file=sys.stderr)
                return 2
            args.out.mkdir(parents=True, exist_ok=True)
            _write_atomic(args.out / f"round_{args.round}.csv", text)
            print(f"wrote round_{args.round}.csv to {args.out}")
            return 0
        generate(args.out)
    except OSError as error:
        print(f"generate.py: cannot write demo data: {error}", file=sys.stderr)
        return 1
    print(f"wrote {', '.join(ROUND_FILES)} and truth.json to {args.out}")
    return 0


if __name__ == "__main__":
    sys.exit(main())

"""Counts in words: "1 stratum", "2 strata", "1,234 rows" — singular and plural by number."""

from __future__ import annotations

__all__ = ["count"]


def count(n: int, one: str, many: str | None = None) -> str:
    """`n` with thousands separators and the noun in the number it needs.

    Parameters
    ----------
    n : int
        How many.
    one : str
        The noun for one (``"row"``, ``"stratum"``).
    many : str, optional
        The noun for any other number (default: `one` + ``"s"``).

    Returns
    -------
    str
        For example ``count(1, "stratum", "strata") == "1 stratum"`` and
        ``count(1200, "row") == "1,200 rows"``.
    """
    return f"{n:,} {one if n == 1 else (many or one + 's')}"

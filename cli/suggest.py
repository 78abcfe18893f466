""""Did you mean ...": the nearest valid names to what a user wrote, for messages."""

from __future__ import annotations

import difflib

__all__ = ["suggest"]


def suggest(word: str, choices: list[str] | tuple[str, ...]) -> str | None:
    """Return a "did you mean" phrase for the choice nearest to `word`, or None.

    Parameters
    ----------
    word : str
        What the user wrote.
    choices : sequence of str
        The valid names.

    Returns
    -------
    str or None
        ``"did you mean 'x'?"`` (or two names) when a close match exists.
    """
    lowered = {c.lower(): c for c in choices}
    if word.lower() in lowered and lowered[word.lower()] != word:
        return f"did you mean '{lowered[word.lower()]}'?"
    close = difflib.get_close_matches(word, list(choices), n=2, cutoff=0.6)
    if not close:
        return None
    return "did you mean " + " or ".join(f"'{c}'" for c in close) + "?"

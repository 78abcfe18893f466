"""Typed errors raised by the estimator core.

The command line turns these into messages and exit codes at one boundary; the numerical code
never prints.
"""

from __future__ import annotations

__all__ = ["EstimatorError", "InputError", "DegenerateDesignError"]


class EstimatorError(Exception):
    """Base class of every error the estimator core raises on purpose."""


class InputError(EstimatorError, ValueError):
    """An argument has the wrong shape, code, value or option name.

    Parameters
    ----------
    argument : str
        Name of the offending argument (``"offer"``, ``"variance"``, ...).
    message : str
        What is wrong, with the value found and how to fix it.
    """

    def __init__(self, argument: str, message: str) -> None:
        super().__init__(f"{argument}: {message}")
        self.argument = argument
        self.message = message


class DegenerateDesignError(EstimatorError):
    """The design carries no information about any effect (for example, no stratum has both
    offered and not-offered units).

    Parameters
    ----------
    message : str
        What is degenerate and what would make the design usable.
    """

    def __init__(self, message: str) -> None:
        super().__init__(message)
        self.message = message

"""Exception hierarchy of popdens.

Misuse (bad parameters, bad files) raises; numerical failure of a solver is
reported in ``Result.status`` / ``Result.message`` instead.
"""

from __future__ import annotations

__all__ = ["PopdensError", "ExpressionError", "ScenarioError", "ConvergenceError", "UnreachableTargetError"]


class PopdensError(Exception):
    """Root of every exception raised deliberately by popdens."""


class ExpressionError(PopdensError, ValueError):
    """A text expression was rejected by the safe parser."""


class ScenarioError(PopdensError, ValueError):
    """A scenario file is malformed; the message names file, table and key."""


class ConvergenceError(PopdensError, RuntimeError):
    """An iterative numerical method did not converge."""


class UnreachableTargetError(PopdensError, ValueError):
    """An inverse-design target (rate, CV) is not reached by any admissible input."""

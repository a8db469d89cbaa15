"""Validation of the options shared by the API and the command line.

Each check names the option, the allowed values and what it received, in one
line (a :class:`~famwise.core.errors.FamwiseInputError`).
"""

from __future__ import annotations

import math
import numbers

from .errors import FamwiseInputError

__all__ = ["check_alpha", "check_alternative", "check_positive_int"]

ALTERNATIVES = ("two-sided", "greater", "less")


def check_alpha(alpha) -> float:
    """Return ``alpha`` as a float in the open interval (0, 1)."""
    if isinstance(alpha, bool) or not isinstance(alpha, numbers.Real) \
            or not math.isfinite(alpha) or not 0.0 < alpha < 1.0:
        raise FamwiseInputError(
            f"alpha must be a number strictly between 0 and 1 (e.g. 0.05); got {alpha!r}")
    return float(alpha)


def check_alternative(alternative) -> str:
    """Return ``alternative`` if it is one of two-sided, greater, less."""
    if alternative not in ALTERNATIVES:
        raise FamwiseInputError(
            f"alternative must be one of {', '.join(ALTERNATIVES)}; got {alternative!r}")
    return alternative


def check_positive_int(value, name: str, minimum: int = 1) -> int:
    """Return ``value`` as an int >= ``minimum``."""
    if isinstance(value, bool) or not isinstance(value, numbers.Integral) or value < minimum:
        raise FamwiseInputError(f"{name} must be an integer >= {minimum}; got {value!r}")
    return int(value)

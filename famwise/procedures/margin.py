"""Practical importance: classify each comparison by its interval and a margin.

With a margin ``d > 0`` (the smallest difference that matters in the user's
field, in the response's unit), each comparison's (simultaneous) interval
``[lo, hi]`` is read as follows:

``important``
    the whole interval lies beyond the margin (``lo >= d`` or ``hi <= -d``):
    the difference is real and at least as large as matters;
``real, may be below margin``
    the interval excludes zero but reaches inside the margin: the difference
    is real, but it may be smaller than matters;
``equivalent within margin``
    the whole interval lies strictly inside ``(-d, d)``: any difference is
    smaller than matters (the reading of two one-sided tests at the
    interval's level);
``inconclusive``
    the interval contains zero and reaches beyond the margin: the data cannot
    tell.

This is the usual reading of confidence intervals against an equivalence
margin (common practice, no source).
"""

from __future__ import annotations

import math

import numpy as np

from ..core.errors import FamwiseInputError

__all__ = ["PRACTICAL", "classify", "check_margin"]

PRACTICAL = ("important", "real, may be below margin", "equivalent within margin",
             "inconclusive")


def check_margin(margin) -> float | None:
    """Return ``margin`` as a positive float (or None)."""
    if margin is None:
        return None
    try:
        value = float(margin)
    except (TypeError, ValueError):
        raise FamwiseInputError(f"margin must be a positive number; got {margin!r}") from None
    if not math.isfinite(value) or value <= 0:
        raise FamwiseInputError(f"margin must be a positive number; got {margin!r}")
    return value


def classify(ci_lower, ci_upper, margin: float) -> list[str]:
    """Return the practical class of each interval (see the module notes)."""
    lo = np.asarray(ci_lower, dtype=float)
    hi = np.asarray(ci_upper, dtype=float)
    d = check_margin(margin)
    out = []
    for a, b in zip(lo, hi):
        if a >= d or b <= -d:
            out.append(PRACTICAL[0])
        elif -d < a and b < d:
            out.append(PRACTICAL[2])
        elif a > 0 or b < 0:
            out.append(PRACTICAL[1])
        else:
            out.append(PRACTICAL[3])
    return out

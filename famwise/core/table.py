"""The comparisons table: one tidy layout shared by every procedure.

Every procedure (classical, unequal-variance, resampling) returns a
:class:`pandas.DataFrame` built by :func:`comparisons_table`, so the
cross-check, the letters and the report read one set of columns:

``comparison``    name of the comparison (``"A - B"`` or the contrast)
``group_a``       first group (or the contrast's text), ``group_b`` second
``difference``    mean_a - mean_b, or the contrast estimate sum(w_i * mean_i)
``std_error``     its standard error under the procedure's model
``df``            degrees of freedom of the reference distribution (inf: none)
``statistic``     the procedure's test statistic (a t-like ratio unless noted)
``p_unadjusted``  p-value of this comparison alone
``p_adjusted``    p-value adjusted for the whole family
``ci_lower``, ``ci_upper``
                  (1 - alpha) interval; simultaneous where the procedure has
                  one (see each procedure's docstring for what it holds)
``reject``        p_adjusted <= alpha
``procedure``     the procedure identifier
``mc_error``      (resampling only) Monte Carlo standard error of p_adjusted
``relative_effect`` (Brunner-Munzel; gehan-maxt and peto-maxt, where the order of
                  a non-detect and a value above it is known and otherwise counts
                  as a tie) P(X_b < X_a) + P(X_b = X_a)/2, the
                  probability that a value of group_a exceeds one of group_b,
                  ties counting half; with ``relative_effect_lower`` and
                  ``relative_effect_upper``, its interval, when given
``practical``     (with a margin only) the practical classification
``ratio``, ``ratio_lower``, ``ratio_upper``
                  (``transform="log"`` only) exp of ``difference``, ``ci_lower``,
                  ``ci_upper``: the ratio of geometric means and its interval

This module sits at the bottom of the package: it imports nothing else from
famwise but :mod:`famwise.core.families` and :mod:`famwise.core.errors`.
"""

from __future__ import annotations

import numpy as np
import pandas as pd

from .families import Family

__all__ = ["COLUMNS", "OPTIONAL_COLUMNS", "comparisons_table"]

COLUMNS = (
    "comparison", "group_a", "group_b", "difference", "std_error", "df",
    "statistic", "p_unadjusted", "p_adjusted", "ci_lower", "ci_upper",
    "reject", "procedure",
)

#: Columns some results add after the standard ones (see the module notes).
OPTIONAL_COLUMNS = ("mc_error", "unsettled", "practical", "ratio", "ratio_lower",
                    "ratio_upper", "relative_effect")


def _column(value, m: int, name: str) -> np.ndarray:
    arr = np.broadcast_to(np.asarray(value, dtype=np.float64), (m,)).copy()
    if name.startswith("p_"):
        # Round-off can push a probability a hair outside [0, 1].
        arr = np.clip(arr, 0.0, 1.0)
    return arr


def comparisons_table(
    family: Family,
    *,
    difference,
    std_error,
    df,
    statistic,
    p_unadjusted,
    p_adjusted,
    ci_lower,
    ci_upper,
    alpha: float,
    procedure: str,
    mc_error=None,
    relative_effect=None,
    **extra,
) -> pd.DataFrame:
    """Build the comparisons table for ``family`` (the one constructor).

    Numeric arguments are arrays of length ``family.m`` (or scalars, which are
    broadcast).  ``reject`` is derived as ``p_adjusted <= alpha``.  Optional
    columns appear only when given: ``mc_error`` first, then
    ``relative_effect``, then extra keyword columns in the order given.
    """
    m = family.m
    data = {
        "comparison": list(family.names),
        "group_a": list(family.group_a),
        "group_b": list(family.group_b),
        "difference": _column(difference, m, "difference"),
        "std_error": _column(std_error, m, "std_error"),
        "df": _column(df, m, "df"),
        "statistic": _column(statistic, m, "statistic"),
        "p_unadjusted": _column(p_unadjusted, m, "p_unadjusted"),
        "p_adjusted": _column(p_adjusted, m, "p_adjusted"),
        "ci_lower": _column(ci_lower, m, "ci_lower"),
        "ci_upper": _column(ci_upper, m, "ci_upper"),
    }
    data["reject"] = data["p_adjusted"] <= alpha
    data["procedure"] = [procedure] * m
    if mc_error is not None:
        data["mc_error"] = _column(mc_error, m, "mc_error")
    if relative_effect is not None:
        data["relative_effect"] = _column(relative_effect, m, "relative_effect")
    for key, value in extra.items():
        arr = np.asarray(value)
        if arr.dtype.kind == "b":
            data[key] = np.broadcast_to(arr, (m,)).copy()
        elif arr.dtype.kind in "iuf":
            data[key] = _column(arr, m, key)
        else:
            data[key] = list(np.broadcast_to(arr, (m,)))
    table = pd.DataFrame(data)
    table.attrs["alpha"] = float(alpha)
    table.attrs["family"] = family.kind
    return table

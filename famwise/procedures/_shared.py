"""Pieces shared by the closed-form procedures (classical, unequal, trimmed).

Input checks of the layout and family, Student-t p-values and critical
values, intervals by side, and the one call to
:func:`famwise.core.table.comparisons_table` with the procedure's notes.
"""

from __future__ import annotations

import numpy as np
from scipy import stats as _st

from ..core.errors import FamwiseInputError
from ..core.families import Family
from ..core.layout import Layout
from ..core.table import comparisons_table


def _fmt(x: float) -> str:
    return f"{x:.6g}"


def _check_layout(layout) -> Layout:
    if not isinstance(layout, Layout):
        raise FamwiseInputError(
            f"layout must be a famwise.Layout; got {type(layout).__name__} "
            f"(build one with famwise.Layout.from_groups or famwise.intake)")
    if layout.k < 2:
        raise FamwiseInputError(f"comparisons need at least two groups; got {layout.k}")
    if layout.values.size == 0 or not np.all(np.isfinite(layout.values)):
        raise FamwiseInputError("layout values must be finite and not empty")
    return layout


def _check_family(layout: Layout, family) -> Family:
    if not isinstance(family, Family):
        raise FamwiseInputError(
            f"family must be a famwise.core.families.Family; got {type(family).__name__} "
            f"(build one with famwise.core.families.build_family)")
    if tuple(family.labels) != tuple(layout.labels):
        raise FamwiseInputError(
            f"family was built for groups {list(family.labels)} but the layout has "
            f"{list(layout.labels)}; build the family from layout.labels")
    return family


def _t_pvalue(t, df, alternative):
    if alternative == "two-sided":
        return np.minimum(1.0, 2.0 * _st.t.sf(np.abs(t), df))
    if alternative == "greater":
        return _st.t.sf(t, df)
    return _st.t.cdf(t, df)


def _t_crit(level, df, alternative):
    return _st.t.isf(level / 2.0 if alternative == "two-sided" else level, df)


def _interval(est, se, crit, alternative):
    half = crit * se
    if alternative == "two-sided":
        return est - half, est + half
    if alternative == "greater":
        return est - half, np.full_like(est, np.inf)
    return np.full_like(est, -np.inf), est + half


def _sided(alternative):
    return "two-sided" if alternative == "two-sided" else f"one-sided ({alternative})"


def _table(family, ws, p_unadj, p_adj, lower, upper, alpha, procedure, alternative, *,
           interval_note, error_rate="familywise", **attrs):
    table = comparisons_table(
        family, difference=ws.difference, std_error=ws.std_error, df=ws.df,
        statistic=ws.statistic, p_unadjusted=p_unadj, p_adjusted=p_adj,
        ci_lower=lower, ci_upper=upper, alpha=alpha, procedure=procedure)
    table.attrs["alternative"] = alternative
    table.attrs["error_rate"] = error_rate
    table.attrs["interval_note"] = interval_note
    table.attrs.update(attrs)
    return table


def _offending_contrast(family: Family) -> str | None:
    """Return the first contrast that is not a difference of two groups (or None)."""
    for name, row in zip(family.names, family.weights):
        pos, neg = np.flatnonzero(row > 0), np.flatnonzero(row < 0)
        if not (len(pos) == 1 and len(neg) == 1 and row[pos[0]] == 1 and row[neg[0]] == -1):
            return name
    return None


def _check_alternative(alternative, allowed, procedure) -> str:
    """Check ``alternative`` against the sides ``procedure`` offers."""
    if alternative not in allowed:
        extra = ("" if len(allowed) > 1 else
                 f"; {procedure} is two-sided only (use 'bonferroni', 'holm' or "
                 f"'dunnett' for one-sided tests)")
        raise FamwiseInputError(
            f"alternative must be one of {{{', '.join(map(repr, allowed))}}}; "
            f"got {alternative!r}{extra}")
    return alternative

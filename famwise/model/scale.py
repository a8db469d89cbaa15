"""The ratio scale: analysis on logarithms, results as ratios of geometric means.

Concentrations, counts and yields often have a spread that grows in
proportion to their level; on the log scale such spreads are equal and a
difference of means becomes the log of a ratio of geometric means.  With
``transform="log"`` famwise takes ``log(x + offset)`` of every value
(``offset`` 0 unless the user gives one, which is recorded), runs the whole
pipeline (checks, route, procedure, cross-check) on the logs, and adds to
the comparisons table

``ratio``        exp(difference): the ratio of the geometric means of
                 ``x + offset`` (first group over second), or exp of a
                 contrast's estimate;
``ratio_lower``, ``ratio_upper``
                 exp of the interval ends (simultaneous where the
                 procedure's intervals are), since exp is increasing.

:func:`spread_level_slope` is the slope of log SD on log mean over the
groups (Tukey's spread-level plot; Box & Cox 1964, *J. R. Statist. Soc. B*
26:211-252, the power 1 - slope): a slope near 1 says the log scale would
equalise the spreads, which the route proposes.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pandas as pd

from ..core.errors import FamwiseInputError
from ..core.layout import Layout

__all__ = ["TRANSFORMS", "Transform", "check_transform", "log_layout", "add_ratio_columns",
           "spread_level_slope"]

TRANSFORMS = (None, "log")


@dataclass(frozen=True)
class Transform:
    """The scale of the analysis, as recorded in the decision record."""

    name: str | None = None
    offset: float = 0.0

    def to_dict(self) -> dict | None:
        if self.name is None:
            return None
        return {"transform": self.name, "offset": self.offset,
                "sentence": (f"analysis on log(x{f' + {self.offset:g}' if self.offset else ''})"
                             f"; differences back-transformed to ratios of geometric means")}


def check_transform(transform, offset) -> Transform:
    if transform not in TRANSFORMS:
        raise FamwiseInputError(f"transform must be None or 'log'; got {transform!r}")
    if offset is None:
        offset = 0.0
    if transform is None:
        if offset:
            raise FamwiseInputError("an offset is used only with transform='log'")
        return Transform()
    if isinstance(offset, bool) or not isinstance(offset, (int, float, np.integer,
                                                           np.floating)) \
            or not np.isfinite(offset) or offset < 0:
        raise FamwiseInputError(f"offset must be a non-negative number; got {offset!r}")
    return Transform("log", float(offset))


def log_layout(layout: Layout, tr: Transform) -> Layout:
    """Return the layout of ``log(x + offset)``; refuse values at or below zero."""
    if layout.has_censoring:
        raise FamwiseInputError(
            "transform='log' is for procedures on means; these data hold non-detects, "
            "whose rank procedures give the same answer on any increasing scale; drop the "
            "transform")
    shifted = layout.values + tr.offset
    bad = np.flatnonzero(~(shifted > 0))
    if bad.size:
        shown = ", ".join(f"row {int(layout.rows[i])} ({layout.values[i]:g})" for i in bad[:5])
        more = f" and {bad.size - 5} more" if bad.size > 5 else ""
        fix = ("give a positive offset (log_offset=, --log-offset) large enough, which is "
               "recorded, or analyse on the original scale"
               if tr.offset == 0 else "raise the offset or analyse on the original scale")
        raise FamwiseInputError(
            f"{bad.size} value(s) of {layout.response!r} in {layout.source!r} are zero or "
            f"negative{' after the offset' if tr.offset else ''}, where the log is "
            f"undefined: {shown}{more}; {fix}")
    return Layout(values=np.log(shifted), codes=layout.codes, labels=layout.labels,
                  rows=layout.rows, response=layout.response, group=layout.group,
                  source=layout.source)


def add_ratio_columns(table: pd.DataFrame) -> pd.DataFrame:
    """Add ``ratio``, ``ratio_lower``, ``ratio_upper`` (exp of the log-scale columns)."""
    attrs = dict(table.attrs)
    out = table.assign(ratio=np.exp(table["difference"].to_numpy(dtype=float)),
                       ratio_lower=np.exp(table["ci_lower"].to_numpy(dtype=float)),
                       ratio_upper=np.exp(table["ci_upper"].to_numpy(dtype=float)))
    out.attrs.update(attrs)
    return out


def spread_level_slope(layout: Layout) -> tuple[float, int] | None:
    """Least-squares slope of log SD on log mean over groups with positive means.

    Returns (slope, groups used), or None when fewer than three groups have a
    positive mean and a positive SD or the means do not vary.
    """
    st = layout.stats
    ok = (st.mean > 0) & (st.var > 0) & np.isfinite(st.var)
    if ok.sum() < 3:
        return None
    lm = np.log(st.mean[ok])
    ls = 0.5 * np.log(st.var[ok])
    lm_c = lm - lm.mean()
    ss = float(lm_c @ lm_c)
    if ss <= 1e-12:
        return None
    return float(lm_c @ (ls - ls.mean()) / ss), int(ok.sum())

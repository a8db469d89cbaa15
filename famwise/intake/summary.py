"""Per-group descriptive summary: n, mean, SD, SE, median, trimmed mean, range.

Means and SDs come from :attr:`Layout.stats` (corrected two-pass sums), so
adding a large constant to every value changes them only by that constant;
medians and trimmed means are read from one sort of the data.

With non-detects (``layout.censored``) every group also gets ``censored``
(how many), ``percent_censored``, ``median_se`` and ``restricted``, and
``mean``, ``sd``, ``se`` and ``median`` are Kaplan–Meier estimates on
flipped data (:mod:`famwise.intake.kaplan_meier`; Helsel 2012), never
means of substituted values; ``trimmed_mean`` is NaN for a group with
non-detects, and ``min`` is its smallest value or limit.
"""

from __future__ import annotations

import numpy as np
import pandas as pd

from ..core.errors import FamwiseInputError
from ..core.layout import Layout

__all__ = ["SUMMARY_COLUMNS", "group_summary", "trimmed_mean"]

SUMMARY_COLUMNS = ("group", "n", "mean", "sd", "se", "median", "trimmed_mean",
                   "min", "max")


def trimmed_mean(sorted_values: np.ndarray, trim: float) -> float:
    """Mean after cutting ``floor(trim * n)`` values from each end.

    The same convention as ``scipy.stats.trim_mean`` and Yuen's (1974) test.
    The values must already be sorted.
    """
    n = sorted_values.size
    g = int(np.floor(trim * n))
    kept = sorted_values[g:n - g]
    centre = kept[kept.size // 2]
    return float(centre + np.mean(kept - centre))


def group_summary(layout: Layout, trim: float = 0.2) -> pd.DataFrame:
    """Return one row per group (in label order) with its descriptive summary.

    Parameters
    ----------
    layout : Layout
    trim : float, default=0.2
        Proportion cut from each end for ``trimmed_mean`` (0 <= trim < 0.5).
    """
    if not 0.0 <= trim < 0.5:
        raise FamwiseInputError(f"trim must be in [0, 0.5); got {trim!r}")
    st = layout.stats
    order = np.lexsort((layout.values, layout.codes))
    sorted_vals = layout.values[order]
    ends = np.cumsum(st.n)
    starts = ends - st.n
    med, tmean, lo, hi = (np.full(layout.k, np.nan) for _ in range(4))
    for c in range(layout.k):
        seg = sorted_vals[starts[c]:ends[c]]
        if seg.size == 0:
            continue
        # Median as the midpoint of the middle pair, computed without overflow.
        a, b = seg[(seg.size - 1) // 2], seg[seg.size // 2]
        med[c] = a + (b - a) / 2
        tmean[c] = trimmed_mean(seg, trim)
        lo[c], hi[c] = seg[0], seg[-1]
    with np.errstate(invalid="ignore", divide="ignore"):
        se = st.sd / np.sqrt(st.n)
    frame = pd.DataFrame({
        "group": list(layout.labels), "n": st.n, "mean": st.mean, "sd": st.sd,
        "se": se, "median": med, "trimmed_mean": tmean, "min": lo, "max": hi,
    })
    if layout.has_censoring:
        frame = _censored_columns(layout, frame)
    return frame


def _censored_columns(layout: Layout, frame: pd.DataFrame) -> pd.DataFrame:
    from .kaplan_meier import kaplan_meier_left
    flags = layout.censored
    rows = []
    for c in range(layout.k):
        sel = layout.codes == c
        rows.append(kaplan_meier_left(layout.values[sel], flags[sel]))
    frame = frame.copy()
    frame["mean"] = [s.mean for s in rows]
    frame["sd"] = [s.sd for s in rows]
    frame["se"] = [s.mean_se for s in rows]
    frame["median"] = [s.median for s in rows]
    frame["trimmed_mean"] = [t if s.censored == 0 else np.nan
                             for t, s in zip(frame["trimmed_mean"], rows)]
    frame["censored"] = np.array([s.censored for s in rows], dtype=np.int64)
    frame["percent_censored"] = [s.percent_censored for s in rows]
    frame["median_se"] = [s.median_se for s in rows]
    frame["restricted"] = [s.restricted for s in rows]
    frame.attrs["estimates"] = ("Kaplan-Meier on flipped data (Helsel 2012); where the "
                                "smallest value of a group is a non-detect, the mean places "
                                "the remaining mass at that limit (an upper bound)")
    return frame

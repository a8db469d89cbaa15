"""Per-group descriptive summary: n, mean, SD, SE, median, trimmed mean, range.

Means and SDs come from :attr:`Layout.stats` (corrected two-pass sums), so
adding a large constant to every value changes them only by that constant;
medians and trimmed means are read from one sort of the data.
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
    return pd.DataFrame({
        "group": list(layout.labels), "n": st.n, "mean": st.mean, "sd": st.sd,
        "se": se, "median": med, "trimmed_mean": tmean, "min": lo, "max": hi,
    })

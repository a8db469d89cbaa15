"""Yuen's (1974) trimmed-mean Welch tests for pairs of groups, Holm adjusted.

Each group is trimmed by ``g = floor(trim * n)`` values at each end; the
trimmed mean's squared standard error uses the winsorised variance
(Yuen 1974, eq. 2.2), and a pair is referred to Student's t at Welch's df
with ``h - 1`` (``h = n - 2 g`` values kept) in place of ``n - 1``.  The
p-values are Holm (1979) adjusted; the intervals are Bonferroni simultaneous.

References
----------
Yuen, K. K. (1974). The two-sample trimmed t for unequal population
variances. *Biometrika* 61(1):165-170. doi:10.1093/biomet/61.1.165
Holm, S. (1979). A simple sequentially rejective multiple test procedure.
*Scand. J. Statist.* 6(2):65-70.
"""

from __future__ import annotations

import math
import numbers
from dataclasses import dataclass

import numpy as np
import pandas as pd

from . import adjust as _adjust
from ._shared import (_check_family, _check_layout, _fmt, _interval, _offending_contrast,
                              _sided, _t_crit, _t_pvalue, _table)
from ..core.errors import FamwiseInputError
from ..core.families import Family
from ..core.layout import Layout
from ..core.validate import check_alpha, check_alternative

__all__ = ["TrimmedSummary", "trimmed_summary", "yuen_holm"]


@dataclass(frozen=True)
class _YuenStatistics:
    """Differences of trimmed means, Yuen's standard errors, t ratios and df."""

    difference: np.ndarray
    std_error: np.ndarray
    statistic: np.ndarray
    df: np.ndarray


@dataclass(frozen=True)
class TrimmedSummary:
    """Per-group trimmed means and Yuen's squared standard errors.

    Attributes
    ----------
    n : ndarray of int, shape (k,)
        Group sizes.
    trimmed : ndarray of int, shape (k,)
        ``g = floor(trim * n)`` values cut from each end.
    h : ndarray of int, shape (k,)
        Values kept, ``n - 2 g``.
    mean : ndarray, shape (k,)
        Trimmed means.
    winsorized_var : ndarray, shape (k,)
        Winsorised variances (ddof = 1).
    d : ndarray, shape (k,)
        Yuen's ``(n - 1) s_w^2 / (h (h - 1))``, the squared standard error of
        the trimmed mean.
    trim : float
    """

    n: np.ndarray
    trimmed: np.ndarray
    h: np.ndarray
    mean: np.ndarray
    winsorized_var: np.ndarray
    d: np.ndarray
    trim: float


def _check_trim(trim) -> float:
    if isinstance(trim, bool) or not isinstance(trim, numbers.Real) \
            or not math.isfinite(trim) or not 0.0 <= trim < 0.5:
        raise FamwiseInputError(
            f"trim must be a proportion in [0, 0.5) cut from each end (e.g. 0.2); "
            f"got {trim!r}")
    return float(trim)


def trimmed_summary(layout: Layout, trim: float = 0.2, involved=None) -> TrimmedSummary:
    """Return trimmed means and winsorised variances of every group (Yuen 1974).

    Parameters
    ----------
    layout : Layout
    trim : float, default=0.2
        Proportion cut from each end; ``g = floor(trim * n)`` values (a
        tolerance of 1e-9 keeps ``0.29 * 100`` at 29).
    involved : sequence of int, optional
        Groups that must support Yuen's test (at least two values kept and a
        positive winsorised variance); default: all.

    Returns
    -------
    TrimmedSummary
    """
    _check_layout(layout)
    ts, shift = _trimmed(layout, _check_trim(trim), involved)
    return TrimmedSummary(ts.n, ts.trimmed, ts.h, ts.mean + shift, ts.winsorized_var,
                          ts.d, ts.trim)


def _trimmed(layout, trim, involved):
    """Trimmed summary with means of median-shifted values, and the shift."""
    shift = float(np.median(layout.values))
    k = layout.k
    n = np.zeros(k, np.int64)
    gcut = np.zeros(k, np.int64)
    mean = np.full(k, np.nan)
    wvar = np.full(k, np.nan)
    check = set(range(k) if involved is None else (int(i) for i in involved))
    for i, x in enumerate(layout.split()):
        x = np.sort(x - shift)
        ni = x.size
        gi = int(math.floor(trim * ni + 1e-9))
        hi = ni - 2 * gi
        n[i], gcut[i] = ni, gi
        label = layout.labels[i]
        if hi < 2:
            if i in check:
                raise FamwiseInputError(
                    f"group {label!r} keeps {hi} of {ni} values after trimming {gi} from "
                    f"each end (trim={trim:g}): Yuen's test needs at least two; lower "
                    f"trim or use 'welch-holm'")
            continue
        kept = x[gi:ni - gi]
        mean[i] = kept.mean() + (kept - kept.mean()).mean()
        xw = np.clip(x, x[gi], x[ni - gi - 1])
        wvar[i] = float(np.sum((xw - xw.mean()) ** 2) / (ni - 1))
        if i in check and not wvar[i] > 0.0:
            raise FamwiseInputError(
                f"group {label!r} has zero winsorised variance (trim={trim:g}: the middle "
                f"{hi} of {ni} values are all equal to {_fmt(kept[0] + shift)}): Yuen's "
                f"standard error and df are undefined; check the values, lower trim, or "
                f"use a pooled-variance procedure")
    h = n - 2 * gcut
    with np.errstate(invalid="ignore", divide="ignore"):
        d = (n - 1) * wvar / (h * (h - 1.0))
    return TrimmedSummary(n, gcut, h, mean, wvar, d, trim), shift


def yuen_holm(layout: Layout, family: Family, *, alpha: float = 0.05,
              alternative: str = "two-sided", trim: float = 0.2) -> pd.DataFrame:
    """Yuen's trimmed-mean Welch tests for pairs, Holm adjusted.

    For a pair ``(a, b)`` with trimmed means ``tm``, winsorised variances
    ``s_w^2`` and ``h = n - 2 floor(trim n)`` kept values (Yuen 1974, eq. 2.2):

        d_i = (n_i - 1) s_wi^2 / (h_i (h_i - 1)),
        t = (tm_a - tm_b) / sqrt(d_a + d_b),
        df = (d_a + d_b)^2 / (d_a^2 / (h_a - 1) + d_b^2 / (h_b - 1)).

    Parameters
    ----------
    layout : Layout
    family : Family
        A pairwise family: all pairs, vs-reference, or contrasts each of which
        is a difference of two groups.
    alpha : float, default=0.05
    alternative : {"two-sided", "greater", "less"}, default="two-sided"
    trim : float, default=0.2
        Proportion trimmed from each end of each group.

    Returns
    -------
    pandas.DataFrame
        The comparisons table; ``difference`` is the difference of **trimmed**
        means (it estimates a difference of population trimmed means, not of
        means) and ``std_error`` Yuen's.  The intervals are Bonferroni
        simultaneous Yuen intervals (each at level 1 - alpha/m); Holm's
        rejections may go beyond them.

    Notes
    -----
    1. Resists outliers and heavy tails; the variances may differ.
    2. ``trim=0`` gives :func:`welch_holm` on pairs.
    3. Each pair is ``scipy.stats.ttest_ind(a, b, equal_var=False, trim=trim)``
       (up to scipy's ``int(trim * n)`` in place of the floor with tolerance).

    References
    ----------
    Yuen, K. K. (1974). *Biometrika* 61(1):165-170. doi:10.1093/biomet/61.1.165
    Holm, S. (1979). *Scand. J. Statist.* 6(2):65-70.
    """
    _check_layout(layout)
    _check_family(layout, family)
    alpha = check_alpha(alpha)
    alternative = check_alternative(alternative)
    trim = _check_trim(trim)
    if family.pairs is None:
        raise FamwiseInputError(
            f"yuen-holm handles differences of two group means only; contrast "
            f"{_offending_contrast(family)!r} is not one (use 'welch-holm' or "
            f"'dunnett-t3' for general contrasts)")
    ts, _ = _trimmed(layout, trim, np.unique(family.pairs))
    a, b = family.pairs[:, 0], family.pairs[:, 1]
    sign = family.weights[np.arange(family.m), a]
    tm = ts.mean
    est = sign * (tm[a] - tm[b])
    da, db = ts.d[a], ts.d[b]
    scale = np.maximum(da, db)
    ua, ub = da / scale, db / scale
    se = np.sqrt((ua + ub) * scale)
    # Yuen (1974) p. 167: Welch's df with h - 1 in place of n - 1
    df = (ua + ub) ** 2 / (ua * ua / (ts.h[a] - 1.0) + ub * ub / (ts.h[b] - 1.0))
    ws = _YuenStatistics(est, se, est / se, df)
    p = _t_pvalue(ws.statistic, df, alternative)
    m = family.m
    lower, upper = _interval(est, se, _t_crit(alpha / m, df, alternative), alternative)
    return _table(family, ws, p, _adjust.holm(p), lower, upper, alpha, "yuen-holm",
                  alternative,
                  interval_note=f"{_sided(alternative)} Bonferroni simultaneous Yuen "
                                f"intervals for differences of {trim:g}-trimmed means "
                                f"(each at level 1 - alpha/{m}); Holm's rejections may "
                                f"go beyond them",
                  trim=trim)

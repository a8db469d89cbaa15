"""Kaplan–Meier summaries of left-censored values (non-detects), on flipped data.

A non-detect ``"<L"`` says only that the value lies below L.  Flipping every
value about a constant M at or above the largest (``y = M - x``) turns
left-censored values into right-censored ones, where the Kaplan–Meier (1958)
product-limit estimator applies; its results are flipped back (Helsel 2012,
*Statistics for Censored Environmental Data Using Minitab and R*, 2nd ed.,
Wiley, chapter 6; from memory).  In the original scale the estimator is
the distribution function

    F(x) = prod over detected values t > x of (1 - d_t / r_t),

with ``d_t`` the detected values equal to t and ``r_t`` the number of values
*known* to lie at or below t (detected values at or below t and non-detects
with limit above t).  A non-detect at the same number as a detected value
ranks below it ("<0.5" is below 0.5).

* Mean: the area under the curve, ``min + integral (1 - F)`` over the
  support.  When the smallest value is a non-detect, the mass left below it
  is placed at its limit (Efron's 1967 redistribution; Helsel 2012 calls
  the result biased high, from memory), and :attr:`KMSummary.restricted`
  says so.  This is the restricted mean of the flipped data up to
  ``M - smallest limit``.
* Standard error of the mean: ``sqrt(sum_t A_t**2 d_t / (r_t (r_t - d_t)))``
  over the detected values, ``A_t`` the area between the smallest value and
  t (Klein & Moeschberger 2003, *Survival Analysis*, 2nd ed., section 4.5,
  eq. 4.5.2 on flipped data; from memory; no small-sample factor).
* Median: ``M - y50``, with ``y50`` the smallest flipped time at which the
  flipped survival falls to 0.5 or below; undefined (NaN) when more than
  half of the group may lie below its lowest detected value.
* Standard error of the median: Greenwood's SE of the curve at the median
  divided by a density estimate from the curve's fall between the points
  where it crosses 0.55 and 0.45 (Collett 2003, *Modelling Survival Data in
  Medical Research*, 2nd ed., section 2.4; from memory); NaN when the
  curve does not cross both.

* SD: that of the estimated distribution (its steps as point masses), times
  sqrt(n / (n - 1)).

Everything is one sort and linear passes: O(n log n) per group.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

__all__ = ["KMSummary", "kaplan_meier_left", "flipped_curve"]


@dataclass(frozen=True)
class KMSummary:
    """Kaplan–Meier summary of one group of left-censored values."""

    n: int
    censored: int
    mean: float
    mean_se: float
    median: float
    median_se: float
    restricted: bool        # the smallest value is a non-detect (mass placed at its limit)
    sd: float = float("nan")

    @property
    def percent_censored(self) -> float:
        return 100.0 * self.censored / self.n if self.n else float("nan")


def flipped_curve(values: np.ndarray, censored: np.ndarray, flip: float):
    """Return the product-limit curve of the flipped data ``flip - values``.

    Returns ``times`` (distinct flipped times of detected values, ascending),
    ``d`` (detected values there), ``r`` (at risk there) and ``surv`` (the
    survival just after each time).  Non-detects at a flipped time equal to
    an event's stay at risk at it (they sort after events).
    """
    y = flip - np.asarray(values, dtype=np.float64)
    cens = np.asarray(censored, dtype=bool)
    order = np.lexsort((cens, y))          # by time, events before censored at a tie
    y, cens = y[order], cens[order]
    n = y.size
    if n == 0:
        empty = np.empty(0)
        return empty, empty, empty, empty
    # Distinct times: boundaries where y changes.
    new = np.ones(n, dtype=bool)
    new[1:] = y[1:] != y[:-1]
    start = np.flatnonzero(new)
    events_at = np.add.reduceat((~cens).astype(np.int64), start)
    at_risk = n - start
    keep = events_at > 0
    times, d, r = y[start][keep], events_at[keep].astype(np.float64), at_risk[keep].astype(
        np.float64)
    surv = np.cumprod(1.0 - d / r)
    return times, d, r, surv


def kaplan_meier_left(values, censored) -> KMSummary:
    """Return the Kaplan–Meier mean, median and their SEs of left-censored values.

    Parameters
    ----------
    values : array of float
        Detected values, and for non-detects their limit.
    censored : array of bool
        True where the value is a non-detect ("below ``values[i]``").

    Returns
    -------
    KMSummary
        NaN mean and median when every value is a non-detect.
    """
    x = np.asarray(values, dtype=np.float64)
    cens = np.asarray(censored, dtype=bool)
    n, nc = int(x.size), int(cens.sum())
    nan = float("nan")
    if n == 0 or nc == n:
        return KMSummary(n, nc, nan, nan, nan, nan, nc > 0)
    flip = float(np.max(x))
    times, d, r, surv = flipped_curve(x, cens, flip)
    y_end = flip - float(np.min(x))                  # flipped time of the smallest value
    restricted = bool(np.any(cens & (x == np.min(x))))
    # Area under the flipped survival from 0 to y_end: S = 1 before times[0].
    knots = np.concatenate([[0.0], times, [y_end]])
    heights = np.concatenate([[1.0], surv])
    widths = np.diff(knots)
    area = float(np.sum(heights * widths))
    mean = flip - area
    # A_t: area from each event time to y_end (reverse cumulative sums).
    seg = heights[1:] * widths[1:]
    tail = np.cumsum(seg[::-1])[::-1]
    with np.errstate(divide="ignore", invalid="ignore"):
        terms = np.where(r > d, tail ** 2 * d / (r * (r - d)), 0.0)
    mean_se = float(np.sqrt(np.sum(terms)))
    median, median_se = _median(times, d, r, surv, flip)
    # SD of the estimated distribution: the curve's steps as point masses
    # (what is left after the last step sits at the smallest value), with
    # the factor n / (n - 1) of the usual sample variance.
    mass = -np.diff(np.concatenate([[1.0], surv]))
    points = flip - times
    rest = 1.0 - mass.sum()
    var = float(np.sum(mass * (points - mean) ** 2) + rest * (float(np.min(x)) - mean) ** 2)
    sd = float(np.sqrt(var * n / (n - 1))) if n > 1 else nan
    return KMSummary(n, nc, mean, mean_se, median, median_se, restricted, sd)


def _median(times, d, r, surv, flip):
    nan = float("nan")
    hit = np.flatnonzero(surv <= 0.5)
    if hit.size == 0:
        return nan, nan
    i = int(hit[0])
    y_med = float(times[i])
    # Greenwood's variance of the curve at the median.
    with np.errstate(divide="ignore", invalid="ignore"):
        g = np.where(r > d, d / (r * (r - d)), 0.0)
    var_s = float(surv[i] ** 2 * np.sum(g[:i + 1]))
    # The curve starts at (0, 1) in flipped time.
    t_all = np.concatenate([[0.0], times])
    s_all = np.concatenate([[1.0], surv])
    upper = np.flatnonzero(s_all >= 0.55)
    lower = np.flatnonzero(s_all <= 0.45)
    se = nan
    if upper.size and lower.size:
        u, l_ = int(upper[-1]), int(lower[0])
        width = float(t_all[l_] - t_all[u])
        fall = float(s_all[u] - s_all[l_])
        if width > 0 and fall > 0:
            se = float(np.sqrt(var_s)) * width / fall
    return flip - y_med, se

"""Studentized statistics of a family of comparisons, observed and resampled.

For a family with weights ``W`` (m x k) the estimate of comparison j is
``sum_g W[j, g] * c_g``, where ``c_g`` is the group mean (Welch, pooled) or
the trimmed mean (Yuen), and its squared standard error is
``sum_g W[j, g]**2 * v_g`` with

* Welch (1947, *Biometrika* 34:28–35, doi:10.1093/biomet/34.1-2.28):
  ``v_g = s_g**2 / n_g``;
* pooled: ``v_g = MSE / n_g`` with MSE the within-group mean square;
* Yuen (1974, *Biometrika* 61:165–170, doi:10.1093/biomet/61.1.165):
  ``v_g = (n_g - 1) s_wg**2 / (h_g (h_g - 1))`` with ``s_wg**2`` the
  winsorized variance and ``h_g = n_g - 2 floor(trim n_g)``;
* Welch with Hall's skewness-removing transformation ("welch-hall"): the
  Welch ``t_j`` becomes ``T_j = t_j + a_j t_j**2 / 3 + a_j**2 t_j**3 / 27
  + a_j / 6`` where that cubic's slope stays at or above 1/2, continued as a
  straight line beyond (:func:`hall_transform`; Hall 1992, *J. R. Statist. Soc. B* 54:221–228,
  doi:10.1111/j.2517-6161.1992.tb01876.x; the one-sample form, from
  memory), where ``a_j = K3_j / V_j**1.5`` is the estimated skewness of the
  comparison's estimate: ``V_j = sum_g W[j, g]**2 v_g`` and ``K3_j =
  sum_g W[j, g]**3 gamma s_g**3 / n_g**2`` its third cumulant, with one
  standardised skewness ``gamma`` pooled over the groups (see
  :func:`pooled_skewness`).  With one group, ``a = gamma / sqrt(n)`` and
  this is Hall's statistic.  The third cumulant of a contrast of means is
  also the covariance of its estimate with its variance estimate, the two
  terms Hall's transformation corrects, so the one-sample form carries
  over to contrasts.  Pooling ``gamma`` assumes the groups share one shape
  up to location and scale; it is what lets a group of four borrow the
  skewness the larger groups show.

The same formulas run inside the compiled kernels for every resample
(:mod:`famwise.resample.kernels`); this module computes the observed values
with numpy and packs the family into the sparse form the kernels read.

Adding a statistic: give it a name in :data:`STATISTICS`, compute its
per-group centre and variance of the centre here (:func:`group_terms`), and
in the kernels fill ``mean`` and ``vm`` the same way for each resample;
:func:`famwise.resample.kernels._family_stats` then does the rest.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from ..core.errors import FamwiseInputError
from ..core.families import Family
from ..core.layout import Layout

__all__ = ["STATISTICS", "ALTERNATIVES", "FamilyWeights", "ObservedStatistics",
           "family_weights", "group_terms", "trimmed_terms", "observed_statistics",
           "pooled_skewness", "ssq_floor", "hall_skew", "hall_transform", "hall_inverse",
           "hall_cubic", "HALL_A_MAX", "HALL_Q"]

STATISTICS = ("welch", "pooled", "yuen", "welch-hall")
ALTERNATIVES = ("two-sided", "greater", "less")

# Relative and absolute tolerance for "a resampled statistic reaches the
# observed one": recomputing the observed arrangement in another summation
# order moves T in the last digits, and those resamples must count as ties.
TIE_RTOL = 1e-9
TIE_ATOL = 1e-12
# Floor of the standard error relative to the overall SD of the data.
SE_FLOOR = 1e-10
# Bound on |a_j| of the Hall transformation.  The transformation is an
# expansion in a = O(n^-1/2); beyond |a| = 1 its quadratic and cubic terms
# dominate t itself.  The bound also keeps a / 6 <= 1/6, so an interval
# built on a critical value above 1/6 contains its estimate.  In the
# error-rate matrix (groups of four, skewness 6.2) the rate is 0.0385 with
# the bound at 1 or at 3.
HALL_A_MAX = 1.0


@dataclass(frozen=True)
class FamilyWeights:
    """A family's weights in compressed sparse rows, as the kernels read them."""

    row_ptr: np.ndarray   # (m + 1,) int64
    col: np.ndarray       # (nnz,) int64, group index
    w: np.ndarray         # (nnz,) float64, weight
    w2: np.ndarray        # (nnz,) float64, weight squared
    w3: np.ndarray        # (nnz,) float64, weight cubed


def family_weights(family: Family) -> FamilyWeights:
    """Pack ``family.weights`` into compressed sparse rows (zeros dropped)."""
    weights = np.asarray(family.weights, dtype=np.float64)
    rows, cols = np.nonzero(weights)
    row_ptr = np.zeros(weights.shape[0] + 1, dtype=np.int64)
    np.cumsum(np.bincount(rows, minlength=weights.shape[0]), out=row_ptr[1:])
    w = weights[rows, cols]
    return FamilyWeights(row_ptr, cols.astype(np.int64), w, w * w, w * w * w)


def trimmed_terms(groups: list[np.ndarray], trim: float):
    """Return trimmed means, Yuen's variance terms, cuts and effective sizes.

    For each group: ``cut = floor(trim * n)`` values are removed from each
    end; the trimmed mean averages the middle ``h = n - 2 cut``; the
    winsorized sample replaces the removed values by the nearest kept one,
    and ``d = SSw / (h (h - 1))`` with SSw its sum of squared deviations
    (Yuen 1974, eq. 2.2–2.4; Wilcox, *Introduction to Robust Estimation
    and Hypothesis Testing*, section 5.3, from memory).
    """
    k = len(groups)
    tmean, d = np.empty(k), np.empty(k)
    cut = np.empty(k, dtype=np.int64)
    h = np.empty(k, dtype=np.int64)
    for g, values in enumerate(groups):
        xs = np.sort(values)
        n = xs.size
        c = int(np.floor(trim * n))
        hg = n - 2 * c
        mid = xs[c:n - c]
        tm = mid.mean()
        tm = tm + (mid - tm).mean()          # second pass (centre first)
        wins = np.clip(xs, xs[c], xs[n - c - 1])
        dev = wins - wins.mean()
        d[g] = float(dev @ dev) / (hg * (hg - 1.0))
        tmean[g], cut[g], h[g] = tm, c, hg
    return tmean, d, cut, h


def group_terms(layout: Layout, statistic: str, trim: float = 0.2):
    """Return per-group centre ``c_g`` and variance of the centre ``v_g``."""
    st = layout.stats
    n = st.n.astype(np.float64)
    if statistic == "welch":
        return st.mean.copy(), st.var / n
    if statistic == "pooled":
        return st.mean.copy(), st.mse / n
    tmean, d, _, _ = trimmed_terms(layout.split(), trim)
    return tmean, d


def pooled_skewness(ssq, m3, n, ssq_floor=0.0):
    """Standardised skewness pooled over the groups (last axis).

    ``ssq`` and ``m3`` are each group's sums of squared and cubed deviations
    from its mean.  Each residual is standardised by its group's SD with
    the factor sqrt(n_g / (n_g - 1)) (so the standardised residuals have
    mean square exactly 1), and gamma is the mean cube of all N of them:
    ``sum_g m3_g (n_g / ssq_g)**1.5 / N``.  Groups without spread (``ssq``
    at most ``ssq_floor``: rounding, not data) add nothing.
    """
    ssq = np.asarray(ssq, dtype=np.float64)
    n = np.asarray(n, dtype=np.float64)
    spread = ssq > ssq_floor
    with np.errstate(divide="ignore", invalid="ignore"):
        term = np.where(spread, np.asarray(m3) * (n / np.where(spread, ssq, 1.0)) ** 1.5, 0.0)
    return term.sum(axis=-1) / n.sum()


def hall_skew(weights, var, n, gamma, v2):
    """``a_j`` of the Hall transformation for each comparison (last axis).

    ``var`` are the group variances (..., k), ``gamma`` the pooled skewness
    (...,), ``v2`` the comparisons' squared standard errors (..., m);
    bounded by :data:`HALL_A_MAX`.
    """
    n = np.asarray(n, dtype=np.float64)
    c3 = np.asarray(gamma)[..., None] * np.asarray(var) ** 1.5 / n ** 2
    k3 = c3 @ (np.asarray(weights, dtype=np.float64) ** 3).T
    with np.errstate(divide="ignore", invalid="ignore"):
        a = np.where(v2 > 0, k3 / np.where(v2 > 0, v2, 1.0) ** 1.5, 0.0)
    return np.clip(a, -HALL_A_MAX, HALL_A_MAX)


#: Where the cubic is kept: while its slope (1 + a t / 3)**2 stays at or above
#: one half, i.e. |t| <= HALL_Q * 3 / |a|; beyond it the map continues as a
#: straight line with the slope at the end (see :func:`hall_transform`).
HALL_Q = 1.0 - 1.0 / np.sqrt(2.0)


def _hall_ends(a):
    """Ends t_L < t_R of the cubic's part, its values there and its end slopes."""
    a = np.asarray(a, dtype=np.float64)
    tiny = np.abs(a) < 1e-12
    safe = np.where(tiny, 1.0, a)
    tau = np.where(tiny, np.inf, 3.0 * HALL_Q / np.abs(safe))
    t_lo, t_hi = -tau, tau
    with np.errstate(invalid="ignore"):
        b_lo = 1.0 + safe * np.where(tiny, 0.0, t_lo) / 3.0
        b_hi = 1.0 + safe * np.where(tiny, 0.0, t_hi) / 3.0
    y_lo = np.where(tiny, -np.inf, (b_lo ** 3 - 1.0) / safe + a / 6.0)
    y_hi = np.where(tiny, np.inf, (b_hi ** 3 - 1.0) / safe + a / 6.0)
    return t_lo, t_hi, y_lo, y_hi, b_lo * b_lo, b_hi * b_hi


def hall_cubic(t, a):
    """Hall's (1992) cubic ``t + a t^2/3 + a^2 t^3/27 + a/6`` on its own."""
    return t + a * t * t / 3.0 + a * a * t * t * t / 27.0 + a / 6.0


def hall_transform(t, a):
    """Hall's cubic where its slope stays at or above 1/2, linear beyond.

    Hall's (1992) cubic ``t + a t^2/3 + a^2 t^3/27 + a/6`` is monotone, but
    its slope ``(1 + a t / 3)**2`` falls to zero at ``t = -3 / a`` and grows
    like ``t**2`` on the other side.  Bootstrapped, the growth turns the rare
    resample with a tiny standard error into a huge max statistic, and the
    flat stretch makes the inverse at the critical value enormous: with a
    gross value in a small group the intervals came out 30-60 times wider
    than the differences.  So the cubic is kept on ``|t| <= 3 q / |a|``
    (``q = 1 - 1/sqrt(2)``, where the slope on the flat side is exactly 1/2)
    and continued beyond as a straight line with the cubic's slope at the
    end (1/2 on one side, (1 + q)**2 = 1.67 on the other): strictly
    increasing, continuous with a continuous slope, its inverse magnifies by
    at most 2, and a resampled t enters the max at most 1.67-fold.  In the
    central part, where the skewness correction does its work at
    ``|a| <= 0.3`` (|t| up to 2.9), the map is Hall's.  The linear
    continuation is our construction (no source).
    """
    t = np.asarray(t, dtype=np.float64)
    a = np.asarray(a, dtype=np.float64)
    t_lo, t_hi, y_lo, y_hi, s_lo, s_hi = _hall_ends(a)
    with np.errstate(invalid="ignore"):
        out = np.where(t < t_lo, y_lo + s_lo * (t - t_lo),
                       np.where(t > t_hi, y_hi + s_hi * (t - t_hi), hall_cubic(t, a)))
    return out


def hall_inverse(y, a):
    """The ``t`` with ``hall_transform(t, a) == y``.

    On the cubic's part ``((1 + a t / 3)**3 - 1) / a + a / 6 = y``, so
    ``t = 3 (cbrt(1 + a (y - a / 6)) - 1) / a``; near a = 0 the two-term
    series ``u - a u^2 / 3`` (u = y - a / 6) avoids the cancellation.
    Beyond the ends, the inverse of the straight lines.
    """
    y, a = np.broadcast_arrays(np.asarray(y, dtype=np.float64),
                               np.asarray(a, dtype=np.float64))
    u = y - a / 6.0
    small = np.abs(a) < 1e-7
    safe = np.where(small, 1.0, a)
    with np.errstate(invalid="ignore", divide="ignore"):
        exact = 3.0 * (np.cbrt(1.0 + safe * u) - 1.0) / safe
    cubic = np.where(small, u - a * u * u / 3.0, exact)
    t_lo, t_hi, y_lo, y_hi, s_lo, s_hi = _hall_ends(a)
    with np.errstate(invalid="ignore"):
        return np.where(y < y_lo, t_lo + (y - y_lo) / s_lo,
                        np.where(y > y_hi, t_hi + (y - y_hi) / s_hi, cubic))


def ssq_floor(layout: Layout) -> np.ndarray:
    """Sums of squares below which a group counts as without spread:
    ``(SE_FLOOR s)**2 n_g`` with s the overall SD (as the SE floor)."""
    values = layout.values
    scale = float(np.std(values - values.mean())) or 1.0
    return (SE_FLOOR * scale) ** 2 * layout.stats.n.astype(np.float64)


def _hall_observed(layout: Layout, weights, t, se2):
    st = layout.stats
    groups = layout.split()
    ssq = np.array([float(((g - g.mean()) ** 2).sum()) for g in groups])
    m3 = np.array([float(((g - g.mean()) ** 3).sum()) for g in groups])
    gamma = pooled_skewness(ssq, m3, st.n, ssq_floor(layout))
    a = hall_skew(weights, st.var, st.n, gamma, se2)
    return hall_transform(t, a), a, float(gamma)


@dataclass(frozen=True)
class ObservedStatistics:
    """Observed estimates, standard errors and studentized statistics.

    ``u`` is the oriented statistic the max is taken over (|T|, T or -T)
    and ``thr`` the threshold a resampled u must reach to count as a hit.
    With "welch-hall", ``statistic`` is the transformed T, ``skew`` the
    ``a_j`` of each comparison and ``gamma`` the pooled skewness.
    """

    estimate: np.ndarray
    std_error: np.ndarray
    statistic: np.ndarray
    u: np.ndarray
    thr: np.ndarray
    se2_floor: np.ndarray = field(repr=False)
    skew: np.ndarray | None = None
    gamma: float | None = None


def observed_statistics(layout: Layout, family: Family, statistic: str,
                        alternative: str, trim: float = 0.2) -> ObservedStatistics:
    """Compute the family's observed statistics under ``statistic``."""
    centre, var_centre = group_terms(layout, "welch" if statistic == "welch-hall" else statistic,
                                     trim)
    weights = np.asarray(family.weights, dtype=np.float64)
    est = weights @ centre
    se2 = (weights * weights) @ var_centre
    bad = ~(se2 > 0)
    if np.any(bad):
        j = int(np.flatnonzero(bad)[0])
        raise FamwiseInputError(
            f"comparison {family.names[j]!r} has a zero standard error (its "
            f"groups have no spread); resampled studentized statistics are "
            f"undefined for it")
    se = np.sqrt(se2)
    t = est / se
    skew = gamma = None
    if statistic == "welch-hall":
        t, skew, gamma = _hall_observed(layout, weights, t, se2)
    u = np.abs(t) if alternative == "two-sided" else (t if alternative == "greater" else -t)
    thr = u - (TIE_RTOL * np.abs(u) + TIE_ATOL)
    # Standard-error floor: (1e-10 s)^2 sum_g w^2 / n_g, s = overall SD.
    values = layout.values
    scale = float(np.std(values - values.mean())) or 1.0
    n = layout.stats.n.astype(np.float64)
    se2_floor = (SE_FLOOR * scale) ** 2 * ((weights * weights) @ (1.0 / n))
    return ObservedStatistics(est, se, t, u, thr, se2_floor, skew, gamma)

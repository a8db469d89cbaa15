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
  winsorized variance and ``h_g = n_g - 2 floor(trim n_g)``.

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

from ..errors import FamwiseInputError
from ..families import Family
from ..layout import Layout

__all__ = ["STATISTICS", "ALTERNATIVES", "FamilyWeights", "ObservedStatistics",
           "family_weights", "group_terms", "trimmed_terms", "observed_statistics"]

STATISTICS = ("welch", "pooled", "yuen")
ALTERNATIVES = ("two-sided", "greater", "less")

# Relative and absolute tolerance for "a resampled statistic reaches the
# observed one": recomputing the observed arrangement in another summation
# order moves T in the last digits, and those resamples must count as ties.
TIE_RTOL = 1e-9
TIE_ATOL = 1e-12
# Floor of the standard error relative to the overall SD of the data.
SE_FLOOR = 1e-10


@dataclass(frozen=True)
class FamilyWeights:
    """A family's weights in compressed sparse rows, as the kernels read them."""

    row_ptr: np.ndarray   # (m + 1,) int64
    col: np.ndarray       # (nnz,) int64, group index
    w: np.ndarray         # (nnz,) float64, weight
    w2: np.ndarray        # (nnz,) float64, weight squared


def family_weights(family: Family) -> FamilyWeights:
    """Pack ``family.weights`` into compressed sparse rows (zeros dropped)."""
    weights = np.asarray(family.weights, dtype=np.float64)
    rows, cols = np.nonzero(weights)
    row_ptr = np.zeros(weights.shape[0] + 1, dtype=np.int64)
    np.cumsum(np.bincount(rows, minlength=weights.shape[0]), out=row_ptr[1:])
    w = weights[rows, cols]
    return FamilyWeights(row_ptr, cols.astype(np.int64), w, w * w)


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


@dataclass(frozen=True)
class ObservedStatistics:
    """Observed estimates, standard errors and studentized statistics.

    ``u`` is the oriented statistic the max is taken over (|T|, T or -T)
    and ``thr`` the threshold a resampled u must reach to count as a hit.
    """

    estimate: np.ndarray
    std_error: np.ndarray
    statistic: np.ndarray
    u: np.ndarray
    thr: np.ndarray
    se2_floor: np.ndarray = field(repr=False)


def observed_statistics(layout: Layout, family: Family, statistic: str,
                        alternative: str, trim: float = 0.2) -> ObservedStatistics:
    """Compute the family's observed statistics under ``statistic``."""
    centre, var_centre = group_terms(layout, statistic, trim)
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
    u = np.abs(t) if alternative == "two-sided" else (t if alternative == "greater" else -t)
    thr = u - (TIE_RTOL * np.abs(u) + TIE_ATOL)
    # Standard-error floor: (1e-10 s)^2 sum_g w^2 / n_g, s = overall SD.
    values = layout.values
    scale = float(np.std(values - values.mean())) or 1.0
    n = layout.stats.n.astype(np.float64)
    se2_floor = (SE_FLOOR * scale) ** 2 * ((weights * weights) @ (1.0 / n))
    return ObservedStatistics(est, se, t, u, thr, se2_floor)

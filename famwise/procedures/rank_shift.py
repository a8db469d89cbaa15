"""The Hodges-Lehmann shift of two groups and its distribution-free interval.

For groups x (n values) and y (m values) the Walsh-type pairwise differences
D = x_i - y_j (all n m of them) give

* the Hodges-Lehmann (1963) shift estimate, the median of D;
* the interval [D_(C), D_(nm + 1 - C)] obtained by inverting the
  Wilcoxon-Mann-Whitney test: a shift d is inside exactly when the rank-sum
  test of x - d against y does not reject at critical value c on the z
  scale.  With the normal approximation to the untied null distribution,
  C = floor(nm/2 - c sqrt(nm(n + m + 1)/12)) (Hollander, Wolfe & Chicken,
  *Nonparametric Statistical Methods*, 3rd ed., section 4.3, from memory;
  famwise rounds down, so the interval is never shorter than the test it
  inverts).  C < 1: the interval is unbounded.

Order statistics of D are found without forming D when nm is large: a
bisection on the value with an O((n + m) log m) count of D <= t, then the
largest difference at or below the bracket.
"""

from __future__ import annotations

import numpy as np

__all__ = ["shift_order_statistic", "hodges_lehmann", "shift_interval", "rank_c"]

_DIRECT_MAX = 4_000_000      # form D explicitly up to this many differences


def _count_le(xs, ys, t):
    """#{x_i - y_j <= t}: for each x_i the y_j >= x_i - t."""
    return int(ys.size * xs.size - np.searchsorted(ys, xs - t, side="left").sum())


def shift_order_statistic(x, y, r) -> np.ndarray:
    """The r-th smallest (1-based, array of r) of the differences x_i - y_j."""
    xs = np.sort(np.asarray(x, dtype=np.float64))
    ys = np.sort(np.asarray(y, dtype=np.float64))
    r = np.atleast_1d(np.asarray(r, dtype=np.int64))
    total = xs.size * ys.size
    if total <= _DIRECT_MAX:
        d = np.subtract.outer(xs, ys).ravel()
        return np.partition(d, r - 1)[r - 1]
    out = np.empty(r.size)
    for idx, rank in enumerate(r):
        lo, hi = xs[0] - ys[-1], xs[-1] - ys[0]
        if _count_le(xs, ys, lo) >= rank:
            out[idx] = lo
            continue
        # invariant: count(lo) < rank <= count(hi)
        for _ in range(200):
            mid = lo + (hi - lo) / 2.0
            if mid <= lo or mid >= hi:
                break
            if _count_le(xs, ys, mid) >= rank:
                hi = mid
            else:
                lo = mid
        # the answer is the largest difference <= hi
        j = np.searchsorted(ys, xs - hi, side="left")
        ok = j < ys.size
        out[idx] = float(np.max(xs[ok] - ys[j[ok]]))
    return out


def hodges_lehmann(x, y) -> float:
    """Median of the pairwise differences x_i - y_j (Hodges & Lehmann 1963)."""
    total = np.size(x) * np.size(y)
    if total % 2:
        return float(shift_order_statistic(x, y, [(total + 1) // 2])[0])
    a, b = shift_order_statistic(x, y, [total // 2, total // 2 + 1])
    return float(0.5 * (a + b))


def rank_c(n, m, crit) -> int:
    """C = floor(nm/2 - crit sqrt(nm(n + m + 1)/12)) (module notes)."""
    nm = float(n) * float(m)
    return int(np.floor(nm / 2.0 - crit * np.sqrt(nm * (n + m + 1.0) / 12.0) + 1e-9))


def shift_interval(x, y, crit, alternative="two-sided") -> tuple[float, float]:
    """The interval for the shift of x over y at critical value ``crit`` (z scale).

    One-sided (``"greater"``: a lower bound only; ``"less"``: an upper bound
    only) uses the same C on one side.
    """
    n, m = np.size(x), np.size(y)
    c = rank_c(n, m, crit)
    if not np.isfinite(crit) or c < 1:
        lower, upper = -np.inf, np.inf
    else:
        lower, upper = shift_order_statistic(x, y, [c, n * m + 1 - c])
    if alternative == "greater":
        upper = np.inf
    elif alternative == "less":
        lower = -np.inf
    return float(lower), float(upper)

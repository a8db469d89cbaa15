"""Scores and placements computed once, for the rank and score permutation kernels.

Two structures feed :mod:`famwise.resample.score_kernels`:

* linear scores (one number per observation: mid-ranks, or any score a
  procedure computes once), permuted as values: :func:`score_sum_problem`;
* :class:`Placements`, the pairwise-score structure of U-statistics: every
  observation has a lower and an upper end, and b lies *above* a when
  a's upper end is below b's lower end.  The antisymmetric score
  S[a, b] = [b above a] - [a above b] is never stored; one sorted scan gives
  G[a, g] = sum_{b in g} S[a, b] for every observation and group.

Interface for a new pairwise score (e.g. Gehan's on left-censored values)
-------------------------------------------------------------------------
Build ``Placements.from_bounds(lower, upper, upper_open)``: for a detected
value v, ``lower = upper = v`` (closed); for a value known only to lie below
a limit L, ``lower = -inf``, ``upper = L``, ``upper_open = True``.  Then

* ``placements.group_sums(codes, k)`` gives the observed (A, Q2, Qx) of the
  module notes of :mod:`famwise.resample.score_kernels`;
* :func:`pair_statistics` turns them into each comparison's statistic with
  ``mode`` ``"mantel"`` (U over its permutation standard deviation, as
  Mantel 1967 standardised Gehan's statistic), ``"fixed"`` or
  ``"brunner-munzel"``;
* :func:`placement_problem` builds the engine's problem; the kernel repeats
  exactly those formulas in every permutation of all N labels.

With point values (``Placements.from_values``) and mode ``"mantel"`` the
statistic is each pair's Wilcoxon-Mann-Whitney z with the tie-corrected
variance (no continuity correction).
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from ..core.errors import FamwiseInputError
from . import engine
from .score_kernels import BRUNNER_MUNZEL, FIXED, MANTEL

__all__ = ["Placements", "PairStatistics", "MODES", "pair_statistics", "placement_problem",
           "score_sum_problem", "midranks", "tie_sizes"]

MODES = {"mantel": MANTEL, "fixed": FIXED, "brunner-munzel": BRUNNER_MUNZEL}
# Variance floor of a Mantel statistic (all values of a pair tied): T = 0.
_V_FLOOR = 1e-12


def midranks(values) -> np.ndarray:
    """Mid-ranks 1..N of ``values`` (ties share the mean of their ranks)."""
    x = np.asarray(values, dtype=np.float64)
    order = np.argsort(x, kind="stable")
    xs = x[order]
    starts = np.flatnonzero(np.r_[True, xs[1:] != xs[:-1]])
    ends = np.r_[starts[1:], xs.size]
    mid = (starts + ends + 1) / 2.0
    ranks = np.empty(x.size)
    ranks[order] = np.repeat(mid, ends - starts)
    return ranks


def tie_sizes(values) -> np.ndarray:
    """Sizes of the groups of equal values (ties), one per distinct value."""
    _, counts = np.unique(np.asarray(values, dtype=np.float64), return_counts=True)
    return counts


@dataclass(frozen=True)
class Placements:
    """The sorted structure behind G[a, g] (see the module notes).

    Attributes
    ----------
    kind : {"point", "interval"}
    order : ndarray of int64, shape (N,)
        Point data: the observation at each sorted position.
    block_ptr : ndarray of int64
        Point data: bounds of the tie blocks in sorted order.
    ev_elem, ev_hi : ndarray, shape (2N,)
        Interval data: observation and end (1 upper, 0 lower) of each event,
        in sorted event order.
    """

    kind: str
    n_obs: int
    order: np.ndarray = field(repr=False, default=None)
    block_ptr: np.ndarray = field(repr=False, default=None)
    ev_elem: np.ndarray = field(repr=False, default=None)
    ev_hi: np.ndarray = field(repr=False, default=None)

    @classmethod
    def from_values(cls, values) -> "Placements":
        """Point values: b lies above a when x_b > x_a; ties score 0."""
        x = np.asarray(values, dtype=np.float64)
        order = np.argsort(x, kind="stable").astype(np.int64)
        xs = x[order]
        starts = np.flatnonzero(np.r_[True, xs[1:] != xs[:-1]]) if x.size else np.zeros(0, int)
        block_ptr = np.r_[starts, x.size].astype(np.int64)
        return cls("point", int(x.size), order=order, block_ptr=block_ptr)

    @classmethod
    def from_bounds(cls, lower, upper, upper_open=None) -> "Placements":
        """Interval observations: a in [lower, upper] (upper end open where
        ``upper_open``); b lies above a when upper_a < lower_b, or when they
        are equal and a's upper end is open."""
        lo = np.asarray(lower, dtype=np.float64)
        hi = np.asarray(upper, dtype=np.float64)
        op = (np.zeros(lo.shape, dtype=bool) if upper_open is None
              else np.asarray(upper_open, dtype=bool))
        if lo.shape != hi.shape or op.shape != lo.shape or lo.ndim != 1:
            raise FamwiseInputError("lower, upper and upper_open must be 1-D of one length")
        if np.any(np.isnan(lo)) or np.any(np.isnan(hi)) or np.any(hi < lo) \
                or np.any(op & (hi <= lo)) or np.any(np.isinf(hi) & (hi < 0)):
            bad = int(np.flatnonzero(np.isnan(lo) | np.isnan(hi) | (hi < lo)
                                     | (op & (hi <= lo)) | (np.isinf(hi) & (hi < 0)))[0])
            raise FamwiseInputError(
                f"observation {bad + 1} has an empty interval [{lo[bad]}, {hi[bad]}]"
                f"{' (open above)' if op[bad] else ''}")
        if not op.any() and np.array_equal(lo, hi):
            return cls.from_values(lo)
        n = lo.size
        value = np.r_[lo, hi]
        # token flag: an open upper end sorts before a lower end at the same value,
        # a lower end before a closed upper end
        flag = np.r_[np.ones(n), np.where(op, 0.0, 1.0)]
        kind = np.r_[np.zeros(n), np.ones(n)]
        ev = np.lexsort((kind, flag, value))
        return cls("interval", n, ev_elem=(ev % n).astype(np.int64),
                   ev_hi=(ev >= n).astype(np.int8))

    @property
    def has_ties(self) -> bool:
        """Whether some pair of observations scores 0 (point ties, or intervals)."""
        if self.kind == "interval":
            return True
        return self.block_ptr.size - 1 < self.n_obs

    def g_matrix(self, codes, k: int) -> np.ndarray:
        """G[a, g] = sum_{b in g} S[a, b] for the labels ``codes`` (N x k)."""
        codes = np.asarray(codes, dtype=np.int64)
        n = np.bincount(codes, minlength=k).astype(np.float64)
        if self.kind == "point":
            lab = codes[self.order]
            nb = self.block_ptr.size - 1
            block = np.repeat(np.arange(nb), np.diff(self.block_ptr))
            counts = np.zeros((nb, k))
            np.add.at(counts, (block, lab), 1.0)
            below = np.cumsum(counts, axis=0) - counts
            g_sorted = n[None, :] - 2.0 * below[block] - counts[block]
            out = np.empty_like(g_sorted)
            out[self.order] = g_sorted
            return out
        lab = codes[self.ev_elem]
        onehot = np.zeros((self.ev_elem.size, k))
        onehot[np.arange(self.ev_elem.size), lab] = 1.0
        is_hi = self.ev_hi.astype(bool)
        cum_hi = np.cumsum(onehot * is_hi[:, None], axis=0) - onehot * is_hi[:, None]
        cum_lo = np.cumsum(onehot * ~is_hi[:, None], axis=0)
        below = np.empty((self.n_obs, k))
        below[self.ev_elem[~is_hi]] = cum_hi[~is_hi]
        out = np.empty((self.n_obs, k))
        out[self.ev_elem[is_hi]] = n[None, :] - cum_lo[is_hi] - below[self.ev_elem[is_hi]]
        return out

    def group_sums(self, codes, k: int):
        """Observed (A, Q2, Qx), each k x k (module notes of score_kernels)."""
        codes = np.asarray(codes, dtype=np.int64)
        g = self.g_matrix(codes, k)
        onehot = np.zeros((codes.size, k))
        onehot[np.arange(codes.size), codes] = 1.0
        own = g[np.arange(codes.size), codes]
        return onehot.T @ g, onehot.T @ (g * g), onehot.T @ (g * own[:, None])


@dataclass(frozen=True)
class PairStatistics:
    """Each comparison's pairwise statistic, oriented group_a - group_b.

    ``statistic`` is positive when group_a tends to be larger;
    ``relative_effect`` is P(X_b < X_a) + P(X_b = X_a) / 2 (the probability
    that a value of group_a exceeds one of group_b, ties counting half);
    ``variance`` the variance used to studentise; for "brunner-munzel" also
    ``df`` (Brunner & Munzel's Satterthwaite-type degrees of freedom).
    """

    statistic: np.ndarray
    relative_effect: np.ndarray
    variance: np.ndarray
    df: np.ndarray | None = None


def pair_statistics(sums, n, pa, pb, mode: str, fixed_v=None) -> PairStatistics:
    """The formulas of :mod:`famwise.resample.score_kernels`, in numpy.

    ``sums`` is (A, Q2, Qx), each (..., k, k): leading axes (arrangements of
    the labels, for a full enumeration) are kept.
    """
    a, q2, qx = sums
    n = np.asarray(n, dtype=np.float64)
    pa, pb = np.asarray(pa), np.asarray(pb)
    ni, nl = n[pa], n[pb]
    a_il, a_li = a[..., pa, pb], a[..., pb, pa]
    rel = 0.5 + a_li / (2.0 * ni * nl)
    if mode == "brunner-munzel":
        sx = (q2[..., pb, pa] - a_li ** 2 / nl) / (4.0 * (nl - 1.0))
        sy = (q2[..., pa, pb] - a_il ** 2 / ni) / (4.0 * (ni - 1.0))
        sx, sy = np.maximum(sx, 0.0), np.maximum(sy, 0.0)
        d = nl * sx + ni * sy
        with np.errstate(divide="ignore", invalid="ignore"):
            df = d ** 2 / ((nl * sx) ** 2 / (nl - 1.0) + (ni * sy) ** 2 / (ni - 1.0))
        d = np.maximum(d, 0.25)
        return PairStatistics(a_li / (2.0 * np.sqrt(d)), rel, d, df)
    if mode == "fixed":
        v = np.asarray(fixed_v, dtype=np.float64)
    elif mode == "mantel":
        hh = (qx[..., pa, pa] + 2.0 * qx[..., pa, pb] + q2[..., pa, pb]
              + qx[..., pb, pb] + 2.0 * qx[..., pb, pa] + q2[..., pb, pa])
        nn = ni + nl
        v = ni * nl * hh / (nn * (nn - 1.0))
    else:
        raise FamwiseInputError(f"mode must be one of {sorted(MODES)}; got {mode!r}")
    v = np.maximum(v, _V_FLOOR)
    return PairStatistics(-a_il / np.sqrt(v), rel, v)


def _orientation(alternative):
    return (1.0 if alternative != "less" else -1.0), alternative == "two-sided"


def placement_problem(placements: Placements, codes, k: int, pairs, mode: str, u, thr,
                      alternative: str, fixed_v=None) -> engine.ResamplingProblem:
    """The engine problem for pairwise U-statistics over permutations of all N labels.

    ``pairs`` (m x 2) are the comparisons (group_a, group_b); ``u`` the
    observed oriented statistics (for the step-down order) and ``thr`` the
    thresholds a permuted u must reach to count as a hit.
    """
    codes = np.asarray(codes, dtype=np.int64)
    n = np.bincount(codes, minlength=k).astype(np.int64)
    pairs = np.asarray(pairs, dtype=np.int64).reshape(-1, 2)
    m = pairs.shape[0]
    sign, two_sided = _orientation(alternative)
    order = np.argsort(-np.asarray(u), kind="stable").astype(np.int64)
    fv = (np.zeros(m) if fixed_v is None else np.ascontiguousarray(fixed_v, dtype=np.float64))
    dtype = np.int8 if k <= 127 else np.int16
    tail = (n, MODES[mode], np.ascontiguousarray(pairs[:, 0]),
            np.ascontiguousarray(pairs[:, 1]), fv, np.full(m, _V_FLOOR), sign, two_sided,
            np.ascontiguousarray(thr, dtype=np.float64), order)
    if placements.kind == "point":
        lab = np.ascontiguousarray(codes[placements.order].astype(dtype))
        return engine.ResamplingProblem("placement_point_chunk",
                                        (placements.block_ptr, lab) + tail,
                                        placements.n_obs, m)
    lab = np.ascontiguousarray(codes.astype(dtype))
    return engine.ResamplingProblem("placement_interval_chunk",
                                    (placements.ev_elem, placements.ev_hi, lab) + tail,
                                    2 * placements.n_obs * max(k, 1), m)


def score_sum_problem(scores, codes, k: int, weights, vm, u, thr,
                      alternative: str) -> engine.ResamplingProblem:
    """The engine problem for linear score statistics (contrasts of mean scores).

    T_j = sum_g W[j, g] mean_g / sqrt(sum_g W[j, g]**2 vm[g]) with ``vm``
    fixed (the permutation variance of a group's mean score).
    """
    from .statistics import FamilyWeights
    codes = np.asarray(codes, dtype=np.int64)
    n = np.bincount(codes, minlength=k).astype(np.int64)
    weights = np.asarray(weights, dtype=np.float64)
    rows, cols = np.nonzero(weights)
    row_ptr = np.zeros(weights.shape[0] + 1, dtype=np.int64)
    np.cumsum(np.bincount(rows, minlength=weights.shape[0]), out=row_ptr[1:])
    w = weights[rows, cols]
    fw = FamilyWeights(row_ptr, cols.astype(np.int64), w, w * w, w * w * w)
    sign, two_sided = _orientation(alternative)
    order = np.argsort(-np.asarray(u), kind="stable").astype(np.int64)
    x = np.asarray(scores, dtype=np.float64)
    x = x - x.mean()
    x = x[np.argsort(codes, kind="stable")]
    largest = int(np.argmax(n))
    others = [g for g in range(k) if g != largest]
    # group order in x is 0..k-1; rebuild so the largest group comes first
    bounds = np.r_[0, np.cumsum(n)]
    parts = [x[bounds[largest]:bounds[largest + 1]]] + [x[bounds[g]:bounds[g + 1]]
                                                        for g in others]
    x = np.ascontiguousarray(np.concatenate(parts))
    hi = np.empty(len(others), dtype=np.int64)
    lo = np.empty(len(others), dtype=np.int64)
    top = x.size
    for s, g in enumerate(others):
        hi[s], lo[s] = top, top - n[g]
        top -= n[g]
    m = weights.shape[0]
    se2_floor = np.full(m, 1e-300)
    args = (x, lo, hi, np.asarray(others, dtype=np.int64), n, largest, float(x.sum()),
            np.ascontiguousarray(vm, dtype=np.float64), fw.row_ptr, fw.col, fw.w, fw.w2,
            se2_floor, sign, two_sided, np.ascontiguousarray(thr, dtype=np.float64), order)
    return engine.ResamplingProblem("score_sum_chunk", args, x.size, m)

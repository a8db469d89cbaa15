"""Compiled permutation loops for rank and score statistics (numba, ``nogil``, cached).

Two kinds of statistic, both permuting all N group labels, with the chunk
contract of :mod:`famwise.resample.kernels` (``maxima``, ``hits_marginal``,
``hits_stepdown``; PCG32 stream per chunk, Lemire's bounded draws, inputs
never written):

* :func:`score_sum_chunk`: *linear* score statistics, a contrast of group
  means of fixed scores (ranks for Dunn's z, or any scores computed once)
  divided by a standard error that does not change under permutation
  (``vm[g]``, the variance of group g's mean score).  The loop is the Welch
  permutation loop of :func:`famwise.resample.kernels.permutation_chunk`
  without the sums of squares.
* :func:`placement_point_chunk` and :func:`placement_interval_chunk`:
  *pairwise* U-statistics, U_ij = sum_{a in i} sum_{b in j} S[a, b], with
  an antisymmetric pairwise score S[a, b] in {-1, 0, +1}: +1 when b is
  known to lie above a, -1 when below, 0 when neither can be said (a tie,
  or two values below detection limits).  Each comparison's statistic is
  re-studentised in every permutation.

The placement structure
-----------------------
The N x N matrix S is never formed.  Every observation a has a lower and an
upper end, ``lo_a <= hi_a``, and b lies above a when ``hi_a < lo_b``
(a point value has lo = hi; a value below a detection limit L has
lo = -inf and an open upper end at L).  :class:`famwise.resample.scores.Placements`
turns the ends into one sorted *event* sequence of 2N events (ties: an
open upper end before a lower end before a closed upper end), or, for
point data, into the sorted order with its tie blocks.  One scan over it
with per-group counters gives, for each observation a and group g,

    G[a, g] = sum_{b in g} S[a, b] = #{b in g above a} - #{b in g below a},

in O(N k) per permutation.  The kernels accumulate, per group c and group g,

    A[c, g]  = sum_{a in c} G[a, g]
    Q2[c, g] = sum_{a in c} G[a, g]**2
    Qx[c, g] = sum_{a in c} G[a, c] G[a, g]

and form, for comparison j = (i, l) (``pa[j]``, ``pb[j]``, oriented so that
a positive statistic means group i tends to be larger):

* ``mode = MANTEL``: T = -A[i, l] / sqrt(V), with Mantel's (1967)
  permutation variance of a U-statistic in the pooled sample of i and l,
  V = n_i n_l / (n (n - 1)) sum_{a in i or l} h_a**2, h_a = G[a, i] + G[a, l]
  (n = n_i + n_l).  With S the sign of the difference this is the pair's
  Wilcoxon-Mann-Whitney statistic with the tie-corrected variance
  (Steel-Dwass, Steel); with Gehan's (1965) score on censored values it is
  the Gehan statistic standardised as Mantel proposed.
* ``mode = FIXED``: T = -A[i, l] / sqrt(fixed_v[j]), a variance that does not
  change under permutation (untied point data: V = n_i n_l (n + 1) / 3).
* ``mode = BRUNNER_MUNZEL``: the Brunner-Munzel (2000) statistic with x = l,
  y = i: p = 1/2 + A[l, i] / (2 n_l n_i), placements P_y(a) = (n_i - G[a, i]) / 2,
  S_x^2 their variance over a in l (and S_y^2 likewise), and
  T = A[l, i] / (2 sqrt(D)), D = n_l S_x^2 + n_i S_y^2 (Neubert & Brunner 2007:
  the studentised statistic, recomputed in each permutation).  D = 0 (both
  groups' placements constant: complete separation, or all tied) is
  replaced by 1/4, the smallest value a non-zero D can take (placements lie
  on a grid of one half, and one placement off by one half gives
  n S^2 = 1/4); so complete separation gives a large finite statistic and
  an all-tied pair gives 0, never a NaN.

A new pairwise score plugs in by building its ``Placements`` (its two ends
per observation); a score that is not of this interval form needs its own
G[a, g] fill, and the accumulation and statistics above stay as they are.
"""

from __future__ import annotations

import numpy as np
from numba import njit

from .kernels import _draw_upto, _family_stats, _pcg_init, _tally

__all__ = ["score_sum_chunk", "placement_point_chunk", "placement_interval_chunk",
           "MANTEL", "FIXED", "BRUNNER_MUNZEL"]

MANTEL = 0
FIXED = 1
BRUNNER_MUNZEL = 2


@njit(cache=True, nogil=True)
def score_sum_chunk(x, seg_lo, seg_hi, seg_group, n, largest, tot_s, vm, row_ptr, col,
                    w, w2, se2_floor, sign, two_sided, thr, order, stepdown, size,
                    rng_state):
    """Run ``size`` permutations of a linear score statistic.

    ``x`` holds the scores (centred) with the largest group first; positions
    ``seg_lo[s] .. seg_hi[s]-1`` belong to group ``seg_group[s]``, filled by
    a partial Fisher-Yates shuffle (N - n_largest draws) as in
    :func:`famwise.resample.kernels.permutation_chunk`.  ``vm[g]`` is the
    fixed variance of group g's mean score.
    """
    buf = x.copy()
    k = n.size
    m = row_ptr.size - 1
    maxima = np.empty(size)
    hits_marginal = np.zeros(m, dtype=np.int64)
    hits_stepdown = np.zeros(m, dtype=np.int64)
    ustat = np.empty(m)
    mean = np.empty(k)
    state, inc = _pcg_init(rng_state[0], rng_state[1])
    for b in range(size):
        rest = tot_s
        for s_ in range(seg_group.size):
            g = seg_group[s_]
            acc = 0.0
            for i in range(seg_hi[s_] - 1, seg_lo[s_] - 1, -1):
                j, state = _draw_upto(state, inc, np.uint64(i + 1))
                v = buf[j]
                buf[j] = buf[i]
                buf[i] = v
                acc += v
            mean[g] = acc / n[g]
            rest -= acc
        mean[largest] = rest / n[largest]
        # _family_stats reads vm and never writes it.
        maxima[b] = _family_stats(mean, vm, row_ptr, col, w, w2, se2_floor, sign,
                                  two_sided, thr, order, ustat, hits_marginal,
                                  hits_stepdown, stepdown)
    return maxima, hits_marginal, hits_stepdown


@njit(cache=True, nogil=True, inline="always")
def _shuffle(lab, state, inc):
    """Full Fisher-Yates pass over ``lab`` in place; returns the new state."""
    for i in range(lab.size - 1, 0, -1):
        j, state = _draw_upto(state, inc, np.uint64(i + 1))
        g = lab[j]
        lab[j] = lab[i]
        lab[i] = g
    return state


@njit(cache=True, nogil=True, inline="always")
def _accumulate(c, weight, gv, acc_a, acc_q2, acc_qx, k, squares):
    gc = gv[c]
    for g in range(k):
        v = gv[g]
        acc_a[c, g] += weight * v
    if squares:
        for g in range(k):
            v = gv[g]
            acc_q2[c, g] += weight * v * v
            acc_qx[c, g] += weight * gc * v


@njit(cache=True, nogil=True)
def _pair_stats(acc_a, acc_q2, acc_qx, n, mode, pa, pb, fixed_v, se2_floor, sign,
                two_sided, ustat):
    """Each comparison's statistic from the accumulated sums (module notes)."""
    m = pa.size
    for j in range(m):
        i = pa[j]
        l = pb[j]
        ni = np.float64(n[i])
        nl = np.float64(n[l])
        if mode == 2:
            sx = (acc_q2[l, i] - acc_a[l, i] * acc_a[l, i] / nl) / (4.0 * (nl - 1.0))
            sy = (acc_q2[i, l] - acc_a[i, l] * acc_a[i, l] / ni) / (4.0 * (ni - 1.0))
            d = nl * sx + ni * sy
            if d < 0.25:
                d = 0.25
            t = acc_a[l, i] / (2.0 * np.sqrt(d))
        else:
            if mode == 1:
                v = fixed_v[j]
            else:
                hh = (acc_qx[i, i] + 2.0 * acc_qx[i, l] + acc_q2[i, l]
                      + acc_qx[l, l] + 2.0 * acc_qx[l, i] + acc_q2[l, i])
                nn = ni + nl
                v = ni * nl * hh / (nn * (nn - 1.0))
            if v < se2_floor[j]:
                v = se2_floor[j]
            t = -acc_a[i, l] / np.sqrt(v)
        ustat[j] = abs(t) if two_sided else sign * t


@njit(cache=True, nogil=True, inline="always")
def _fy_step(lab, i, state, inc):
    """Fisher-Yates step at position i (j uniform on 0..i); returns the state."""
    j, state = _draw_upto(state, inc, np.uint64(i + 1))
    lv = lab[j]
    lab[j] = lab[i]
    lab[i] = lv
    return state


@njit(cache=True, nogil=True)
def placement_point_chunk(block_ptr, lab0, n, mode, pa, pb, fixed_v, se2_floor, sign,
                          two_sided, thr, order, stepdown, size, rng_state):
    """Run ``size`` permutations of pairwise U-statistics on point data.

    ``lab0[p]`` is the group of the observation at sorted position p;
    ``block_ptr`` bounds the tie blocks of the sorted values.  The
    Fisher-Yates pass runs from the top position down, and position p is
    final once its step is done, so the scan (from the largest values down)
    is fused with the shuffle.  An observation of group c in a block with
    ``tie[g]`` members of group g and ``cnt[g]`` above it has
    G[g] = 2 cnt[g] + tie[g] - n_g; each observation adds its group's
    counters into its group's row (a fixed loop over the k groups, which
    branch predictors handle far better than a per-group list).

    Untied data (every block one value) take a loop without blocks:
    A[c, g] = 2 P1[c, g] - n_c n_g and Q2[c, g] = 4 P2[c, g] - 4 n_g P1[c, g]
    + n_c n_g^2 (c != g) from P1 = sum cnt_g and P2 = sum cnt_g^2 over c.
    Mantel's variance needs no per-observation squares on point data: the
    pooled sum of h_a^2 is (n^3 - sum_b (t_ib + t_lb)^3) / 3 over the tie
    blocks b, from T3[c] = sum_b t_cb^3 and M[c, g] = sum_b t_cb^2 t_gb,
    which only tied blocks change.
    """
    lab = lab0.copy()
    k = n.size
    m = pa.size
    nb = block_ptr.size - 1
    big_n = lab.size
    bm = mode == 2
    untied = nb == big_n
    maxima = np.empty(size)
    hits_marginal = np.zeros(m, dtype=np.int64)
    hits_stepdown = np.zeros(m, dtype=np.int64)
    ustat = np.empty(m)
    acc_a = np.empty((k, k))
    acc_q2 = np.empty((k, k))
    t3 = np.empty(k)
    mx = np.empty((k, k))
    cnt = np.empty(k)
    tie = np.zeros(k)
    present = np.empty(k, dtype=np.int64)
    icnt = np.zeros(k, dtype=np.int64)
    ip1 = np.zeros(k * k, dtype=np.int64)
    ip2 = np.zeros(k * k, dtype=np.int64)
    nf = n.astype(np.float64)
    state, inc = _pcg_init(rng_state[0], rng_state[1])
    for b in range(size):
        for c in range(k):
            cnt[c] = 0.0
            t3[c] = nf[c]
            for g in range(k):
                acc_a[c, g] = 0.0
                acc_q2[c, g] = 0.0
                mx[c, g] = 0.0
        if untied:
            # integer counters: a one-cycle add, where a float add would chain
            # four cycles through memory when neighbours share a group
            for c in range(k):
                icnt[c] = 0
            for e in range(k * k):
                ip1[e] = 0
                ip2[e] = 0
            i = big_n - 1
            while i >= 0:
                if i > 0:
                    state = _fy_step(lab, i, state, inc)
                c = np.int64(lab[i])
                base = c * k
                if bm:
                    for g in range(k):
                        cg = icnt[g]
                        ip1[base + g] += cg
                        ip2[base + g] += cg * cg
                else:
                    for g in range(k):
                        ip1[base + g] += icnt[g]
                icnt[c] += 1
                i -= 1
            for c in range(k):
                for g in range(k):
                    p1 = np.float64(ip1[c * k + g])
                    acc_a[c, g] = 2.0 * p1 - nf[c] * nf[g]
                    if bm:
                        acc_q2[c, g] = (4.0 * np.float64(ip2[c * k + g]) - 4.0 * nf[g] * p1
                                        + nf[c] * nf[g] * nf[g])
        else:
            hi = big_n
            for s_ in range(nb):
                lo = block_ptr[nb - 1 - s_]
                i = hi - 1
                while i >= lo and i > 0:
                    state = _fy_step(lab, i, state, inc)
                    i -= 1
                if hi - lo == 1:
                    c = np.int64(lab[lo])
                    for g in range(k):
                        gv1 = 2.0 * cnt[g] - nf[g]
                        acc_a[c, g] += gv1
                        if bm:
                            acc_q2[c, g] += gv1 * gv1
                    cnt[c] += 1.0
                    hi = lo
                    continue
                npres = 0
                for p in range(lo, hi):
                    c = np.int64(lab[p])
                    if tie[c] == 0.0:
                        present[npres] = c
                        npres += 1
                    tie[c] += 1.0
                for q in range(npres):
                    c = present[q]
                    w = tie[c]
                    for g in range(k):
                        gv2 = 2.0 * cnt[g] + tie[g] - nf[g]
                        acc_a[c, g] += w * gv2
                        if bm:
                            acc_q2[c, g] += w * gv2 * gv2
                    if not bm:
                        t3[c] += w * w * w - w
                        for r in range(npres):
                            g = present[r]
                            if g != c:
                                mx[c, g] += w * w * tie[g]
                for q in range(npres):
                    c = present[q]
                    cnt[c] += tie[c]
                    tie[c] = 0.0
                hi = lo
        for j in range(m):
            i = pa[j]
            l = pb[j]
            ni = nf[i]
            nl = nf[l]
            if bm:
                sx = (acc_q2[l, i] - acc_a[l, i] * acc_a[l, i] / nl) / (4.0 * (nl - 1.0))
                sy = (acc_q2[i, l] - acc_a[i, l] * acc_a[i, l] / ni) / (4.0 * (ni - 1.0))
                d = nl * sx + ni * sy
                if d < 0.25:
                    d = 0.25
                t = acc_a[l, i] / (2.0 * np.sqrt(d))
            else:
                if mode == 1:
                    vv = fixed_v[j]
                else:
                    nn = ni + nl
                    s3 = t3[i] + t3[l] + 3.0 * (mx[i, l] + mx[l, i])
                    vv = ni * nl * (nn * nn * nn - s3) / (3.0 * nn * (nn - 1.0))
                if vv < se2_floor[j]:
                    vv = se2_floor[j]
                t = -acc_a[i, l] / np.sqrt(vv)
            ustat[j] = abs(t) if two_sided else sign * t
        maxima[b] = _tally(ustat, thr, order, hits_marginal, hits_stepdown, stepdown)
    return maxima, hits_marginal, hits_stepdown


@njit(cache=True, nogil=True)
def placement_interval_chunk(ev_elem, ev_hi, lab0, n, mode, pa, pb, fixed_v, se2_floor,
                             sign, two_sided, thr, order, stepdown, size, rng_state):
    """Run ``size`` permutations of pairwise U-statistics on interval data.

    ``ev_elem[e]`` is the observation of event e and ``ev_hi[e]`` 1 for its
    upper end, 0 for its lower end, in the sorted event order of
    :class:`famwise.resample.scores.Placements`.  At a lower end of a the
    kernel records ``below[a, g]`` (upper ends of group g passed); at its
    upper end, G[g] = n_g - (lower ends of g passed) - below[a, g].
    ``lab0[a]`` is the group of observation a; the labels are shuffled over
    the observations.
    """
    lab = lab0.copy()
    k = n.size
    m = pa.size
    big_n = lab.size
    squares = mode != 1
    maxima = np.empty(size)
    hits_marginal = np.zeros(m, dtype=np.int64)
    hits_stepdown = np.zeros(m, dtype=np.int64)
    ustat = np.empty(m)
    acc_a = np.empty((k, k))
    acc_q2 = np.empty((k, k))
    acc_qx = np.empty((k, k))
    cnt_lo = np.empty(k)
    cnt_hi = np.empty(k)
    below = np.empty((big_n, k))
    gv = np.empty(k)
    nf = n.astype(np.float64)
    state, inc = _pcg_init(rng_state[0], rng_state[1])
    for b in range(size):
        state = _shuffle(lab, state, inc)
        for c in range(k):
            cnt_lo[c] = 0.0
            cnt_hi[c] = 0.0
            for g in range(k):
                acc_a[c, g] = 0.0
                acc_q2[c, g] = 0.0
                acc_qx[c, g] = 0.0
        for e in range(ev_elem.size):
            a = ev_elem[e]
            c = lab[a]
            if ev_hi[e] == 0:
                for g in range(k):
                    below[a, g] = cnt_hi[g]
                cnt_lo[c] += 1.0
            else:
                for g in range(k):
                    gv[g] = nf[g] - cnt_lo[g] - below[a, g]
                _accumulate(c, 1.0, gv, acc_a, acc_q2, acc_qx, k, squares)
                cnt_hi[c] += 1.0
        _pair_stats(acc_a, acc_q2, acc_qx, n, mode, pa, pb, fixed_v, se2_floor, sign,
                    two_sided, ustat)
        maxima[b] = _tally(ustat, thr, order, hits_marginal, hits_stepdown, stepdown)
    return maxima, hits_marginal, hits_stepdown

"""Compiled inner loops of the resampling engine (numba, ``nogil``, cached).

One call of a chunk kernel runs ``size`` resamples of one data set and
returns what the engine needs and nothing of size B x N:

* ``maxima`` (size,): the max statistic of each resample, max_j u*_j
  (for single-step p-values and simultaneous interval quantiles);
* ``hits_marginal`` (m,): how often u*_j >= u_j for each comparison;
* ``hits_stepdown`` (m,): how often the successive maximum over the
  comparisons ranked at or below comparison r (by observed statistic)
  reaches the observed u of rank r (Westfall & Young 1993, Algorithm 2.8).

Here u = |T| (two-sided), T (greater) or -T (less).  The kernels never write
to their inputs (joblib may hand workers read-only memory maps); each keeps
a private working copy.

Random numbers
--------------
Each chunk has its own PCG32 stream (O'Neill 2014, "PCG: a family of simple
fast space-efficient statistically good algorithms for random number
generation", HMC-CS-2014-0905), whose 64-bit state and 64-bit stream
selector are drawn by the engine from the chunk's
:class:`numpy.random.SeedSequence` child.  Bounded integers use Lemire's
multiply-and-reject method (Lemire 2019, *ACM TOMACS* 29(1):3,
doi:10.1145/3230636), which is exactly uniform.  A compiled 32-bit generator
with its state in registers is what lets the fused loops run at about two
nanoseconds per element.

Degenerate resamples
--------------------
A resample may have groups with zero spread (a bootstrap resample of four
values that draws one value four times; tied data).  The squared standard
error of each comparison is floored at ``se2_floor[j]``, which the engine
sets to ``(1e-10 * s)**2 * sum_g w_jg**2 / n_g`` with ``s`` the overall
standard deviation of the data, so such a resample gives a very large but
finite statistic (or 0 when the estimate is 0 too) and never a NaN.
"""

from __future__ import annotations

import numpy as np
from numba import njit

__all__ = ["permutation_chunk", "permutation_labels_chunk", "bootstrap_chunk",
           "bootstrap_hall_chunk", "bootstrap_trimmed_chunk", "seed_state"]

_MULT = np.uint64(6364136223846793005)
_M32 = np.uint64(0xFFFFFFFF)
_TWO32 = np.uint64(1 << 32)
_S18 = np.uint64(18)
_S27 = np.uint64(27)
_S32 = np.uint64(32)
_S59 = np.uint64(59)
_U31 = np.uint64(31)
_ONE = np.uint64(1)
_ZERO = np.uint64(0)


def seed_state(seed_sequence: np.random.SeedSequence) -> np.ndarray:
    """Return the (state, stream) pair of a chunk's PCG32 generator.

    The pair is drawn from ``seed_sequence`` (a chunk's SeedSequence child),
    so the chunk's random numbers depend on the root seed and the chunk's
    index only.
    """
    return seed_sequence.generate_state(2, dtype=np.uint64)


@njit(cache=True, nogil=True, inline="always")
def _pcg_init(initstate, initseq):
    # pcg32_srandom_r (O'Neill 2014, pcg_basic.c).
    inc = (initseq << _ONE) | _ONE
    state = _ZERO
    state = state * _MULT + inc
    state = state + initstate
    state = state * _MULT + inc
    return state, inc


@njit(cache=True, nogil=True, inline="always")
def _pcg_out(old):
    # XSH-RR output of the 64-bit LCG state before the step.
    xs = (((old >> _S18) ^ old) >> _S27) & _M32
    rot = old >> _S59
    return ((xs >> rot) | (xs << ((_S32 - rot) & _U31))) & _M32


@njit(cache=True, nogil=True, inline="always")
def _draw(state, inc, bound, tg):
    """One exactly uniform index in [0, bound) and the advanced state
    (Lemire's multiply-and-reject; ``tg = (2^32 - bound) % bound``)."""
    old = state
    state = old * _MULT + inc
    prod = _pcg_out(old) * bound
    while (prod & _M32) < tg:
        old = state
        state = old * _MULT + inc
        prod = _pcg_out(old) * bound
    return np.int64(prod >> _S32), state


@njit(cache=True, nogil=True, inline="always")
def _draw_upto(state, inc, bound):
    """As :func:`_draw` for a bound that changes every call (a Fisher–Yates
    pass): the threshold's modulo is computed only in the rare case it can
    matter (low word below ``bound``)."""
    old = state
    state = old * _MULT + inc
    prod = _pcg_out(old) * bound
    low = prod & _M32
    if low < bound:
        thresh = (_TWO32 - bound) % bound
        while low < thresh:
            old = state
            state = old * _MULT + inc
            prod = _pcg_out(old) * bound
            low = prod & _M32
    return np.int64(prod >> _S32), state


@njit(cache=True, nogil=True, inline="always")
def _tally(ustat, thr, order, hits_marginal, hits_stepdown, stepdown):
    """Count u_j >= thr_j, then, if ``stepdown``, the successive maxima from
    the lowest-ranked comparison upwards; return the max of ``ustat``."""
    m = ustat.size
    for j in range(m):
        if ustat[j] >= thr[j]:
            hits_marginal[j] += 1
    run = -np.inf
    if stepdown:
        # Westfall & Young (1993), Algorithm 2.8: order[0] has the largest
        # observed u; successive maxima run from order[m-1] upwards.
        for r in range(m - 1, -1, -1):
            j = order[r]
            if ustat[j] > run:
                run = ustat[j]
            if run >= thr[j]:
                hits_stepdown[r] += 1
    else:
        for j in range(m):
            if ustat[j] > run:
                run = ustat[j]
    return run


@njit(cache=True, nogil=True, inline="always")
def _chunk_outputs(m, size):
    """A chunk's outputs and scratch: maxima, marginal and step-down hits, statistics."""
    return (np.empty(size), np.zeros(m, dtype=np.int64), np.zeros(m, dtype=np.int64),
            np.empty(m))


@njit(cache=True, nogil=True, inline="always")
def _draw_thresholds(n):
    """Lemire's rejection threshold (2^32 - n) mod n for drawing within each group."""
    thresh = np.empty(n.size, dtype=np.uint64)
    for g in range(n.size):
        bound = np.uint64(n[g])
        thresh[g] = (_TWO32 - bound) % bound
    return thresh


@njit(cache=True, nogil=True, inline="always")
def _moments(gs, gss, n, pooled, big_n, mean, vm):
    """Group means and variances of the mean from sums and sums of squares
    (the pooled variance instead when ``pooled``)."""
    k = n.size
    within = 0.0
    for g in range(k):
        mean[g] = gs[g] / n[g]
        ssq = gss[g] - gs[g] * mean[g]
        if ssq < 0.0:
            ssq = 0.0
        within += ssq
        vm[g] = ssq / ((n[g] - 1) * n[g])
    if pooled:
        mse = within / (big_n - k)
        for g in range(k):
            vm[g] = mse / n[g]


@njit(cache=True, nogil=True)
def _family_stats(mean, vm, row_ptr, col, w, w2, se2_floor, sign, two_sided,
                  thr, order, ustat, hits_marginal, hits_stepdown, stepdown):
    """Statistics of the whole family for one resample; returns the max.

    T_j = sum_e w_e mean[col_e] / sqrt(max(sum_e w_e^2 vm[col_e], floor_j)),
    u_j = |T_j| or sign * T_j; then :func:`_tally`.
    """
    m = row_ptr.size - 1
    for j in range(m):
        est = 0.0
        v2 = 0.0
        for e in range(row_ptr[j], row_ptr[j + 1]):
            g = col[e]
            est += w[e] * mean[g]
            v2 += w2[e] * vm[g]
        if v2 < se2_floor[j]:
            v2 = se2_floor[j]
        t = est / np.sqrt(v2)
        ustat[j] = abs(t) if two_sided else sign * t
    return _tally(ustat, thr, order, hits_marginal, hits_stepdown, stepdown)


_HALL_Q = 1.0 - 1.0 / np.sqrt(2.0)


@njit(cache=True, nogil=True, inline="always")
def _hall_map(t, a):
    """Hall's cubic where its slope is at least 1/2, linear beyond (the same
    map as :func:`famwise.resample.statistics.hall_transform`)."""
    if abs(a) < 1e-12:
        return t + a / 6.0
    tau = 3.0 * _HALL_Q / abs(a)
    if t < -tau:
        b = 1.0 - a * tau / 3.0
        return (b * b * b - 1.0) / a + a / 6.0 + b * b * (t + tau)
    if t > tau:
        b = 1.0 + a * tau / 3.0
        return (b * b * b - 1.0) / a + a / 6.0 + b * b * (t - tau)
    return t + a * t * t / 3.0 + a * a * t * t * t / 27.0 + a / 6.0


@njit(cache=True, nogil=True)
def _family_stats_hall(mean, vm, c3, a_max, row_ptr, col, w, w2, w3, se2_floor, sign,
                       two_sided, thr, order, ustat, hits_marginal, hits_stepdown,
                       stepdown):
    """As :func:`_family_stats` with Hall's transformation of each Welch t.

    ``c3[g]`` is the third cumulant of group g's mean; a_j = sum_e w_e^3
    c3[col_e] / v2_j^1.5, bounded by ``a_max``, and T_j = t + a t^2/3 +
    a^2 t^3/27 + a/6 where that cubic's slope is at least 1/2, linear
    beyond (:func:`_hall_map`; :mod:`famwise.resample.statistics`).
    """
    m = row_ptr.size - 1
    for j in range(m):
        est = 0.0
        v2 = 0.0
        k3 = 0.0
        for e in range(row_ptr[j], row_ptr[j + 1]):
            g = col[e]
            est += w[e] * mean[g]
            v2 += w2[e] * vm[g]
            k3 += w3[e] * c3[g]
        if v2 < se2_floor[j]:
            v2 = se2_floor[j]
        t = est / np.sqrt(v2)
        a = k3 / (v2 * np.sqrt(v2))
        if a > a_max:
            a = a_max
        elif a < -a_max:
            a = -a_max
        t = _hall_map(t, a)
        ustat[j] = abs(t) if two_sided else sign * t
    return _tally(ustat, thr, order, hits_marginal, hits_stepdown, stepdown)


@njit(cache=True, nogil=True)
def permutation_chunk(x, seg_lo, seg_hi, seg_group, n, largest, tot_s, tot_ss,
                      pooled, row_ptr, col, w, w2, se2_floor, sign, two_sided,
                      thr, order, stepdown, size, rng_state):
    """Run ``size`` permutations of group labels (fused shuffle-and-sum).

    ``x`` holds the values centred by the grand mean with the largest group
    first; positions ``seg_lo[s] .. seg_hi[s]-1`` belong to group
    ``seg_group[s]`` (every group but the largest).  A partial Fisher–Yates
    shuffle (Durstenfeld 1964, *CACM* 7(7):420) fills those positions from
    the back, so each permutation takes only N - n_largest draws; the sums
    of the largest group follow from the totals ``tot_s``, ``tot_ss``.
    The working copy is never reset: a Fisher–Yates pass over any
    arrangement of the data yields a uniform permutation, independent of
    the previous one.
    """
    buf = x.copy()
    k = n.size
    m = row_ptr.size - 1
    big_n = x.size
    maxima, hits_marginal, hits_stepdown, ustat = _chunk_outputs(m, size)
    gs = np.empty(k)
    gss = np.empty(k)
    mean = np.empty(k)
    vm = np.empty(k)
    state, inc = _pcg_init(rng_state[0], rng_state[1])
    for b in range(size):
        rest_s = tot_s
        rest_ss = tot_ss
        for s_ in range(seg_group.size):
            g = seg_group[s_]
            acc = 0.0
            acc2 = 0.0
            for i in range(seg_hi[s_] - 1, seg_lo[s_] - 1, -1):
                # j uniform on 0..i (Lemire's multiply with rejection).
                j, state = _draw_upto(state, inc, np.uint64(i + 1))
                v = buf[j]
                buf[j] = buf[i]
                buf[i] = v
                acc += v
                acc2 += v * v
            gs[g] = acc
            gss[g] = acc2
            rest_s -= acc
            rest_ss -= acc2
        gs[largest] = rest_s
        gss[largest] = rest_ss
        _moments(gs, gss, n, pooled, big_n, mean, vm)
        maxima[b] = _family_stats(mean, vm, row_ptr, col, w, w2, se2_floor, sign,
                                  two_sided, thr, order, ustat, hits_marginal,
                                  hits_stepdown, stepdown)
    return maxima, hits_marginal, hits_stepdown


@njit(cache=True, nogil=True)
def permutation_labels_chunk(x, labels, n, pooled, row_ptr, col, w, w2, se2_floor,
                             sign, two_sided, thr, order, stepdown, size,
                             rng_state):
    """Run ``size`` permutations by shuffling small integer labels.

    For data too large for the core's cache, moving 8-byte values at random
    is memory-bound.  This kernel instead shuffles a copy of the group
    labels (``int8`` or ``int16``, a quarter to an eighth of the bytes) by a
    full Fisher–Yates pass and, fused with it, streams through ``x`` in
    order, adding each value to the sums of the label that lands on it.
    Each permutation is uniform and independent of the previous one.
    """
    lab = labels.copy()
    k = n.size
    m = row_ptr.size - 1
    big_n = x.size
    maxima, hits_marginal, hits_stepdown, ustat = _chunk_outputs(m, size)
    gs = np.empty(k)
    gss = np.empty(k)
    mean = np.empty(k)
    vm = np.empty(k)
    state, inc = _pcg_init(rng_state[0], rng_state[1])
    for b in range(size):
        for g in range(k):
            gs[g] = 0.0
            gss[g] = 0.0
        for i in range(big_n - 1, 0, -1):
            j, state = _draw_upto(state, inc, np.uint64(i + 1))
            g = lab[j]
            lab[j] = lab[i]
            lab[i] = g
            v = x[i]
            gs[g] += v
            gss[g] += v * v
        g = lab[0]
        gs[g] += x[0]
        gss[g] += x[0] * x[0]
        _moments(gs, gss, n, pooled, big_n, mean, vm)
        maxima[b] = _family_stats(mean, vm, row_ptr, col, w, w2, se2_floor, sign,
                                  two_sided, thr, order, ustat, hits_marginal,
                                  hits_stepdown, stepdown)
    return maxima, hits_marginal, hits_stepdown


@njit(cache=True, nogil=True)
def bootstrap_chunk(r, start, n, pooled, row_ptr, col, w, w2, se2_floor, sign,
                    two_sided, thr, order, stepdown, size, rng_state):
    """Run ``size`` bootstrap resamples within groups (Welch or pooled t).

    ``r`` holds each group's residuals about its own mean (the null
    imposed), group ``g`` at ``start[g] .. start[g] + n[g] - 1``.  Each
    resample draws ``n[g]`` residuals with replacement from each group and
    forms the studentized statistics from the resampled means and variances
    (bootstrap-t; Hall & Wilson 1991, *Biometrics* 47:757–762,
    doi:10.2307/2532163).
    """
    k = n.size
    m = row_ptr.size - 1
    big_n = r.size
    maxima, hits_marginal, hits_stepdown, ustat = _chunk_outputs(m, size)
    mean = np.empty(k)
    vm = np.empty(k)
    thresh = _draw_thresholds(n)
    state, inc = _pcg_init(rng_state[0], rng_state[1])
    gs = np.empty(k)
    gss = np.empty(k)
    for b in range(size):
        for g in range(k):
            bound = np.uint64(n[g])
            tg = thresh[g]
            base = start[g]
            acc = 0.0
            acc2 = 0.0
            for _ in range(n[g]):
                j, state = _draw(state, inc, bound, tg)
                v = r[base + j]
                acc += v
                acc2 += v * v
            gs[g] = acc
            gss[g] = acc2
        _moments(gs, gss, n, pooled, big_n, mean, vm)
        maxima[b] = _family_stats(mean, vm, row_ptr, col, w, w2, se2_floor, sign,
                                  two_sided, thr, order, ustat, hits_marginal,
                                  hits_stepdown, stepdown)
    return maxima, hits_marginal, hits_stepdown


@njit(cache=True, nogil=True)
def bootstrap_hall_chunk(r, start, n, ssq_floor, a_max, row_ptr, col, w, w2, w3,
                         se2_floor, sign, two_sided, thr, order, stepdown, size,
                         rng_state):
    """Run ``size`` bootstrap resamples with Hall-transformed Welch statistics.

    As :func:`bootstrap_chunk` (``r``: residuals about each group's mean),
    and each resample also re-estimates the pooled skewness from its own
    third moments, gamma* = sum_g m3_g (n_g / ssq_g)^1.5 / N, so the
    statistic is bootstrapped with its skewness estimate
    (:func:`famwise.resample.statistics.pooled_skewness`).  A group whose
    sum of squares is at most ``ssq_floor[g]`` counts as without spread.
    """
    k = n.size
    m = row_ptr.size - 1
    big_n = r.size
    maxima, hits_marginal, hits_stepdown, ustat = _chunk_outputs(m, size)
    mean = np.empty(k)
    vm = np.empty(k)
    c3 = np.empty(k)
    sd3 = np.empty(k)
    thresh = _draw_thresholds(n)
    state, inc = _pcg_init(rng_state[0], rng_state[1])
    for b in range(size):
        gamma = 0.0
        for g in range(k):
            bound = np.uint64(n[g])
            tg = thresh[g]
            base = start[g]
            acc = 0.0
            acc2 = 0.0
            acc3 = 0.0
            for _ in range(n[g]):
                j, state = _draw(state, inc, bound, tg)
                v = r[base + j]
                acc += v
                acc2 += v * v
                acc3 += v * v * v
            ng = np.float64(n[g])
            mg = acc / ng
            ssq = acc2 - acc * mg
            mean[g] = mg
            if ssq > ssq_floor[g]:
                # sum (v - mg)^3 = S3 - 3 mg S2 + 2 n mg^3
                m3 = acc3 - 3.0 * mg * acc2 + 2.0 * ng * mg * mg * mg
                gamma += m3 * (ng / ssq) * np.sqrt(ng / ssq)
                var = ssq / (ng - 1.0)
            else:
                var = 0.0
            vm[g] = var / ng
            sd3[g] = var * np.sqrt(var) / (ng * ng)
        gamma /= big_n
        for g in range(k):
            c3[g] = gamma * sd3[g]
        maxima[b] = _family_stats_hall(mean, vm, c3, a_max, row_ptr, col, w, w2, w3,
                                       se2_floor, sign, two_sided, thr, order, ustat,
                                       hits_marginal, hits_stepdown, stepdown)
    return maxima, hits_marginal, hits_stepdown


@njit(cache=True, nogil=True)
def bootstrap_trimmed_chunk(r, start, n, cut, row_ptr, col, w, w2, se2_floor,
                            sign, two_sided, thr, order, stepdown, size,
                            rng_state):
    """Run ``size`` bootstrap resamples with Yuen's trimmed-mean statistics.

    ``r`` holds each group's residuals about its trimmed mean, *sorted*
    within the group; ``cut[g]`` = floor(trim * n_g) values are trimmed from
    each end.  A resample is kept as counts over the sorted residuals, so its
    order statistics come from one scan: the trimmed mean of the middle
    h = n - 2 cut values, and the winsorized sum of squares SSw, giving
    d = SSw / (h (h - 1)) (Yuen 1974, *Biometrika* 61:165–170,
    doi:10.1093/biomet/61.1.165).
    """
    k = n.size
    m = row_ptr.size - 1
    maxima, hits_marginal, hits_stepdown, ustat = _chunk_outputs(m, size)
    mean = np.empty(k)
    vm = np.empty(k)
    counts = np.zeros(r.size, dtype=np.int64)
    thresh = _draw_thresholds(n)
    state, inc = _pcg_init(rng_state[0], rng_state[1])
    for b in range(size):
        for g in range(k):
            ng = n[g]
            bound = np.uint64(ng)
            tg = thresh[g]
            base = start[g]
            for i in range(ng):
                counts[base + i] = 0
            for _ in range(ng):
                j, state = _draw(state, inc, bound, tg)
                counts[base + j] += 1
            c = cut[g]
            lo_rank = c
            hi_rank = ng - c - 1
            # Values at ranks lo_rank and hi_rank (the winsorizing bounds).
            rank = 0
            v_lo = 0.0
            v_hi = 0.0
            mid_s = 0.0
            mid_ss = 0.0
            for i in range(ng):
                cnt = counts[base + i]
                if cnt == 0:
                    continue
                v = r[base + i]
                first = rank
                last = rank + cnt - 1
                if first <= lo_rank <= last:
                    v_lo = v
                if first <= hi_rank <= last:
                    v_hi = v
                a = first if first > lo_rank else lo_rank
                z = last if last < hi_rank else hi_rank
                if z >= a:
                    inside = z - a + 1
                    mid_s += inside * v
                    mid_ss += inside * v * v
                rank += cnt
            h = ng - 2 * c
            mean[g] = mid_s / h
            ws = mid_s + c * (v_lo + v_hi)
            wss = mid_ss + c * (v_lo * v_lo + v_hi * v_hi)
            ssw = wss - ws * ws / ng
            if ssw < 0.0:
                ssw = 0.0
            vm[g] = ssw / (h * (h - 1.0))
        maxima[b] = _family_stats(mean, vm, row_ptr, col, w, w2, se2_floor, sign,
                                  two_sided, thr, order, ustat, hits_marginal,
                                  hits_stepdown, stepdown)
    return maxima, hits_marginal, hits_stepdown

"""Compiled permutation kernel of pairwise two-sample score statistics (numba).

Each comparison (a, b) of a pairwise family gets its *own* two-sample
linear rank statistic, computed from the scores of the pair's combined
sample only (not from joint scores of all k groups), standardised by its
permutation variance given that combined sample; the family's max is taken
over permutations of all N group labels.  With Gehan weights and no
censoring this is the pair's own Wilcoxon–Mann–Whitney statistic with the
tie-corrected variance (the Steel–Dwass pairwise statistic); with
left-censored values it is Gehan's (1965) generalised Wilcoxon statistic;
with Peto weights the Peto & Peto (1972) statistic.

Data as the kernels read them
-----------------------------
Observations are placed on *levels*: level 0 holds the largest value, and a
level is a distinct value in descending order (the flipped times ``M - x``
ascending).  ``event[i]`` is True for a measured value, False for a
non-detect (known only to lie below its level's value).  A measured value
and a non-detect at the same number share a level; the non-detect ranks
below the measured value ("<0.5" is below 0.5), so it is still "at risk"
when the measured values of its level are counted.

The statistic of pair (a, b), walking the levels of the pair's combined
sample (size n, at risk r_t at level t, d_t measured values there):

    A_t    = sum over levels s <= t of w_s d_s / r_s
    score  = w_t - A_t for a measured value at t,  -A_t for a non-detect
    U_ab   = sum of the scores of group a's members
    V_ab   = n_a n_b / (n (n - 1)) * sum of all n squared scores
    T_ab   = U_ab / sqrt(V_ab)   (0 when V_ab = 0: the pair carries no order)

with ``w_t = r_t`` (Gehan; the score is then #values known to lie below
minus #values known to lie above: Mantel 1967, *Biometrics* 23:65-78) or
``w_t = prod over levels s <= t of (1 - d_s / (r_s + 1))``, Prentice's
(1978, *Biometrika* 65:167-179) form of the product-limit estimate of the
pair's combined sample, the Peto & Peto (1972, *J. R. Statist. Soc. A*
135:185-207) generalised Wilcoxon weight (with ``S(t-)`` in place of it the
scores would be Peto & Peto's S(t-) + S(t) - 1 and S(t) - 1).  The scores sum to zero
over the combined sample, so V_ab is the exact permutation variance of
U_ab given that sample (a finite-population variance).  T_ab > 0 when
group a tends to the larger values.

Cost per permutation: one shuffle of N labels, one pass to count each
group's measured values and non-detects per level (k x L counts), then
O(L) per comparison.
"""

from __future__ import annotations

import numpy as np
from numba import njit

from .kernels import _TWO32, _draw, _pcg_init, _tally

__all__ = ["GEHAN", "PETO", "pair_statistics", "pair_scores_chunk"]

GEHAN = 0
PETO = 1


@njit(cache=True, nogil=True)
def _count(level, event, labels, k, n_levels, ev, ce, n_group):
    for g in range(k):
        n_group[g] = 0
        for t in range(n_levels):
            ev[g, t] = 0
            ce[g, t] = 0
    for i in range(level.size):
        g = labels[i]
        n_group[g] += 1
        if event[i]:
            ev[g, level[i]] += 1
        else:
            ce[g, level[i]] += 1


@njit(cache=True, nogil=True)
def _pairs(ev, ce, n_group, pa, pb, weight, var_floor, out, u_out, v_out):
    """Fill ``out`` with T of each pair (and U, V when the arrays are non-empty)."""
    n_levels = ev.shape[1]
    for j in range(pa.size):
        a = pa[j]
        b = pb[j]
        na = n_group[a]
        nb = n_group[b]
        n = na + nb
        at_risk = float(n)
        cum = 0.0
        surv = 1.0
        u = 0.0
        ss = 0.0
        for t in range(n_levels):
            e = ev[a, t] + ev[b, t]
            c = ce[a, t] + ce[b, t]
            if e + c == 0:
                continue
            if weight == GEHAN:
                w = at_risk
            else:
                # Prentice's (1978) product-limit form, through t itself.
                surv *= 1.0 - e / (at_risk + 1.0)
                w = surv
            if e > 0:
                cum += w * e / at_risk
            s_ev = w - cum
            s_ce = -cum
            u += ev[a, t] * s_ev + ce[a, t] * s_ce
            ss += e * s_ev * s_ev + c * s_ce * s_ce
            at_risk -= e + c
        v = 0.0
        if n > 1:
            v = na * nb / (n * (n - 1.0)) * ss
        if v > var_floor[j]:
            out[j] = u / np.sqrt(v)
        else:
            out[j] = 0.0
        if u_out.size:
            u_out[j] = u
            v_out[j] = v


@njit(cache=True, nogil=True)
def pair_statistics(level, event, labels, k, n_levels, pa, pb, weight, var_floor):
    """Return (T, U, V) of every pair for one labelling (the observed one)."""
    ev = np.zeros((k, n_levels), dtype=np.int64)
    ce = np.zeros((k, n_levels), dtype=np.int64)
    n_group = np.zeros(k, dtype=np.int64)
    _count(level, event, labels, k, n_levels, ev, ce, n_group)
    out = np.zeros(pa.size)
    u = np.zeros(pa.size)
    v = np.zeros(pa.size)
    _pairs(ev, ce, n_group, pa, pb, weight, var_floor, out, u, v)
    return out, u, v


@njit(cache=True, nogil=True)
def pair_scores_chunk(level, event, labels, k, n_levels, pa, pb, weight, var_floor,
                      sign, two_sided, thr, order, stepdown, size, rng_state):
    """Run ``size`` permutations of all N labels; return maxima and hit counts.

    ``labels`` is never written to; each permutation is a full Fisher–Yates
    shuffle of a private copy, drawn from the chunk's PCG32 stream.
    """
    m = pa.size
    n = labels.size
    work = labels.copy()
    ev = np.zeros((k, n_levels), dtype=np.int64)
    ce = np.zeros((k, n_levels), dtype=np.int64)
    n_group = np.zeros(k, dtype=np.int64)
    stat = np.zeros(m)
    ustat = np.zeros(m)
    empty = np.zeros(0)
    maxima = np.empty(size)
    hits_marginal = np.zeros(m, dtype=np.int64)
    hits_stepdown = np.zeros(m, dtype=np.int64)
    state, inc = _pcg_init(rng_state[0], rng_state[1])
    for r in range(size):
        for i in range(n - 1, 0, -1):
            bound = np.uint64(i + 1)
            tg = (_TWO32 - bound) % bound
            j, state = _draw(state, inc, bound, tg)
            tmp = work[i]
            work[i] = work[j]
            work[j] = tmp
        _count(level, event, work, k, n_levels, ev, ce, n_group)
        _pairs(ev, ce, n_group, pa, pb, weight, var_floor, stat, empty, empty)
        for j in range(m):
            if two_sided:
                ustat[j] = abs(stat[j])
            else:
                ustat[j] = sign * stat[j]
        maxima[r] = _tally(ustat, thr, order, hits_marginal, hits_stepdown, stepdown)
    return maxima, hits_marginal, hits_stepdown

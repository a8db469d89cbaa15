"""Compiled loops for resampling a block or covariate model (numba, ``nogil``).

Two chunk kernels, with the same contract as :mod:`famwise.resample.kernels`
(``maxima``, ``hits_marginal``, ``hits_stepdown``; PCG32 streams seeded per
chunk; inputs never written):

* :func:`permutation_model_chunk`: permutations of the group labels within
  blocks of the within-block-centred response (or, with covariates, of the
  reduced model's residuals; Freedman & Lane 1983), with the error mean
  square, or each group's residual variance, recomputed for each
  permutation from the fixed design algebra of
  :mod:`famwise.resample.design`;
* :func:`wild_chunk`: the wild bootstrap of a linear model's restricted
  residuals with heteroscedasticity-consistent studentization
  (:mod:`famwise.resample.wild`).
"""

from __future__ import annotations

import numpy as np
from numba import njit

from .kernels import _MULT, _ONE, _draw, _draw_upto, _pcg_init, _pcg_out, _tally

__all__ = ["permutation_model_chunk", "wild_chunk"]

_SIX = np.uint64(6)
_TWO32 = np.uint64(1 << 32)


@njit(cache=True, nogil=True)
def _family_stats_cov(tau, s2, row_ptr, col, w, hptr, hcol, hval, se2_floor, sign,
                      two_sided, thr, order, ustat, hits_marginal, hits_stepdown,
                      stepdown):
    """T_j = sum_e w_e tau[col_e] / sqrt(max(sum_f hval_f s2[hcol_f], floor_j))."""
    m = row_ptr.size - 1
    for j in range(m):
        est = 0.0
        for e in range(row_ptr[j], row_ptr[j + 1]):
            est += w[e] * tau[col[e]]
        v2 = 0.0
        for f in range(hptr[j], hptr[j + 1]):
            v2 += hval[f] * s2[hcol[f]]
        if v2 < se2_floor[j]:
            v2 = se2_floor[j]
        t = est / np.sqrt(v2)
        ustat[j] = abs(t) if two_sided else sign * t
    return _tally(ustat, thr, order, hits_marginal, hits_stepdown, stepdown)


@njit(cache=True, nogil=True)
def permutation_model_chunk(x, xc, lab, gather, unit_ptr, runs, blk_lo, blk_stop, blk_hi, blk_cs, blk_c1,
                            blk_s, blk_ss, cell_lo, cell_hi,
                            unit_group, unit_block, unit_n, cells, cell_group,
                            cell_block, cell_n, n_g, n_b, orthogonal, chol, fmat, kinv, sstot,
                            df_error, d_g, welch, row_ptr, col, w, hptr, hcol, hval,
                            se2_floor, sign, two_sided, thr, order, stepdown, size,
                            rng_state):
    """Run ``size`` permutations within blocks of a block/covariate model.

    ``x`` is sorted by block (positions ``blk_lo[b] .. blk_hi[b] - 1``);
    ``lab[i]`` is the unit position i belongs to: its group, or with
    ``cells`` its group-by-block cell (``unit_group``, ``unit_block``,
    ``unit_n`` describe the units; ``cell_*`` the group-by-block incidence).
    With ``runs`` each cell's positions are summed as one run (cells of
    many plots); otherwise the sums are gathered unit by unit after the
    shuffle (positions ``gather[unit_ptr[t]:unit_ptr[t + 1]]``; cells of
    one plot).  Each block gets a Fisher–Yates shuffle
    (Durstenfeld 1964) from its top position down to ``blk_stop[b]``: a
    partial one without covariates, where the positions below hold the
    block's largest cell and only the set of values there matters; a
    complete one with covariates (``xc`` has q > 0 columns), because
    u = X^c'r* needs every position.  Then Q = S - F u, tau solves the
    reduced normal equations by the Cholesky factor ``chol`` (or is S / n
    in an orthogonal design), SSE = r'r - tau'Q - u'K^-1 u, and each
    contrast is studentized by MSE * D_j (pooled) or by sum_g H_jg s_g^2
    with s_g^2 group g's residual sum of squares over its share ``d_g`` of
    the residual df (``welch``).  Without covariates the per-group residual
    sums come from the unit sums and sums of squares; with covariates from
    a second pass over the permuted residuals.
    """
    buf = x.copy()
    q = xc.shape[1]
    k = n_g.size
    nb = blk_lo.size
    n_units = unit_group.size
    squares = welch and q == 0
    m = row_ptr.size - 1
    maxima = np.empty(size)
    hits_marginal = np.zeros(m, dtype=np.int64)
    hits_stepdown = np.zeros(m, dtype=np.int64)
    ustat = np.empty(m)
    us = np.empty(n_units)
    uss = np.zeros(n_units)
    s = np.empty(k)
    qv = np.empty(k)
    tau = np.empty(k)
    tb = np.zeros(nb)
    rss = np.empty(k)
    s2 = np.empty(k if welch else 1)
    u = np.empty(q)
    ku = np.empty(q)
    delta = np.empty(q)
    state, inc = _pcg_init(rng_state[0], rng_state[1])
    for b in range(size):
        for t in range(n_units):
            us[t] = 0.0
        if squares:
            for t in range(n_units):
                uss[t] = 0.0
        for l in range(q):
            u[l] = 0.0
        for bl in range(nb):
            lo = blk_lo[bl]
            tot = 0.0
            tot2 = 0.0
            if runs:
                # Long cells: each cell's run of positions summed in registers.
                for c in range(blk_c1[bl] - 1, blk_cs[bl] - 1, -1):
                    acc = 0.0
                    acc2 = 0.0
                    c_lo = cell_lo[c]
                    start = c_lo if c_lo > lo else lo + 1
                    # Positions relative to the block (the one-way loop's form).
                    view = buf[lo:cell_hi[c]]
                    for i in range(cell_hi[c] - lo - 1, start - lo - 1, -1):
                        # j uniform on 0..i (Lemire's multiply with rejection).
                        j, state = _draw_upto(state, inc, np.uint64(i + 1))
                        v = view[j]
                        view[j] = view[i]
                        view[i] = v
                        acc += v
                        acc2 += v * v
                    if start > c_lo:          # position lo, left in place
                        v = buf[lo]
                        acc += v
                        acc2 += v * v
                    t = lab[c_lo]
                    us[t] += acc
                    uss[t] += acc2
                    tot += acc
                    tot2 += acc2
            else:
                # Short cells (one plot per group and block): a complete
                # shuffle of the block (as many draws as the partial one
                # when its first cell has one plot); the sums are gathered
                # by unit after all blocks are shuffled.
                view = buf[lo:blk_hi[bl]]
                for i in range(blk_hi[bl] - lo - 1, 0, -1):
                    # j uniform on 0..i (Lemire's multiply with rejection).
                    j, state = _draw_upto(state, inc, np.uint64(i + 1))
                    v = view[j]
                    view[j] = view[i]
                    view[i] = v
            if q > 0:
                # The block's positions are final: u += X^c' r* over them.
                for i in range(lo, blk_hi[bl]):
                    v = buf[i]
                    for l in range(q):
                        u[l] += xc[i, l] * v
            if runs and blk_stop[bl] > lo:
                # The block's first cell holds what the shuffle left there:
                # its sums are the block's totals less the others.
                first = lab[lo]
                us[first] += blk_s[bl] - tot
                uss[first] += blk_ss[bl] - tot2
        if not runs:
            # Four partial sums per unit, so the additions do not wait on
            # each other.
            for t in range(n_units):
                a0 = 0.0
                a1 = 0.0
                a2 = 0.0
                a3 = 0.0
                e = unit_ptr[t]
                end = unit_ptr[t + 1]
                while e + 3 < end:
                    a0 += buf[gather[e]]
                    a1 += buf[gather[e + 1]]
                    a2 += buf[gather[e + 2]]
                    a3 += buf[gather[e + 3]]
                    e += 4
                while e < end:
                    a0 += buf[gather[e]]
                    e += 1
                us[t] = (a0 + a1) + (a2 + a3)
                if squares:
                    acc2 = 0.0
                    for e in range(unit_ptr[t], end):
                        v = buf[gather[e]]
                        acc2 += v * v
                    uss[t] = acc2
        if orthogonal and not cells:
            # Complete blocks, no covariates: tau is the group mean of r.
            for g in range(k):
                qv[g] = us[g]
                tau[g] = us[g] / n_g[g]
        else:
            if cells:
                for g in range(k):
                    s[g] = 0.0
                for t in range(n_units):
                    s[unit_group[t]] += us[t]
            else:
                for g in range(k):
                    s[g] = us[g]
            for g in range(k):
                acc = s[g]
                for l in range(q):
                    acc -= fmat[g, l] * u[l]
                qv[g] = acc
            if orthogonal:
                for g in range(k):
                    tau[g] = qv[g] / n_g[g]
            else:
                # L L' tau = Q over the first k - 1 groups; tau[k-1] = 0.
                for g in range(k - 1):
                    acc = qv[g]
                    for h in range(g):
                        acc -= chol[g, h] * tau[h]
                    tau[g] = acc / chol[g, g]
                for g in range(k - 2, -1, -1):
                    acc = tau[g]
                    for h in range(g + 1, k - 1):
                        acc -= chol[h, g] * tau[h]
                    tau[g] = acc / chol[g, g]
                tau[k - 1] = 0.0
        sse = sstot
        for g in range(k):
            sse -= tau[g] * qv[g]
        for l in range(q):
            acc = 0.0
            for h in range(q):
                acc += kinv[l, h] * u[h]
            ku[l] = acc
            sse -= u[l] * acc
        if welch:
            if not orthogonal:
                for bl in range(nb):
                    tb[bl] = 0.0
                for c in range(cell_group.size):
                    tb[cell_block[c]] += cell_n[c] * tau[cell_group[c]]
                for bl in range(nb):
                    tb[bl] /= n_b[bl]
            for g in range(k):
                rss[g] = 0.0
            if q > 0:
                for l in range(q):
                    acc = ku[l]
                    for g in range(k):
                        acc -= fmat[g, l] * tau[g]
                    delta[l] = acc
                for bl in range(nb):
                    for i in range(blk_lo[bl], blk_hi[bl]):
                        g = lab[i]
                        e = buf[i] - tau[g] + tb[bl]
                        for l in range(q):
                            e -= xc[i, l] * delta[l]
                        rss[g] += e * e
            else:
                # sum over a unit of (r - a)^2 = SS - 2 a S + n a^2, a = tau_g - tbar_b.
                for t in range(n_units):
                    g = unit_group[t]
                    a = tau[g] - tb[unit_block[t]]
                    rss[g] += uss[t] - 2.0 * a * us[t] + unit_n[t] * a * a
            for g in range(k):
                r_ = rss[g]
                s2[g] = (r_ if r_ > 0.0 else 0.0) / d_g[g]
        else:
            s2[0] = (sse if sse > 0.0 else 0.0) / df_error
        maxima[b] = _family_stats_cov(tau, s2, row_ptr, col, w, hptr, hcol, hval,
                                      se2_floor, sign, two_sided, thr, order, ustat,
                                      hits_marginal, hits_stepdown, stepdown)
    return maxima, hits_marginal, hits_stepdown


@njit(cache=True, nogil=True)
def wild_chunk(e0, qbasis, amat, a2mat, kappa, webb, se2_floor, sign, two_sided, thr,
               order, stepdown, size, rng_state):
    """Run ``size`` wild-bootstrap resamples of a linear model's contrasts.

    Each resample multiplies the restricted residuals ``e0`` (the null
    imposed) by independent weights v_i, Rademacher (+-1, one bit of the
    PCG32 output each) or, with ``webb``, Webb's six points +-sqrt(1/2),
    +-1, +-sqrt(3/2); y* = e0 * v.  With Q (``qbasis``, N x p) an
    orthonormal basis of the full model, the residuals are e* = y* - Q Q'y*,
    the contrasts' estimates est*_j = sum_i A_ji y*_i and their HC
    variances sum_i A_ji^2 kappa_i e*_i^2 (HC3: kappa = (1 - h)^-2; HC4:
    (1 - h)^-delta).  T*_j = est*_j / se*_j; then the tally.
    """
    n = e0.size
    p = qbasis.shape[1]
    m = amat.shape[0]
    maxima = np.empty(size)
    hits_marginal = np.zeros(m, dtype=np.int64)
    hits_stepdown = np.zeros(m, dtype=np.int64)
    ustat = np.empty(m)
    ys = np.empty(n)
    om = np.empty(n)
    z = np.empty(p)
    points = np.array([-np.sqrt(1.5), -1.0, -np.sqrt(0.5), np.sqrt(0.5), 1.0, np.sqrt(1.5)])
    tg6 = (_TWO32 - _SIX) % _SIX
    state, inc = _pcg_init(rng_state[0], rng_state[1])
    for b in range(size):
        if webb:
            for i in range(n):
                j, state = _draw(state, inc, _SIX, tg6)
                ys[i] = e0[i] * points[j]
        else:
            bits = np.uint64(0)
            left = 0
            for i in range(n):
                if left == 0:
                    old = state
                    state = old * _MULT + inc
                    bits = _pcg_out(old)
                    left = 32
                ys[i] = e0[i] if (bits & _ONE) else -e0[i]
                bits = bits >> _ONE
                left -= 1
        for c in range(p):
            z[c] = 0.0
        for i in range(n):
            v = ys[i]
            for c in range(p):
                z[c] += qbasis[i, c] * v
        for i in range(n):
            r_ = ys[i]
            for c in range(p):
                r_ -= qbasis[i, c] * z[c]
            om[i] = kappa[i] * r_ * r_
        for j in range(m):
            est = 0.0
            v2 = 0.0
            for i in range(n):
                est += amat[j, i] * ys[i]
                v2 += a2mat[j, i] * om[i]
            if v2 < se2_floor[j]:
                v2 = se2_floor[j]
            t = est / np.sqrt(v2)
            ustat[j] = abs(t) if two_sided else sign * t
        maxima[b] = _tally(ustat, thr, order, hits_marginal, hits_stepdown, stepdown)
    return maxima, hits_marginal, hits_stepdown

"""Scale mixtures behind famwise.distributions: tables, the compiled outer integral, quantiles.

Every probability of :mod:`famwise.distributions` is a conditional
probability ``F(w)`` for known error scale, averaged over the studentizing
scale ``S`` with ``S**2 ~ chi2_df / df``::

    P(q) = integral_0^inf  f_df(s) F(q s) ds          (df < inf)
    P(q) = F(q)                                       (df = inf)

This module holds the machinery shared by all of them:

1. :class:`_Table`: ``log F`` and ``log(1 - F)`` as piecewise Chebyshev
   series on fixed panels, with their derivatives (the series differentiated
   term by term) and the tail rules beyond the tabulated range;
2. :func:`_outer`: the integral over ``log s`` for every element at once in
   one compiled loop, with Gauss-Legendre panels placed around the peak of
   each element's integrand.  Differentiating under the integral sign,
   ``dP/dq = integral f_df(s) s F'(q s) ds``, gives the density on the same
   nodes (``F' = F d log F / dw``, from the differentiated series);
3. :func:`_quantile`: vectorised safeguarded Newton iteration on the
   logarithm of the smaller tail, using that density, started from the
   ``df = inf`` quantile mapped through Student's t at the same marginal
   level (the Sidak-type start that is exact for one comparison).

The smaller of the two tails is always integrated directly, so upper-tail
probabilities keep their relative accuracy far out (no ``1 - cdf``).

References
----------
Copenhaver, M. D. & Holland, B. (1988). Computation of the distribution of
the maximum studentized range statistic with application to multiple
significance testing of simple effects. *J. Stat. Comput. Simul.*
30(1):1-15. doi:10.1080/00949658808811082
"""

from __future__ import annotations

import math

import numpy as np
from numba import njit
from numpy.polynomial import chebyshev as _chebyshev
from scipy import special, stats

# ---------------------------------------------------------------------------
# Fixed rules
# ---------------------------------------------------------------------------

_CHEB_N = 16                      # Chebyshev points per table panel
_GL_OUTER_X, _GL_OUTER_W = np.polynomial.legendre.leggauss(12)   # outer panels
_GL_INNER_X, _GL_INNER_W = np.polynomial.legendre.leggauss(12)   # inner panels
_LOG_HALF = math.log(0.5)


def _panel_rule(lo, hi, width):
    """Composite Gauss-Legendre nodes and weights on [lo, hi], panels of ~width."""
    npan = max(1, int(math.ceil((hi - lo) / width)))
    edges = np.linspace(lo, hi, npan + 1)
    half = 0.5 * np.diff(edges)
    mid = 0.5 * (edges[1:] + edges[:-1])
    x = (mid[:, None] + half[:, None] * _GL_INNER_X[None, :]).ravel()
    w = (half[:, None] * _GL_INNER_W[None, :]).ravel()
    return x, w


class _Table:
    """``log F`` (upper) and ``log(1-F)`` (lower) as piecewise Chebyshev series.

    The upper function is tabulated on ``w`` in ``[u0, u1]``; the lower one on
    ``x = log w`` (``lower_log=True``, two-sided quantities that behave like a
    power of ``w`` near 0) or on ``w`` itself.  ``meta`` packs the ranges and
    the tail rules read by the compiled evaluator ``_log_f``; ``dcoef_u`` and
    ``dcoef_l`` are the term-by-term derivatives (per unit of the tabulation
    variable) read by ``_dlog_f``.
    """

    def __init__(self, log_upper, log_lower, u_range, u_width, l_range, l_width,
                 lower_log, upper_tail, lower_tail):
        self.coef_u, u0, uw = _cheb_fit(log_upper, u_range, u_width)
        if log_lower is None:                  # lower tail from 1 - upper
            self.coef_l, l0, lw, mode = np.zeros((1, _CHEB_N)), 0.0, 1.0, 2.0
        else:
            lo_fun = (lambda x: log_lower(np.exp(x))) if lower_log else log_lower
            self.coef_l, l0, lw = _cheb_fit(lo_fun, l_range, l_width)
            mode = 1.0 if lower_log else 0.0
        self.dcoef_u = _cheb_der(self.coef_u, uw)
        self.dcoef_l = _cheb_der(self.coef_l, lw)
        self.meta = np.array([u0, uw, self.coef_u.shape[0], upper_tail,
                              mode, l0, lw, self.coef_l.shape[0], lower_tail])


def _cheb_fit(fun, rng, width):
    """Chebyshev coefficients of ``fun`` on panels of ``width`` covering ``rng``."""
    lo, hi = rng
    npan = max(1, int(math.ceil((hi - lo) / width - 1e-9)))
    width = (hi - lo) / npan
    j = np.arange(_CHEB_N)
    y = np.cos(np.pi * (j + 0.5) / _CHEB_N)              # first-kind points
    x = lo + width * (np.arange(npan)[:, None] + 0.5 * (y[None, :] + 1.0))
    f = np.asarray(fun(x.ravel()), dtype=float).reshape(npan, _CHEB_N)
    if not np.all(np.isfinite(f)):
        raise RuntimeError("famwise.distributions: non-finite table value")
    cosm = np.cos(np.pi * np.outer(j, j + 0.5) / _CHEB_N)  # (m, j)
    coef = (2.0 / _CHEB_N) * f @ cosm.T
    coef[:, 0] *= 0.5
    return np.ascontiguousarray(coef), lo, width


def _cheb_der(coef, width):
    """Per-panel derivative series (d/dx, panel variable y = 2 (x - x_i)/width - 1)."""
    d = _chebyshev.chebder(coef, axis=1) * (2.0 / width)
    return np.ascontiguousarray(np.concatenate([d, np.zeros((d.shape[0], 1))], axis=1))


# ---------------------------------------------------------------------------
# Compiled evaluation: tables, their derivatives, the outer integral over S
# ---------------------------------------------------------------------------

@njit(cache=True, nogil=True)
def _cheb(coef, x0, width, x):
    npan = coef.shape[0]
    u = (x - x0) / width
    i = int(math.floor(u))
    if i < 0:
        i = 0
    elif i >= npan:
        i = npan - 1
    y = 2.0 * (u - i) - 1.0
    b1 = 0.0
    b2 = 0.0
    for j in range(coef.shape[1] - 1, 0, -1):
        b0 = 2.0 * y * b1 - b2 + coef[i, j]
        b2 = b1
        b1 = b0
    return y * b1 - b2 + coef[i, 0]


@njit(cache=True, nogil=True)
def _log_upper(cu, meta, w):
    u0 = meta[0]
    uw = meta[1]
    u1 = u0 + uw * meta[2]
    if w >= u1:
        # Gaussian-type tail beyond the table (Mills ratio):
        # log F(w) ~ log F(u1) - a (w^2 - u1^2) - log(w / u1)
        return _cheb(cu, u0, uw, u1) - meta[3] * (w * w - u1 * u1) - math.log(w / u1)
    if w < u0:
        return 0.0
    return _cheb(cu, u0, uw, w)


@njit(cache=True, nogil=True)
def _dlog_upper(du, meta, w):
    """d log F / dw of the upper function (the derivative of _log_upper)."""
    u0 = meta[0]
    uw = meta[1]
    u1 = u0 + uw * meta[2]
    if w >= u1:
        return -2.0 * meta[3] * w - 1.0 / w
    if w < u0:
        return 0.0
    return _cheb(du, u0, uw, w)


@njit(cache=True, nogil=True)
def _log1mexp(a):
    """log(1 - exp(a)) for a <= 0, accurately."""
    if a > -0.6931471805599453:
        return math.log(-math.expm1(a))
    return math.log1p(-math.exp(a))


@njit(cache=True, nogil=True)
def _log_lower(cu, cl, meta, w):
    l0 = meta[5]
    lw = meta[6]
    l1 = l0 + lw * meta[7]
    if meta[4] > 1.5:                      # no lower table
        if w <= 0.0:
            return -np.inf
        return _log1mexp(min(_log_upper(cu, meta, w), -1e-300))
    if meta[4] > 0.5:                      # lower table on log w
        if w <= 0.0:
            return -np.inf
        x = math.log(w)
        if x < l0:                         # power law F(w) ~ c w^slope near 0
            return _cheb(cl, l0, lw, l0) + meta[8] * (x - l0)
        if x >= l1:
            return _log1mexp(_log_upper(cu, meta, w))
        return _cheb(cl, l0, lw, x)
    if w < l0:                             # Gaussian-type left tail
        return _cheb(cl, l0, lw, l0) - meta[8] * (w * w - l0 * l0)
    if w >= l1:
        return _log1mexp(_log_upper(cu, meta, w))
    return _cheb(cl, l0, lw, w)


@njit(cache=True, nogil=True)
def _dlog_from_upper(cu, du, meta, w):
    """d/dw log(1 - F(w)) where the lower function is 1 - upper."""
    lu = min(_log_upper(cu, meta, w), -1e-300)
    return -_dlog_upper(du, meta, w) * math.exp(lu - _log1mexp(lu))


@njit(cache=True, nogil=True)
def _dlog_lower(cu, du, dl, meta, w):
    """d log(1 - F) / dw, the derivative of _log_lower (w > 0 for log tables)."""
    l0 = meta[5]
    lw = meta[6]
    l1 = l0 + lw * meta[7]
    if meta[4] > 1.5:
        return _dlog_from_upper(cu, du, meta, w)
    if meta[4] > 0.5:
        x = math.log(w)
        if x < l0:
            return meta[8] / w
        if x >= l1:
            return _dlog_from_upper(cu, du, meta, w)
        return _cheb(dl, l0, lw, x) / w
    if w < l0:
        return -2.0 * meta[8] * w
    if w >= l1:
        return _dlog_from_upper(cu, du, meta, w)
    return _cheb(dl, l0, lw, w)


@njit(cache=True, nogil=True)
def _log_f(cu, cl, meta, w, upper):
    if upper:
        return _log_upper(cu, meta, w)
    return _log_lower(cu, cl, meta, w)


@njit(cache=True, nogil=True)
def _dlog_f(cu, du, dl, meta, w, upper):
    if upper:
        return _dlog_upper(du, meta, w)
    return _dlog_lower(cu, du, dl, meta, w)


@njit(cache=True, nogil=True)
def _chi_const(nu):
    """log of 2 (nu/2)^(nu/2) e^(-nu/2) / Gamma(nu/2): density of log S at 0."""
    x = 0.5 * nu
    if x > 40.0:                           # Stirling series, avoids cancellation
        r = 1.0 / x
        return (math.log(2.0) + 0.5 * math.log(x) - 0.5 * math.log(2.0 * math.pi)
                - r * (1.0 / 12.0 - r * r * (1.0 / 360.0 - r * r / 1260.0)))
    return math.log(2.0) + x * math.log(x) - x - math.lgamma(x)


@njit(cache=True, nogil=True)
def _chi_range(nu, depth):
    """t-interval where nu (t - expm1(2t)/2) >= -depth (log S = t)."""
    # f(t) = nu (t - expm1(2t)/2) + depth is concave; Newton from outside the
    # roots converges monotonically.
    tl = -depth / nu - 1.0
    for _ in range(60):
        f = nu * (tl - 0.5 * math.expm1(2.0 * tl)) + depth
        d = nu * (1.0 - math.exp(2.0 * tl))
        step = f / d
        tl -= step
        if abs(step) < 1e-12 * (1.0 + abs(tl)):
            break
    tr = 0.5 * math.log1p(4.0 * depth / nu) + 1.0
    for _ in range(60):
        f = nu * (tr - 0.5 * math.expm1(2.0 * tr)) + depth
        d = nu * (1.0 - math.exp(2.0 * tr))
        step = f / d
        tr -= step
        if abs(step) < 1e-12 * (1.0 + abs(tr)):
            break
    return tl, tr


@njit(cache=True, nogil=True)
def _psi(cu, cl, meta, q, nu, t, upper):
    em = math.expm1(t)                     # one transcendental: e^t and expm1(2t)
    return nu * (t - 0.5 * em * (em + 2.0)) + _log_f(cu, cl, meta, q * (1.0 + em), upper)


@njit(cache=True, nogil=True)
def _outer_one(cu, cl, du, dl, meta, q, nu, upper, gx, gw, tl, tr, psis, ratio, hmul,
               want_d):
    """log of  integral f_nu(s) F(q s) ds / const  for one element (F upper or lower).

    With ``want_d`` also d log P / dq = E[s F'(q s)] / E[F(q s)] on the same nodes.
    """
    m = psis.shape[0]
    dt = (tr - tl) / (m - 1)
    best = -np.inf
    ib = 0
    for i in range(m):
        p = _psi(cu, cl, meta, q, nu, tl + i * dt, upper)
        psis[i] = p
        if p > best:
            best = p
            ib = i
    if best == -np.inf:
        return -np.inf, 0.0
    # refine the peak location twice on finer uniform grids
    tc = tl + ib * dt
    step = dt
    pc = best
    for rnd in range(2):
        step = step / 4.0
        t0 = tc
        for j in range(-4, 5):
            if j == 0 or (rnd == 1 and abs(j) > 2):
                continue
            t = t0 + j * step
            p = _psi(cu, cl, meta, q, nu, t, upper)
            if p > pc:
                pc = p
                tc = t
    pm = _psi(cu, cl, meta, q, nu, tc - step, upper)
    pp = _psi(cu, cl, meta, q, nu, tc + step, upper)
    curv = (2.0 * pc - pm - pp) / (step * step)
    h0 = dt
    if curv > 0.0:
        h0 = 1.0 / math.sqrt(curv)
    h0 = min(max(hmul * h0, 1e-4 * dt), dt)
    # region where the integrand exceeds exp(-40) of its peak (coarse grid)
    thr = pc - 40.0
    i1 = 0
    while i1 < m and psis[i1] < thr:
        i1 += 1
    i2 = m - 1
    while i2 >= 0 and psis[i2] < thr:
        i2 -= 1
    a = tl + max(i1 - 1, 0) * dt
    b = tl + min(i2 + 1, m - 1) * dt
    a = min(a, tc - h0)
    b = max(b, tc + h0)
    # geometric panels h0, 2h0, 4h0, ... outward from the peak, n-point GL each
    total = 0.0
    dtotal = 0.0
    for side in range(2):
        lo = tc
        width = h0
        while True:
            if side == 0:
                hi = lo
                lo2 = max(hi - width, a)
                l, r = lo2, hi
            else:
                l = lo
                r = min(lo + width, b)
            half = 0.5 * (r - l)
            mid = 0.5 * (r + l)
            if half > 0.0:
                acc = 0.0
                dacc = 0.0
                for j in range(gx.shape[0]):
                    t = mid + half * gx[j]
                    e = gw[j] * math.exp(_psi(cu, cl, meta, q, nu, t, upper) - pc)
                    acc += e
                    if want_d and e > 0.0:
                        s = math.exp(t)
                        dacc += e * s * _dlog_f(cu, du, dl, meta, q * s, upper)
                total += half * acc
                dtotal += half * dacc
            if side == 0:
                lo = l
                if l <= a:
                    break
            else:
                lo = r
                if r >= b:
                    break
            width *= ratio
    if total <= 0.0:
        return -np.inf, 0.0
    return pc + math.log(total), dtotal / total


@njit(cache=True, nogil=True)
def _outer(cu, cl, du, dl, meta, q, nu, gx, gw, sf, cdf, pdf, want_d, ratio, hmul, m):
    """Fill sf, cdf (and pdf = d cdf / dq if want_d) for arrays q, nu (nu may be inf).

    ``ratio`` (float) is the growth of the panels out from the peak, ``hmul``
    (float) scales the first panel's width, ``m`` (int) is the number of
    points of the scan for the peak.  No argument has a default: numba
    dispatches a call that omits one through its Python-level path (a
    ``typeof`` on every argument, about half a millisecond), so callers pass
    them all, with the types of :data:`_OUTER_RULE`.
    """
    psis = np.empty(m)
    nu_prev = np.nan
    tl = tr = c0 = 0.0
    for i in range(q.shape[0]):
        qi = q[i]
        nui = nu[i]
        if qi != qi or nui != nui:
            sf[i] = np.nan
            cdf[i] = np.nan
            if want_d:
                pdf[i] = np.nan
            continue
        # choose the tail: the conditional probability at s = 1 is a good proxy
        lu = _log_upper(cu, meta, qi)
        upper = lu < _LOG_HALF or meta[4] > 1.5     # no lower table: always the upper tail
        dl_dq = 0.0
        if nui == np.inf:
            lp = lu if upper else _log_lower(cu, cl, meta, qi)
            if want_d:
                dl_dq = _dlog_f(cu, du, dl, meta, qi, upper)
        else:
            if nui != nu_prev:
                tl, tr = _chi_range(nui, 50.0)
                c0 = _chi_const(nui)
                nu_prev = nui
            lo, dl_dq = _outer_one(cu, cl, du, dl, meta, qi, nui, upper, gx, gw, tl, tr,
                                   psis, ratio, hmul, want_d)
            lp = c0 + lo
        p = min(math.exp(lp), 1.0)
        if upper:
            sf[i] = p
            cdf[i] = 1.0 - p
        else:
            cdf[i] = p
            sf[i] = 1.0 - p
        if want_d:
            # d cdf/dq = -sf * dlog sf/dq (upper) or cdf * dlog cdf/dq (lower)
            pdf[i] = max(-p * dl_dq if upper else p * dl_dq, 0.0)


#: (ratio, hmul, m) of the outer rule, typed as _outer was compiled for.
_OUTER_RULE = (2.0, 1.0, 24)


def _evaluate(table, q, nu, density=False):
    """sf and cdf (and the density if asked) of the family ``table`` at flattened q, nu.

    Contiguous float copies are handed to the compiled loop, so read-only or
    broadcast views from callers never reach it.
    """
    q = np.array(q, dtype=np.float64, order="C", copy=True).ravel()
    nu = np.array(nu, dtype=np.float64, order="C", copy=True).ravel()
    sf = np.empty(q.shape)
    cdf = np.empty(q.shape)
    pdf = np.empty(q.shape if density else (0,))
    _outer(table.coef_u, table.coef_l, table.dcoef_u, table.dcoef_l, table.meta, q, nu,
           _GL_OUTER_X, _GL_OUTER_W, sf, cdf, pdf, bool(density), *_OUTER_RULE)
    return (sf, cdf, pdf) if density else (sf, cdf)


# ---------------------------------------------------------------------------
# Quantiles: safeguarded Newton on the log of the smaller tail
# ---------------------------------------------------------------------------

_NEWTON_TOL = 1e-10       # stop once the Newton step is below this (in log x or x)
_MAX_STEP = 1.0           # largest step (log x: a factor e; linear x: one unit)
_MAX_ITER = 60


def _newton(fun, p_lower, x0, nu, log_scale):
    """Solve ``cdf(x) = p_lower`` for every element; ``fun(x, idx, nu) -> (sf, cdf, pdf)``.

    ``G = log cdf - log p`` (lower half) or ``log(1 - p) - log sf`` (upper
    half) is increasing in ``x``; Newton steps ``-G / G'`` on ``v = log x``
    (``log_scale``) or on ``x`` are kept inside the bracket the signs of
    ``G`` have established so far (bisection otherwise) and capped at
    ``_MAX_STEP``.  Near the root the step is ``O(err^2)`` plus the density's
    relative error times ``err``, so stopping at a step below
    ``_NEWTON_TOL`` leaves a relative error far below 1e-12.  Returns the
    roots and the number of evaluation rounds.
    """
    p_lower = np.asarray(p_lower, float)
    n = p_lower.size
    use_upper = p_lower > 0.5
    target = np.log(np.where(use_upper, 1.0 - p_lower, p_lower))
    v = np.log(x0) if log_scale else np.array(x0, dtype=float)
    a = np.full(n, -np.inf)                  # G(a) < 0 < G(b)
    b = np.full(n, np.inf)
    active = np.ones(n, bool)
    rounds = 0
    for _ in range(_MAX_ITER):
        i = np.flatnonzero(active)
        if i.size == 0:
            break
        rounds += 1
        vi = v[i]
        x = np.exp(vi) if log_scale else vi
        sf, cdf, pdf = fun(x, i, nu[i])
        up = use_upper[i]
        with np.errstate(divide="ignore", invalid="ignore"):
            tail = np.where(up, sf, cdf)
            g = np.where(up, target[i] - np.log(sf), np.log(cdf) - target[i])
            dg = pdf / tail * (x if log_scale else 1.0)
            step = -g / dg
        a[i] = np.where(g < 0, vi, a[i])
        b[i] = np.where(g > 0, vi, b[i])
        ok = np.isfinite(step) & np.isfinite(g)
        step = np.where(ok, np.clip(step, -_MAX_STEP, _MAX_STEP),
                        np.where(g < 0, _MAX_STEP, -_MAX_STEP))
        ai, bi = a[i], b[i]
        both = np.isfinite(ai) & np.isfinite(bi)
        scale = np.maximum(1.0, np.abs(vi))
        # converged: the last Newton step is applied as it is (it may round to vi)
        done = (g == 0) | (ok & (np.abs(step) <= _NEWTON_TOL * scale)) \
            | (both & (bi - ai <= 1e-14 * scale))
        new = vi + step
        with np.errstate(invalid="ignore"):
            bisect = ~done & both & ~((new > ai) & (new < bi))
            new = np.where(bisect, 0.5 * (ai + bi), new)
        v[i] = np.where(g == 0, vi, new)
        active[i[done]] = False
    return (np.exp(v) if log_scale else v), rounds


def _quantile(fun, p_lower, nu, x_start, scale, log_scale=True):
    """Quantiles of a scale mixture: first at df = inf, then at each element's df.

    The ``df = inf`` solve (tables only, no integral) starts from
    ``x_start``.  Each finite-df element then starts from the point with the
    same Student-t tail as the normal tail of the ``df = inf`` quantile
    (``x0 = scale * t.isf(norm.sf(x_inf / scale), df)``; ``scale = sqrt 2``
    for the range, whose two-group case is exactly this map), which is within
    a few per cent for any number of comparisons, so a handful of Newton
    steps follow.
    """
    p_lower = np.asarray(p_lower, float)
    nu = np.asarray(nu, float)
    x_inf, r1 = _newton(fun, p_lower, np.asarray(x_start, float), np.full(p_lower.shape, np.inf),
                        log_scale)
    fin = np.flatnonzero(np.isfinite(nu))
    if fin.size == 0:
        return x_inf, (r1, 0)
    x0 = x_inf[fin].copy()
    up = p_lower[fin] > 0.5
    x0[up] = scale * stats.t.isf(special.ndtr(-x_inf[fin][up] / scale), nu[fin][up])
    if log_scale:
        x0 = np.maximum(x0, 1e-300)

    def fun_fin(x, idx, nu_idx):
        return fun(x, fin[idx], nu_idx)

    out = x_inf.copy()
    out[fin], r2 = _newton(fun_fin, p_lower[fin], x0, nu[fin], log_scale)
    return out, (r1, r2)

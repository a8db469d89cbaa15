"""Distributions behind the simultaneous procedures, vectorised and deterministic.

Every probability here has the same shape: a conditional probability ``F(w)``
for known error scale, averaged over the studentizing scale ``S`` with
``S**2 ~ chi2_df / df``::

    P = integral_0^inf  f_df(s) F(q s) ds           (df < inf)
    P = F(q)                                         (df = inf)

``F`` is itself an integral (over the largest observation for the range,
over the common factor for Dunnett's product correlation) or a closed form
(studentized maximum modulus).  The pipeline below is:

1. validate arguments once, up front (``FamwiseInputError``, one line);
2. tabulate ``log F`` and ``log(1 - F)`` once per shape parameter (``k``,
   ``lam``, ``m``) on fixed Gauss-Legendre node sets, stored as piecewise
   Chebyshev series (cached);
3. integrate over ``s`` for every element at once in one compiled loop, on
   the variable ``log s`` with a fixed number of Gauss-Legendre panels placed
   around the peak of each element's integrand (no adaptive quadrature per
   element, so an array of distinct ``df`` costs the same as one ``df``);
4. for quantiles, a vectorised safeguarded secant/bisection iteration.

The smaller of the two tails is always integrated directly, so upper-tail
probabilities keep their relative accuracy far out (no ``1 - cdf``).
"""

from __future__ import annotations

import functools
import math

import numpy as np
from numba import njit
from scipy import special

from .errors import FamwiseInputError

__all__ = [
    "srange_cdf",
    "srange_sf",
    "srange_ppf",
    "dunnett_sf",
    "dunnett_ppf",
    "smm_sf",
    "smm_ppf",
    "welch_df",
    "contrast_se_pooled",
    "contrast_se_welch",
]

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
    the tail rules read by the compiled evaluator ``_log_f``.
    """

    def __init__(self, log_upper, log_lower, u_range, u_width, l_range, l_width,
                 lower_log, upper_tail, lower_tail):
        self.coef_u, u0, uw = _cheb_fit(log_upper, u_range, u_width)
        lo_fun = (lambda x: log_lower(np.exp(x))) if lower_log else log_lower
        self.coef_l, l0, lw = _cheb_fit(lo_fun, l_range, l_width)
        self.meta = np.array([u0, uw, self.coef_u.shape[0], upper_tail,
                              1.0 if lower_log else 0.0, l0, lw, self.coef_l.shape[0],
                              lower_tail])


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


# ---------------------------------------------------------------------------
# Compiled evaluation: tables and the outer integral over the scale S
# ---------------------------------------------------------------------------

@njit(cache=True, nogil=True, inline="always")
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


@njit(cache=True, nogil=True, inline="always")
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


@njit(cache=True, nogil=True, inline="always")
def _log1mexp(a):
    """log(1 - exp(a)) for a <= 0, accurately."""
    if a > -0.6931471805599453:
        return math.log(-math.expm1(a))
    return math.log1p(-math.exp(a))


@njit(cache=True, nogil=True, inline="always")
def _log_lower(cu, cl, meta, w):
    l0 = meta[5]
    lw = meta[6]
    l1 = l0 + lw * meta[7]
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


@njit(cache=True, nogil=True, inline="always")
def _log_f(cu, cl, meta, w, upper):
    if upper:
        return _log_upper(cu, meta, w)
    return _log_lower(cu, cl, meta, w)


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


@njit(cache=True, nogil=True, inline="always")
def _psi(cu, cl, meta, q, nu, t, upper):
    em = math.expm1(t)                     # one transcendental: e^t and expm1(2t)
    return nu * (t - 0.5 * em * (em + 2.0)) + _log_f(cu, cl, meta, q * (1.0 + em), upper)


@njit(cache=True, nogil=True)
def _outer_one(cu, cl, meta, q, nu, upper, gx, gw, tl, tr, psis, ratio, hmul):
    """log of  integral f_nu(s) F(q s) ds / const  for one element (F upper or lower)."""
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
        return -np.inf
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
                for j in range(gx.shape[0]):
                    acc += gw[j] * math.exp(_psi(cu, cl, meta, q, nu, mid + half * gx[j], upper) - pc)
                total += half * acc
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
        return -np.inf
    return pc + math.log(total)


@njit(cache=True, nogil=True)
def _outer(cu, cl, meta, q, nu, gx, gw, sf, cdf, ratio=2.0, hmul=1.0, m=24):
    """Fill sf and cdf for arrays q, nu (nu may be inf); the smaller tail is integrated."""
    psis = np.empty(m)
    nu_prev = np.nan
    tl = tr = c0 = 0.0
    for i in range(q.shape[0]):
        qi = q[i]
        nui = nu[i]
        if qi != qi or nui != nui:
            sf[i] = np.nan
            cdf[i] = np.nan
            continue
        # choose the tail: the conditional probability at s = 1 is a good proxy
        lu = _log_upper(cu, meta, qi)
        upper = lu < _LOG_HALF
        if nui == np.inf:
            lp = lu if upper else _log_lower(cu, cl, meta, qi)
        else:
            if nui != nu_prev:
                tl, tr = _chi_range(nui, 50.0)
                c0 = _chi_const(nui)
                nu_prev = nui
            lp = c0 + _outer_one(cu, cl, meta, qi, nui, upper, gx, gw, tl, tr, psis, ratio, hmul)
        p = math.exp(lp)
        if upper:
            sf[i] = p
            cdf[i] = 1.0 - p
        else:
            cdf[i] = p
            sf[i] = 1.0 - p


def _evaluate(table, q, nu):
    """sf and cdf of the studentized family ``table`` at flattened q, nu."""
    q = np.ascontiguousarray(q, dtype=float).ravel()
    nu = np.ascontiguousarray(nu, dtype=float).ravel()
    sf = np.empty(q.shape)
    cdf = np.empty(q.shape)
    _outer(table.coef_u, table.coef_l, table.meta, q, nu, _GL_OUTER_X, _GL_OUTER_W, sf, cdf)
    return sf, cdf


# ---------------------------------------------------------------------------
# Conditional probabilities (known scale) and their tables
# ---------------------------------------------------------------------------

_SQRT2 = math.sqrt(2.0)
_LOG_SQRT_2PI = 0.5 * math.log(2.0 * math.pi)


def _interval_mass(lo, hi):
    """Phi(hi) - Phi(lo) for lo <= hi without cancellation (elementwise).

    Uses the tail on the side away from the interval's centre, and the
    midpoint series (Taylor in the half-width h with Hermite polynomials) when
    the interval is short.
    """
    lo, hi = np.broadcast_arrays(np.asarray(lo, float), np.asarray(hi, float))
    mid = 0.5 * (lo + hi)
    h = 0.5 * (hi - lo)
    out = np.where(mid <= 0.0, special.ndtr(hi) - special.ndtr(lo),
                   special.ndtr(-lo) - special.ndtr(-hi))
    short = h < 0.05
    if np.any(short):
        m = mid[short]
        hh = h[short]
        m2 = m * m
        h2 = hh * hh
        series = 1.0 + h2 * ((m2 - 1.0) / 6.0 + h2 * ((m2 * (m2 - 6.0) + 3.0) / 120.0
                 + h2 * (((m2 - 15.0) * m2 + 45.0) * m2 - 15.0) / 5040.0))
        out[short] = 2.0 * hh * np.exp(-0.5 * m2 - _LOG_SQRT_2PI) * series
    return out


def _logsum(logv, logw, axis=-1):
    return special.logsumexp(logv + logw, axis=axis)


@functools.lru_cache(maxsize=64)
def _range_table(k):
    """Tables of the range of k iid N(0,1) (Copenhaver & Holland 1988, eq. 2.1).

    With z the largest observation,
    ``P(W < w) = k int phi(z) [Phi(z) - Phi(z - w)]^(k-1) dz``, and the upper
    tail is integrated directly as
    ``P(W >= w) = k int phi(z) Phi(z)^(k-1) {1 - [1 - Phi(z-w)/Phi(z)]^(k-1)} dz``.
    """
    km1 = k - 1.0
    # z: the maximum; k phi(z) is below 1e-22 beyond z_hi.
    w_top = 16.0 + 0.5 * math.log(k)
    z_hi = max(math.sqrt(2.0 * (math.log(k) + 50.0)), 0.5 * w_top + 6.0)
    z, wz = _panel_rule(-9.0, z_hi, 0.5)
    logwz = np.log(wz) + math.log(k) - 0.5 * z * z - _LOG_SQRT_2PI
    lnd_z = special.log_ndtr(z)

    def log_upper(w):
        w = np.asarray(w, float)[:, None]
        lr = special.log_ndtr(z[None, :] - w) - lnd_z[None, :]     # log(d/a)
        with np.errstate(divide="ignore", invalid="ignore"):
            x = km1 * np.log1p(-np.exp(lr))                        # log (1 - d/a)^(k-1)
            lt = np.where(x > -0.6931471805599453, np.log(-np.expm1(x)),
                          np.log1p(-np.exp(x)))
        lt = np.where(lr < -30.0, math.log(km1) + lr, lt)
        return _logsum(km1 * lnd_z[None, :] + lt, logwz[None, :])

    def log_lower(w):
        w = np.asarray(w, float)[:, None]
        mass = _interval_mass(z[None, :] - w, np.broadcast_to(z[None, :], (w.shape[0], z.size)))
        with np.errstate(divide="ignore"):
            return _logsum(km1 * np.log(mass), logwz[None, :])

    return _Table(log_upper, log_lower, (0.0, w_top), 0.5, (math.log(1e-6), math.log(w_top)),
                  0.5, True, 0.25, km1)

"""Compiled common-factor integral of Dunnett's product-correlation normal maximum.

With ``corr(Z_i, Z_j) = lam_i lam_j`` the ``Z_i = lam_i u + sig_i e_i``
(``sig_i = sqrt(1 - lam_i^2)``) are independent given the common factor
``u ~ N(0, 1)`` (Dunnett 1955, section 2), so for known scale

    P(all |Z_i| < w) = int phi(u) prod_i [Phi((w - lam_i u)/sig_i)
                                          - Phi((-w - lam_i u)/sig_i)] du

(``P(all Z_i < w)``: the first term only).  :func:`_dunnett_log_tails`
returns the logarithms of this probability and of its complement, both
integrated directly, for many ``w`` at once; famwise.distributions tabulates
them.  As ``lam_i -> 1`` a factor becomes a step in ``u`` of width
``sig_i / lam_i`` at ``u = w / lam_i``; graded panels there keep the
integral accurate for every ``lam`` in [0, 1).

References
----------
Dunnett, C. W. (1955). A multiple comparison procedure for comparing several
treatments with a control. *JASA* 50(272):1096-1121.
doi:10.1080/01621459.1955.10501294
"""

from __future__ import annotations

import math

import numpy as np
from numba import njit

_LOG_SQRT_2PI = 0.5 * math.log(2.0 * math.pi)


@njit(cache=True, nogil=True)
def _log_ndtr_scalar(x):
    if x > -5.0:
        return math.log1p(-0.5 * math.erfc(x / 1.4142135623730951))
    if x > -30.0:
        return math.log(0.5 * math.erfc(-x / 1.4142135623730951))
    x2 = x * x                                   # asymptotic (Mills ratio)
    return -0.5 * x2 - math.log(-x) - 0.9189385332046728 + math.log1p(-1.0 / x2 + 3.0 / (x2 * x2))


@njit(cache=True, nogil=True)
def _dunnett_breaks(wa, lam, sig, two_sided, h):
    """Panel edges in u for one w: the fixed grid plus graded panels at each step.

    Base grid of spacing ``h`` on [0, 9] (two-sided) or [-9, 9], continued to
    ``+-(|w| + 5)`` where the upper tail's mass sits (near ``u = lam w``;
    for ``lam -> 1`` the upper-tail integrand is ``phi(u)`` beyond
    ``u = w / lam``).  Where a factor's transition ``u = w / lam_i`` has
    width ``s_i = sig_i / lam_i`` below ``h`` (``lam_i`` near 1), edges
    ``c +- s_i 2^j`` resolve the near-step: GL panels of one ``s_i`` across
    it, doubling outward to ``h``.
    """
    reach = max(9.0, abs(wa) + 5.0)
    lo = 0.0 if two_sided else -reach
    start = 0.0 if two_sided else -9.0
    nb = int(math.ceil((reach - lo) / h)) + 3
    nref = 0
    for i in range(lam.shape[0]):
        if lam[i] > 0.0 and sig[i] < h * lam[i]:
            nref += 2 * (int(math.log2(h * lam[i] / sig[i])) + 2) + 1
    edges = np.empty(nb + nref)
    n = 0
    j = 0
    while True:                                  # downward from the grid's start
        x = start - j * h
        if x < lo:
            break
        edges[n] = x
        n += 1
        j += 1
    j = 1
    while True:
        x = start + j * h
        if x >= reach:
            break
        edges[n] = x
        n += 1
        j += 1
    edges[n] = reach
    n += 1
    if lo < start and edges[n - 1] != lo:
        edges[n] = lo
        n += 1
    for i in range(lam.shape[0]):
        if not (lam[i] > 0.0 and sig[i] < h * lam[i]):
            continue
        s = sig[i] / lam[i]
        c = wa / lam[i]
        if lo <= c <= reach:
            edges[n] = c
            n += 1
        d = s
        while d < h:
            for x in (c - d, c + d):
                if lo < x < reach:
                    edges[n] = x
                    n += 1
            d *= 2.0
    e = np.sort(edges[:n])
    keep = np.empty(n, np.bool_)
    keep[0] = True
    for i in range(1, n):
        keep[i] = e[i] > e[i - 1]
    return e[keep]


@njit(cache=True, nogil=True)
def _dunnett_log_p(wa, u, lam, sig, mult, two_sided):
    """sum_i mult_i log P_i(u, w): log P(all |Z_i| < w | u) (or all Z_i < w)."""
    acc = 0.0
    for i in range(lam.shape[0]):
        c = lam[i] * u
        hi = (wa - c) / sig[i]
        if not two_sided:
            acc += mult[i] * _log_ndtr_scalar(hi)
            continue
        lo = (-wa - c) / sig[i]
        qout = 0.5 * math.erfc(-lo / 1.4142135623730951) + 0.5 * math.erfc(hi / 1.4142135623730951)
        if qout < 0.5:
            acc += mult[i] * math.log1p(-qout)
        else:
            if lo + hi <= 0.0:
                mass = 0.5 * (math.erfc(-hi / 1.4142135623730951) - math.erfc(-lo / 1.4142135623730951))
            else:
                mass = 0.5 * (math.erfc(lo / 1.4142135623730951) - math.erfc(hi / 1.4142135623730951))
            if mass <= 0.0:
                return -np.inf
            acc += mult[i] * math.log(mass)
    return acc


@njit(cache=True, nogil=True, inline="always")
def _lse_add(m, s, x):
    """Streaming log-sum-exp: (max, scaled sum) after adding exp(x)."""
    if x == -np.inf:
        return m, s
    if x > m:
        return x, s * math.exp(m - x) + 1.0
    return m, s + math.exp(x - m)


@njit(cache=True, nogil=True)
def _dunnett_log_tails(w, lam, sig, mult, two_sided, h, gx, gw, upper, lower):
    """log P(max_i |Z_i| >= w) and log P(max_i |Z_i| < w) (or max_i Z_i), per w.

    ``int phi(u) g(u) du`` over the common factor on the edges of
    _dunnett_breaks, 12-point Gauss-Legendre per panel; the two-sided
    integrand is even in u, so only u >= 0 is integrated (weight 2).
    """
    lw2 = math.log(2.0) if two_sided else 0.0
    for a in range(w.shape[0]):
        wa = w[a]
        e = _dunnett_breaks(wa, lam, sig, two_sided, h)
        mu, su, ml, sl = -np.inf, 0.0, -np.inf, 0.0
        for k in range(e.shape[0] - 1):
            half = 0.5 * (e[k + 1] - e[k])
            mid = 0.5 * (e[k + 1] + e[k])
            for j in range(gx.shape[0]):
                u = mid + half * gx[j]
                lwt = math.log(half * gw[j]) + lw2 - 0.5 * u * u - _LOG_SQRT_2PI
                s = _dunnett_log_p(wa, u, lam, sig, mult, two_sided)
                ml, sl = _lse_add(ml, sl, s + lwt)
                if s < 0.0:
                    ml_u = _log1mexp_scalar(s)
                    mu, su = _lse_add(mu, su, ml_u + lwt)
        upper[a] = mu + math.log(su) if su > 0.0 else -np.inf
        lower[a] = ml + math.log(sl) if sl > 0.0 else -np.inf


@njit(cache=True, nogil=True, inline="always")
def _log1mexp_scalar(a):
    if a > -0.6931471805599453:
        return math.log(-math.expm1(a))
    return math.log1p(-math.exp(a))

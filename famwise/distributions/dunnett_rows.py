"""Dunnett's two-sided many-to-one tail with its own correlations and df per element.

:func:`famwise.distributions.simultaneous.dunnett_sf` tabulates the
distribution once per set of correlation factors and then evaluates many
statistics at one df: the right tool for one data set.  A simulation of the
Welch-type procedure against a reference (``welch-dunnett``) needs the
opposite: every replicate has its own factors (from its own variances) and
every comparison its own Welch df, so no table is ever reused.
:func:`dunnett_rows_sf` integrates each element directly:

    P(max_j |T_j| < t) = int f_nu(s) int phi(u) prod_j [Phi((t s - lam_j u) / sig_j)
                                                      - Phi((-t s - lam_j u) / sig_j)] du ds

with ``T_j = Z_j / S``, ``Z_j = lam_j u + sig_j e_j`` given the common
factor ``u`` (Dunnett 1955, section 2), ``sig_j = sqrt(1 - lam_j^2)`` and
``S = sqrt(chi2_nu / nu)``.  The u integrand is even, so u runs over
[0, 6.5] (the mass beyond is below 1e-10) on Gauss-Legendre panels no wider
than the narrowest step ``sig_j / lam_j``; the s integral runs over
x = log s, on panels of width 1 / sqrt(2 nu) (the curvature of the log
density at its peak x = 0) doubling outward until the log density has fallen
by 45.  A fixed amount of work per element, no adaptivity, absolute error
about 1e-9 (``tests/test_plan_reference.py`` checks it against
``dunnett_sf``).  :func:`dunnett_rows_at_most` gives the decisions at a
level, first with a rule about eight times cheaper (10-point panels become
5-point, the u panels twice as wide, the s range shorter; absolute error
below 3e-5) and with the fine rule only where that leaves the level within
``COARSE_BAND``.

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

__all__ = ["dunnett_rows_sf", "dunnett_rows_at_most"]

_SQRT1_2 = 1.0 / math.sqrt(2.0)
_U_MAX = 6.5
#: (Gauss-Legendre points per s panel, per u panel, widest u panel as a multiple of
#: the narrowest step, fall of the log density where the s range ends).
_FINE = (*np.polynomial.legendre.leggauss(10), *np.polynomial.legendre.leggauss(10), 0.6,
         45.0)
#: A rule about 8x cheaper, absolute error below 3e-5 in the tests; decisions it
#: leaves within COARSE_BAND of the level are taken with the fine rule.
_COARSE = (*np.polynomial.legendre.leggauss(5), *np.polynomial.legendre.leggauss(5), 1.0,
           30.0)
COARSE_BAND = 1e-3


@njit(cache=True, nogil=True)
def _log_chi_density(x, nu, const):
    """log of the density of log S at x, S = sqrt(chi2_nu / nu)."""
    return const + nu * x - 0.5 * nu * math.exp(2.0 * x)


@njit(cache=True, nogil=True)
def _inside(w, lam, sig, h, gx, gw):
    """P(all |Z_j| < w) = 2 int_0^U phi(u) prod_j [...] du on panels of width h."""
    panels = int(math.ceil(_U_MAX / h))
    width = _U_MAX / panels
    total = 0.0
    for k in range(panels):
        mid = (k + 0.5) * width
        half = 0.5 * width
        for i in range(gx.shape[0]):
            u = mid + half * gx[i]
            prod = math.exp(-0.5 * u * u)
            for j in range(lam.shape[0]):
                a = (w - lam[j] * u) / sig[j]
                b = (-w - lam[j] * u) / sig[j]
                prod *= 0.5 * (math.erfc(-a * _SQRT1_2) - math.erfc(-b * _SQRT1_2))
                if prod == 0.0:
                    break
            total += half * gw[i] * prod
    return 2.0 * total / math.sqrt(2.0 * math.pi)


@njit(cache=True, nogil=True)
def _s_edges(nu, drop):
    """Panel edges in x = log s: width 1/sqrt(2 nu) at the peak, doubling outward."""
    d = 1.0 / math.sqrt(2.0 * nu)
    lo = -drop / nu - 0.5
    hi = 0.0
    while nu * (hi - 0.5 * (math.exp(2.0 * hi) - 1.0)) > -drop:
        hi += d
    out = np.empty(64)
    n = 0
    x, step = 0.0, d
    left = np.empty(32)
    nl = 0
    while x > lo and nl < 31:
        x -= step
        left[nl] = max(x, lo)
        nl += 1
        step *= 2.0
    for i in range(nl - 1, -1, -1):
        out[n] = left[i]
        n += 1
    out[n] = 0.0
    n += 1
    x, step = 0.0, d
    while x < hi and n < 63:
        x += step
        out[n] = min(x, hi)
        n += 1
        step *= 2.0
    return out[:n]


@njit(cache=True, nogil=True)
def _rows_sf(t, nu, lam, out, gxs, gws, gxu, gwu, hmax, drop):
    for e in range(t.shape[0]):
        la = lam[e]
        sig = np.sqrt((1.0 - la) * (1.0 + la))
        h = hmax
        for j in range(la.shape[0]):
            if la[j] > 0.0:
                h = min(h, max(0.05, hmax * sig[j] / la[j]))
        v = nu[e]
        const = math.log(2.0) + 0.5 * v * math.log(0.5 * v) - math.lgamma(0.5 * v)
        edges = _s_edges(v, drop)
        acc = 0.0
        for k in range(edges.shape[0] - 1):
            half = 0.5 * (edges[k + 1] - edges[k])
            mid = 0.5 * (edges[k + 1] + edges[k])
            for i in range(gxs.shape[0]):
                x = mid + half * gxs[i]
                dens = math.exp(_log_chi_density(x, v, const))
                if dens < 1e-14:
                    continue
                acc += half * gws[i] * dens * _inside(t[e] * math.exp(x), la, sig, h, gxu, gwu)
        out[e] = 1.0 - acc


def _prepare(t, nu, lam):
    t = np.ascontiguousarray(np.abs(np.asarray(t, dtype=np.float64)).ravel())
    nu = np.ascontiguousarray(np.asarray(nu, dtype=np.float64).ravel())
    lam = np.ascontiguousarray(np.asarray(lam, dtype=np.float64).reshape(t.size, -1))
    if not (nu.size == t.size and np.all(nu >= 1.0) and np.all(np.isfinite(nu))):
        raise ValueError("nu must hold one finite df >= 1 per statistic")
    if np.any(lam < 0.0) or np.any(lam >= 1.0) or not np.all(np.isfinite(t)):
        raise ValueError("lam must lie in [0, 1) and t be finite")
    return t, nu, lam


def _run(t, nu, lam, rule):
    out = np.empty(t.size)
    if t.size:
        _rows_sf(t, nu, lam, out, *rule)
    return out


def dunnett_rows_at_most(t, nu, lam, alpha: float) -> np.ndarray:
    """Return ``dunnett_rows_sf(t, nu, lam) <= alpha`` (the decisions at level
    ``alpha``), from the coarse rule where it is farther than ``COARSE_BAND``
    from ``alpha`` and from the fine rule elsewhere."""
    t, nu, lam = _prepare(t, nu, lam)
    p = _run(t, nu, lam, _COARSE)
    near = np.flatnonzero(np.abs(p - alpha) <= COARSE_BAND)
    if near.size:
        p[near] = _run(t[near], nu[near], np.ascontiguousarray(lam[near]), _FINE)
    return p <= alpha


def dunnett_rows_sf(t, nu, lam) -> np.ndarray:
    """Return ``P(max_j |T_j| >= t)`` for each element, two-sided.

    Parameters
    ----------
    t : array_like, shape (E,)
        Statistics (their absolute values are used).
    nu : array_like, shape (E,)
        Each element's df (finite, at least 1).
    lam : array_like, shape (E, p)
        Each element's correlation factors in [0, 1): ``corr(Z_i, Z_j) =
        lam_i lam_j``; for Welch statistics against a reference,
        ``lam_i = sqrt(v_0 / (v_0 + v_i))`` with ``v = s^2 / n``.
    """
    t, nu, lam = _prepare(t, nu, lam)
    return _run(t, nu, lam, _FINE)

"""Compiled kernels of the multivariate normal / t maximum (numba, ``nogil``, cached).

The probability ``P(a_i <= (L x)_i <= b_i for every row i)`` with
``x ~ N(0, I_p)`` and ``L`` in *staircase* form (each row's last nonzero
coefficient, its pivot, sits in the column whose variable it bounds) is
written as a product of conditional probabilities by separation of
variables (Genz 1992, section 2; Genz & Bretz 2009, section 4.1.1): for
column ``j`` in turn, the rows that end at ``j`` bound ``x_j`` to
``[lo_j, hi_j]`` given the earlier variables, ``e_j = Phi(hi_j) -
Phi(lo_j)``, and the next variable is drawn inside that interval through
``y_j = Phi^-1(Phi(lo_j) + u_j e_j)`` with ``u_j`` a coordinate of the
integration point.  The integrand is ``prod_j e_j``; its complement
``1 - prod_j e_j`` is formed from ``sum_j log e_j`` with ``log1p`` and
``expm1``, so far upper tails keep their relative accuracy.

The limits are ``-w <= (L x)_i <= w`` (two-sided) or ``(L x)_i <= w``
(one-sided), ``w = c s`` for each critical value ``c`` and the point's
studentizing scale ``s`` (``s = 1`` for infinite df).  One call runs a
block of integration points of every randomization for every active ``c``
and adds the point sums into ``f_sum`` and ``g_sum`` (the caller divides);
the kernel never writes to its inputs.

Integration points are a randomly shifted Kronecker (Richtmyer) sequence,
``frac(i alpha_d + shift_d)`` with ``alpha_d`` the fractional parts of the
square roots of the primes (Richtmyer 1951), periodized by the baker's
(tent) transform ``u = 1 - |2 t - 1|`` (Hickernell 2002).

References
----------
Genz, A. (1992). Numerical computation of multivariate normal
probabilities. *J. Comput. Graph. Statist.* 1(2):141-149.
doi:10.1080/10618600.1992.10477010
Genz, A. & Bretz, F. (2009). *Computation of Multivariate Normal and t
Probabilities*. Springer, Berlin (monograph, vol. 195 of its statistics series).
doi:10.1007/978-3-642-01689-9
Wichura, M. J. (1988). Algorithm AS 241: the percentage points of the
normal distribution. *Appl. Statist.* 37(3):477-484. doi:10.2307/2347330
Hickernell, F. J. (2002). Obtaining O(N^-2+e) convergence for lattice
quadrature rules. In *Monte Carlo and Quasi-Monte Carlo Methods 2000*,
Springer, 274-289.
"""

from __future__ import annotations

import math

import numpy as np
from numba import njit

__all__ = ["staircase_block", "kronecker_alphas", "ndtri_scalar"]

_SQRT1_2 = 0.7071067811865476


def kronecker_alphas(dim: int) -> np.ndarray:
    """Fractional parts of the square roots of the first ``dim`` primes."""
    if dim <= 0:
        return np.zeros(0)
    limit = max(16, int(dim * (math.log(dim + 2) + math.log(math.log(dim + 2)) + 3)))
    while True:
        sieve = np.ones(limit + 1, bool)
        sieve[:2] = False
        for q in range(2, int(limit ** 0.5) + 1):
            if sieve[q]:
                sieve[q * q::q] = False
        primes = np.flatnonzero(sieve)
        if primes.size >= dim:
            break
        limit *= 2
    root = np.sqrt(primes[:dim].astype(float))
    return np.ascontiguousarray(root - np.floor(root))


@njit(cache=True, nogil=True)
def _poly(coef, x):
    acc = 0.0
    for i in range(coef.shape[0] - 1, -1, -1):
        acc = acc * x + coef[i]
    return acc


_A = np.array([3.3871328727963666080e0, 1.3314166789178437745e2, 1.9715909503065514427e3,
               1.3731693765509461125e4, 4.5921953931549871457e4, 6.7265770927008700853e4,
               3.3430575583588128105e4, 2.5090809287301226727e3])
_B = np.array([1.0, 4.2313330701600911252e1, 6.8718700749205790830e2, 5.3941960214247511077e3,
               2.1213794301586595867e4, 3.9307895800092710610e4, 2.8729085735721942674e4,
               5.2264952788528545610e3])
_C = np.array([1.42343711074968357734e0, 4.63033784615654529590e0, 5.76949722146069140550e0,
               3.64784832476320460504e0, 1.27045825245236838258e0, 2.41780725177450611770e-1,
               2.27238449892691845833e-2, 7.74545014278341407640e-4])
_D = np.array([1.0, 2.05319162663775882187e0, 1.67638483018380384940e0, 6.89767334985100004550e-1,
               1.48103976427480074590e-1, 1.51986665636164571966e-2, 5.47593808499534494600e-4,
               1.05075007164441684324e-9])
_E = np.array([6.65790464350110377720e0, 5.46378491116411436990e0, 1.78482653991729133580e0,
               2.96560571828504891230e-1, 2.65321895265761230930e-2, 1.24266094738807843860e-3,
               2.71155556874348757815e-5, 2.01033439929228813265e-7])
_F = np.array([1.0, 5.99832206555887937690e-1, 1.36929880922735805310e-1, 1.48753612908506148525e-2,
               7.86869131145613259100e-4, 1.84631831751005468180e-5, 1.42151175831644588870e-7,
               2.04426310338993978564e-15])


@njit(cache=True, nogil=True)
def ndtri_scalar(p):
    """Phi^-1(p) for 0 < p < 1 (Wichura 1988, AS 241 PPND16: about 1e-16 relative).

    Callers pass the smaller tail (p <= 1/2 where they can) so that no
    precision is lost in ``1 - p``.
    """
    q = p - 0.5
    if abs(q) <= 0.425:
        r = 0.180625 - q * q
        return q * _poly(_A, r) / _poly(_B, r)
    r = p if q < 0.0 else 1.0 - p
    if r <= 0.0:
        return -40.0 if q < 0.0 else 40.0
    r = math.sqrt(-math.log(r))
    if r <= 5.0:
        r -= 1.6
        val = _poly(_C, r) / _poly(_D, r)
    else:
        r -= 5.0
        val = _poly(_E, r) / _poly(_F, r)
    return -val if q < 0.0 else val


@njit(cache=True, nogil=True, inline="always")
def _phi_lower(x):
    """Phi(x) = P(Z <= x), accurate in the lower tail."""
    return 0.5 * math.erfc(-x * _SQRT1_2)


@njit(cache=True, nogil=True)
def _one_point(w, two_sided, u, cptr, rptr, idx, val, y):
    """log prod_j e_j at one point and limit w (``-inf`` when the region is empty)."""
    p = cptr.shape[0] - 1
    logf = 0.0
    for j in range(p):
        lo = -np.inf
        hi = np.inf
        for q in range(cptr[j], cptr[j + 1]):
            last = rptr[q + 1] - 1
            part = 0.0
            for e in range(rptr[q], last):
                part += val[e] * y[idx[e]]
            piv = val[last]
            if piv > 0.0:
                b = (w - part) / piv
                if b < hi:
                    hi = b
                if two_sided:
                    a = (-w - part) / piv
                    if a > lo:
                        lo = a
            else:
                a = (w - part) / piv
                if a > lo:
                    lo = a
                if two_sided:
                    b = (-w - part) / piv
                    if b < hi:
                        hi = b
        if not lo < hi:
            return -np.inf
        # mass and the draw, on the side of zero the interval lies on
        if lo >= 0.0:                       # upper half: use upper tails
            tlo = _phi_lower(-lo)           # P(Z >= lo)
            thi = _phi_lower(-hi)           # P(Z >= hi)
            e = tlo - thi
            if e <= 0.0:
                return -np.inf
            logf += math.log(e)
            if j < p - 1:
                y[j] = -ndtri_scalar(thi + (1.0 - u[j]) * e)
        elif hi <= 0.0:
            plo = _phi_lower(lo)
            phi = _phi_lower(hi)
            e = phi - plo
            if e <= 0.0:
                return -np.inf
            logf += math.log(e)
            if j < p - 1:
                y[j] = ndtri_scalar(plo + u[j] * e)
        else:                               # straddles zero: 1 - the two tails
            plo = _phi_lower(lo)
            thi = _phi_lower(-hi)
            out = plo + thi
            logf += math.log1p(-out)
            if j < p - 1:
                e = 1.0 - out
                z = plo + u[j] * e
                if z <= 0.5:
                    y[j] = ndtri_scalar(z)
                else:
                    y[j] = -ndtri_scalar(thi + (1.0 - u[j]) * e)
    return logf


@njit(cache=True, nogil=True)
def staircase_block(c, active, two_sided, cptr, rptr, idx, val, alphas, shifts, svals,
                    i0, i1, f_sum, g_sum):
    """Add the integrand over points ``i0 <= i < i1`` of every randomization.

    ``c`` (nc,) critical values (only ``active`` ones are run); ``alphas``
    (dim,) the Kronecker generators and ``shifts`` (R, dim) the random
    shifts of the coordinates that draw the variables; ``svals`` (R, i1 - i0)
    the studentizing scale of each point (or shape (R, 0) for infinite df).
    ``f_sum[r, a]`` and ``g_sum[r, a]`` receive the sums of the probability
    and of its complement; nothing else is written.
    """
    nrand = shifts.shape[0]
    dim = alphas.shape[0]
    p = cptr.shape[0] - 1
    nc = c.shape[0]
    use_s = svals.shape[1] > 0
    u = np.empty(max(dim, 1))
    y = np.zeros(max(p, 1))
    for r in range(nrand):
        for i in range(i0, i1):
            for d in range(dim):
                t = i * alphas[d] + shifts[r, d]
                t -= math.floor(t)
                v = 1.0 - abs(2.0 * t - 1.0)
                if v < 1e-300:
                    v = 1e-300
                elif v > 1.0 - 1e-16:
                    v = 1.0 - 1e-16
                u[d] = v
            s = svals[r, i - i0] if use_s else 1.0
            for a in range(nc):
                if not active[a]:
                    continue
                logf = _one_point(c[a] * s, two_sided, u, cptr, rptr, idx, val, y)
                if logf == -np.inf:
                    g_sum[r, a] += 1.0
                else:
                    f_sum[r, a] += math.exp(logf)
                    g_sum[r, a] += -math.expm1(logf)

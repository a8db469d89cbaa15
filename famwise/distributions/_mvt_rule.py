"""The randomized quasi-Monte Carlo rule behind famwise.distributions.multivariate_t.

Point sums of the compiled staircase integrand (:mod:`._lattice`) over a
randomly shifted Kronecker sequence, in ``_RANDOMIZATIONS`` independent
randomizations from a fixed seed; the doubling rule that adds points until
each probability's error bound meets its target; and the interpolation of
the upper tail over many critical values on one shared rule.  The public
functions and the algorithm's description are in
:mod:`famwise.distributions.multivariate_t`.
"""

from __future__ import annotations

import math
import warnings

import numpy as np

from ..core.errors import FamwiseWarning

_RANDOMIZATIONS = 10
_BOUND_SE = 4.0                      # bound = 4 standard errors (t_9: 99.7%)
_SEED = 20150917                     # fixed: the shifts of the randomized rule
_N_START = 512                       # points per randomization in the first block
_N_MAX = 1 << 16                     # cap on points per randomization
_BUDGET_S = 20.0                     # work cap of one call, in seconds of kernel time
_SEC_PER_RANK = 6e-8                 # kernel time per point: per variable (3 special functions)
_SEC_PER_NZ = 2e-9                   # ... and per nonzero coefficient of the staircase


class QMCAccuracyWarning(FamwiseWarning, RuntimeWarning):
    """The quasi-Monte Carlo error bound missed its target at the point cap."""


# ---------------------------------------------------------------------------
# The integral
# ---------------------------------------------------------------------------

def _target(small, tolerance):
    """Error bound wanted for a probability whose smaller tail is ``small``.

    ``tolerance`` where the smaller tail is 0.05 or more, in proportion below
    (2% relative), never below tolerance / 10.
    """
    return tolerance * np.clip(small / 0.05, 0.1, 1.0)


class _Integrator:
    """Point sums for one staircase, df and side, extended block by block."""

    def __init__(self, stair, nu: float, two_sided: bool, n_jobs: int = 1):
        self.stair = stair
        self.nu = nu
        self.two_sided = two_sided
        self.n_jobs = n_jobs
        self.dim = max(stair.rank - 1, 0)
        gen = np.random.default_rng(_SEED)
        shifts = gen.random((_RANDOMIZATIONS, self.dim + 1))
        self.shifts = np.ascontiguousarray(shifts[:, :self.dim])
        self.s_shift = shifts[:, self.dim].copy()
        # rough kernel time of one point at one value (for the work cap)
        self.eval_seconds = _SEC_PER_RANK * stair.rank + _SEC_PER_NZ * stair.val.size
        alphas = _kronecker(self.dim + 1)
        self.alphas = np.ascontiguousarray(alphas[:self.dim])
        self.s_alpha = float(alphas[self.dim])

    def svals(self, i0, i1):
        if not math.isfinite(self.nu):
            return np.zeros((_RANDOMIZATIONS, 0))
        from scipy import special

        t = np.arange(i0, i1)[None, :] * self.s_alpha + self.s_shift[:, None]
        t -= np.floor(t)
        u = np.clip(1.0 - np.abs(2.0 * t - 1.0), 1e-300, 1.0)
        # S = sqrt(chi2_nu / nu): chi2 quantile through the inverse regularized gamma
        return np.ascontiguousarray(np.sqrt(2.0 * special.gammaincinv(0.5 * self.nu, u) / self.nu))

    def run(self, c, active, i0, i1):
        """Sums over points [i0, i1) for the active c: (f_sum, g_sum), shape (R, nc)."""
        from ._lattice import staircase_block

        st = self.stair
        c = np.ascontiguousarray(c, dtype=np.float64)
        f_sum = np.zeros((_RANDOMIZATIONS, c.size))
        g_sum = np.zeros((_RANDOMIZATIONS, c.size))
        sv = self.svals(i0, i1)
        act = np.ascontiguousarray(active, dtype=np.bool_)
        pieces = _pieces(np.flatnonzero(act), self.n_jobs)
        if len(pieces) <= 1:
            staircase_block(c, act, self.two_sided, st.cptr, st.rptr, st.idx, st.val,
                            self.alphas, self.shifts, sv, i0, i1, f_sum, g_sum)
            return f_sum, g_sum
        from joblib import Parallel, delayed

        def one(sel):
            a = np.zeros(c.size, np.bool_)
            a[sel] = True
            fs = np.zeros_like(f_sum)
            gs = np.zeros_like(g_sum)
            staircase_block(c, a, self.two_sided, st.cptr, st.rptr, st.idx, st.val,
                            self.alphas, self.shifts, sv, i0, i1, fs, gs)
            return sel, fs, gs

        for sel, fs, gs in Parallel(n_jobs=self.n_jobs, prefer="threads")(
                delayed(one)(sel) for sel in pieces):
            f_sum[:, sel] = fs[:, sel]
            g_sum[:, sel] = gs[:, sel]
        return f_sum, g_sum


def _pieces(idx, n_jobs):
    """Split the active values over workers; each value's sums are computed
    whole by one worker, so the split never changes a result."""
    if n_jobs == 1 or idx.size < 2:
        return [idx]
    workers = idx.size if n_jobs < 0 else min(n_jobs, idx.size)
    return [p for p in np.array_split(idx, workers) if p.size]


_ALPHA_CACHE = {}


def _kronecker(dim):
    if dim not in _ALPHA_CACHE:
        from ._lattice import kronecker_alphas

        _ALPHA_CACHE[dim] = kronecker_alphas(dim)
    return _ALPHA_CACHE[dim]


def _exact_one(c, nu, two_sided):
    """Rank one: every row is +-Z_1, so the probability is Student's t (or normal)."""
    from scipy import stats

    dist = stats.norm if not math.isfinite(nu) else stats.t(nu)
    sf = 2.0 * dist.sf(c) if two_sided else dist.sf(c)
    sf = np.where(c <= 0.0, 1.0, sf) if two_sided else sf
    return np.minimum(sf, 1.0)


def _caller_level() -> int:
    """Stack level of the first frame outside famwise (where the warning points)."""
    import sys

    level, frame = 1, sys._getframe(1)
    while frame is not None and frame.f_globals.get("__name__", "").startswith("famwise"):
        level += 1
        frame = frame.f_back
    return level


def _integrate(integ: _Integrator, c, tolerance, fixed_n=None, *, shared=False,
               decide_at=None, warn=True, budget=_BUDGET_S):
    """Sums at each c, doubling the points until each error bound meets its target.

    ``fixed_n``: run exactly that many points per randomization.  ``shared``:
    keep every value running until all meet their targets, so all share one
    rule (needed to interpolate between them).  ``decide_at``: a level (alpha)
    whose side each probability should be settled on: the target shrinks to
    half the distance to it, down to a tenth of the tolerance.  ``budget``:
    the work cap in seconds of kernel time for all values together.
    Returns (sf, cdf, error, points, n) with n the points per randomization
    of the last block's end.
    """
    nc = c.size
    # work cap: about _BUDGET_S seconds of kernel time for all values together
    n_cap = int(budget / (integ.eval_seconds * _RANDOMIZATIONS * max(nc, 1)))
    n_cap = min(_N_MAX, max(_N_START, n_cap))
    f_tot = np.zeros((_RANDOMIZATIONS, nc))
    g_tot = np.zeros((_RANDOMIZATIONS, nc))
    n_used = np.zeros(nc, np.int64)
    active = np.ones(nc, bool)
    n = 0
    block = _N_START if fixed_n is None else fixed_n
    while True:
        fs, gs = integ.run(c, active, n, n + block)
        f_tot[:, active] += fs[:, active]
        g_tot[:, active] += gs[:, active]
        n += block
        n_used[active] = n
        f_est = f_tot / n_used
        g_est = g_tot / n_used
        sf = g_est.mean(axis=0)
        cdf = f_est.mean(axis=0)
        err = _BOUND_SE * g_est.std(axis=0, ddof=1) / math.sqrt(_RANDOMIZATIONS)
        if fixed_n is not None:
            break
        target = _target(np.minimum(sf, cdf), tolerance)
        if decide_at is not None:
            target = np.minimum(target, np.maximum(0.5 * np.abs(sf - decide_at),
                                                   0.1 * tolerance))
        met = err <= target
        if shared:
            if met.all():
                break
        else:
            active &= ~met
            if not active.any():
                break
        if 2 * n > n_cap:
            if warn:
                late = ~met
                warnings.warn(QMCAccuracyWarning(
                    f"multivariate t: the error bound of {int(late.sum())} probability(ies) "
                    f"is still above its target after {n * _RANDOMIZATIONS} points, the work "
                    f"cap (largest {float(err[late].max()):.2g}); it is reported as it is"),
                    stacklevel=_caller_level())
            break
        block = n                                   # doubling
    return sf, cdf, err, n_used * _RANDOMIZATIONS, n


# Interpolation of the upper tail over c, on one shared rule --------------------

_CURVE_NODES = 12                    # Chebyshev points per panel (in log c)
_CURVE_WIDTH = 0.7                   # panel width in log c
_CURVE_MIN_VALUES = 48               # fewer distinct values: evaluate directly
_CURVE_SPLITS = 3                    # a panel may be halved this many times


def _cheb_nodes(lo, hi):
    j = np.arange(_CURVE_NODES)
    y = np.cos(np.pi * (j + 0.5) / _CURVE_NODES)
    return 0.5 * (lo + hi) + 0.5 * (hi - lo) * y, y


def _cheb_coef(f):
    n = _CURVE_NODES
    j = np.arange(n)
    cosm = np.cos(np.pi * np.outer(j, j + 0.5) / n)
    coef = (2.0 / n) * cosm @ f
    coef[0] *= 0.5
    return coef


def _curve(integ: _Integrator, c, tolerance):
    """sf, error and points at many values c > 0 through interpolation.

    ``log P(max >= c)`` is evaluated on Chebyshev points of panels in
    ``log c`` covering the values, all on one rule (the points double until
    every node meets its target), and interpolated.  A panel is accepted when
    its series' last two coefficients, a bound on the relative interpolation
    error, are below a tenth of the smallest relative error bound of its
    nodes (or 1e-9); otherwise it is halved, and after three halvings its
    values are evaluated directly on the same rule.  The error reported at a
    value is the node errors interpolated linearly in ``log`` (plus the
    interpolation bound).  Returns None when direct evaluation is cheaper.
    """
    x = np.log(c)
    lo, hi = float(x.min()), float(x.max())
    npan = max(1, int(math.ceil((hi - lo) / _CURVE_WIDTH)))
    if npan * _CURVE_NODES >= c.size or c.size < _CURVE_MIN_VALUES:
        return None
    edges = np.linspace(lo, hi, npan + 1)
    if hi - lo < 1e-6:
        return None
    panels = [(edges[i], edges[i + 1], 0) for i in range(npan)]
    nodes = np.concatenate([_cheb_nodes(a, b)[0] for a, b, _ in panels])
    s_n, _, e_n, _, n_rule = _integrate(integ, np.exp(nodes), tolerance, shared=True)
    sf_out = np.full(c.size, np.nan)
    err_out = np.zeros(c.size)
    todo = list(panels)
    while todo:
        batch = todo
        todo = []
        if s_n is None:
            allx = np.concatenate([_cheb_nodes(a, b)[0] for a, b, _ in batch])
            s_n, _, e_n, _, _ = _integrate(integ, np.exp(allx), tolerance, fixed_n=n_rule)
        for i, (a, b, depth) in enumerate(batch):
            sl = slice(i * _CURVE_NODES, (i + 1) * _CURVE_NODES)
            sf_i, err_i = s_n[sl], e_n[sl]
            inside = (x >= a) & (x <= b) & np.isnan(sf_out)
            if not inside.any():
                continue
            if np.any(sf_i <= 0.0):
                good = False
            else:
                coef = _cheb_coef(np.log(sf_i))
                tail = abs(coef[-1]) + abs(coef[-2])
                budget = max(0.1 * float(np.min(err_i / sf_i)), 1e-9)
                good = tail <= budget
            if good:
                y = (2.0 * x[inside] - (a + b)) / (b - a)
                vals = np.exp(np.polynomial.chebyshev.chebval(y, coef))
                sf_out[inside] = vals
                xs_i = _cheb_nodes(a, b)[0][::-1]           # ascending
                le = np.log(np.maximum(err_i[::-1], 1e-300))
                err_out[inside] = np.exp(np.interp(x[inside], xs_i, le)) + tail * vals
            elif depth < _CURVE_SPLITS:
                mid = 0.5 * (a + b)
                todo += [(a, mid, depth + 1), (mid, b, depth + 1)]
            else:
                s_d, _, e_d, _, _ = _integrate(integ, c[inside], tolerance, fixed_n=n_rule)
                sf_out[inside] = s_d
                err_out[inside] = e_d
        s_n = None
    return np.clip(sf_out, 0.0, 1.0), err_out, n_rule * _RANDOMIZATIONS


def _probabilities(stair, c, nu, two_sided, tolerance, n_jobs, decide_at=None, warn=True):
    """sf, cdf, error, points at the flat array c (any values, inf and nan allowed)."""
    c = np.asarray(c, dtype=np.float64)
    sf = np.full(c.shape, np.nan)
    err = np.zeros(c.shape)
    pts = np.zeros(c.shape, np.int64)
    ok = np.isfinite(c)
    sf[c == np.inf] = 0.0
    sf[c == -np.inf] = 1.0
    if two_sided:
        sf[ok & (c <= 0.0)] = 1.0
        ok &= c > 0.0
    if stair.rank == 1:
        sf[ok] = _exact_one(c[ok], nu, two_sided)
        return sf, 1.0 - sf, err, pts
    cdf = 1.0 - sf
    if ok.any():
        uniq, inv = np.unique(c[ok], return_inverse=True)
        integ = _Integrator(stair, nu, two_sided, n_jobs)
        curve = _curve(integ, uniq, tolerance) if np.all(uniq > 0) else None
        if curve is None:
            s, f, e, p, _ = _integrate(integ, uniq, tolerance, decide_at=decide_at, warn=warn)
        else:
            s, e, n_pts = curve
            f = 1.0 - s
            p = np.full(uniq.size, n_pts)
            if decide_at is not None:              # settle the values near alpha directly
                near = np.abs(s - decide_at) <= e
                if near.any():
                    s2, f2, e2, p2, _ = _integrate(integ, uniq[near], tolerance,
                                                   decide_at=decide_at, warn=warn)
                    s[near], f[near], e[near], p[near] = s2, f2, e2, p2
        sf[ok], err[ok], pts[ok] = s[inv], e[inv], p[inv]
        cdf[ok] = f[inv]                # integrated directly: keeps the lower tail
    return np.clip(sf, 0.0, 1.0), np.clip(cdf, 0.0, 1.0), err, pts



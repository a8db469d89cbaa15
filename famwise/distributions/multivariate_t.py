"""The maximum of a multivariate t (or normal) vector with a given correlation.

For ``T = Z / S`` with ``Z ~ N(0, R)`` (``R`` an m x m correlation matrix,
possibly singular) and ``S**2 ~ chi2_df / df`` independent of ``Z``
(``S = 1`` for ``df = inf``), this module computes

    P(max_i |T_i| <= c)   (two-sided)        P(max_i T_i <= c)   (one-sided)

and their complements for many ``c`` at once, the adjusted p-values of a
family of t ratios, and the quantile (the simultaneous critical value).
These are the exact single-step adjustments for any family of contrasts with
a known correlation: all pairs, each group against a reference, or general
contrasts, from a one-way layout or from a linear model with correlated
adjusted means.

Pipeline
--------
1. **Validate** ``R`` (symmetric, unit diagonal, positive semidefinite) and
   the arguments, once (``FamwiseInputError``, one line).
2. **Factor and reorder.**  ``R = L L'`` by Cholesky with pivoting on the
   largest remaining conditional variance.  For limits ``-c <= T_i <= c``
   that are the same for every row, this is the variable ordering of Genz &
   Bretz (2002, section 2.2; 2009, section 4.1.3), whose rule (smallest
   expected interval probability first) reduces to the largest conditional
   variance when the expected values of the earlier variables are zero; the
   one-sided case uses the same order.  The factorization stops at the
   numerical rank ``r`` (remaining conditional variances below 1e-11).
3. **Singular R.**  With rank ``r < m`` (all pairs of ``k`` groups have rank
   ``k - 1``; contrasts that are linear combinations of others) the ``m - r``
   rows after the pivots are combinations of the ``r`` pivot variables.
   Their coefficients are cleaned of round-off (entries below 1e-10 of the
   unit row length become exact zeros, and each row is rescaled to unit
   length, so every marginal stays exactly N(0, 1)), and each row is then
   attached to the column of its *last* nonzero coefficient: it bounds that
   variable, together with the pivot row of the column, once the earlier
   variables are drawn.  The integral is then an ``r``-dimensional one whose
   inner limits are the intersection of several constraints, which is the
   treatment of singular covariance matrices in Genz & Bretz (2009,
   section 4.1.4).  Nothing is perturbed to make ``R`` invertible, and no
   degenerate row is dropped: with pairwise differences the dependent rows
   usually end in early columns (``Z_bc = Z_ac - Z_ab``), so they cut the
   region as soon as their variables are known.
4. **Integrate** the separation-of-variables integrand of Genz (1992) over
   ``r - 1`` coordinates (the first variable's probability is exact), plus
   one for the chi scale when ``df`` is finite (Genz & Bretz 2002: the
   scale enters as ``s = sqrt(chi2.ppf(u, df) / df)``), by a randomly
   shifted Kronecker sequence (Richtmyer's square roots of primes) with the
   baker's periodization, in ``R = 10`` independent randomizations from a
   fixed seed.  Every ``c`` uses the same points, so the estimate is a
   smooth deterministic function of ``c``.  The number of points doubles
   (the sequence is extensible, earlier points are kept) until the error
   bound of every requested probability meets the tolerance, or a work cap
   of about 20 seconds of kernel time per call (65,536 points per
   randomization at most) is reached; then a :class:`QMCAccuracyWarning`
   says so and the larger error is reported as it is.
5. **Error bound.**  The 10 randomized estimates are independent and
   unbiased; the reported ``error`` is four standard errors of their mean,
   ``4 sd / sqrt(10)`` (a 99.7% bound if the estimates were normal: Student's
   t on 9 df), for the probability and its complement alike (they are
   estimated on the same points).  The errors of neighbouring ``c`` are
   strongly correlated (the same points), so a whole curve is one draw.
6. **Quantile** by regula falsi (Illinois) on ``log`` of the upper tail
   against ``log c``, inside the bracket that always holds: the
   one-comparison quantile below and Bonferroni's above.  The points are
   fixed before the solve, so the iteration sees one smooth function.

Determinism: the shifts come from a fixed seed; the kernel is serial per
randomization and block, and blocks are added in a fixed order, so the
result is bit-identical run to run and for any ``n_jobs``.

References
----------
Genz, A. (1992). Numerical computation of multivariate normal
probabilities. *J. Comput. Graph. Statist.* 1(2):141-149.
doi:10.1080/10618600.1992.10477010
Genz, A. & Bretz, F. (2002). Comparison of methods for the computation of
multivariate t probabilities. *J. Comput. Graph. Statist.* 11(4):950-971.
doi:10.1198/106186002394
Genz, A. & Bretz, F. (2009). *Computation of Multivariate Normal and t
Probabilities*. Springer, Berlin (monograph, vol. 195 of its statistics series).
doi:10.1007/978-3-642-01689-9
Richtmyer, R. D. (1951). The evaluation of definite integrals, and a
quasi-Monte-Carlo method based on the properties of algebraic numbers.
Report LA-1342, Los Alamos Scientific Laboratory.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np

from ..core.errors import FamwiseInputError
from ._mvt_rule import (_BUDGET_S, QMCAccuracyWarning, _Integrator, _integrate,
                        _probabilities)

__all__ = ["Staircase", "MaxTProbability", "MaxTQuantile", "QMCAccuracyWarning",
           "staircase", "max_t_sf", "max_t_pvalues", "max_t_ppf",
           "DEFAULT_TOLERANCE"]

#: Target error bound (four standard errors) of a probability of 0.05 or more.
DEFAULT_TOLERANCE = 1e-3
_RANK_TOL = 1e-11                    # conditional variance counted as zero
_ZERO_TOL = 1e-10                    # coefficient counted as a structural zero
_PSD_TOL = 1e-8                      # negative conditional variance allowed (round-off)
_ALTERNATIVES = ("two-sided", "greater")



# ---------------------------------------------------------------------------
# Validated structure: the reordered, rank-revealing factor in staircase form
# ---------------------------------------------------------------------------

@dataclass(frozen=True)
class Staircase:
    """``R = L L'`` in staircase form, ready for the compiled integrand.

    Attributes
    ----------
    m : int
        Number of rows (comparisons).
    rank : int
        Numerical rank of ``R``: the dimension of the normal integral.
    order : ndarray of int
        Original row index of each staircase row (pivots first in column
        order, each dependent row after the pivot of its last column).
    column_rows : ndarray of int
        How many rows bound each column's variable (1 for a column with no
        dependent row attached).
    """

    m: int
    rank: int
    order: np.ndarray = field(repr=False)
    column_rows: np.ndarray = field(repr=False)
    cptr: np.ndarray = field(repr=False)
    rptr: np.ndarray = field(repr=False)
    idx: np.ndarray = field(repr=False)
    val: np.ndarray = field(repr=False)


def staircase(corr) -> Staircase:
    """Check a correlation matrix and return its pivoted staircase factor.

    Parameters
    ----------
    corr : array_like, shape (m, m)
        Symmetric, unit diagonal, positive semidefinite (singular allowed).

    Returns
    -------
    Staircase
    """
    r = np.array(corr, dtype=np.float64, copy=True)
    if r.ndim == 0:
        r = r.reshape(1, 1)
    if r.ndim != 2 or r.shape[0] != r.shape[1] or r.shape[0] == 0:
        raise FamwiseInputError(
            f"the correlation matrix must be square with at least one row; got shape {r.shape}")
    if not np.all(np.isfinite(r)):
        raise FamwiseInputError("the correlation matrix has non-finite entries (NaN or inf)")
    m = r.shape[0]
    if np.max(np.abs(r - r.T)) > 1e-10:
        i, j = np.unravel_index(np.argmax(np.abs(r - r.T)), r.shape)
        raise FamwiseInputError(
            f"the correlation matrix is not symmetric: entry ({i}, {j}) is {r[i, j]!r} "
            f"but ({j}, {i}) is {r[j, i]!r}")
    if np.max(np.abs(np.diag(r) - 1.0)) > 1e-10:
        i = int(np.argmax(np.abs(np.diag(r) - 1.0)))
        raise FamwiseInputError(
            f"the correlation matrix must have a unit diagonal; entry ({i}, {i}) is {r[i, i]!r} "
            f"(divide a covariance by the outer product of its standard errors)")
    r = 0.5 * (r + r.T)
    np.fill_diagonal(r, 1.0)

    # Outer-product Cholesky on the residual covariance ``a`` with greedy
    # pivoting: first the row whose pivot completes the most other rows (their
    # conditional variance drops to zero, so they become constraints of this
    # column), then the largest conditional variance (Genz & Bretz).
    a = r.copy()
    cols = []
    pivots = []
    live = np.ones(m, bool)                      # not yet a pivot nor completed
    for _ in range(m):
        d = np.diag(a).copy()
        cand = live & (d > _RANK_TOL)
        if not cand.any():
            break
        dl = np.where(live, np.maximum(d, 0.0), 0.0)
        sub = a[np.ix_(live, cand)]
        completes = np.sum(sub * sub >= (1.0 - 1e-9) * np.outer(dl[live], d[cand]), axis=0)
        score = completes + 0.5 * d[cand]
        piv = int(np.flatnonzero(cand)[int(np.argmax(score))])
        col = a[:, piv] / math.sqrt(d[piv])
        col[pivots] = 0.0                        # earlier pivots: exactly zero
        a -= np.outer(col, col)
        cols.append(col)
        pivots.append(piv)
        live[piv] = False
        live &= np.diag(a) > _RANK_TOL
    rank = len(pivots)
    d = np.diag(a)
    rest = np.setdiff1d(np.arange(m), pivots)
    if rest.size and np.min(d[rest]) < -_PSD_TOL:
        raise FamwiseInputError(
            "the correlation matrix is not positive semidefinite (a conditional variance "
            f"of {np.min(d[rest]):.3g}); build it from one covariance matrix")
    perm = np.concatenate([np.array(pivots, np.int64), rest]).astype(np.int64)
    lf = np.array(cols).T[perm] if rank else np.zeros((m, 0))
    lf = lf[:, :rank]
    # Clean round-off: structural zeros exact, unit rows (exact N(0,1) marginals).
    lf[np.abs(lf) <= _ZERO_TOL] = 0.0
    norms = np.sqrt(np.sum(lf * lf, axis=1))
    lf /= norms[:, None]
    last = np.array([np.flatnonzero(row)[-1] for row in lf])
    # Stable order: by last column, pivot row first (it is the row with
    # position == column), then dependent rows in pivot order.
    position = np.arange(m)
    srt = np.lexsort((position, last))
    lf, last, rows = lf[srt], last[srt], perm[srt]
    cptr = np.zeros(rank + 1, np.int64)
    np.add.at(cptr, last + 1, 1)
    cptr = np.cumsum(cptr)
    nz = lf != 0.0
    rptr = np.concatenate([[0], np.cumsum(nz.sum(axis=1))]).astype(np.int64)
    ii, jj = np.nonzero(nz)                       # row-major: columns ascending per row
    return Staircase(m=m, rank=rank, order=rows.astype(np.int64),
                     column_rows=np.diff(cptr).astype(np.int64),
                     cptr=np.ascontiguousarray(cptr), rptr=np.ascontiguousarray(rptr),
                     idx=np.ascontiguousarray(jj.astype(np.int64)),
                     val=np.ascontiguousarray(lf[ii, jj]))


# ---------------------------------------------------------------------------
# Results
# ---------------------------------------------------------------------------

@dataclass(frozen=True)
class MaxTProbability:
    """Probabilities of the maximum at each critical value.

    Attributes
    ----------
    sf : ndarray
        ``P(max >= c)`` (upper tail, integrated directly).
    cdf : ndarray
        ``P(max < c)`` (the same points; ``sf + cdf = 1`` up to rounding).
    error : ndarray
        Error bound of both (absolute; four standard errors over the
        randomizations).
    points : ndarray of int
        Integration points used for each value (all randomizations).
    rank : int
        Dimension of the normal integral (numerical rank of ``R``).
    """

    sf: np.ndarray
    cdf: np.ndarray
    error: np.ndarray
    points: np.ndarray
    rank: int


@dataclass(frozen=True)
class MaxTQuantile:
    """The simultaneous critical value ``c`` with ``P(max >= c) = 1 - conf``.

    Attributes
    ----------
    value : ndarray
        The critical values.
    error : ndarray
        Error bound (four standard errors) of the tail probability at ``value`` (so the
        coverage is ``conf -/+ error``).
    value_error : ndarray
        That bound mapped to the scale of ``c`` (error / density).
    points : ndarray of int
    rank : int
    """

    value: np.ndarray
    error: np.ndarray
    value_error: np.ndarray
    points: np.ndarray
    rank: int


# ---------------------------------------------------------------------------
# Argument checks
# ---------------------------------------------------------------------------

def _check_df(df) -> float:
    try:
        nu = float(df)
    except (TypeError, ValueError):
        raise FamwiseInputError(f"df must be a positive number or inf; got {df!r}") from None
    if not nu > 0.0:
        raise FamwiseInputError(f"df must be a positive number or inf; got {df!r}")
    return nu


def _check_alternative(alternative) -> bool:
    if alternative not in _ALTERNATIVES:
        raise FamwiseInputError(
            f"alternative must be one of {{'two-sided', 'greater'}} (apply 'less' by "
            f"negating the statistics); got {alternative!r}")
    return alternative == "two-sided"


def _check_tolerance(tolerance) -> float:
    try:
        tol = float(tolerance)
    except (TypeError, ValueError):
        tol = float("nan")
    if not 1e-8 <= tol <= 0.1:
        raise FamwiseInputError(
            f"tolerance must be a number between 1e-8 and 0.1 (e.g. 1e-4); got {tolerance!r}")
    return tol


def _as_stair(corr) -> Staircase:
    return corr if isinstance(corr, Staircase) else staircase(corr)


def max_t_sf(c, corr, df, alternative="two-sided", *, tolerance=DEFAULT_TOLERANCE,
             decide_at=None, n_jobs=1) -> MaxTProbability:
    """Compute ``P(max_i |T_i| >= c)`` (or ``P(max_i T_i >= c)``) for many ``c`` at once.

    Parameters
    ----------
    c : array_like
        Critical values (any shape; the results have the same shape).
    corr : array_like, shape (m, m), or Staircase
        Correlation matrix of ``T`` (singular allowed), or its
        :func:`staircase` (to reuse the factorization).
    df : float
        Degrees of freedom of the common studentizing scale; ``inf`` for the
        multivariate normal.
    alternative : {"two-sided", "greater"}, default="two-sided"
        ``"greater"``: the one-sided maximum ``max_i T_i``.
    tolerance : float, default=1e-3
        Target error bound (four standard errors) for probabilities of 0.05 or more; smaller
        tails get a proportionally smaller target (down to tolerance / 10).
    decide_at : float, optional
        A level (alpha) each probability should be settled against: points
        are added until the error bound is below half the distance to it (or
        a tenth of ``tolerance``).
    n_jobs : int, default=1
        Threads over the critical values (joblib's meaning); results do not
        depend on it.

    Returns
    -------
    MaxTProbability
        ``sf``, ``cdf`` and their ``error`` bound, ``points`` and ``rank``.

    Notes
    -----
    1. The algorithm is in the module docstring: pivoted Cholesky with the
       Genz-Bretz ordering, the singular rows attached to their last
       column, randomized Kronecker quasi-Monte Carlo of Genz's integrand.
    2. Rank one (every row is +-the same variable) is Student's t exactly.
    3. With 48 or more distinct values spread over fewer panels than values,
       ``log sf`` is evaluated on Chebyshev points of panels in ``log c`` on
       one shared rule and interpolated, with a check on the series' decay
       (failing panels are halved, then evaluated directly); the reported
       error includes the interpolation bound.

    Examples
    --------
    Two-sided Dunnett-type probability, three comparisons with correlation
    1/2 on 10 df (Dunnett 1964's critical value 2.76, from memory):

    >>> import numpy as np
    >>> r = np.full((3, 3), 0.5) + 0.5 * np.eye(3)
    >>> res = max_t_sf(2.7590, r, 10)
    >>> round(float(res.sf), 2)
    0.05
    """
    stair = _as_stair(corr)
    nu = _check_df(df)
    two_sided = _check_alternative(alternative)
    tol = _check_tolerance(tolerance)
    c = np.asarray(c, dtype=np.float64)
    sf, cdf, err, pts = _probabilities(stair, c.ravel(), nu, two_sided, tol, n_jobs,
                                       decide_at=decide_at)
    return MaxTProbability(sf.reshape(c.shape), cdf.reshape(c.shape), err.reshape(c.shape),
                           pts.reshape(c.shape), stair.rank)


def max_t_pvalues(t, corr, df, alternative="two-sided", *, tolerance=DEFAULT_TOLERANCE,
                  decide_at=None, n_jobs=1) -> MaxTProbability:
    """Return single-step adjusted p-values ``P(max_j |T_j| >= |t_i|)`` of t ratios.

    ``alternative`` is ``"two-sided"``, ``"greater"`` (``P(max_j T_j >=
    t_i)``) or ``"less"`` (``P(min_j T_j <= t_i)``, i.e. the greater case of
    ``-t``).  Each p-value is kept within the two bounds that hold exactly:
    at least the unadjusted p-value of its own t (one row of the maximum)
    and at most Bonferroni's ``m p`` (capped at 1); these can only move an
    estimate towards the truth.

    Returns
    -------
    MaxTProbability
        ``sf`` holds the adjusted p-values.
    """
    from scipy import stats

    stair = _as_stair(corr)
    nu = _check_df(df)
    if alternative not in ("two-sided", "greater", "less"):
        raise FamwiseInputError(
            f"alternative must be one of {{'two-sided', 'greater', 'less'}}; got {alternative!r}")
    t = np.asarray(t, dtype=np.float64)
    two_sided = alternative == "two-sided"
    u = np.abs(t) if two_sided else (t if alternative == "greater" else -t)
    res = max_t_sf(u, stair, nu, "two-sided" if two_sided else "greater",
                   tolerance=tolerance, decide_at=decide_at, n_jobs=n_jobs)
    dist = stats.norm if not math.isfinite(nu) else stats.t(nu)
    p_one = np.minimum(1.0, 2.0 * dist.sf(u)) if two_sided else dist.sf(u)
    p = np.clip(res.sf, p_one, np.minimum(1.0, stair.m * p_one))
    return MaxTProbability(p, 1.0 - p, res.error, res.points, res.rank)


def max_t_ppf(conf, corr, df, alternative="two-sided", *, tolerance=DEFAULT_TOLERANCE,
              n_jobs=1) -> MaxTQuantile:
    """Return the simultaneous critical value ``c`` with ``P(max < c) = conf``.

    Parameters
    ----------
    conf : array_like
        Confidence levels in (0, 1), e.g. ``1 - alpha``.
    corr, df, alternative, tolerance, n_jobs
        As for :func:`max_t_sf`.

    Returns
    -------
    MaxTQuantile
        ``value``, the ``error`` bound of the tail probability at ``value``,
        ``value_error`` (the same on the scale of ``c``), ``points``, ``rank``.

    Notes
    -----
    The number of points is set first, at the starting point, by the same
    doubling rule as :func:`max_t_sf`; the root is then found on that fixed
    rule by Illinois regula falsi on ``log P(max >= c)`` against ``log c``,
    bracketed by the one-comparison quantile (a lower bound) and
    Bonferroni's (an upper bound), to 1e-9 relative in ``c``.
    """
    from scipy import stats

    stair = _as_stair(corr)
    nu = _check_df(df)
    two_sided = _check_alternative(alternative)
    tol = _check_tolerance(tolerance)
    conf = np.asarray(conf, dtype=np.float64)
    flat = conf.ravel()
    if not np.all((flat > 0.0) & (flat < 1.0)):
        raise FamwiseInputError(
            f"conf must lie strictly between 0 and 1 (e.g. 0.95); got {flat[~((flat > 0) & (flat < 1))][0]!r}")
    tail = 1.0 - flat
    dist = stats.norm if not math.isfinite(nu) else stats.t(nu)
    side = 2.0 if two_sided else 1.0
    lo = dist.isf(tail / side)                                  # one comparison
    hi = dist.isf(tail / (side * stair.m))                      # Bonferroni
    if stair.rank == 1:
        v = lo.copy()
        z = np.zeros_like(v)
        return MaxTQuantile(v.reshape(conf.shape), z.reshape(conf.shape),
                            z.reshape(conf.shape), z.astype(np.int64).reshape(conf.shape), 1)
    integ = _Integrator(stair, nu, two_sided, n_jobs)
    # Set the rule at the Sidak-type start (between the bounds).
    start = dist.isf((1.0 - flat ** (1.0 / stair.m)) / side) if two_sided else \
        dist.isf(1.0 - flat ** (1.0 / stair.m))
    start = np.clip(start, lo, hi)
    # the rule's work cap leaves room for the dozen solves that follow
    _, _, _, _, n_fixed = _integrate(integ, start, tol, shared=True, budget=_BUDGET_S / 12)

    def g(logc):
        s, _, _, _, _ = _integrate(integ, np.exp(logc), tol, fixed_n=n_fixed)
        with np.errstate(divide="ignore"):
            return np.log(np.maximum(s, 1e-300)) - np.log(tail)

    a = np.log(lo)
    b = np.log(hi)
    fa = g(a)
    fb = g(b)
    # The bounds hold exactly; the estimate can sit a hair outside at the ends.
    fa = np.maximum(fa, 1e-12)
    fb = np.minimum(fb, -1e-12)
    side_kept = np.zeros(flat.size, np.int8)
    x = 0.5 * (a + b)
    for _ in range(100):
        x = b - fb * (b - a) / (fb - fa)
        x = np.where(np.isfinite(x), x, 0.5 * (a + b))
        fx = g(x)
        left = fx > 0.0                        # root to the right of x
        # Illinois: halve the retained end's value when the same end is kept twice
        fa_new = np.where(left, fx, np.where(side_kept == 1, fa * 0.5, fa))
        fb_new = np.where(~left, fx, np.where(side_kept == -1, fb * 0.5, fb))
        a = np.where(left, x, a)
        b = np.where(~left, x, b)
        side_kept = np.where(left, -1, 1).astype(np.int8)
        fa, fb = fa_new, fb_new
        if np.all((b - a) <= 1e-9) or np.all(fx == 0.0):
            break
    value = np.exp(x)
    s, _, err, pts, _ = _integrate(integ, value, tol, fixed_n=n_fixed)
    # density on the same rule: dP/dc = P / c * d log P / d log c (central difference)
    h = 1e-3
    slope = np.abs(g(x + h) - g(x - h)) / (2.0 * h)
    dens = tail / value * slope
    verr = np.where(np.isfinite(dens) & (dens > 0), err / dens, np.nan)
    return MaxTQuantile(value.reshape(conf.shape), err.reshape(conf.shape),
                        verr.reshape(conf.shape), pts.reshape(conf.shape), stair.rank)

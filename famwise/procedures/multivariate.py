"""Exact single-step adjustment from the multivariate t, for any family.

Under the normal linear model with one error variance, the t ratios
``T_i = (est_i - theta_i) / se_i`` of any family of contrasts are jointly
multivariate t on the residual df with the correlation matrix ``R`` of the
estimates (Dunnett 1955, section 2; Hothorn, Bretz & Westfall 2008,
section 3).  The single-step procedure refers every ``|t_i|`` to the
distribution of ``max_j |T_j|``:

    p_adjusted_i = P(max_j |T_j| >= |t_i|),    interval  est_i -/+ c se_i,
    with c the (1 - alpha) quantile of max_j |T_j|

(one-sided: ``max_j T_j``).  For the balanced one-way layout this is
Tukey's procedure for all pairs and Dunnett's for comparisons with a
reference; with unequal sizes it is the exact version of what Tukey-Kramer
bounds, and with a blocked or covariate model, whose adjusted means are
correlated, it is the exact adjustment for the model's own correlation.  It
takes contrasts of any kind, so it also replaces Bonferroni or Scheffe for a
planned family of general contrasts.

The probabilities are computed by :mod:`famwise.distributions.multivariate_t`
(randomized quasi-Monte Carlo from a fixed seed; deterministic).  Each
adjusted p-value carries its quasi-Monte Carlo standard error in
``mc_error`` (the error bound is four times it) and ``unsettled`` marks
a comparison whose bound still reaches alpha.  The table's ``attrs``
hold the critical value, its error bound and the largest error, and
``interval_note`` says so in words.

Pipeline: validate (family, estimates, covariance, df, alpha, side) ->
correlation and its staircase factor (once) -> critical value -> adjusted
p-values (refined near alpha) -> decisions reconciled with the intervals ->
the comparisons table.

References
----------
Dunnett, C. W. (1955). A multiple comparison procedure for comparing several
treatments with a control. *JASA* 50(272):1096-1121.
doi:10.1080/01621459.1955.10501294
Hothorn, T., Bretz, F. & Westfall, P. (2008). Simultaneous inference in
general parametric models. *Biometrical Journal* 50(3):346-363.
doi:10.1002/bimj.200810425
Genz, A. & Bretz, F. (2009). *Computation of Multivariate Normal and t
Probabilities*. Springer, Berlin (monograph, vol. 195 of its statistics series).
doi:10.1007/978-3-642-01689-9
"""

from __future__ import annotations

import math

import numpy as np
import pandas as pd

from ._shared import _check_alternative, _check_family, _interval, _sided, _t_pvalue
from ..core.errors import FamwiseInputError
from ..core.families import Family
from ..core.table import comparisons_table
from ..core.validate import check_alpha

__all__ = ["multivariate_t_table", "multivariate_t", "ALTERNATIVES"]

ALTERNATIVES = ("two-sided", "greater", "less")
_BOUND_PER_SE = 4.0        # the distribution's bound is four standard errors


def _check_inputs(family, estimate, covariance, df):
    if not isinstance(family, Family):
        raise FamwiseInputError(
            f"family must be a famwise.core.families.Family; got {type(family).__name__} "
            f"(build one with famwise.core.families.build_family)")
    m = family.m
    est = np.asarray(estimate, dtype=np.float64).ravel()
    cov = np.asarray(covariance, dtype=np.float64)
    if est.shape != (m,):
        raise FamwiseInputError(
            f"estimate needs one value per comparison ({m}); got shape {np.shape(estimate)}")
    if cov.shape != (m, m):
        raise FamwiseInputError(
            f"covariance must be {m} x {m} (one row per comparison); got shape {cov.shape}")
    if not (np.all(np.isfinite(est)) and np.all(np.isfinite(cov))):
        raise FamwiseInputError("estimate and covariance must be finite (no NaN or inf)")
    var = np.diag(cov).copy()
    bad = np.flatnonzero(~(var > 0.0))
    if bad.size:
        raise FamwiseInputError(
            f"comparison {family.names[bad[0]]!r} has variance {var[bad[0]]!r}; every "
            f"comparison needs a positive variance (is it a contrast of estimable means?)")
    try:
        nu = float(df)
    except (TypeError, ValueError):
        nu = float("nan")
    if not nu > 0.0:
        raise FamwiseInputError(f"df must be a positive number or inf; got {df!r}")
    return est, cov, np.sqrt(var), nu


def multivariate_t_table(family: Family, estimate, covariance, df, *, alpha: float = 0.05,
                         alternative: str = "two-sided", tolerance: float | None = None,
                         procedure: str = "multivariate-t", n_jobs: int = 1) -> pd.DataFrame:
    """Return the comparisons table of the exact single-step multivariate-t adjustment.

    Parameters
    ----------
    family : Family
        Any family (all pairs, vs reference, contrasts); its rows name the
        comparisons.
    estimate : array_like, shape (m,)
        The comparisons' estimates (``W @ means``).
    covariance : array_like, shape (m, m)
        Their covariance matrix (``W Cov(means) W'``; singular when the
        comparisons are linearly dependent, as all pairs are).
    df : float
        Degrees of freedom of the variance estimate (``inf``: known variance).
    alpha : float, default=0.05
    alternative : {"two-sided", "greater", "less"}, default="two-sided"
        ``"greater"``: each comparison's true value exceeds zero.
    tolerance : float, optional
        Target error bound (4 standard errors) of the probabilities (default
        :data:`famwise.distributions.multivariate_t.DEFAULT_TOLERANCE`,
        1e-3, smaller for small p-values and near alpha; a quarter of it for
        the critical value).
    procedure : str, default="multivariate-t"
        The identifier written in the ``procedure`` column.
    n_jobs : int, default=1
        Threads for the integration; results do not depend on it.

    Returns
    -------
    pandas.DataFrame
        The comparisons table (:func:`famwise.core.table.comparisons_table`)
        with ``mc_error`` (quasi-Monte Carlo standard error of
        ``p_adjusted``) and ``unsettled``; ``attrs`` has
        ``critical_value``, ``critical_value_error``, ``qmc`` (the error
        bounds and points) and ``interval_note``.

    Notes
    -----
    1. Normal errors with one variance, estimated on ``df`` degrees of
       freedom independently of the estimates; the correlation is then
       known exactly, so the adjustment is exact (up to the reported
       integration error).
    2. Each p-value lies between its unadjusted value and Bonferroni's, the
       bounds that always hold.
    3. Decisions are dual to the intervals: a comparison is rejected exactly
       when its interval excludes zero.  Where integration error puts the
       two on different sides (only within the error bound of alpha), the
       p-value is set to alpha on the interval's side and the row is marked
       ``unsettled``.
    """
    from ..distributions.multivariate_t import (DEFAULT_TOLERANCE, max_t_ppf,
                                                max_t_pvalues, staircase)

    est, cov, se, nu = _check_inputs(family, estimate, covariance, df)
    alpha = check_alpha(alpha)
    alternative = _check_alternative(alternative, ALTERNATIVES, procedure)
    tol = DEFAULT_TOLERANCE if tolerance is None else tolerance
    corr = cov / np.outer(se, se)
    corr = 0.5 * (corr + corr.T)
    np.fill_diagonal(corr, 1.0)
    stair = staircase(corr)
    t = est / se
    p_unadj = _t_pvalue(t, nu, alternative)
    side = "two-sided" if alternative == "two-sided" else "greater"
    # one value: the critical value gets a quarter of the tolerance
    quant = max_t_ppf(1.0 - alpha, stair, nu, side, tolerance=max(tol / 4, 1e-8),
                      n_jobs=n_jobs)
    crit = float(quant.value)
    res = max_t_pvalues(t, stair, nu, alternative, tolerance=tol, decide_at=alpha,
                        n_jobs=n_jobs)
    p_adj = np.maximum(res.sf, p_unadj)
    bound = np.asarray(res.error, dtype=float)
    # Duality: reject exactly when the interval excludes zero.
    u = np.abs(t) if alternative == "two-sided" else (t if alternative == "greater" else -t)
    excludes = u > crit
    pinned = excludes != (p_adj <= alpha)
    p_adj = np.where(pinned & excludes, alpha, p_adj)
    p_adj = np.where(pinned & ~excludes, np.nextafter(alpha, 1.0), p_adj)
    unsettled = pinned | (np.abs(p_adj - alpha) <= bound)
    lower, upper = _interval(est, se, crit, alternative)
    table = comparisons_table(
        family, difference=est, std_error=se, df=nu, statistic=t, p_unadjusted=p_unadj,
        p_adjusted=p_adj, ci_lower=lower, ci_upper=upper, alpha=alpha, procedure=procedure,
        mc_error=bound / _BOUND_PER_SE, unsettled=unsettled)
    ce = float(quant.value_error)
    table.attrs["alternative"] = alternative
    table.attrs["error_rate"] = "familywise"
    table.attrs["critical_value"] = crit
    table.attrs["critical_value_error"] = ce
    table.attrs["qmc"] = {
        "method": "randomized Kronecker sequence (Richtmyer), 10 randomizations, fixed seed",
        "bound": "4 standard errors over the randomizations (99.7% under normality)",
        "max_p_error_bound": float(np.max(bound)) if bound.size else 0.0,
        "critical_value_coverage_error_bound": float(quant.error),
        "points_max": int(max(int(np.max(res.points)) if res.points.size else 0,
                              int(quant.points))),
        "rank": int(stair.rank),
        "pinned_to_alpha": int(pinned.sum()),
    }
    table.attrs["interval_note"] = (
        f"simultaneous {_sided(alternative)} (1 - alpha) multivariate-t intervals for the "
        f"{family.m} comparisons (correlation of rank {stair.rank}, {_df_text(nu)}), "
        f"critical value {crit:.5g} +- {ce:.2g}; coverage 1 - alpha +- {float(quant.error):.2g} "
        f"and adjusted p-values +- at most {float(np.max(bound)):.2g} (quasi-Monte Carlo "
        f"error bounds, 4 standard errors)")
    return table


def _df_text(nu):
    return "known variance" if not math.isfinite(nu) else f"{nu:g} df"


def multivariate_t(layout, family: Family, *, alpha: float = 0.05,
                   alternative: str = "two-sided", model=None,
                   tolerance: float | None = None) -> pd.DataFrame:
    """Exact simultaneous comparisons from the multivariate t of the model's estimates.

    The estimates, their covariance and the residual df come from the
    layout's model (:func:`famwise.model.fit_model`: the one-way group means
    and pooled mean square, or the adjusted means of a blocked or covariate
    model), or from ``model`` when a fit is given.  Every t ratio is then
    referred to the maximum of the family's multivariate t (see
    :func:`multivariate_t_table`).

    Parameters
    ----------
    layout : Layout
    family : Family
        All pairs, each group against a reference, or any contrasts.
    alpha : float, default=0.05
    alternative : {"two-sided", "greater", "less"}, default="two-sided"
    model : ModelFit, optional
        A fitted model (``famwise.model.fit_model``) to take the estimates
        from instead of fitting the layout's own.
    tolerance : float, optional
        Target error bound of the probabilities (see :func:`multivariate_t_table`).

    Returns
    -------
    pandas.DataFrame
        The comparisons table with simultaneous (1 - alpha) intervals,
        ``mc_error`` and ``unsettled``.

    Notes
    -----
    1. Normal errors with one common variance (the model's).
    2. Balanced one-way: equals Tukey's studentized range (all pairs) and
       Dunnett's (vs reference).  Unequal sizes or correlated adjusted
       means: exact where Tukey-Kramer is conservative.
    3. Cost grows with the family's size and rank (see the benchmark
       ``tests/bench/bench_multivariate_t.py``): fractions of a second for
       a few groups, seconds for all pairs of 20.

    Examples
    --------
    Data of the ``scipy.stats.tukey_hsd`` docstring (three brands of five);
    the adjusted p-values are Tukey's 0.0144, 0.9803 and 0.0203:

    >>> from famwise import Layout
    >>> from famwise.core.families import all_pairs
    >>> lay = Layout.from_groups([[24.5, 23.5, 26.4, 27.1, 29.9],
    ...                           [28.4, 34.2, 29.5, 32.2, 30.1],
    ...                           [26.1, 28.3, 24.3, 26.2, 27.8]])
    >>> tab = multivariate_t(lay, all_pairs(lay.labels))
    >>> [round(p, 3) for p in tab.p_adjusted]
    [0.014, 0.98, 0.02]
    """
    _check_family(layout, family)
    if model is None:
        from .classical import pooled_estimates

        _check_alternative(alternative, ALTERNATIVES, "multivariate-t")
        pe = pooled_estimates(layout, family, alternative=alternative)
        fit = pe.fit
        est = pe.difference
    else:
        fit = model
        if tuple(getattr(fit, "labels", ())) != tuple(family.labels):
            raise FamwiseInputError(
                f"model was fitted for groups {list(getattr(fit, 'labels', []))} but the "
                f"family has {list(family.labels)}; fit the model on the same layout")
        est = None
    est_m, cov = fit.contrast(family.weights)
    if est is None:
        est = est_m
    table = multivariate_t_table(family, est, cov, fit.df, alpha=alpha,
                                 alternative=alternative, tolerance=tolerance)
    table.attrs["mse"] = float(fit.mse)
    return table

"""Classical (pooled-variance) procedures for a one-way layout.

Every procedure here assumes the one-way normal model ``y_ij = mu_i + e_ij``
with independent errors of one common variance, estimated by the pooled
within-group mean square ``MSE`` on ``nu = N - k`` degrees of freedom.  For a
comparison with weights ``w`` (one per group; a pairwise difference has
``+1`` and ``-1``) the estimate, its standard error and the pooled t ratio
are

    est = sum_i w_i * mean_i,   se = sqrt(MSE * sum_i w_i^2 / n_i),
    t = est / se                                       (common to all)

and the procedures differ only in the reference distribution used for the
adjusted p-value and for the simultaneous interval ``est -/+ c * se``:

============  ================================  ==========================
procedure     family                            critical value ``c``
============  ================================  ==========================
lsd           any (after a significant F test)  t(1 - alpha/2; nu)
bonferroni    any                               t(1 - alpha/(2m); nu)
sidak         any                               t at per-test 1-(1-alpha)^(1/m)
holm          any                               (none of its own; Bonferroni's)
tukey_kramer  pairwise differences only         q(1 - alpha; k, nu) / sqrt(2)
scheffe       any contrasts                     sqrt((k - 1) F(1 - alpha; k-1, nu))
dunnett       each group against a reference    exact multivariate-t quantile
bh            any (false discovery rate)        FCR interval (Benjamini & Yekutieli 2005)
============  ================================  ==========================

The ``statistic`` column is the pooled t ratio for every procedure (the
studentized range statistic is ``sqrt(2) * |t|``; Scheffe's F is
``t^2 / (k - 1)``).  Each table's ``attrs`` carry ``interval_note`` (what the
interval columns hold), ``error_rate`` and ``alternative``.

Numerics: sums of squares and contrast estimates are computed from values
shifted by their median, so adding a constant such as 1e12 to every value
leaves the results unchanged (to rounding of the shifted values).

References
----------
Fisher, R. A. (1935). *The Design of Experiments*. Oliver & Boyd.
Tukey, J. W. (1953). The problem of multiple comparisons. Unpublished
manuscript, in *Collected Works* VIII (1994), Chapman & Hall.
Kramer, C. Y. (1956). Extension of multiple range tests to group means with
unequal numbers of replications. *Biometrics* 12(3):307-310. doi:10.2307/3001469
Hayter, A. J. (1984). A proof of the conjecture that the Tukey-Kramer
multiple comparisons procedure is conservative. *Ann. Statist.* 12(1):61-75.
doi:10.1214/aos/1176346392
Scheffe, H. (1953). A method for judging all contrasts in the analysis of
variance. *Biometrika* 40(1-2):87-104. doi:10.1093/biomet/40.1-2.87
Dunnett, C. W. (1955). A multiple comparison procedure for comparing several
treatments with a control. *JASA* 50(272):1096-1121. doi:10.1080/01621459.1955.10501294
Sidak, Z. (1967). *JASA* 62:626-633. doi:10.1080/01621459.1967.10482935
Holm, S. (1979). *Scand. J. Statist.* 6(2):65-70.
Benjamini, Y. and Hochberg, Y. (1995). *JRSS B* 57(1):289-300.
doi:10.1111/j.2517-6161.1995.tb02031.x
Benjamini, Y. and Yekutieli, D. (2005). False discovery rate-adjusted
multiple confidence intervals for selected parameters. *JASA* 100(469):71-81.
doi:10.1198/016214504000001907
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np
import pandas as pd
from scipy import stats as _st

from . import adjust as _adjust
from ._shared import (_check_alternative, _check_family, _interval,
                               _offending_contrast, _sided, _t_crit, _t_pvalue)
from ..core.errors import FamwiseInputError
from ..core.families import Family
from ..core.layout import Layout
from ..core.table import comparisons_table
from ..core.validate import check_alpha

__all__ = ["AnovaTable", "anova_table", "PooledEstimates", "pooled_estimates",
           "lsd", "bonferroni", "sidak", "holm", "tukey_kramer", "scheffe",
           "dunnett", "bh", "ALTERNATIVES"]

ALTERNATIVES = ("two-sided", "greater", "less")


# --- the model every procedure reads ---------------------------------------------

def _summary(layout: Layout):
    """Return the layout's model fit (one-way, or with its blocks and covariates).

    Every procedure here reads (estimates, covariance, df) from
    :func:`famwise.model.fit_model` and does not care how they were fitted.
    """
    from ..model import fit_model
    return fit_model(layout)


# --- the pooled estimates common to every procedure ---------------------------

@dataclass(frozen=True)
class PooledEstimates:
    """Estimates, pooled standard errors and t ratios for one family.

    Attributes
    ----------
    difference, std_error, statistic, p_unadjusted : ndarray, shape (m,)
        ``w @ means`` (adjusted means under a blocked or covariate model),
        ``sqrt(w' Cov(means) w)`` (``sqrt(MSE * sum(w^2 / n))`` one-way), their
        ratio, and the p-value of the t test of each comparison alone for
        ``alternative``.
    df : int
        Residual degrees of freedom of the model (``N - k`` one-way).
    mse : float
        Residual mean square (the pooled within-group mean square one-way).
    alternative : str
    """

    difference: np.ndarray
    std_error: np.ndarray
    statistic: np.ndarray
    p_unadjusted: np.ndarray
    df: int
    mse: float
    alternative: str
    fit: object = field(default=None, repr=False, compare=False)


def pooled_estimates(layout: Layout, family: Family, *,
                     alternative: str = "two-sided") -> PooledEstimates:
    """Return the pooled-variance estimates and unadjusted t tests of ``family``.

    Parameters
    ----------
    layout : Layout
        With a ``design`` (blocks, covariates) the estimates are contrasts of
        the model's adjusted means.
    family : Family
        Built on ``layout.labels``.
    alternative : {"two-sided", "greater", "less"}, default="two-sided"
        ``"greater"``: the comparison's true value exceeds zero (for a
        pairwise row, ``mean_a > mean_b``).

    Returns
    -------
    PooledEstimates
    """
    _check_family(layout, family)
    _check_alternative(alternative, ALTERNATIVES, "pooled t")
    s = _summary(layout)
    return _pooled(s, family, alternative)


def _pooled(fit, family: Family, alternative: str) -> PooledEstimates:
    if family.pairs is not None:
        a, b = family.pairs[:, 0], family.pairs[:, 1]
        sign = family.weights[np.arange(family.m), a]  # +1 (pairs are (pos, neg))
        est = sign * (fit.mean_shifted[a] - fit.mean_shifted[b])
        var_w = fit.pair_variance_factor(a, b)
    else:
        # weights sum to zero, so the shift cancels from w @ means
        est = family.weights @ fit.mean_shifted
        if fit.is_oneway:
            var_w = (family.weights ** 2) @ np.diag(fit.mean_cov_unscaled)
        else:
            var_w = fit.contrast_variance_factor(family.weights)
    se = np.sqrt(fit.mse * var_w)
    t = est / se
    p = _t_pvalue(t, fit.df, alternative)
    return PooledEstimates(est, se, t, p, fit.df, fit.mse, alternative, fit)


def _table(family, pe, p_adjusted, lower, upper, alpha, procedure, *,
           interval_note, error_rate="familywise", **attrs):
    table = comparisons_table(
        family, difference=pe.difference, std_error=pe.std_error, df=pe.df,
        statistic=pe.statistic, p_unadjusted=pe.p_unadjusted,
        p_adjusted=p_adjusted, ci_lower=lower, ci_upper=upper, alpha=alpha,
        procedure=procedure)
    table.attrs["alternative"] = pe.alternative
    table.attrs["error_rate"] = error_rate
    table.attrs["interval_note"] = interval_note
    table.attrs["mse"] = pe.mse
    if pe.fit is not None and not pe.fit.is_oneway:
        table.attrs["model"] = pe.fit.describe()
    table.attrs.update(attrs)
    return table


def _setup(layout, family, alpha, alternative, allowed, procedure):
    _check_family(layout, family)
    alpha = check_alpha(alpha)
    alternative = _check_alternative(alternative, allowed, procedure)
    s = _summary(layout)
    return s, alpha, _pooled(s, family, alternative)


# --- the one-way ANOVA table ---------------------------------------------------

@dataclass(frozen=True)
class AnovaTable:
    """The one-way analysis of variance (Fisher's F test of equal means).

    Attributes
    ----------
    ss_between, ss_within, ss_total : float
        Sums of squares between groups, within groups and in total
        (``ss_total = ss_between + ss_within``).
    df_between, df_within : int
        ``k - 1`` and ``N - k``.
    ms_between, ms_within : float
        Mean squares; ``ms_within`` is the pooled variance (MSE).
    f, p : float
        ``ms_between / ms_within`` and its upper-tail probability under
        F(k - 1, N - k).
    r_squared : float
        ``ss_between / ss_total``, the share of variation between groups.
    """

    ss_between: float
    ss_within: float
    ss_total: float
    df_between: int
    df_within: int
    ms_between: float
    ms_within: float
    f: float
    p: float
    r_squared: float

    @property
    def df_total(self) -> int:
        return self.df_between + self.df_within

    def to_frame(self) -> pd.DataFrame:
        """Return the table as a DataFrame with rows between / within / total."""
        return pd.DataFrame(
            {"sum_of_squares": [self.ss_between, self.ss_within, self.ss_total],
             "df": [self.df_between, self.df_within, self.df_total],
             "mean_square": [self.ms_between, self.ms_within, np.nan],
             "f": [self.f, np.nan, np.nan],
             "p": [self.p, np.nan, np.nan]},
            index=pd.Index(["between groups", "within groups", "total"], name="source"))


def anova_table(layout: Layout) -> AnovaTable:
    """Return the ANOVA table of ``layout``'s groups.

    One-way: sums of squares from centred values, within groups as the sum
    of squared deviations from each group mean, between groups as
    ``sum n_i (mean_i - grand)^2`` on median-shifted means, so adding 1e12 to
    every value leaves them unchanged.  With blocks or covariates (a
    ``layout.design``): ``ss_between`` is the group sum of squares adjusted
    for the blocks and covariates, ``ss_within`` the model's residual sum of
    squares on its residual df, and the two need not add up to ``ss_total``
    (the corrected total); the full table is ``fit_model(layout).anova()``.

    Parameters
    ----------
    layout : Layout

    Returns
    -------
    AnovaTable

    Examples
    --------
    NIST/SEMATECH e-Handbook section 7.4.7.1 data (four treatments of five):

    >>> from famwise import Layout
    >>> lay = Layout.from_groups([[6.9, 5.4, 5.8, 4.6, 4.0], [8.3, 6.8, 7.8, 9.2, 6.5],
    ...                           [8.0, 10.5, 8.1, 6.9, 9.3], [5.8, 3.8, 6.1, 5.6, 6.2]])
    >>> round(anova_table(lay).f, 4)
    9.7238
    """
    from ..model.anova import term_sums_of_squares
    s = _summary(layout)
    ss_between = float([r for r in term_sums_of_squares(s) if r[1] == "group"][0][3])
    ss_between = max(ss_between, 0.0)
    ss_within = s.ss_residual if not s.is_oneway else s.mse * s.df
    df_b, df_w = layout.k - 1, s.df
    ms_b, ms_w = ss_between / df_b, s.mse
    f = ms_b / ms_w
    if s.is_oneway:
        ss_total = ss_between + ss_within
    else:
        centred = s.y_shifted - s.y_shifted.mean()
        ss_total = float(centred @ centred)
    return AnovaTable(ss_between, ss_within, ss_total, df_b, df_w, ms_b, ms_w,
                      f, float(_st.f.sf(f, df_b, df_w)), ss_between / ss_total)


# --- the procedures -------------------------------------------------------------

def lsd(layout: Layout, family: Family, *, alpha: float = 0.05,
        alternative: str = "two-sided") -> pd.DataFrame:
    """Fisher's least significant difference, gated by the F test.

    First the one-way ANOVA F test of equal means is run at ``alpha``.  If it
    rejects (the gate opens), each comparison is tested by the pooled t test at
    ``alpha`` with no further adjustment; if it fails to reject (the gate
    closes), no comparison is rejected.

    Parameters
    ----------
    layout : Layout
    family : Family
        Any family (pairs, vs-reference, contrasts).
    alpha : float, default=0.05
        Level of the F test and of each t test.
    alternative : {"two-sided", "greater", "less"}, default="two-sided"
        Direction of each t test (the F gate is always the omnibus test).

    Returns
    -------
    pandas.DataFrame
        The comparisons table.  ``p_adjusted = max(p_unadjusted, p_F)``, the
        smallest level at which the two-stage procedure rejects the
        comparison, so ``reject`` is all False when the gate is closed.
        ``ci_lower``/``ci_upper`` are unadjusted (1 - alpha) t intervals
        whatever the gate.  ``attrs["gate"]`` holds the F statistic, its
        p-value and whether the gate opened; ``attrs["gate_note"]`` says so
        in a sentence.

    Notes
    -----
    1. The gate protects the familywise error rate only under the complete
       null; with three groups it controls it fully, with four or more a
       partial null can inflate it (Hayter 1986, *JASA* 81:1000-1004).
    2. Assumes normal errors with one common variance.

    References
    ----------
    Fisher, R. A. (1935). *The Design of Experiments*, section 24.
    """
    s, alpha, pe = _setup(layout, family, alpha, alternative, ALTERNATIVES, "lsd")
    aov = anova_table(layout)
    gate_open = bool(aov.p <= alpha)
    lower, upper = _interval(pe.difference, pe.std_error,
                             _t_crit(alpha, pe.df, pe.alternative), pe.alternative)
    if gate_open:
        note = (f"F = {aov.f:.4g} on ({aov.df_between}, {aov.df_within}) df, "
                f"p = {aov.p:.4g} <= alpha = {alpha:g}: the gate opened and each "
                f"comparison was tested at alpha without adjustment")
    else:
        note = (f"F = {aov.f:.4g} on ({aov.df_between}, {aov.df_within}) df, "
                f"p = {aov.p:.4g} > alpha = {alpha:g}: the gate closed, so no "
                f"comparison is declared different")
    return _table(
        family, pe, np.maximum(pe.p_unadjusted, aov.p), lower, upper, alpha, "lsd",
        interval_note=f"unadjusted {_sided(pe.alternative)} (1 - alpha) pooled t "
                      f"intervals, one at a time; not simultaneous",
        error_rate="familywise under the complete null only (F-gated)",
        gate={"f": aov.f, "p": aov.p, "df": (aov.df_between, aov.df_within),
              "open": gate_open},
        gate_note=note)


def bonferroni(layout: Layout, family: Family, *, alpha: float = 0.05,
               alternative: str = "two-sided") -> pd.DataFrame:
    """Pooled t tests with Bonferroni's adjustment, ``min(1, m * p)``.

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
        The comparisons table; intervals are simultaneous (1 - alpha) t
        intervals at per-comparison level alpha / m (one-sided intervals have
        an infinite end).

    Notes
    -----
    1. Controls the familywise error rate under any dependence (Boole's
       inequality); conservative when m is large.
    2. Normal errors, one common variance.
    """
    s, alpha, pe = _setup(layout, family, alpha, alternative, ALTERNATIVES, "bonferroni")
    m = family.m
    crit = _t_crit(alpha / m, pe.df, pe.alternative)
    lower, upper = _interval(pe.difference, pe.std_error, crit, pe.alternative)
    return _table(family, pe, _adjust.bonferroni(pe.p_unadjusted), lower, upper,
                  alpha, "bonferroni",
                  interval_note=f"simultaneous {_sided(pe.alternative)} Bonferroni "
                                f"intervals, each at level 1 - alpha/{m}")


def sidak(layout: Layout, family: Family, *, alpha: float = 0.05,
          alternative: str = "two-sided") -> pd.DataFrame:
    """Pooled t tests with Sidak's adjustment, ``1 - (1 - p)^m``.

    Intervals use the per-comparison level ``1 - (1 - alpha)^(1/m)``.
    Sidak's (1967) inequality makes the two-sided intervals simultaneous for
    multivariate t statistics such as these; one-sided Sidak intervals rely on
    positive dependence of the comparisons (true for many-to-one families).

    Parameters
    ----------
    layout : Layout
    family : Family
    alpha : float, default=0.05
    alternative : {"two-sided", "greater", "less"}, default="two-sided"

    Returns
    -------
    pandas.DataFrame
        The comparisons table.

    References
    ----------
    Sidak, Z. (1967). *JASA* 62:626-633. doi:10.1080/01621459.1967.10482935
    """
    s, alpha, pe = _setup(layout, family, alpha, alternative, ALTERNATIVES, "sidak")
    m = family.m
    per_test = -np.expm1(np.log1p(-alpha) / m)
    crit = _t_crit(per_test, pe.df, pe.alternative)
    lower, upper = _interval(pe.difference, pe.std_error, crit, pe.alternative)
    return _table(family, pe, _adjust.sidak(pe.p_unadjusted), lower, upper,
                  alpha, "sidak",
                  interval_note=f"simultaneous {_sided(pe.alternative)} Sidak "
                                f"intervals, each at level (1 - alpha)^(1/{m})")


def holm(layout: Layout, family: Family, *, alpha: float = 0.05,
         alternative: str = "two-sided") -> pd.DataFrame:
    """Pooled t tests with Holm's step-down adjustment (Holm 1979).

    Parameters
    ----------
    layout : Layout
    family : Family
    alpha : float, default=0.05
    alternative : {"two-sided", "greater", "less"}, default="two-sided"

    Returns
    -------
    pandas.DataFrame
        The comparisons table.  Holm's procedure has no simultaneous
        intervals of its own (a step-down test does not invert into
        intervals that match its decisions), so ``ci_lower``/``ci_upper``
        hold the **Bonferroni** simultaneous intervals (per-comparison level
        alpha / m); they are valid simultaneous (1 - alpha) intervals but may
        include zero for a comparison Holm rejects.  ``attrs["interval_note"]``
        says so.

    Notes
    -----
    1. Controls the familywise error rate under any dependence and rejects
       everything Bonferroni rejects (adjusted p never above Bonferroni's).

    References
    ----------
    Holm, S. (1979). A simple sequentially rejective multiple test procedure.
    *Scand. J. Statist.* 6(2):65-70.
    """
    s, alpha, pe = _setup(layout, family, alpha, alternative, ALTERNATIVES, "holm")
    m = family.m
    crit = _t_crit(alpha / m, pe.df, pe.alternative)
    lower, upper = _interval(pe.difference, pe.std_error, crit, pe.alternative)
    return _table(family, pe, _adjust.holm(pe.p_unadjusted), lower, upper,
                  alpha, "holm",
                  interval_note=f"Holm has no simultaneous intervals of its own; these "
                                f"are the {_sided(pe.alternative)} Bonferroni "
                                f"simultaneous intervals (each at level 1 - alpha/{m}), "
                                f"which may include zero where Holm rejects")


def bh(layout: Layout, family: Family, *, alpha: float = 0.05,
       alternative: str = "two-sided") -> pd.DataFrame:
    """Pooled t tests with the Benjamini-Hochberg adjustment: FALSE DISCOVERY RATE.

    This controls the false discovery rate (the expected share of false
    rejections among the rejections), **not** the familywise error rate.
    Use it for exploratory families and for screening across responses.

    Parameters
    ----------
    layout : Layout
    family : Family
    alpha : float, default=0.05
        The false discovery rate level q.
    alternative : {"two-sided", "greater", "less"}, default="two-sided"

    Returns
    -------
    pandas.DataFrame
        The comparisons table.  The intervals are false-coverage-rate
        adjusted intervals (Benjamini & Yekutieli 2005): marginal t intervals
        at level ``1 - R * alpha / m`` with ``R`` the number of rejections
        (``R = 1`` when there are none).  Their guarantee (expected share of
        non-covering intervals among the selected, that is rejected, rows at
        most alpha) covers the rejected rows; for the others they are
        marginal intervals at that level.  For every rejected row the interval
        excludes zero.

    References
    ----------
    Benjamini, Y. and Hochberg, Y. (1995). *JRSS B* 57(1):289-300.
    doi:10.1111/j.2517-6161.1995.tb02031.x
    Benjamini, Y. and Yekutieli, D. (2005). *JASA* 100(469):71-81.
    doi:10.1198/016214504000001907
    """
    s, alpha, pe = _setup(layout, family, alpha, alternative, ALTERNATIVES, "bh")
    m = family.m
    p_adj = _adjust.bh(pe.p_unadjusted)
    r = max(1, int(np.sum(p_adj <= alpha)))
    crit = _t_crit(r * alpha / m, pe.df, pe.alternative)
    lower, upper = _interval(pe.difference, pe.std_error, crit, pe.alternative)
    return _table(family, pe, p_adj, lower, upper, alpha, "bh",
                  interval_note=f"false-coverage-rate adjusted {_sided(pe.alternative)} "
                                f"intervals (Benjamini & Yekutieli 2005), each at level "
                                f"1 - {r}*alpha/{m}; the guarantee covers the rejected "
                                f"rows; not simultaneous",
                  error_rate="false discovery rate (not familywise)")


def tukey_kramer(layout: Layout, family: Family, *, alpha: float = 0.05,
                 alternative: str = "two-sided") -> pd.DataFrame:
    """Tukey's studentized range procedure with Kramer's unequal-n form.

    The adjusted p-value of a pair is ``P(Q(k', nu) >= sqrt(2) |t|)`` and the
    simultaneous interval is ``est -/+ q(1 - alpha; k', nu) / sqrt(2) * se``,
    where ``Q(k', nu)`` is the studentized range of ``k'`` means and ``k'`` is
    the number of groups the family's pairs involve (all ``k`` for the
    all-pairs family).

    Parameters
    ----------
    layout : Layout
    family : Family
        All pairs, or any family whose every row is a difference of two group
        means (a vs-reference family or pairwise contrasts such as ``"B - A"``).
        Any other contrast is refused: use :func:`scheffe` or
        :func:`bonferroni`.
    alpha : float, default=0.05
    alternative : {"two-sided"}
        The studentized range is two-sided only.

    Returns
    -------
    pandas.DataFrame
        The comparisons table with simultaneous (1 - alpha) intervals.

    Notes
    -----
    1. Exact for equal group sizes (Tukey 1953); conservative for unequal
       sizes (Hayter 1984).
    2. The range of the ``k'`` involved means has the same distribution
       whatever the other groups do, so ``k' < k`` is valid for a subset
       family; the pooled variance still uses every group (``nu = N - k``).
    3. Normal errors, one common variance.

    References
    ----------
    Kramer, C. Y. (1956). *Biometrics* 12(3):307-310. doi:10.2307/3001469
    Hayter, A. J. (1984). *Ann. Statist.* 12(1):61-75. doi:10.1214/aos/1176346392

    Examples
    --------
    Data of the ``scipy.stats.tukey_hsd`` docstring (three brands of five):

    >>> from famwise import Layout
    >>> from famwise.core.families import all_pairs
    >>> lay = Layout.from_groups([[24.5, 23.5, 26.4, 27.1, 29.9],
    ...                           [28.4, 34.2, 29.5, 32.2, 30.1],
    ...                           [26.1, 28.3, 24.3, 26.2, 27.8]])
    >>> tab = tukey_kramer(lay, all_pairs(lay.labels))
    >>> [round(p, 4) for p in tab.p_adjusted]
    [0.0144, 0.9803, 0.0203]
    """
    _check_family(layout, family)
    _check_alternative(alternative, ("two-sided",), "tukey-kramer")
    if family.pairs is None:
        raise FamwiseInputError(
            f"tukey-kramer handles differences of two group means only; contrast "
            f"{_offending_contrast(family)!r} is not one (use 'scheffe' or "
            f"'bonferroni' for general contrasts)")
    from ..distributions.simultaneous import srange_ppf, srange_sf

    s, alpha, pe = _setup(layout, family, alpha, alternative, ("two-sided",), "tukey-kramer")
    k_eff = int(np.unique(family.pairs).size)
    q_obs = np.sqrt(2.0) * np.abs(pe.statistic)
    p_adj = srange_sf(q_obs, k_eff, pe.df)
    crit = float(srange_ppf(1.0 - alpha, k_eff, pe.df)) / np.sqrt(2.0)
    lower, upper = _interval(pe.difference, pe.std_error, crit, "two-sided")
    return _table(family, pe, p_adj, lower, upper, alpha, "tukey-kramer",
                  interval_note=f"simultaneous (1 - alpha) Tukey-Kramer intervals, "
                                f"studentized range of {k_eff} means on {pe.df} df "
                                f"(conservative for unequal sizes)",
                  range_groups=k_eff)


def scheffe(layout: Layout, family: Family, *, alpha: float = 0.05,
            alternative: str = "two-sided") -> pd.DataFrame:
    """Scheffe's method: simultaneous intervals for every contrast at once.

    The adjusted p-value of a contrast is ``P(F(k-1, nu) >= t^2 / (k-1))`` and
    the interval is ``est -/+ sqrt((k-1) F(1-alpha; k-1, nu)) * se``.  The
    coverage holds for all contrasts among the ``k`` groups at once, so it
    stays valid for contrasts chosen after looking at the data.

    Parameters
    ----------
    layout : Layout
    family : Family
        Any family; its rows must be contrasts (weights summing to zero, as
        every famwise family's do).
    alpha : float, default=0.05
    alternative : {"two-sided"}

    Returns
    -------
    pandas.DataFrame
        The comparisons table with simultaneous (1 - alpha) intervals.

    Notes
    -----
    1. A contrast is rejected exactly when the F test would reject and the
       contrast lies in the direction that made it reject (Scheffe 1953).
    2. For pairwise families it is wider than Tukey-Kramer; use it for
       general or data-suggested contrasts.
    3. Normal errors, one common variance.

    References
    ----------
    Scheffe, H. (1953). *Biometrika* 40(1-2):87-104. doi:10.1093/biomet/40.1-2.87
    """
    s, alpha, pe = _setup(layout, family, alpha, alternative, ("two-sided",), "scheffe")
    q = layout.k - 1
    p_adj = _st.f.sf(pe.statistic ** 2 / q, q, pe.df)
    crit = float(np.sqrt(q * _st.f.isf(alpha, q, pe.df)))
    lower, upper = _interval(pe.difference, pe.std_error, crit, "two-sided")
    return _table(family, pe, p_adj, lower, upper, alpha, "scheffe",
                  interval_note=f"simultaneous (1 - alpha) Scheffe intervals, valid for "
                                f"every contrast among the {layout.k} groups")


def dunnett(layout: Layout, family: Family, *, alpha: float = 0.05,
            alternative: str = "two-sided") -> pd.DataFrame:
    """Dunnett's many-to-one comparisons with a reference group (exact).

    Each treatment ``i`` is compared with the reference ``0`` by the pooled t
    ratio ``T_i``; under the null the ``T_i`` are multivariate t on ``nu`` df
    with correlations ``rho_ij = lambda_i lambda_j``,
    ``lambda_i = sqrt(n_i / (n_i + n_0))`` (Dunnett 1955, section 2).  The
    adjusted p-value is ``P(max_i |T_i| >= |t|)`` (two-sided) or
    ``P(max_i T_i >= t)`` (one-sided), computed by the exact one-dimensional
    factor integral in :mod:`famwise.distributions`, not from the 1955
    tables (whose two-sided values for three or more treatments are
    conservative approximations; Dunnett 1964).

    Parameters
    ----------
    layout : Layout
    family : Family
        A vs-reference family (``family.kind == "vs-reference"``); rows are
        ``mean_group - mean_reference``.
    alpha : float, default=0.05
    alternative : {"two-sided", "greater", "less"}, default="two-sided"
        ``"greater"``: each treatment mean exceeds the reference mean;
        ``"less"``: it falls below.

    Returns
    -------
    pandas.DataFrame
        The comparisons table with simultaneous (1 - alpha) intervals; a
        one-sided interval has its other end at -inf or +inf.

    References
    ----------
    Dunnett, C. W. (1955). *JASA* 50(272):1096-1121. doi:10.1080/01621459.1955.10501294
    Dunnett, C. W. (1964). New tables for multiple comparisons with a control.
    *Biometrics* 20(3):482-491 (DOI not checked).

    Examples
    --------
    Dunnett's (1955) blood-count example (control, drug A, drug B):

    >>> from famwise import Layout
    >>> from famwise.core.families import vs_reference
    >>> lay = Layout.from_groups([[7.40, 8.50, 7.20, 8.24, 9.84, 8.32],
    ...                           [9.76, 8.80, 7.68, 9.36],
    ...                           [12.80, 9.68, 12.16, 9.20, 10.55]],
    ...                          labels=["control", "A", "B"])
    >>> tab = dunnett(lay, vs_reference(lay.labels, "control"))
    >>> [round(p, 4) for p in tab.p_adjusted]
    [0.6201, 0.0058]
    """
    _check_family(layout, family)
    if family.kind != "vs-reference" or family.reference is None:
        raise FamwiseInputError(
            f"dunnett compares each group with a reference group; build the family "
            f"with family='vs-reference' and reference=LABEL (got {family.kind!r})")
    from ..distributions.simultaneous import dunnett_ppf, dunnett_sf

    s, alpha, pe = _setup(layout, family, alpha, alternative, ALTERNATIVES, "dunnett")
    lam, deviation = _dunnett_lambdas(s, family)
    t = pe.statistic
    if pe.alternative == "two-sided":
        p_adj = dunnett_sf(np.abs(t), lam, pe.df, alternative="two-sided")
        crit = float(dunnett_ppf(1.0 - alpha, lam, pe.df, alternative="two-sided"))
    else:
        directed = t if pe.alternative == "greater" else -t
        p_adj = dunnett_sf(directed, lam, pe.df, alternative="greater")
        crit = float(dunnett_ppf(1.0 - alpha, lam, pe.df, alternative="greater"))
    lower, upper = _interval(pe.difference, pe.std_error, crit, pe.alternative)
    return _table(family, pe, p_adj, lower, upper, alpha, "dunnett",
                  interval_note=f"simultaneous {_sided(pe.alternative)} (1 - alpha) "
                                f"Dunnett intervals against {family.labels[family.reference]!r}, "
                                f"{'exact' if deviation <= 1e-9 else 'approximate'} "
                                f"critical value {crit:.6g}" + (
                                    "" if deviation <= 1e-9 else
                                    f" (the model's correlations replaced by the nearest "
                                    f"product form, largest change {deviation:.2g}; "
                                    f"'multivariate-t' is exact)"),
                  critical_value=crit, correlation_deviation=deviation)


def _dunnett_lambdas(fit, family: Family) -> tuple[np.ndarray, float]:
    """Return Dunnett's ``lambda_i`` and how far the model departs from them.

    One-way: ``lambda_i = sqrt(n_i / (n_i + n_0))`` (Dunnett 1955, section 2),
    exact.  Under a blocked or covariate model the correlations of the
    comparisons with the reference are those of the model's adjusted means;
    they have the product form ``rho_ij = lambda_i lambda_j`` for complete
    balanced blocks (then exact), and otherwise are replaced by the closest
    product form, fitted by the principal-factor iteration of a one-factor
    model (Hsu 1992), the largest change in a correlation returned.

    Hsu, J. C. (1992). The factor analytic approach to simultaneous inference
    in the general linear model. *J. Comput. Graph. Statist.* 1(2):151-168.
    doi:10.1080/10618600.1992.10477011
    """
    treat = family.pairs[:, 0]
    if fit.is_oneway:
        n0 = float(fit.n[family.reference])
        return np.sqrt(fit.n[treat] / (fit.n[treat] + n0)), 0.0
    C = fit.contrast_variance_factor(family.weights)
    cov = family.weights @ fit.mean_cov_unscaled @ family.weights.T
    d = np.sqrt(C)
    R = cov / np.outer(d, d)
    m = R.shape[0]
    off = ~np.eye(m, dtype=bool)
    if m == 1:
        return np.array([0.0]), 0.0
    lam = np.sqrt(np.clip(R[off].reshape(m, m - 1).mean(axis=1), 0.0, 1.0))
    for _ in range(500):
        A = R.copy()
        np.fill_diagonal(A, lam ** 2)
        w, v = np.linalg.eigh(A)
        new = np.sqrt(max(w[-1], 0.0)) * np.abs(v[:, -1])
        new = np.clip(new, 0.0, 1.0 - 1e-12)
        if np.max(np.abs(new - lam)) < 1e-14:
            lam = new
            break
        lam = new
    deviation = float(np.max(np.abs((R - np.outer(lam, lam))[off])))
    return lam, deviation

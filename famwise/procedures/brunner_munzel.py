"""Brunner-Munzel pairwise statistics with a studentised-permutation max-T.

For groups whose spreads or shapes differ, where a rank-sum test compares
more than location: the Brunner-Munzel (2000) statistic tests the relative
effect p = P(X_b < X_a) + P(X_b = X_a)/2 = 1/2 without assuming equal
distributions under the null, and its studentised permutation version
(Neubert & Brunner 2007) is exact under exchangeability and asymptotically
valid otherwise.  famwise's family version permutes all N labels, recomputes
every pair's statistic with its own variance estimate in each permutation
(:mod:`famwise.resample.score_kernels`, mode ``BRUNNER_MUNZEL``), and refers
the max to that permutation distribution.

A zero variance estimate (the placements of both groups constant: complete
separation, or all values of the pair tied) is replaced by the smallest
value a non-zero one can take, n_a S_a^2 + n_b S_b^2 = 1/4 (placements lie on
a grid of one half; one placement off by one half gives n S^2 = 1/4).  So
complete separation gives a large finite statistic and an all-tied pair 0;
no NaN arises, observed or permuted.

References
----------
Brunner, E. and Munzel, U. (2000). The nonparametric Behrens-Fisher problem:
asymptotic theory and a small-sample approximation. *Biometrical J.*
42:17-25. doi:10.1002/(SICI)1521-4036(200001)42:1<17::AID-BIMJ17>3.0.CO;2-U
Neubert, K. and Brunner, E. (2007). A studentized permutation test for the
non-parametric Behrens-Fisher problem. *Comput. Statist. Data Anal.*
51:5192-5204. doi:10.1016/j.csda.2006.05.024
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from scipy import special

from ..core.errors import FamwiseInputError
from ._rank_common import rank_setup, rank_table, reference_distribution, shifts

__all__ = ["BrunnerMunzelPairs", "brunner_munzel_pairs", "brunner_munzel_maxt"]


@dataclass(frozen=True)
class BrunnerMunzelPairs:
    """Each pair's Brunner-Munzel statistic, oriented group_a - group_b.

    ``statistic`` is positive when group_a tends to be larger (it equals
    ``scipy.stats.brunnermunzel(x=group_b, y=group_a).statistic``);
    ``relative_effect`` p = P(X_b < X_a) + P(X_b = X_a)/2; ``std_error`` the
    standard error of p; ``df`` Brunner & Munzel's degrees of freedom and
    ``p`` the two-sided p-value of their t approximation (one pair alone).
    """

    names: tuple
    statistic: np.ndarray
    relative_effect: np.ndarray
    std_error: np.ndarray
    df: np.ndarray
    p: np.ndarray


def _observed(setup):
    from ..resample.scores import Placements, pair_statistics
    lay = setup.layout
    sums = Placements.from_values(lay.values).group_sums(lay.codes, lay.k)
    return pair_statistics(sums, setup.n, setup.pairs[:, 0], setup.pairs[:, 1],
                           "brunner-munzel")


def _se_rel(setup, ps):
    n = setup.n.astype(np.float64)
    return np.sqrt(ps.variance) / (n[setup.pairs[:, 0]] * n[setup.pairs[:, 1]])


def brunner_munzel_pairs(layout, family) -> BrunnerMunzelPairs:
    """Return each pair's Brunner-Munzel statistic, df and t-approximation p-value.

    W = n_a n_b (p - 1/2) / sqrt(n_a S_a^2 + n_b S_b^2), S_g^2 the variance of
    group g's placements among the other group, with Satterthwaite-type
    df = (n_a S_a^2 + n_b S_b^2)^2 / ((n_a S_a^2)^2/(n_a - 1) + (n_b S_b^2)^2/(n_b - 1))
    (Brunner & Munzel 2000).  Unadjusted: for one pair alone.
    """
    setup = rank_setup(layout, family, 0.05, "two-sided", ("two-sided",),
                       "brunner_munzel_pairs")
    ps = _observed(setup)
    with np.errstate(invalid="ignore"):
        p = 2.0 * special.stdtr(ps.df, -np.abs(ps.statistic))
    p = np.where(np.isfinite(ps.df), p, np.where(ps.statistic == 0, 1.0, 0.0))
    return BrunnerMunzelPairs(tuple(setup.family.names), ps.statistic, ps.relative_effect,
                              _se_rel(setup, ps), ps.df, np.minimum(p, 1.0))


def brunner_munzel_maxt(layout, family, *, alpha=0.05, alternative="two-sided",
                        method="permutation", resamples=9999, seed=None, n_jobs=1,
                        backend="threads", chunk_size=None, progress=None, scheduler=None,
                        max_resamples=127_999):
    """Compare pairs by Brunner-Munzel statistics with a studentised-permutation max-T.

    Parameters
    ----------
    layout : Layout
    family : Family
        All pairs or against a reference.
    alpha : float, default=0.05
    alternative : {"two-sided", "greater", "less"}, default="two-sided"
        "greater": H1 that group_a tends to be larger (p > 1/2).
    method : {"permutation", "exact"}, default="permutation"
        Permutations of all N labels on the engine, or every distinct
        assignment (tiny designs).
    resamples, seed, n_jobs, backend, chunk_size, progress, scheduler, max_resamples
        As in :func:`famwise.resample.permutation_maxt`.

    Returns
    -------
    DataFrame
        The comparisons table with ``relative_effect`` (p = P(X_b < X_a) +
        P(X_b = X_a)/2) and its simultaneous interval ``relative_effect_lower``,
        ``relative_effect_upper`` (p -/+ c SE(p), clipped to [0, 1], c the
        permutation (1 - alpha) quantile of max |W*|; it excludes 1/2
        exactly when ``reject`` is True).  ``statistic``: W, positive when
        group_a tends larger.  ``difference``: the Hodges-Lehmann shift with
        the Wilcoxon inversion at c in ``ci_lower``/``ci_upper``, which
        assumes the groups differ by a shift only; under unequal spreads
        read the relative effect.  ``p_unadjusted``: each pair's own
        studentised permutation p (marginal), ``mc_error`` and ``unsettled``
        as for every resampling procedure.  ``attrs["brunner_munzel"]``
        holds each pair's df and t-approximation p.

    Notes
    -----
    1. Under the complete null of identical distributions the test is exact
       for any B (permutation) or exactly level alpha up to discreteness
       (exact); under p = 1/2 with unequal spreads the studentisation makes
       it asymptotically valid (Neubert & Brunner 2007).
    2. Zero variance estimates: see the module notes.
    """
    setup = rank_setup(layout, family, alpha, alternative, ("two-sided", "greater", "less"),
                       "brunner-munzel-maxt")
    if method not in ("permutation", "exact"):
        raise FamwiseInputError(f"method must be 'permutation' or 'exact' for "
                                f"brunner-munzel-maxt; got {method!r}")
    from .ranks import _pair_stats_for
    ps = _observed(setup)
    reference = reference_distribution(
        setup, method, "brunner-munzel", ps.statistic,
        dict(resamples=resamples, seed=seed, n_jobs=n_jobs, backend=backend,
             chunk_size=chunk_size, progress=progress, scheduler=scheduler,
             max_resamples=max_resamples),
        _pair_stats_for(setup, "brunner-munzel"), "brunner-munzel")
    crit = reference.critical_value
    se_p = _se_rel(setup, ps)
    rel = ps.relative_effect
    with np.errstate(invalid="ignore"):
        rel_lo = np.clip(rel - crit * se_p, 0.0, 1.0) if alternative != "less" \
            else np.zeros_like(rel)
        rel_hi = np.clip(rel + crit * se_p, 0.0, 1.0) if alternative != "greater" \
            else np.ones_like(rel)
    est, lo, hi, se = shifts(setup, crit, alternative)
    with np.errstate(invalid="ignore"):
        p_t = 2.0 * special.stdtr(ps.df, -np.abs(ps.statistic))
    note = (f"Hodges-Lehmann shift with the Wilcoxon inversion at the permutation critical "
            f"value c = {crit:.4f} of max |W*| (simultaneous if the groups differ by a shift "
            f"only); relative_effect_lower/upper hold the simultaneous interval for the "
            f"relative effect, dual to the decisions")
    table = rank_table(setup, difference=est, std_error=se, statistic=ps.statistic,
                       p_unadjusted=reference.p_marginal, p_adjusted=reference.p_adjusted,
                       ci_lower=lo, ci_upper=hi, procedure="brunner-munzel-maxt",
                       interval_note=note, reference=reference, relative_effect=rel,
                       relative_effect_lower=rel_lo, relative_effect_upper=rel_hi)
    table.attrs["brunner_munzel"] = {
        "df": [float(d) if np.isfinite(d) else None for d in ps.df],
        "p_t_approximation": [float(v) if np.isfinite(v) else None for v in p_t],
        "zero_variance": "replaced by n_a S_a^2 + n_b S_b^2 = 1/4 (module notes)"}
    table.attrs["estimate"] = ("relative effect P(X_b < X_a) + P(X_b = X_a)/2, and the "
                               "Hodges-Lehmann shift")
    return table

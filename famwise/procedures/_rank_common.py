"""Pieces shared by the rank procedures: checks, the permutation and exact
reference distributions, shift estimates and the table.

The permutation distribution permutes all N group labels (the complete
null: every group has the same distribution) on the compiled engine
(:mod:`famwise.resample.score_kernels`); ``method="exact"`` enumerates every
distinct assignment of the labels instead, for designs with at most
:data:`EXACT_MAX` of them.
"""

from __future__ import annotations

import itertools
import math
from dataclasses import dataclass

import numpy as np

from ..core.errors import FamwiseInputError
from ..core.families import Family
from ..core.layout import Layout
from ..core.table import comparisons_table
from ._shared import _check_family, _check_layout
from .rank_shift import rank_c, shift_order_statistic

__all__ = ["EXACT_MAX", "RANK_METHODS", "RankSetup", "rank_setup", "rank_options",
           "reference_distribution", "ReferenceDistribution", "shifts", "rank_table"]

RANK_METHODS = ("asymptotic", "permutation", "exact")
#: Largest number of distinct label assignments ``method="exact"`` enumerates.
EXACT_MAX = 200_000
_Z975 = 1.959963984540054        # scipy.stats.norm.ppf(0.975)


@dataclass(frozen=True)
class RankSetup:
    """Validated inputs of a rank procedure."""

    layout: Layout
    family: Family
    alpha: float
    alternative: str
    groups: list
    n: np.ndarray
    pairs: np.ndarray


def rank_setup(layout, family, alpha, alternative, allowed_alternatives, procedure,
               families=("all-pairs", "vs-reference")) -> RankSetup:
    """Check the data and family of a rank procedure; one-line errors."""
    from ..core.validate import check_alpha
    layout = _check_layout(layout)
    family = _check_family(layout, family)
    alpha = check_alpha(alpha)
    if alternative not in allowed_alternatives:
        raise FamwiseInputError(
            f"alternative must be one of {{{', '.join(map(repr, allowed_alternatives))}}} "
            f"for {procedure}; got {alternative!r}")
    if not family.is_pairwise or family.kind not in families + ("contrasts",) or (
            family.kind == "contrasts" and "all-pairs" not in families):
        raise FamwiseInputError(
            f"{procedure} compares pairs of groups (families: {', '.join(families)}); "
            f"rank procedures have no general contrasts")
    n = layout.stats.n
    for g in np.flatnonzero(n < 2):
        rows = layout.rows[layout.codes == g]
        where = f" (row {int(rows[0])})" if rows.size else ""
        raise FamwiseInputError(
            f"group {layout.labels[g]!r} in {layout.source!r} has {int(n[g])} value"
            f"{'s' if n[g] != 1 else ''}{where}; rank procedures need at least 2 values "
            f"per group: add observations or leave the group out")
    if np.all(layout.values == layout.values[0]):
        raise FamwiseInputError(
            f"every value of {layout.response!r} in {layout.source!r} is "
            f"{layout.values[0]:g}; ranks cannot tell the groups apart")
    return RankSetup(layout, family, alpha, alternative, layout.split(), n,
                     np.asarray(family.pairs, dtype=np.int64))


def rank_options(setup: RankSetup, resamples, seed, n_jobs, backend, chunk_size,
                 progress, scheduler, max_resamples):
    """The resampling options, validated as every resampling procedure does."""
    from ..resample.procedures import _validate
    return _validate(setup.layout, setup.family, alpha=setup.alpha, resamples=resamples,
                     max_resamples=max_resamples, seed=seed, n_jobs=n_jobs,
                     backend=backend, statistic="welch", statistics_allowed=("welch",),
                     trim=0.2, alternative=setup.alternative, chunk_size=chunk_size,
                     progress=progress, scheduler=scheduler)


def oriented(t, alternative):
    t = np.asarray(t, dtype=np.float64)
    return np.abs(t) if alternative == "two-sided" else (t if alternative == "greater" else -t)


@dataclass(frozen=True)
class ReferenceDistribution:
    """p-values and the critical value from a permutation or exact distribution."""

    p_marginal: np.ndarray
    p_adjusted: np.ndarray
    critical_value: float
    mc_error: np.ndarray | None
    unsettled: np.ndarray | None
    record: dict


def _assignments(n):
    """Every distinct assignment of labels with group sizes ``n``, as (A, N) codes."""
    big_n = int(np.sum(n))
    out = []

    def fill(codes, free, g):
        if g == len(n) - 1:
            codes = codes.copy()
            codes[list(free)] = g
            out.append(codes)
            return
        for chosen in itertools.combinations(free, int(n[g])):
            c = codes.copy()
            c[list(chosen)] = g
            rest = [i for i in free if i not in set(chosen)]
            fill(c, rest, g + 1)

    fill(np.zeros(big_n, dtype=np.int64), list(range(big_n)), 0)
    return np.array(out)


def _exact(setup: RankSetup, mode, u, thr, alternative, observed_fn):
    n = setup.n
    count = math.factorial(int(n.sum()))
    for ng in n:
        count //= math.factorial(int(ng))
    if count > EXACT_MAX:
        raise FamwiseInputError(
            f"method='exact' would enumerate {count:,} label assignments (at most "
            f"{EXACT_MAX:,}); use method='permutation'")
    codes = _assignments(n)
    stats = observed_fn(codes)                      # (A, m)
    ustar = oriented(stats, alternative)
    tol = thr
    p_marg = np.mean(ustar >= tol[None, :], axis=0)
    mx = ustar.max(axis=1)
    p_adj = np.mean(mx[:, None] >= tol[None, :], axis=0)
    srt = np.sort(mx)
    tail = 1.0 - np.searchsorted(srt, srt, side="left") / srt.size   # P(M >= v)
    above = srt[tail > setup.alpha]
    crit = float(above.max()) if above.size else -np.inf
    record = {"method": "exact", "assignments": int(count), "critical_value": crit}
    return ReferenceDistribution(p_marg, p_adj, crit, None, None, record)


def reference_distribution(setup: RankSetup, method, mode, t_obs, opts_args,
                           observed_fn, statistic_name,
                           placements=None) -> ReferenceDistribution:
    """The permutation (engine) or exact distribution of the max statistic.

    ``observed_fn(codes)`` returns the statistics for label arrays ``codes``
    (A, N) -> (A, m), the same function as for the observed data (used by
    ``method="exact"`` only).  ``placements`` is the pairwise-score structure
    (:class:`famwise.resample.scores.Placements`; default: the point values
    of the layout); a score such as Gehan's on censored values passes its
    own, built from each observation's lower and upper ends, in the
    layout's observation order.
    """
    from ..resample.scores import Placements, placement_problem
    from ..resample.maxt import resampling_attrs, run_maxt
    from ..resample.statistics import TIE_ATOL, TIE_RTOL
    u = oriented(t_obs, setup.alternative)
    thr = u - (TIE_RTOL * np.abs(u) + TIE_ATOL)
    if method == "exact":
        return _exact(setup, mode, u, thr, setup.alternative, observed_fn)
    opts = rank_options(setup, **opts_args)
    lay = setup.layout
    if placements is None:
        placements = Placements.from_values(lay.values)
    fixed_v = None
    if mode == "mantel" and not placements.has_ties:
        ni, nl = setup.n[setup.pairs[:, 0]], setup.n[setup.pairs[:, 1]]
        mode, fixed_v = "fixed", ni * nl * (ni + nl + 1.0) / 3.0
    problem = placement_problem(placements, lay.codes, lay.k, setup.pairs, mode, u, thr,
                                setup.alternative, fixed_v)
    res = run_maxt(problem, u, thr, opts, stepdown=False, stacklevel=5)
    crit = res.critical_value(setup.alpha)
    record = resampling_attrs(res, opts, problem, method="permutation", stepdown=False,
                              statistic=statistic_name, alpha=setup.alpha)
    return ReferenceDistribution(res.p_marginal, res.p_adjusted, crit, res.mc_error,
                                 res.unsettled, record)


def pair_values(setup: RankSetup):
    """(values of group_a, values of group_b) for each comparison."""
    return [(setup.groups[a], setup.groups[b]) for a, b in setup.pairs]


def shifts(setup: RankSetup, crit, alternative="two-sided"):
    """Hodges-Lehmann shift, its interval at ``crit`` and an implied standard error.

    The standard error is (upper - lower) / (2 z_.975) of each pair's own
    95% Wilcoxon interval (Hollander, Wolfe & Chicken, 3rd ed., section 4.3,
    from memory); NaN when the groups are too small for that interval.
    """
    m = setup.pairs.shape[0]
    est, lo, hi, se = (np.empty(m) for _ in range(4))
    crit = np.broadcast_to(np.asarray(crit, dtype=np.float64), (m,))
    for j, (x, y) in enumerate(pair_values(setup)):
        nm = x.size * y.size
        c = rank_c(x.size, y.size, crit[j]) if np.isfinite(crit[j]) else 0
        c95 = rank_c(x.size, y.size, _Z975)
        # every order statistic the pair needs, in one selection
        want = [(nm + 1) // 2, nm // 2 + 1]
        if c >= 1:
            want += [c, nm + 1 - c]
        if c95 >= 1:
            want += [c95, nm + 1 - c95]
        got = dict(zip(want, shift_order_statistic(x, y, want)))
        est[j] = 0.5 * (got[(nm + 1) // 2] + got[nm // 2 + 1])
        lo[j], hi[j] = (got[c], got[nm + 1 - c]) if c >= 1 else (-np.inf, np.inf)
        if alternative == "greater":
            hi[j] = np.inf
        elif alternative == "less":
            lo[j] = -np.inf
        se[j] = (got[nm + 1 - c95] - got[c95]) / (2.0 * _Z975) if c95 >= 1 else np.nan
    return est, lo, hi, se


def rank_table(setup: RankSetup, *, difference, std_error, statistic, p_unadjusted,
               p_adjusted, ci_lower, ci_upper, procedure, interval_note, reference=None,
               relative_effect=None, **extra):
    """The comparisons table of a rank procedure, with its notes in attrs."""
    mc = None if reference is None else reference.mc_error
    more = dict(extra)
    if reference is not None and reference.unsettled is not None:
        more["unsettled"] = np.asarray(reference.unsettled, dtype=bool)
    table = comparisons_table(
        setup.family, difference=difference, std_error=std_error, df=np.inf,
        statistic=statistic, p_unadjusted=p_unadjusted, p_adjusted=p_adjusted,
        ci_lower=ci_lower, ci_upper=ci_upper, alpha=setup.alpha, procedure=procedure,
        mc_error=mc, relative_effect=relative_effect, **more)
    if "unsettled" in more:
        table["unsettled"] = more["unsettled"]
    table.attrs["alternative"] = setup.alternative
    table.attrs["error_rate"] = "familywise"
    table.attrs["interval_note"] = interval_note
    table.attrs["estimate"] = "Hodges-Lehmann shift (median of the pairwise differences)"
    if reference is not None and reference.record.get("method") == "permutation":
        table.attrs["resampling"] = reference.record
    elif reference is not None:
        table.attrs["exact"] = reference.record
    return table

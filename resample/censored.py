"""Familywise comparisons of censored data (non-detects): Gehan and Peto max-T.

Two procedures, each ``fn(layout, family, *, alpha=0.05, **options)`` for a
pairwise family (all pairs, or each group against a reference):

* :func:`gehan_maxt`: each pair's own two-sample generalised Wilcoxon
  statistic of Gehan (1965), standardised by its permutation variance
  (Mantel 1967);
* :func:`peto_maxt`: the same with the Peto & Peto (1972) generalised
  Wilcoxon weight in Prentice's (1978) form, the product-limit estimate of
  the pair's combined sample with factors (1 - d/(r + 1)); Peto & Peto's
  own S(t-) differs only by the small-sample factor.

Both handle several detection limits, within a group and between groups,
because a non-detect "<L" is compared only where the order is known: it
lies below every measured value at or above L, and its order against a
measured value below L or against another non-detect is unknown (score 0).
Without non-detects, Gehan's statistic is the pair's Wilcoxon–Mann–Whitney
statistic with the tie-corrected variance.

The family's adjusted p-values are the single-step max-T over permutations
of all N group labels (Westfall & Young 1993) on the compiled engine: Gehan's
statistic is a pairwise U-statistic and runs on the placement kernel of the
rank procedures (:mod:`famwise.resample.scores`, each non-detect "<L" the
interval below L, open at L); the Peto-Prentice scores depend on each pair's
own product-limit curve and run on :mod:`famwise.resample.censored_kernels`,
which also computes Gehan's (the two agree; tests/test_censored.py);
p = (1 + hits) / (1 + B)
(Phipson & Smyth 2010).  Under the complete null with all groups drawn from
one distribution *and the same detection limits*, the labels are
exchangeable and the test is exact; when the limits differ between groups
(a laboratory changed its method for one station), the censoring pattern
itself differs and no rank test of censored data is exact: the sensitivity
table (:func:`substitution_sensitivity`) shows how much the decisions lean
on it.

The table's ``difference`` holds the difference of the groups' Kaplan–Meier
means (on flipped data; :mod:`famwise.intake.kaplan_meier`), with
``std_error`` from their standard errors, for description only: the test
is on ranks, not on means, and there are no simultaneous intervals
(``ci_lower``/``ci_upper`` are NaN).  ``relative_effect`` is
``P(X_a > X_b) + 1/2 P(order unknown or tied)`` (as the rank procedures
report it), estimated by counting the pairs of values whose order is
known.
"""

from __future__ import annotations

import numpy as np

from ..core.errors import FamwiseInputError
from ..core.layout import Layout
from ..core.table import comparisons_table
from . import engine
from .procedures import DEFAULT_MAX_RESAMPLES, _validate
from .statistics import TIE_ATOL, TIE_RTOL

__all__ = ["gehan_maxt", "peto_maxt", "substitution_sensitivity", "score_levels",
           "known_order_effect", "SUBSTITUTIONS"]

SUBSTITUTIONS = (("zero", 0.0), ("half-limit", 0.5), ("limit", 1.0))
_WEIGHT = {"gehan": 0, "peto": 1}


def score_levels(values, censored):
    """Return (level, event, n_levels): levels by descending value (0 = largest)."""
    values = np.asarray(values, dtype=np.float64)
    uniq, inverse = np.unique(-values, return_inverse=True)
    event = ~np.asarray(censored, dtype=bool)
    return (np.ascontiguousarray(inverse.astype(np.int64)), np.ascontiguousarray(event),
            int(uniq.size))


def known_order_effect(xa, ca, xb, cb) -> float:
    """``P(X_a > X_b) + 1/2 P(unknown or tied)`` by counting known orders.

    Value i of a lies known-below value j of b when j is measured and either
    i is measured and smaller, or i is a non-detect with limit at or below
    j.  O(n log n) with sorted searches.
    """
    xa, xb = np.asarray(xa, float), np.asarray(xb, float)
    ca, cb = np.asarray(ca, bool), np.asarray(cb, bool)

    def below(x1, c1, x2, c2):
        # pairs (i in 1, j in 2) with i known below j
        det2 = np.sort(x2[~c2])
        if det2.size == 0:
            return 0
        # measured i: count measured j > x_i; non-detect i: count measured j >= L_i
        strictly = det2.size - np.searchsorted(det2, x1[~c1], side="right")
        at_or = det2.size - np.searchsorted(det2, x1[c1], side="left")
        return int(strictly.sum() + at_or.sum())

    total = xa.size * xb.size
    lt = below(xa, ca, xb, cb)
    gt = below(xb, cb, xa, ca)
    return (gt + 0.5 * (total - lt - gt)) / total


def _var_floor(layout, family, weight):
    n = np.bincount(layout.codes, minlength=layout.k).astype(np.float64)
    pairs = family.pairs
    size = n[pairs[:, 0]] + n[pairs[:, 1]]
    scale = size ** 2 if weight == 0 else np.ones_like(size)
    return np.ascontiguousarray(1e-24 * scale * size)


def _observed(layout, family, weight):
    from .censored_kernels import pair_statistics
    level, event, n_levels = score_levels(layout.values, layout.censored_flags)
    pairs = family.pairs
    pa = np.ascontiguousarray(pairs[:, 0].astype(np.int64))
    pb = np.ascontiguousarray(pairs[:, 1].astype(np.int64))
    floor = _var_floor(layout, family, weight)
    labels = np.ascontiguousarray(layout.codes.astype(np.int64))
    t, u, v = pair_statistics(level, event, labels, layout.k, n_levels, pa, pb, weight, floor)
    return (level, event, n_levels, pa, pb, floor, labels), t, u, v


def _km_columns(layout, family):
    from ..intake.kaplan_meier import kaplan_meier_left
    flags = layout.censored_flags
    # Less the median first: differences of means near 1e12 keep their digits.
    centred = layout.values - float(np.median(layout.values))
    km = [kaplan_meier_left(centred[layout.codes == g], flags[layout.codes == g])
          for g in range(layout.k)]
    mean = np.array([s.mean for s in km])
    se = np.array([s.mean_se for s in km])
    pairs = family.pairs
    diff = mean[pairs[:, 0]] - mean[pairs[:, 1]]
    std_error = np.sqrt(se[pairs[:, 0]] ** 2 + se[pairs[:, 1]] ** 2)
    return diff, std_error


def gehan_placements(layout):
    """The rank procedures' placements of censored values: a measured v is the
    point v, a non-detect "<L" the interval (-inf, L), open at L."""
    from .scores import Placements
    flags = layout.censored_flags
    lower = np.where(flags, -np.inf, layout.values)
    return Placements.from_bounds(lower, layout.values, flags)


def _gehan_problem(layout, family, alternative):
    """Observed (T, U, V, relative effect) and the engine problem on the placement kernel."""
    from .scores import pair_statistics, placement_problem
    placements = gehan_placements(layout)
    n = np.bincount(layout.codes, minlength=layout.k)
    pairs = family.pairs
    st = pair_statistics(placements.group_sums(layout.codes, layout.k), n, pairs[:, 0],
                         pairs[:, 1], "mantel")
    t = np.asarray(st.statistic, dtype=np.float64)
    t = np.where(st.variance > 1e-12 * np.maximum(1.0, st.variance.max()), t, 0.0)
    u, thr = _oriented(t, alternative)
    problem = placement_problem(placements, layout.codes, layout.k, pairs, "mantel", u, thr,
                                alternative)
    return t, t * np.sqrt(st.variance), st.variance, st.relative_effect, u, thr, problem


def _oriented(t, alternative):
    u = np.abs(t) if alternative == "two-sided" else (t if alternative == "greater" else -t)
    return u, u - (TIE_RTOL * np.abs(u) + TIE_ATOL)


def _run_scores(procedure, score, layout, family, *, alpha, resamples, seed, n_jobs,
                backend, alternative, chunk_size, progress, scheduler, max_resamples,
                sensitivity=True):
    if getattr(family, "pairs", None) is None:
        raise FamwiseInputError(
            f"procedure {procedure!r} compares pairs of groups (all pairs, or each group "
            f"against a reference); it has no statistic for general contrasts")
    opts = _validate(layout, family, alpha=alpha, resamples=resamples,
                     max_resamples=max_resamples, seed=seed, n_jobs=n_jobs,
                     backend=backend, statistic=score, statistics_allowed=(score,),
                     trim=0.2, alternative=alternative, chunk_size=chunk_size,
                     progress=progress, scheduler=scheduler)
    from .maxt import resampling_attrs, run_maxt
    weight = _WEIGHT[score]
    if score == "gehan":
        t, u_raw, v_raw, effect, u, thr, problem = _gehan_problem(layout, family,
                                                                  opts.alternative)
    else:
        args, t, u_raw, v_raw = _observed(layout, family, weight)
        u, thr = _oriented(t, opts.alternative)
        order = np.argsort(-u, kind="stable").astype(np.int64)
        sign = 1.0 if opts.alternative != "less" else -1.0
        problem = engine.ResamplingProblem(
            "censored_kernels.pair_scores_chunk",
            args[:2] + (args[6], layout.k, args[2], args[3], args[4], weight, args[5], sign,
                        opts.alternative == "two-sided", thr, order),
            layout.n_total, family.m)
        effect = _gehan_problem(layout, family, "two-sided")[3]
    res = run_maxt(problem, u, thr, opts, stacklevel=6)
    b, p_marginal, p_adjusted = res.resamples, res.p_marginal, res.p_adjusted
    mc_error, unsettled = res.mc_error, res.unsettled
    diff, se = _km_columns(layout, family)
    nan = np.full(family.m, np.nan)
    table = comparisons_table(
        family, difference=diff, std_error=se, df=np.inf, statistic=t,
        p_unadjusted=p_marginal, p_adjusted=p_adjusted, ci_lower=nan, ci_upper=nan,
        alpha=opts.alpha, procedure=procedure, mc_error=mc_error, unsettled=unsettled,
        relative_effect=effect)
    table["unsettled"] = np.asarray(unsettled, dtype=bool)
    table.attrs["interval_note"] = (
        "no intervals: a rank test of censored values; 'difference' is the difference "
        "of Kaplan-Meier means, for description only")
    table.attrs["resampling"] = resampling_attrs(res, opts, problem, method="permutation",
                                                 stepdown=False, statistic=score,
                                                 alpha=opts.alpha, trim=None,
                                                 pooled_skewness=None)
    table.attrs["censored"] = {
        "score": score, "u": [float(x) for x in u_raw], "variance": [float(x) for x in v_raw],
        "nondetects_by_group": {lab: int(layout.censored_flags[layout.codes == g].sum())
                                for g, lab in enumerate(layout.labels)},
    }
    if sensitivity and layout.has_censoring:
        table.attrs["sensitivity"] = substitution_sensitivity(
            procedure, score, layout, family, table, alpha=opts.alpha,
            resamples=int(b), seed=opts.seed, alternative=opts.alternative,
            chunk_size=chunk_size)
    return table


def substitution_sensitivity(procedure, score, layout, family, table, *, alpha, resamples,
                             seed, alternative="two-sided", chunk_size=None) -> dict:
    """Re-run the comparison with each non-detect replaced by 0, half its limit, its limit.

    Substitution is what the censored analysis avoids (it invents values);
    the table shows whether any decision rests on how the non-detects are
    treated.  Each substituted data set is run through the same procedure
    (with no non-detects left) at the same B and seed.

    Returns
    -------
    dict
        ``rows``: per comparison, the censored decision and p-value and, for
        each substitution, its p-value and decision; ``flips``: the
        (comparison, substitution) pairs whose decision differs;
        ``sentence``: one plain sentence.
    """
    flags = layout.censored_flags
    rows = {name: {"comparison": name, "reject": bool(rej), "p_adjusted": float(p)}
            for name, rej, p in zip(table["comparison"], table["reject"], table["p_adjusted"])}
    flips = []
    for label, factor in SUBSTITUTIONS:
        values = np.where(flags, layout.values * factor, layout.values)
        sub = Layout(values=values, codes=layout.codes, labels=layout.labels, rows=layout.rows,
                     response=layout.response, group=layout.group, source=layout.source)
        if np.all(values == values[0]):
            for name in rows:
                rows[name][f"p_{label}"] = float("nan")
                rows[name][f"reject_{label}"] = None
            continue
        res = _run_scores(procedure, score, sub, family, alpha=alpha, resamples=resamples,
                          seed=seed, n_jobs=1, backend="threads", alternative=alternative,
                          chunk_size=chunk_size, progress=False, scheduler=None,
                          max_resamples=DEFAULT_MAX_RESAMPLES, sensitivity=False)
        for name, rej, p in zip(res["comparison"], res["reject"], res["p_adjusted"]):
            rows[name][f"p_{label}"] = float(p)
            rows[name][f"reject_{label}"] = bool(rej)
            if bool(rej) != rows[name]["reject"]:
                flips.append({"comparison": name, "substitution": label})
    names = {"zero": "0", "half-limit": "half the limit", "limit": "the limit"}
    if flips:
        shown = "; ".join(f"{f['comparison']} with {names[f['substitution']]}"
                          for f in flips[:6])
        more = f" and {len(flips) - 6} more" if len(flips) > 6 else ""
        sentence = (f"Substituting values for the non-detects would change "
                    f"{len({f['comparison'] for f in flips})} decision(s): {shown}{more}; "
                    f"those results depend on how the non-detects are treated, and the "
                    f"censored analysis (no invented values) is the one reported.")
    else:
        sentence = ("Substituting 0, half the limit or the limit for every non-detect "
                    "would change no decision.")
    return {"substitutions": [s for s, _ in SUBSTITUTIONS], "rows": list(rows.values()),
            "flips": flips, "sentence": sentence}


_PARAMS = """
    Parameters
    ----------
    layout : famwise.core.layout.Layout
        The data; ``layout.censored`` marks non-detects (their value is the
        limit).  Works without non-detects too.
    family : famwise.core.families.Family
        All pairs, or each group against a reference.
    alpha : float, default=0.05
    resamples : int or "auto", default=9999
    seed, n_jobs, backend, chunk_size, progress, scheduler, max_resamples
        As for :func:`famwise.resample.permutation_maxt`; results depend on
        the seed and chunk size only.
    alternative : {"two-sided", "greater", "less"}, default="two-sided"
        "greater": group a (the group compared with the reference) tends to
        larger values.
    sensitivity : bool, default=True
        Also run :func:`substitution_sensitivity` (in
        ``table.attrs["sensitivity"]``) when there are non-detects.

    Returns
    -------
    pandas.DataFrame
        The comparisons table: ``statistic`` is the standardised pair
        statistic T_ab (> 0 when group a tends larger), ``p_unadjusted``
        each pair's own permutation p-value, ``p_adjusted`` the single-step
        max-T p-value, ``difference`` the difference of Kaplan–Meier means
        (descriptive), ``ci_lower``/``ci_upper`` NaN, ``relative_effect``
        P(X_a > X_b) + 1/2 P(order unknown), plus ``mc_error`` and
        ``unsettled``.  ``attrs["censored"]`` holds U and V of each pair.

    References
    ----------
    .. [1] Gehan, E. A. (1965). A generalized Wilcoxon test for comparing
       arbitrarily singly-censored samples. *Biometrika* 52:203-223.
       doi:10.1093/biomet/52.1-2.203
    .. [2] Mantel, N. (1967). Ranking procedures for arbitrarily restricted
       observation. *Biometrics* 23:65-78. doi:10.2307/2528282
    .. [3] Peto, R. and Peto, J. (1972). Asymptotically efficient rank
       invariant test procedures. *J. R. Statist. Soc. A* 135:185-207.
       doi:10.2307/2344317
    .. [4] Prentice, R. L. (1978). Linear rank tests with right censored
       data. *Biometrika* 65:167-179. doi:10.1093/biomet/65.1.167
    .. [5] Helsel, D. R. (2012). *Statistics for Censored Environmental
       Data Using Minitab and R*, 2nd ed. Wiley. (Flipping left-censored
       data; chapters 6 and 9, from memory.)
    .. [6] Westfall, P. H. and Young, S. S. (1993). *Resampling-Based
       Multiple Testing*. Wiley.
"""


def gehan_maxt(layout, family, *, alpha=0.05, resamples=9999, seed=None, n_jobs=1,
               backend="threads", alternative="two-sided", chunk_size=None, progress=None,
               scheduler=None, max_resamples=DEFAULT_MAX_RESAMPLES, sensitivity=True):
    return _run_scores("gehan-maxt", "gehan", layout, family, alpha=alpha,
                       resamples=resamples, seed=seed, n_jobs=n_jobs, backend=backend,
                       alternative=alternative, chunk_size=chunk_size, progress=progress,
                       scheduler=scheduler, max_resamples=max_resamples,
                       sensitivity=sensitivity)


def peto_maxt(layout, family, *, alpha=0.05, resamples=9999, seed=None, n_jobs=1,
              backend="threads", alternative="two-sided", chunk_size=None, progress=None,
              scheduler=None, max_resamples=DEFAULT_MAX_RESAMPLES, sensitivity=True):
    return _run_scores("peto-maxt", "peto", layout, family, alpha=alpha,
                       resamples=resamples, seed=seed, n_jobs=n_jobs, backend=backend,
                       alternative=alternative, chunk_size=chunk_size, progress=progress,
                       scheduler=scheduler, max_resamples=max_resamples,
                       sensitivity=sensitivity)


gehan_maxt.__doc__ = ("Compare groups of censored values by pairwise Gehan statistics "
                      "with a permutation max-T.\n\n    Each pair's own generalised "
                      "Wilcoxon statistic [1]_ standardised by its permutation variance "
                      "[2]_; see the module notes.\n" + _PARAMS)
peto_maxt.__doc__ = ("Compare groups of censored values by pairwise Peto–Peto statistics "
                     "with a permutation max-T.\n\n    Each pair's own statistic with "
                     "Peto & Peto's product-limit scores [3]_ (cf. [4]_), standardised by "
                     "its permutation variance; more weight than Gehan's on differences "
                     "among the low values when detection limits vary.\n" + _PARAMS)

"""Permutation and bootstrap max-statistic procedures (single-step, step-down).

Four procedures, each ``fn(layout, family, *, alpha=0.05, **options)``
returning the comparisons table (:func:`famwise.core.table.comparisons_table`)
with the resampling columns ``mc_error`` and ``unsettled``:

* :func:`permutation_maxt`, :func:`permutation_stepdown`: Westfall & Young
  (1993) single-step and step-down max-T over permutations of the group
  labels; Welch-studentized statistics by default (asymptotically valid
  under unequal spread, Janssen 1997), pooled t by option.
* :func:`bootstrap_maxt`, :func:`bootstrap_stepdown`: the bootstrap-t max
  statistic with within-group resampling of centred data (Hall & Wilson
  1991); Welch, pooled or Yuen trimmed-mean statistics.

p-values are (1 + hits) / (1 + B) (Phipson & Smyth 2010).  The raw result
(B, seed, chunks, critical value, ...) is in ``table.attrs["resampling"]``.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pandas as pd

from ..core.errors import FamwiseInputError
from ..core.families import Family
from ..core.layout import Layout
from ..core.table import comparisons_table
from . import engine
from .maxt import MC_LEVEL, UnsettledWarning, run_maxt
from .design import design_inputs, model_observed, permutation_design, variance_terms
from .statistics import (ALTERNATIVES, HALL_A_MAX, family_weights, hall_inverse,
                         observed_statistics, ssq_floor, trimmed_terms)

__all__ = ["permutation_maxt", "permutation_stepdown", "bootstrap_maxt",
           "bootstrap_stepdown", "bootstrap_hall", "UnsettledWarning", "AUTO_START",
           "DEFAULT_MAX_RESAMPLES", "MC_LEVEL"]

AUTO_START = 999                 # first B of resamples="auto"
DEFAULT_MAX_RESAMPLES = 127_999  # cap of resamples="auto" (7 doublings)


@dataclass(frozen=True)
class _Options:
    alpha: float
    resamples: int
    auto: bool
    max_resamples: int
    seed: np.random.SeedSequence
    n_jobs: int | None
    backend: str
    statistic: str
    trim: float
    alternative: str
    chunk_size: int
    progress: bool | None
    scheduler: object


def _one_of(name, value, allowed):
    if not isinstance(value, str) or value not in allowed:
        raise FamwiseInputError(
            f"`{name}` must be one of {{{', '.join(repr(a) for a in allowed)}}}; "
            f"got {value!r}")
    return value


def _positive_int(name, value):
    if isinstance(value, (bool, np.bool_)) or not isinstance(value, (int, np.integer)) \
            or value < 1:
        raise FamwiseInputError(f"`{name}` must be a positive integer; got {value!r}")
    return int(value)


def _validate(layout, family, *, alpha, resamples, max_resamples, seed, n_jobs,
              backend, statistic, statistics_allowed, trim, alternative,
              chunk_size, progress, scheduler) -> _Options:
    if not isinstance(layout, Layout):
        raise FamwiseInputError(f"`layout` must be a famwise Layout; got {type(layout).__name__}")
    if not isinstance(family, Family):
        raise FamwiseInputError(f"`family` must be a famwise Family; got {type(family).__name__}")
    if tuple(family.labels) != tuple(layout.labels):
        raise FamwiseInputError(
            f"the family's groups {list(family.labels)} are not the layout's "
            f"groups {list(layout.labels)}; build the family from layout.labels")
    n = layout.stats.n
    small = np.flatnonzero(n < 2)
    if small.size:
        g = int(small[0])
        raise FamwiseInputError(
            f"group {layout.labels[g]!r} has {int(n[g])} value(s); resampling "
            f"procedures need at least 2 per group")
    try:
        alpha = float(alpha)
    except (TypeError, ValueError):
        raise FamwiseInputError(f"`alpha` must be a number in (0, 1); got {alpha!r}") from None
    if not 0.0 < alpha < 1.0:
        raise FamwiseInputError(f"`alpha` must be in (0, 1); got {alpha!r}")
    max_resamples = _positive_int("max_resamples", max_resamples)
    auto = isinstance(resamples, str)
    if auto:
        if resamples != "auto":
            raise FamwiseInputError(
                f"`resamples` must be a positive integer or 'auto'; got {resamples!r}")
        resamples = min(AUTO_START, max_resamples)
    else:
        resamples = _positive_int("resamples", resamples)
    if n_jobs is not None and (isinstance(n_jobs, (bool, np.bool_))
                               or not isinstance(n_jobs, (int, np.integer)) or n_jobs == 0):
        raise FamwiseInputError(
            f"n_jobs (--jobs) must be a non-zero whole number (-1: all cores); got {n_jobs!r}")
    backend = _one_of("backend", backend, engine.BACKENDS)
    if scheduler is not None and backend != "dask":
        raise FamwiseInputError(
            f"`scheduler` is used only with backend='dask'; got backend={backend!r}")
    statistic = _one_of("statistic", statistic, statistics_allowed)
    alternative = _one_of("alternative", alternative, ALTERNATIVES)
    try:
        trim = float(trim)
    except (TypeError, ValueError):
        raise FamwiseInputError(f"`trim` must be a number in [0, 0.5); got {trim!r}") from None
    if not 0.0 <= trim < 0.5:
        raise FamwiseInputError(f"`trim` must be in [0, 0.5); got {trim!r}")
    if statistic == "yuen":
        h = n - 2 * np.floor(trim * n).astype(np.int64)
        if np.any(h < 2):
            g = int(np.flatnonzero(h < 2)[0])
            raise FamwiseInputError(
                f"trim={trim} leaves fewer than 2 values of group {layout.labels[g]!r}; "
                f"use a smaller trim")
    chunk_size = (engine.default_chunk_size(layout.n_total) if chunk_size is None
                  else _positive_int("chunk_size", chunk_size))
    if progress is not None and not isinstance(progress, (bool, np.bool_)):
        raise FamwiseInputError(f"`progress` must be None, True or False; got {progress!r}")
    return _Options(alpha, resamples, auto, max_resamples, engine.as_seed_sequence(seed),
                    n_jobs, backend, statistic, trim, alternative, chunk_size,
                    progress, scheduler)


# --- preparing the data for the kernels --------------------------------------

def _orientation(alternative):
    return (1.0 if alternative != "less" else -1.0), alternative == "two-sided"


# Above this many values (8 MiB of float64 per 2**20) the value-shuffling
# kernel is memory-bound and the label-shuffling one is faster.
LABEL_KERNEL_ABOVE = 1 << 17


def _permutation_problem(layout, family, obs, opts) -> engine.ResamplingProblem:
    st = layout.stats
    n = st.n.astype(np.int64)
    grand = float(np.sum(st.n * st.mean) / st.n.sum())
    fw = family_weights(family)
    sign, two_sided = _orientation(opts.alternative)
    order = np.argsort(-obs.u, kind="stable").astype(np.int64)
    tail = (fw.row_ptr, fw.col, fw.w, fw.w2, obs.se2_floor, sign, two_sided,
            obs.thr, order)
    if layout.n_total > LABEL_KERNEL_ABOVE:
        x = layout.values - grand
        x = np.ascontiguousarray(x - x.mean())
        dtype = np.int8 if layout.k <= 127 else (np.int16 if layout.k <= 32767 else np.int32)
        args = (x, layout.codes.astype(dtype), n, opts.statistic == "pooled") + tail
        return engine.ResamplingProblem("permutation_labels_chunk", args,
                                        layout.n_total, family.m)
    x = layout.values[np.argsort(layout.codes, kind="stable")] - grand
    x = x - x.mean()                      # centre by the grand mean, second pass
    largest = int(np.argmax(n))
    others = [g for g in range(layout.k) if g != largest]
    # Segments fill positions from the top: others[0] gets the highest ones.
    hi = np.empty(len(others), dtype=np.int64)
    lo = np.empty(len(others), dtype=np.int64)
    top = layout.n_total
    for s, g in enumerate(others):
        hi[s], lo[s] = top, top - n[g]
        top -= n[g]
    args = (np.ascontiguousarray(x), lo, hi, np.asarray(others, dtype=np.int64), n,
            largest, float(x.sum()), float(x @ x), opts.statistic == "pooled") + tail
    return engine.ResamplingProblem("permutation_chunk", args, layout.n_total, family.m)


def _bootstrap_problem(layout, family, obs, opts) -> engine.ResamplingProblem:
    groups = layout.split()
    n = np.array([g.size for g in groups], dtype=np.int64)
    start = np.concatenate([[0], np.cumsum(n)[:-1]]).astype(np.int64)
    fw = family_weights(family)
    sign, two_sided = _orientation(opts.alternative)
    order = np.argsort(-obs.u, kind="stable").astype(np.int64)
    tail = (fw.row_ptr, fw.col, fw.w, fw.w2, obs.se2_floor, sign, two_sided,
            obs.thr, order)
    if opts.statistic == "yuen":
        tmean, _, cut, _ = trimmed_terms(groups, opts.trim)
        parts = []
        for g, values in enumerate(groups):
            res = np.sort(values - tmean[g])
            c = cut[g]
            res = res - res[c:res.size - c].mean()   # trimmed mean exactly 0
            parts.append(res)
        r = np.concatenate(parts)
        args = (r, start, n, cut) + tail
        kernel = "bootstrap_trimmed_chunk"
    else:
        parts = []
        for values in groups:
            res = values - values.mean()
            parts.append(res - res.mean())           # null imposed: mean exactly 0
        r = np.concatenate(parts)
        if opts.statistic == "welch-hall":
            args = (r, start, n, ssq_floor(layout), HALL_A_MAX, fw.row_ptr, fw.col, fw.w,
                    fw.w2, fw.w3) + tail[4:]
            kernel = "bootstrap_hall_chunk"
        else:
            args = (r, start, n, opts.statistic == "pooled") + tail
            kernel = "bootstrap_chunk"
    return engine.ResamplingProblem(kernel, args, layout.n_total, family.m)


# Mean plots per group-by-block cell from which the kernel sums cells as runs
# (else it gathers each unit's positions after the shuffle).
RUNS_FROM = 4
def _model_problem(design, family, obs, opts) -> engine.ResamplingProblem:
    """Within-block permutation of the block (and covariate) model."""
    fw = family_weights(family)
    sign, two_sided = _orientation(opts.alternative)
    order = np.argsort(-obs.u, kind="stable").astype(np.int64)
    hptr, hcol, hval = variance_terms(design, family, opts.statistic)
    d = design
    welch = opts.statistic == "welch"
    # Units the kernel sums over: group-by-block cells when the per-group
    # residual sums need them (Welch, non-orthogonal, no covariates), else groups.
    cells = welch and not d.orthogonal and d.q == 0
    unit_of_cell = np.arange(d.cell_group.size) if cells else d.cell_group
    lab = np.repeat(unit_of_cell, (d.cell_hi - d.cell_lo)).astype(np.int64)
    if cells:
        units = (d.cell_group, d.cell_block, d.cell_n)
    else:
        units = (np.arange(d.k, dtype=np.int64), np.zeros(d.k, dtype=np.int64), d.n_g)
    blk_hi = d.cell_hi[d.blk_c1 - 1]
    blk_stop = d.blk_lo.copy() if d.q else d.cell_hi[d.blk_c0]
    sb = np.repeat(d.cell_block, (d.cell_hi - d.cell_lo))
    blk_s = np.bincount(sb, weights=d.r, minlength=d.n_blocks)
    blk_ss = np.bincount(sb, weights=d.r * d.r, minlength=d.n_blocks)
    runs = bool(d.r.size >= RUNS_FROM * d.cell_group.size)
    blk_cs = d.blk_c0 if d.q else d.blk_c0 + 1
    gather = np.argsort(lab, kind="stable").astype(np.int64)
    unit_ptr = np.zeros(units[0].size + 1, dtype=np.int64)
    np.cumsum(np.bincount(lab, minlength=units[0].size), out=unit_ptr[1:])
    args = (d.r, d.xc, lab, gather, unit_ptr, runs, d.blk_lo, np.ascontiguousarray(blk_stop),
            np.ascontiguousarray(blk_hi), np.ascontiguousarray(blk_cs), d.blk_c1, blk_s,
            blk_ss, d.cell_lo, d.cell_hi) + units + (
            cells, d.cell_group, d.cell_block, d.cell_n, d.n_g, d.n_b, d.orthogonal, d.chol, d.fmat, d.kinv, d.sstot,
            float(d.df_error), d.d_g, welch, fw.row_ptr, fw.col, fw.w, hptr, hcol, hval,
            obs.se2_floor, sign, two_sided, obs.thr, order)
    return engine.ResamplingProblem("model_kernels.permutation_model_chunk", args,
                                    d.r.size, family.m)


def _model_setup(layout, family, inputs, opts):
    """The design, observed statistics and kernel problem of a model run."""
    design = permutation_design(layout, inputs)
    if opts.statistic == "welch":
        short = np.flatnonzero(~(design.d_g > 0.5))
        if short.size:
            g = int(short[0])
            raise FamwiseInputError(
                f"group {layout.labels[g]!r} keeps {design.d_g[g]:.2f} residual degrees "
                f"of freedom under the model, too few to estimate its own variance; "
                f"use statistic='pooled'")
    obs = model_observed(design, family, opts.statistic, opts.alternative)
    info = {
        "blocks": inputs.n_blocks if inputs.block_labels != ("all",) else 0,
        "covariates": list(inputs.covariate_names),
        "df_error": int(design.df_error),
        "orthogonal": bool(design.orthogonal),
        "exchange": ("residuals of the model without groups, within blocks"
                     if inputs.q else "group labels within blocks"),
    }
    return obs, _model_problem(design, family, obs, opts), info


# --- p-values, intervals, Monte Carlo error -----------------------------------

def _centred(layout: Layout) -> Layout:
    """The same data less their median.

    Every statistic here is a contrast (weights summing to zero) or a
    spread, so the shift changes nothing but rounding: values near 1e12
    would otherwise give group means rounded to about 1e-4 before any
    difference is taken.  x - median is exact for values within a factor of
    two of the median (Sterbenz).
    """
    shift = float(np.median(layout.values))
    if shift == 0.0:
        return layout
    return Layout(values=layout.values - shift, codes=layout.codes, labels=layout.labels,
                  rows=layout.rows, response=layout.response, group=layout.group,
                  source=layout.source)


#: An interval of bootstrap-hall whose half-width exceeds this many times the
#: widest difference the data can show (range of all values, times half the
#: contrast's sum of |weights|) is withheld.  Every difference of two observed
#: values lies within one range; a half-width of twice that would claim the
#: means may differ by more than any two observations do, twice over, which
#: only the correction term, not the data, can produce.
WITHHOLD_FACTOR = 2.0


def _withhold_absurd(layout, family, est, lower, upper):
    """Replace intervals wider than WITHHOLD_FACTOR times the data's reach by NaN."""
    span = float(np.max(layout.values) - np.min(layout.values))
    reach = span * np.abs(np.asarray(family.weights, dtype=np.float64)).sum(axis=1) / 2.0
    with np.errstate(invalid="ignore"):
        wide = (np.isfinite(lower) & ((est - lower) > WITHHOLD_FACTOR * reach)) | (
            np.isfinite(upper) & ((upper - est) > WITHHOLD_FACTOR * reach))
    if not wide.any():
        return lower, upper, []
    lower, upper = lower.copy(), upper.copy()
    lower[wide] = np.nan
    upper[wide] = np.nan
    return lower, upper, [family.names[j] for j in np.flatnonzero(wide)]


def _run(procedure, method, stepdown, layout, family, *, alpha, resamples, seed,
         n_jobs, backend, statistic, trim, alternative, chunk_size, progress,
         scheduler, max_resamples, statistics_allowed, blocks=None, covariates=None,
         model=None, wild_weights=None) -> pd.DataFrame:
    modelled = (blocks is not None or covariates is not None or model is not None
                 or getattr(layout, "design", None) is not None)
    if modelled and method == "bootstrap":
        raise FamwiseInputError(
            f"{procedure} resamples within the groups of a one-way layout; with blocks "
            f"or covariates use wild-bootstrap-maxt (unequal variances) or "
            f"permutation-maxt")
    if statistic is None:
        statistic = "pooled" if modelled else "welch"
    opts = _validate(layout, family, alpha=alpha, resamples=resamples,
                     max_resamples=max_resamples, seed=seed, n_jobs=n_jobs,
                     backend=backend, statistic=statistic,
                     statistics_allowed=statistics_allowed, trim=trim,
                     alternative=alternative, chunk_size=chunk_size,
                     progress=progress, scheduler=scheduler)
    inputs = design_inputs(layout, blocks, covariates, model) if modelled else None
    model_info = None
    if method == "wild":
        from .hc import wild_setup
        obs, problem, model_info = wild_setup(layout, family, inputs, opts, wild_weights)
    elif inputs is not None:
        obs, problem, model_info = _model_setup(layout, family, inputs, opts)
    else:
        layout = _centred(layout)
        obs = observed_statistics(layout, family, opts.statistic, opts.alternative,
                                  opts.trim)
        build = _permutation_problem if method == "permutation" else _bootstrap_problem
        problem = build(layout, family, obs, opts)
    res = run_maxt(problem, obs.u, obs.thr, opts, stepdown=stepdown)
    run, b, seconds = res.run, res.resamples, res.seconds
    p_marginal, p_adjusted = res.p_marginal, res.p_adjusted
    mc_error, unsettled = res.mc_error, res.unsettled
    n_unsettled = int(unsettled.sum())
    # Simultaneous intervals from the (1 - alpha) quantile of the max statistic.
    crit = run.critical_value(opts.alpha)
    est, se = obs.estimate, obs.std_error
    if obs.skew is None:
        t_hi, t_lo = crit, -crit
    else:
        # Invert the monotone transformation: |T(theta)| <= c for
        # t = (est - theta) / se between hall_inverse(-c) and hall_inverse(c).
        t_hi, t_lo = hall_inverse(crit, obs.skew), hall_inverse(-crit, obs.skew)
    with np.errstate(invalid="ignore"):
        lower = est - t_hi * se if opts.alternative != "less" else np.full(family.m, -np.inf)
        upper = est - t_lo * se if opts.alternative != "greater" else np.full(family.m, np.inf)
    withheld = []
    if obs.skew is not None:
        lower, upper, withheld = _withhold_absurd(layout, family, est, lower, upper)
    table = comparisons_table(
        family, difference=est, std_error=se, df=np.inf, statistic=obs.statistic,
        p_unadjusted=p_marginal, p_adjusted=p_adjusted, ci_lower=lower,
        ci_upper=upper, alpha=opts.alpha, procedure=procedure, mc_error=mc_error,
        unsettled=unsettled)
    # comparisons_table stores numeric extras as float; keep this one boolean.
    table["unsettled"] = np.asarray(unsettled, dtype=bool)
    if withheld:
        table.attrs["intervals_withheld"] = {
            "comparisons": withheld,
            "reason": (f"the skewness-corrected interval reached more than "
                       f"{WITHHOLD_FACTOR:g} times the widest difference the data can show "
                       f"(the range of all values) from its estimate, so the correction, "
                       f"not the data, would set it; the decision (p_adjusted) stands")}
    table.attrs["resampling"] = {
        "method": method,
        "stepdown": bool(stepdown),
        "statistic": opts.statistic,
        "trim": opts.trim if opts.statistic == "yuen" else None,
        "pooled_skewness": obs.gamma,
        "alternative": opts.alternative,
        "resamples": int(b),
        "auto": bool(opts.auto),
        "max_resamples": int(opts.max_resamples) if opts.auto else None,
        "seed": run.seed,
        "spawn_key": list(run.spawn_key),
        "chunk_size": int(opts.chunk_size),
        "chunks": int(run.n_chunks),
        "backend": opts.backend,
        "n_jobs": opts.n_jobs,
        "kernel": problem.kernel,
        "critical_value": float(crit),
        "n_unsettled": n_unsettled,
        "mc_level": MC_LEVEL,
        "seconds": float(seconds),
    }
    if model_info is not None:
        table.attrs["resampling"]["model"] = model_info
    return table


_COMMON_PARAMETERS = """
    Parameters
    ----------
    layout : famwise.core.layout.Layout
        The data; every group needs at least 2 values.
    family : famwise.core.families.Family
        All pairs, vs a reference, or contrasts (any weights).
    alpha : float, default=0.05
        Familywise error rate; also sets the interval level 1 - alpha.
    resamples : int or "auto", default=9999
        B.  ``"auto"`` starts at 999 and doubles (B -> 2(B + 1) - 1) until
        no comparison is unsettled or ``max_resamples`` is reached; earlier
        chunks are reused, so the result equals a direct run at the final B.
    seed : None, int, numpy.random.SeedSequence or numpy.random.Generator
        Root of the chunk streams.  The same seed gives identical p-values
        and intervals for every ``n_jobs`` and backend.  With None, fresh
        entropy is drawn and recorded in ``attrs["resampling"]["seed"]``.
    n_jobs : int or None, default=1
        Parallel workers, with joblib's meaning (-1: all cores).
    backend : {"threads", "processes", "dask"}, default="threads"
        joblib backend: threads (the kernels release the GIL), loky
        processes, or joblib's dask backend on a ``dask.distributed``
        cluster (``scheduler``, or the current default Client).
    statistic : str, default="welch"
        {stat_doc}
    alternative : {"two-sided", "greater", "less"}, default="two-sided"
        Two-sided uses max |T|; "greater" (H1: estimate > 0) max T;
        "less" max -T.
    chunk_size : int or None, default=None
        Resamples per chunk.  None: about 2**24 element-resamples per chunk
        (16 to 1024), a function of the data size only.  Results depend on
        the seed and the chunk size, not on how chunks are scheduled.
    progress : bool or None, default=None
        None shows a progress bar on a terminal, outside CI (``$CI`` unset),
        when the run should take more than about two seconds.
    scheduler : dask.distributed.Client or str, optional
        Client or scheduler address for ``backend="dask"``.
    max_resamples : int, default=127999
        Cap of ``resamples="auto"``.{extra_param}

    Returns
    -------
    pandas.DataFrame
        The comparisons table, plus ``mc_error`` (Monte Carlo standard error
        of ``p_adjusted``, sqrt(p (1 - p) / B)) and ``unsettled`` (True when
        p ± 2.576 mc_error contains alpha).  ``df`` is inf: the reference
        distribution is the resampling one.  ``p_unadjusted`` is each
        comparison's own resampling p-value, (1 + #{u*_j >= u_j}) / (1 + B).
        ``std_error`` and ``statistic`` are those of ``statistic``.
        ``attrs["resampling"]`` holds B, seed, spawn_key, chunk_size,
        chunks, backend, n_jobs, kernel, critical_value (the (1 - alpha)
        quantile of the max statistic), n_unsettled and seconds.

    Raises
    ------
    famwise.core.errors.FamwiseInputError
        Bad options, a group with fewer than 2 values, or a comparison with
        zero standard error.

    Warns
    -----
    UnsettledWarning
        When comparisons remain unsettled.
"""

_REFERENCES = """
    References
    ----------
    .. [1] Westfall, P. H. and Young, S. S. (1993). *Resampling-Based Multiple
       Testing*. Wiley. (Algorithms 2.5 and 2.8, single-step and step-down;
       algorithm numbers from memory.)
    .. [2] Phipson, B. and Smyth, G. K. (2010). Permutation p-values should
       never be zero. *Stat. Appl. Genet. Mol. Biol.* 9(1):39.
       doi:10.2202/1544-6115.1585
    .. [3] Janssen, A. (1997). Studentized permutation tests for non-i.i.d.
       hypotheses and the generalized Behrens-Fisher problem. *Statist.
       Probab. Lett.* 36:9-21. doi:10.1016/S0167-7152(97)00043-6
    .. [4] Hall, P. and Wilson, S. R. (1991). Two guidelines for bootstrap
       hypothesis testing. *Biometrics* 47:757-762. doi:10.2307/2532163
    .. [5] Yuen, K. K. (1974). The two-sample trimmed t for unequal population
       variances. *Biometrika* 61:165-170. doi:10.1093/biomet/61.1.165
    .. [6] Hall, P. (1992). On the removal of skewness by transformation.
       *J. R. Statist. Soc. B* 54:221-228.
       doi:10.1111/j.2517-6161.1992.tb01876.x
    .. [7] Fisher, R. A. (1935). *The Design of Experiments*. Oliver and
       Boyd. (Randomisation within blocks as the basis of the test.)
    .. [8] Freedman, D. and Lane, D. (1983). A nonstochastic interpretation
       of reported significance levels. *J. Bus. Econ. Statist.* 1:292-298.
       doi:10.2307/1391660 (from memory)
"""

_PERM_STAT = ('"welch" or "pooled".  None (default): "welch" for one-way data '
              '(Welch-studentized, valid under unequal spread asymptotically '
              '[3]), "pooled" with blocks or covariates (the model\'s pooled t, '
              'its error mean square recomputed for every permutation).  With '
              'blocks or covariates "welch" studentizes each contrast by its '
              'exact variance under one error variance per group, each '
              'estimated from the group\'s residuals over its share of the '
              'residual df.')
_BLOCK_PARAMS = """
    blocks : array-like of labels, shape (N,), optional
        Block of each value, in the layout's order.  Labels are permuted
        within blocks, the randomisation a blocked trial used [7]_.
        Default: the layout's ``design`` (a second blocking factor, the
        columns of a Latin square, enters as indicator covariates).
    covariates : array-like, shape (N,) or (N, q), or DataFrame, optional
        Numeric covariates: the residuals of the model without groups
        (blocks and covariates) are permuted within blocks and the full
        model refitted each time (Freedman & Lane [8]_).
    model : famwise.model.ModelFit, optional
        A fitted model whose blocks and covariates to use."""
_BOOT_STAT = ('"welch" (default), "pooled", "yuen" (trimmed means with '
              'winsorized variances [5], trimming ``trim``), or "welch-hall" '
              '(Welch t with Hall\'s skewness-removing transformation [6], '
              'as in :func:`bootstrap_hall`).')
_TRIM = """
    trim : float, default=0.2
        Proportion trimmed from each end of each group with ``statistic="yuen"``."""


def _doc(summary, body, stat_doc, extra_param=""):
    params = _COMMON_PARAMETERS
    if stat_doc is None:            # the procedure fixes its statistic
        params = params.replace('    statistic : str, default="welch"\n        {stat_doc}\n', "")
    if stat_doc is _PERM_STAT:
        params = params.replace('statistic : str, default="welch"',
                                'statistic : str or None, default=None')
    params = params.replace("{stat_doc}", stat_doc or "").replace("{extra_param}", extra_param)
    return summary + "\n" + body + params + _REFERENCES


def permutation_maxt(layout, family, *, alpha=0.05, resamples=9999, seed=None,
                     n_jobs=1, backend="threads", statistic=None,
                     alternative="two-sided", chunk_size=None, progress=None,
                     scheduler=None, max_resamples=DEFAULT_MAX_RESAMPLES,
                     blocks=None, covariates=None, model=None):
    return _run("permutation-maxt", "permutation", False, layout, family,
                alpha=alpha, resamples=resamples, seed=seed, n_jobs=n_jobs,
                backend=backend, statistic=statistic, trim=0.2,
                alternative=alternative, chunk_size=chunk_size, progress=progress,
                scheduler=scheduler, max_resamples=max_resamples,
                statistics_allowed=("welch", "pooled"), blocks=blocks,
                covariates=covariates, model=model)


def permutation_stepdown(layout, family, *, alpha=0.05, resamples=9999, seed=None,
                         n_jobs=1, backend="threads", statistic=None,
                         alternative="two-sided", chunk_size=None, progress=None,
                         scheduler=None, max_resamples=DEFAULT_MAX_RESAMPLES,
                         blocks=None, covariates=None, model=None):
    return _run("permutation-stepdown", "permutation", True, layout, family,
                alpha=alpha, resamples=resamples, seed=seed, n_jobs=n_jobs,
                backend=backend, statistic=statistic, trim=0.2,
                alternative=alternative, chunk_size=chunk_size, progress=progress,
                scheduler=scheduler, max_resamples=max_resamples,
                statistics_allowed=("welch", "pooled"), blocks=blocks,
                covariates=covariates, model=model)


def bootstrap_maxt(layout, family, *, alpha=0.05, resamples=9999, seed=None,
                   n_jobs=1, backend="threads", statistic="welch", trim=0.2,
                   alternative="two-sided", chunk_size=None, progress=None,
                   scheduler=None, max_resamples=DEFAULT_MAX_RESAMPLES):
    return _run("bootstrap-maxt", "bootstrap", False, layout, family,
                alpha=alpha, resamples=resamples, seed=seed, n_jobs=n_jobs,
                backend=backend, statistic=statistic, trim=trim,
                alternative=alternative, chunk_size=chunk_size, progress=progress,
                scheduler=scheduler, max_resamples=max_resamples,
                statistics_allowed=("welch", "pooled", "yuen", "welch-hall"))


def bootstrap_stepdown(layout, family, *, alpha=0.05, resamples=9999, seed=None,
                       n_jobs=1, backend="threads", statistic="welch", trim=0.2,
                       alternative="two-sided", chunk_size=None, progress=None,
                       scheduler=None, max_resamples=DEFAULT_MAX_RESAMPLES):
    return _run("bootstrap-stepdown", "bootstrap", True, layout, family,
                alpha=alpha, resamples=resamples, seed=seed, n_jobs=n_jobs,
                backend=backend, statistic=statistic, trim=trim,
                alternative=alternative, chunk_size=chunk_size, progress=progress,
                scheduler=scheduler, max_resamples=max_resamples,
                statistics_allowed=("welch", "pooled", "yuen", "welch-hall"))


def bootstrap_hall(layout, family, *, alpha=0.05, resamples=9999, seed=None,
                   n_jobs=1, backend="threads", alternative="two-sided",
                   chunk_size=None, progress=None, scheduler=None,
                   max_resamples=DEFAULT_MAX_RESAMPLES):
    return _run("bootstrap-hall", "bootstrap", False, layout, family,
                alpha=alpha, resamples=resamples, seed=seed, n_jobs=n_jobs,
                backend=backend, statistic="welch-hall", trim=0.2,
                alternative=alternative, chunk_size=chunk_size, progress=progress,
                scheduler=scheduler, max_resamples=max_resamples,
                statistics_allowed=("welch-hall",))


permutation_maxt.__doc__ = _doc(
    "Adjust a family by the single-step permutation max-T (Westfall & Young).",
    """
    Under the complete null the group labels are exchangeable; each of B
    random permutations of the labels gives the family's statistics T*_j and
    their max M* = max_j u*_j (u = |T| two-sided).  The adjusted p-value of
    comparison j is (1 + #{M* >= u_j}) / (1 + B) [1]_, [2]_.  Intervals:
    difference ± c · std_error with c the (1 - alpha) quantile of M* (the
    same max-statistic quantile the bootstrap-t uses), simultaneous at level
    1 - alpha; they exclude 0 exactly when ``reject`` is True.

    Notes
    -----
    1. Exact (level alpha for any B) when the groups' distributions are
       identical under the null; with unequal spreads only asymptotically,
       through the Welch studentization [3]_.  With groups of four to ten
       carrying large spreads it is liberal (about 0.09 at alpha = 0.05 in
       famwise's own simulation): prefer the bootstrap there.
    2. Data are centred by the grand mean; each permutation is a partial
       Fisher-Yates shuffle of N - n_largest values.
    3. With blocks (and no covariates) the test is exact under the
       randomisation within blocks; the estimates are the block model's
       least-squares contrasts.  In a complete block design they are
       contrasts of group means (blocks cancel); with missing plots the
       reduced normal equations are solved in every permutation
       (:mod:`famwise.resample.design`).  With covariates it is
       approximate (exact as N grows).  ``attrs["resampling"]["model"]``
       records the blocks, covariates, residual df and what was exchanged.
""", _PERM_STAT, _BLOCK_PARAMS)

permutation_stepdown.__doc__ = _doc(
    "Adjust a family by the step-down permutation max-T (Westfall & Young).",
    """
    As :func:`permutation_maxt`, but comparison ranked r by observed u is
    referred to the max over the comparisons ranked r and below only (the
    successive maxima of Westfall & Young 1993, Algorithm 2.8 [1]_), and the
    p-values are made monotone in rank.  Step-down p <= single-step p; it
    rejects at least what the single-step rejects.  The interval columns hold
    the *single-step* simultaneous intervals (step-down has no intervals of
    its own).

    Notes
    -----
    1. Controls the familywise error rate strongly under subset pivotality;
       the exchangeability caveats of :func:`permutation_maxt` apply.
    2. Blocks and covariates as in :func:`permutation_maxt`.
""", _PERM_STAT, _BLOCK_PARAMS)

bootstrap_maxt.__doc__ = _doc(
    "Adjust a family by the bootstrap-t max statistic with the null imposed.",
    """
    Each group's values are centred at the group's own mean (or trimmed
    mean) so that the null holds, then resampled with replacement within
    the group [4]_; each resample gives studentized statistics T*_j (each
    with its resampled standard error) and their max M*.  The adjusted
    p-value is (1 + #{M* >= u_j}) / (1 + B) [2]_; the bootstrap-t
    simultaneous intervals are difference ± c · std_error with c the
    (1 - alpha) quantile of M*.

    Notes
    -----
    1. Does not assume equal spreads or shapes; it is conservative with very
       small groups (resampling four values is coarse).
    2. A resample with a zero-spread group gets a floored standard error,
       hence a very large but finite statistic; no NaN arises.
""", _BOOT_STAT, _TRIM)

bootstrap_stepdown.__doc__ = _doc(
    "Adjust a family by the step-down bootstrap-t max statistic.",
    """
    As :func:`bootstrap_maxt` with the step-down successive maxima of
    Westfall & Young (1993, Algorithm 2.8) [1]_, p-values monotone in rank.
    The interval columns hold the single-step bootstrap-t simultaneous
    intervals.
""", _BOOT_STAT, _TRIM)

bootstrap_hall.__doc__ = _doc(
    "Adjust a family by the bootstrap max-t of skewness-corrected Welch statistics.",
    """
    The bootstrap of :func:`bootstrap_maxt` (within-group resampling of
    centred data [4]_) applied to Hall's transformation of each Welch t [6]_:
    T = t + a t^2/3 + a^2 t^3/27 + a/6, where a is the estimated skewness of
    the comparison's estimate, built from one standardised skewness pooled
    over all groups (:mod:`famwise.resample.statistics`).  Every resample
    re-estimates the pooled skewness, so the statistic is bootstrapped
    whole.  The transformation is monotone; the simultaneous intervals are
    its inverse at the (1 - alpha) quantile c of max |T*|, so they are not
    symmetric about the difference, and they exclude 0 exactly when
    ``reject`` is True.

    Notes
    -----
    1. For means of skewed data with small groups.  Mean-centred t
       statistics of a skewed small group are skewed themselves (a sample
       that misses the long tail has a low mean and a small SD); a
       bootstrap of four values cannot see that tail, but the larger
       groups' residuals can, and the pooled skewness carries it to the
       small group.  In famwise's error-rate matrix (n = 4 to 30, large
       SDs in the small groups, lognormal errors of skewness 6.2) the plain
       bootstrap max-t errs in about 0.065 of data sets at alpha = 0.05,
       this one in about 0.04.
    2. Pooling assumes one shape, up to location and scale, for all groups.
    3. With symmetric data a is near 0 and the result is close to
       :func:`bootstrap_maxt`; evidence from the short-tail side of a
       skewed small group counts for less, from the long-tail side for more.
    4. |a| is bounded by 1 (``statistics.HALL_A_MAX``).
""", None)

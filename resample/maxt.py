"""The max-T loop shared by every permutation and bootstrap procedure.

:func:`run_maxt` runs an engine problem (:mod:`famwise.resample.engine`) for
B resamples, grows B with ``resamples="auto"`` until no comparison is
unsettled (or the cap), and returns the p-values and Monte Carlo errors:
marginal p (1 + #{u*_j >= u_j}) / (1 + B), single-step max-T p
(1 + #{max u* >= u_j}) / (1 + B) (Phipson & Smyth 2010) or the step-down p
of Westfall & Young (1993, Algorithm 2.8).  :func:`resampling_attrs` is the
record every procedure stores in ``table.attrs["resampling"]``.
"""

from __future__ import annotations

import warnings
from dataclasses import dataclass, field

import numpy as np

from ..core.errors import FamwiseWarning
from . import engine

__all__ = ["MaxTRun", "run_maxt", "resampling_attrs", "UnsettledWarning", "MC_LEVEL"]

MC_LEVEL = 0.99                  # level of the interval for p that decides "unsettled"
_Z_MC = 2.5758293035489004       # scipy.stats.norm.ppf(0.995)


class UnsettledWarning(FamwiseWarning, RuntimeWarning):
    """Some comparisons' 99% Monte Carlo interval for p still contains alpha."""


@dataclass(frozen=True)
class MaxTRun:
    """What :func:`run_maxt` returns."""

    run: engine.ResamplingRun = field(repr=False)
    resamples: int
    p_marginal: np.ndarray
    p_adjusted: np.ndarray
    mc_error: np.ndarray
    unsettled: np.ndarray
    seconds: float

    def critical_value(self, alpha: float) -> float:
        return self.run.critical_value(alpha)


def _adjust(run, u, thr, stepdown):
    b = run.resamples
    p_marginal = (1.0 + run.hits_marginal) / (1.0 + b)
    p_single = (1.0 + run.hits_single(thr)) / (1.0 + b)
    if not stepdown:
        return p_marginal, p_single
    order = np.argsort(-u, kind="stable")
    # Westfall & Young (1993), Algorithm 2.8: by rank, then made monotone.
    p_rank = np.maximum.accumulate((1.0 + run.hits_stepdown) / (1.0 + b))
    p_step = np.empty_like(p_rank)
    p_step[order] = p_rank
    return p_marginal, p_step


def _mc(p, b, alpha):
    mc_error = np.sqrt(p * (1.0 - p) / b)
    unsettled = np.abs(p - alpha) < _Z_MC * mc_error
    return mc_error, unsettled


def run_maxt(problem: engine.ResamplingProblem, u, thr, opts, *, stepdown: bool = False,
             stacklevel: int = 4) -> MaxTRun:
    """Run ``problem`` with the options ``opts`` (resample.procedures._Options).

    ``u`` are the observed oriented statistics and ``thr`` the thresholds a
    resampled statistic must reach to count as a hit.  Warns
    :class:`UnsettledWarning` when comparisons remain unsettled.
    """
    u = np.asarray(u, dtype=np.float64)
    thr = np.asarray(thr, dtype=np.float64)
    b, run, seconds = opts.resamples, None, 0.0
    while True:
        run = engine.run_resamples(problem, resamples=b, seed=opts.seed,
                                   chunk_size=opts.chunk_size, n_jobs=opts.n_jobs,
                                   backend=opts.backend, scheduler=opts.scheduler,
                                   progress=opts.progress, stepdown=stepdown,
                                   previous=run)
        seconds += run.seconds
        p_marginal, p_adjusted = _adjust(run, u, thr, stepdown)
        mc_error, unsettled = _mc(p_adjusted, b, opts.alpha)
        if not opts.auto or not unsettled.any() or b >= opts.max_resamples:
            break
        b = min(2 * (b + 1) - 1, opts.max_resamples)
    n_unsettled = int(unsettled.sum())
    if n_unsettled:
        how = ("raise max_resamples" if opts.auto
               else "use more resamples or resamples='auto'")
        warnings.warn(
            f"{n_unsettled} of {u.size} comparisons are unsettled at B={b}: "
            f"their {MC_LEVEL:.0%} Monte Carlo interval for p contains "
            f"alpha={opts.alpha:g}; {how}", UnsettledWarning, stacklevel=stacklevel)
    return MaxTRun(run, int(b), p_marginal, p_adjusted, mc_error, unsettled, seconds)


def resampling_attrs(result: MaxTRun, opts, problem, *, method: str, stepdown: bool,
                     statistic: str, alpha: float, **extra) -> dict:
    """The ``table.attrs["resampling"]`` record of a max-T run."""
    run = result.run
    record = {
        "method": method,
        "stepdown": bool(stepdown),
        "statistic": statistic,
        "alternative": opts.alternative,
        "resamples": int(result.resamples),
        "auto": bool(opts.auto),
        "max_resamples": int(opts.max_resamples) if opts.auto else None,
        "seed": run.seed,
        "spawn_key": list(run.spawn_key),
        "chunk_size": int(opts.chunk_size),
        "chunks": int(run.n_chunks),
        "backend": opts.backend,
        "n_jobs": opts.n_jobs,
        "kernel": problem.kernel,
        "critical_value": float(run.critical_value(alpha)),
        "n_unsettled": int(result.unsettled.sum()),
        "mc_level": MC_LEVEL,
        "seconds": float(result.seconds),
    }
    record.update(extra)
    return record

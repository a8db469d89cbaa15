"""Data with non-detects on stacked replicates: the scenario and the procedures.

The scenario (:class:`CensoredScenario`): in each group g a latent value
exp(mu_g + sigma_g e), e standard normal (a lognormal, with mu_g and
sigma_g given by the caller), and a detection
limit for each observation drawn from the group's limits with their
frequencies; a latent value below its limit is reported as a non-detect
"<L" (the layout's convention: the value holds the limit, ``censored`` is
True).  The limits belong to the laboratory, not to the group's level: an
alternative that raises a group's level leaves them where they are, so that
group has fewer non-detects.

The procedures, for every row at once:

* ``gehan-maxt`` and ``peto-maxt``: each pair's own generalised Wilcoxon
  statistic of its combined sample, with the scores of
  :mod:`famwise.resample.censored_kernels` (the levels are the distinct
  values in descending order, a non-detect ranking below a measured value
  at its own limit; Gehan's weight w_t = r_t, Peto-Prentice's the
  product-limit form prod (1 - d_s / (r_s + 1)); score w_t - A_t for a
  measured value, -A_t for a non-detect), standardised by the permutation
  variance n_a n_b / (n (n - 1)) sum of squared scores (Mantel 1967); the
  family's max-T by the warp-speed method (Giacomini, Politis & White 2013):
  one permutation of all N labels per replicate, the row rejecting when its
  max |T| exceeds the (1 - alpha) quantile of the pooled permuted maxima.
  Under the complete null with one set of limits for every group the
  labels are exchangeable, so a replicate's permuted statistics have the
  same distribution as its observed ones and the pooled quantile is that
  of the permutation distribution itself;
* ``half-limit-games-howell``: the common practice this route avoids (no
  source; Helsel 2012, *Statistics for Censored Environmental Data*, 2nd
  ed., argues against it, from memory): every non-detect replaced by half
  its limit, then Games-Howell on the original scale (Welch-Dunnett
  against a reference, Dunnett's T3 for contrasts).  A comparator for
  planning, not a procedure of the catalogue.

``tests/test_stacked_ranks.py`` checks the statistics against
:mod:`famwise.resample.censored`'s row by row and the warp-speed decisions
of ``gehan-maxt`` and ``peto-maxt`` against the full nested computation.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from .stacked import Blocks
from .stacked_procedures import Stack

__all__ = ["CENSORED_SIMULATED", "SUBSTITUTION", "CensoredStack", "CensoredScenario",
           "pair_scores_t", "censored_kind", "censored_part"]

SUBSTITUTION = "half-limit-games-howell"
CENSORED_SIMULATED = ("gehan-maxt", "peto-maxt", SUBSTITUTION)
_WEIGHT = {"gehan-maxt": "gehan", "peto-maxt": "peto"}


class CensoredStack(Stack):
    """A stack whose values may be non-detects: ``censored`` (R, N) marks them
    (their value is the limit), ``limit_index`` (R, N) the limit drawn for
    every observation (an index into the scenario's limits)."""

    def __init__(self, x, blocks, censored, limit_index):
        super().__init__(x, blocks)
        self.censored = np.ascontiguousarray(censored, dtype=bool)
        self.limit_index = np.ascontiguousarray(limit_index, dtype=np.int64)


@dataclass(frozen=True)
class CensoredScenario:
    """Lognormal groups censored at fixed detection limits (module notes).

    ``n``: group sizes; ``log_mean``, ``log_sd``: mu_g and sigma_g on the log
    scale; ``limits``: the detection limits (J,); ``limit_share``: (k, J),
    each group's share of observations analysed at each limit (rows sum to 1).
    """

    n: tuple
    log_mean: tuple
    log_sd: tuple
    limits: tuple
    limit_share: tuple = field(repr=False)

    @property
    def blocks(self) -> Blocks:
        return Blocks.of(self.n)

    @property
    def mean(self) -> tuple:
        """The groups' means on the original scale, exp(mu + sigma^2 / 2)."""
        mu, s = np.asarray(self.log_mean), np.asarray(self.log_sd)
        return tuple(np.exp(mu + s * s / 2.0))

    @property
    def sd(self) -> tuple:
        """The groups' SDs on the original scale (what the route reads of a design)."""
        mu, s = np.asarray(self.log_mean), np.asarray(self.log_sd)
        return tuple(np.sqrt(np.expm1(s * s) * np.exp(2.0 * mu + s * s)))

    def draw(self, replicates: int, rng) -> CensoredStack:
        blocks = self.blocks
        size = (int(replicates), blocks.total)
        e = rng.standard_normal(size)
        mu = np.asarray(self.log_mean, dtype=float)[blocks.codes]
        s = np.asarray(self.log_sd, dtype=float)[blocks.codes]
        latent = np.exp(mu + s * e)
        limits = np.asarray(self.limits, dtype=float)
        if limits.size == 1:
            idx = np.zeros(size, dtype=np.int64)
        else:
            cum = np.cumsum(np.asarray(self.limit_share, dtype=float), axis=1)[blocks.codes]
            cum[:, -1] = 1.0
            u = rng.random(size)
            idx = (u[:, :, None] >= cum[None, :, :-1]).sum(axis=2)
        lim = limits[idx]
        cens = latent < lim
        return CensoredStack(np.where(cens, lim, latent), blocks, cens, idx)


def _flags(stack) -> np.ndarray:
    cens = getattr(stack, "censored", None)
    return np.zeros(stack.x.shape, dtype=bool) if cens is None else cens


def pair_scores_t(v: np.ndarray, cens: np.ndarray, na: int, weight: str) -> np.ndarray:
    """The standardised two-sample score statistic of every row (R,), positive
    when the first ``na`` columns tend to the larger values.

    The formulas of :mod:`famwise.resample.censored_kernels`, vectorised over
    rows: the combined sample in descending order of value (measured before
    non-detects at one value), levels the distinct values, at risk r_t =
    values at or below level t, d_t its measured values.
    """
    r, n = v.shape
    order = np.lexsort((cens, -v), axis=1)
    sv = np.take_along_axis(v, order, axis=1)
    ev = ~np.take_along_axis(cens, order, axis=1)
    pos = np.broadcast_to(np.arange(n), (r, n))
    start = np.ones((r, n), dtype=bool)
    start[:, 1:] = sv[:, 1:] != sv[:, :-1]
    end = np.ones((r, n), dtype=bool)
    end[:, :-1] = start[:, 1:]
    first = np.maximum.accumulate(np.where(start, pos, 0), axis=1)
    last = np.minimum.accumulate(np.where(end, pos, n)[:, ::-1], axis=1)[:, ::-1]
    cum_e = np.cumsum(ev, axis=1)
    at_risk = (n - first).astype(np.float64)
    before = np.where(first > 0, np.take_along_axis(cum_e, np.maximum(first - 1, 0), axis=1), 0)
    d = (np.take_along_axis(cum_e, last, axis=1) - before).astype(np.float64)
    if weight == "gehan":
        w = at_risk
        acc = np.take_along_axis(cum_e, last, axis=1).astype(np.float64)   # sum of d_s
        floor = 1e-24 * float(n) ** 3
    else:
        # Prentice's (1978) product-limit form, through t itself: one factor per level
        factor = np.where(start, np.log1p(-d / (at_risk + 1.0)), 0.0)
        w = np.exp(np.cumsum(factor, axis=1))
        acc = np.cumsum(np.where(start, w * d / at_risk, 0.0), axis=1)
        floor = 1e-24 * float(n)
    score = np.where(ev, w - acc, -acc)
    in_a = order < na
    u = np.sum(np.where(in_a, score, 0.0), axis=1)
    var = na * (n - na) / (n * (n - 1.0)) * np.sum(score * score, axis=1)
    with np.errstate(invalid="ignore", divide="ignore"):
        t = u / np.sqrt(var)
    return np.where(var > floor, t, 0.0)


def _scores_t(name, family, x, cens, blocks) -> np.ndarray:
    weight = _WEIGHT[name]
    sl = blocks.slices()
    out = []
    for a, b in family.pairs:
        v = np.concatenate([x[:, sl[a]], x[:, sl[b]]], axis=1)
        c = np.concatenate([cens[:, sl[a]], cens[:, sl[b]]], axis=1)
        out.append(pair_scores_t(v, c, int(blocks.n[a]), weight))
    return np.column_stack(out)


def censored_kind(name: str) -> str:
    return "closed" if name == SUBSTITUTION else "warp"


def censored_part(name: str, kind: str, family, stack, rng, alpha: float):
    """A chunk's part (see :mod:`famwise.diagnostics.stacked_scores`)."""
    cens = _flags(stack)
    if name == SUBSTITUTION:
        from .stacked_procedures import closed_form_rejects
        half = Stack(np.where(cens, 0.5 * stack.x, stack.x), stack.blocks)
        method = {"all-pairs": "games-howell", "vs-reference": "welch-dunnett"}.get(
            family.kind, "dunnett-t3")
        return closed_form_rejects(method, family, half, alpha)
    observed = _scores_t(name, family, stack.x, cens, stack.blocks)
    perm = np.argsort(rng.random(stack.x.shape), axis=1)
    xs = np.take_along_axis(stack.x, perm, axis=1)
    cs = np.take_along_axis(cens, perm, axis=1)
    return np.abs(observed), np.abs(_scores_t(name, family, xs, cs, stack.blocks))

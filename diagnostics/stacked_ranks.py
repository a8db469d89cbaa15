"""The rank procedures on stacked replicates: which comparisons each one rejects.

The replicates of one design are the rows of ``stack.x`` (R, N), groups in
contiguous blocks (:class:`famwise.diagnostics.stacked_procedures.Stack`).
The rank procedures of :mod:`famwise.procedures.ranks` and
:mod:`famwise.procedures.brunner_munzel` are computed for every row at once:

* ranks of every row by one sort along the row (mid-ranks for ties), and
  each row's tie correction sum (t^3 - t) from the same sort;
* Dunn (1964): the joint ranks, z = (Rbar_a - Rbar_b) / sqrt(s^2 (1/n_a +
  1/n_b)), s^2 = N (N + 1)/12 - sum (t^3 - t) / (12 (N - 1)), normal
  p-values, Holm or Bonferroni along the comparisons axis;
* Steel-Dwass-Critchlow-Fligner and Steel (1959): each pair ranked on its
  own, the Wilcoxon-Mann-Whitney z with the tie-corrected variance (no
  continuity correction); the asymptotic forms refer sqrt(2) max |z| to the
  studentized range at df = inf (one critical value for every row), and
  each |z_j| against the reference to Dunnett's distribution at df = inf
  with lambda_j = sqrt(n_j / (n_j + n_0 + 1));
* Brunner & Munzel (2000): each pair's placements from the pair's joint
  ranks less the within-group ranks, W = (sum P_a - n_a n_b / 2) /
  sqrt(D), D = n_b S_b^2 + n_a S_a^2 floored at 1/4 as the one-data-set
  procedure does.

Permutation versions (``method="permutation"``: the rank procedures with
groups under ``policy.rank_permutation_below``, and ``brunner-munzel-maxt``
always) use the warp-speed method of Giacomini, Politis & White (2013,
*Econometric Theory* 29:567-589), as the other resampling procedures do
(:mod:`famwise.diagnostics.stacked_procedures`): each replicate contributes
one permutation of all its N labels, its statistics are recomputed on the
permuted row (re-ranked and, for Brunner-Munzel, re-studentised), and a row
rejects when its observed statistic exceeds the (1 - alpha) quantile of the
pooled permuted maxima.  Dunn's permutation form adjusts each pair's own
permutation p-value (the pooled permuted |z| of that pair) by Holm or
Bonferroni, as :func:`famwise.procedures.ranks.dunn_holm` does.  Rank
statistics of untied data have one permutation distribution whatever the
values, so pooling the replicates' permutations is then simply a Monte
Carlo sample of it.

``tests/test_stacked_ranks.py`` checks every closed form against the
one-data-set procedures row by row, and the warp-speed decisions against
the full nested computation on a small case.
"""

from __future__ import annotations

from functools import lru_cache

import numpy as np
from scipy import special

from ..core.families import Family
from ..procedures import adjust

__all__ = ["RANK_PROCEDURES", "rank_method", "row_ranks", "dunn_z", "pair_wilcoxon_z",
           "brunner_munzel_w", "rank_pvalues", "rank_rejects", "rank_warp_statistics",
           "rank_warp_rejects"]

RANK_PROCEDURES = ("dunn-holm", "dunn-bonferroni", "steel-dwass", "steel",
                   "brunner-munzel-maxt")
_SQRT2 = np.sqrt(2.0)
# Variance floor of a pair's Wilcoxon statistic in U units (all values tied: z = 0),
# the one-data-set floor 1e-12 on the scale of 2U (famwise.resample.scores).
_U_FLOOR = 0.25e-12


def rank_method(name: str, n, policy, options: dict | None = None) -> str:
    """The reference distribution a rank procedure uses at group sizes ``n``:
    the user's ``options["method"]``, else ``policy.rank_method(n)`` (what
    :func:`famwise.compare` applies), and always the permutation for
    Brunner-Munzel."""
    if name == "brunner-munzel-maxt":
        return "permutation"
    method = (options or {}).get("method")
    return method if method else policy.rank_method(n)


def row_ranks(x: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Mid-ranks 1..N of every row of ``x`` (R, N) and each row's sum of
    (t^3 - t) over its groups of tied values, from one sort per row."""
    x = np.asarray(x, dtype=np.float64)
    r, n = x.shape
    order = np.argsort(x, axis=1, kind="stable")
    s = np.take_along_axis(x, order, axis=1)
    pos = np.broadcast_to(np.arange(n), (r, n))
    start = np.ones((r, n), dtype=bool)
    start[:, 1:] = s[:, 1:] != s[:, :-1]
    end = np.ones((r, n), dtype=bool)
    end[:, :-1] = start[:, 1:]
    first = np.maximum.accumulate(np.where(start, pos, 0), axis=1)
    last = np.minimum.accumulate(np.where(end, pos, n)[:, ::-1], axis=1)[:, ::-1]
    t = (last - first + 1).astype(np.float64)
    ranks = np.empty((r, n))
    np.put_along_axis(ranks, order, (first + last) / 2.0 + 1.0, axis=1)
    # each element of a tie of size t contributes t^2 - 1: the group sums t^3 - t
    return ranks, np.sum(t * t - 1.0, axis=1)


def _blocks(stack):
    return [stack.x[:, s] for s in stack.blocks.slices()]


def dunn_z(family: Family, stack) -> np.ndarray:
    """Dunn's (1964) z of every row and pair, on the joint ranks (R, m)."""
    ranks, ties = row_ranks(stack.x)
    n = stack.n.astype(np.float64)
    big_n = float(n.sum())
    rbar = np.add.reduceat(ranks, stack.bounds[:-1], axis=1) / n
    s2 = big_n * (big_n + 1.0) / 12.0 - ties / (12.0 * (big_n - 1.0))
    a, b = family.pairs[:, 0], family.pairs[:, 1]
    return (rbar[:, a] - rbar[:, b]) / np.sqrt(s2[:, None] * (1.0 / n[a] + 1.0 / n[b]))


def _pair_z(xa: np.ndarray, xb: np.ndarray) -> np.ndarray:
    """The pair's own Wilcoxon-Mann-Whitney z (tie-corrected, no continuity
    correction) of every row, positive when ``xa`` tends larger."""
    na, nb = xa.shape[1], xb.shape[1]
    n = na + nb
    ranks, ties = row_ranks(np.concatenate([xa, xb], axis=1))
    u = ranks[:, :na].sum(axis=1) - na * (na + 1) / 2.0
    var = na * nb / 12.0 * ((n + 1.0) - ties / (n * (n - 1.0)))
    with np.errstate(invalid="ignore", divide="ignore"):
        z = (u - na * nb / 2.0) / np.sqrt(var)
    return np.where(var > _U_FLOOR, z, 0.0)


def pair_wilcoxon_z(family: Family, stack) -> np.ndarray:
    """Each pair's own Wilcoxon z (Steel-Dwass, Steel) of every row, (R, m)."""
    g = _blocks(stack)
    return np.column_stack([_pair_z(g[a], g[b]) for a, b in family.pairs])


def brunner_munzel_w(family: Family, stack) -> np.ndarray:
    """Each pair's Brunner-Munzel statistic of every row, (R, m), positive when
    group_a tends larger (:func:`famwise.procedures.brunner_munzel.brunner_munzel_pairs`)."""
    g = _blocks(stack)
    own = [row_ranks(block)[0] for block in g]
    out = []
    for a, b in family.pairs:
        na, nb = g[a].shape[1], g[b].shape[1]
        joint, _ = row_ranks(np.concatenate([g[a], g[b]], axis=1))
        pa = joint[:, :na] - own[a]          # placements of a's values among b's
        pb = joint[:, na:] - own[b]
        d = nb * pb.var(axis=1, ddof=1) + na * pa.var(axis=1, ddof=1)
        d = np.maximum(d, 0.25)              # the zero-variance rule of the procedure
        out.append((pa.sum(axis=1) - na * nb / 2.0) / np.sqrt(d))
    return np.column_stack(out)


def _statistic(name, family, stack):
    if name.startswith("dunn"):
        return dunn_z(family, stack)
    if name == "brunner-munzel-maxt":
        return brunner_munzel_w(family, stack)
    return pair_wilcoxon_z(family, stack)


def _steel_lambda(family, n):
    n = n.astype(np.float64)
    others = n[family.pairs[:, 0]]
    return np.sqrt(others / (others + n[family.reference] + 1.0))


def _norm_p(z):
    return np.minimum(1.0, special.erfc(np.abs(z) / _SQRT2))


def rank_pvalues(name: str, family: Family, stack) -> np.ndarray:
    """Adjusted p-values (R, m) of an asymptotic rank procedure, as the
    one-data-set procedure computes them (used to check decisions row by row)."""
    z = _statistic(name, family, stack)
    p = _norm_p(z)
    if name == "dunn-holm":
        return adjust.holm(p, axis=1)
    if name == "dunn-bonferroni":
        return adjust.bonferroni(p, axis=1)
    if name == "steel-dwass":
        from ..distributions import srange_sf
        return np.maximum(p, srange_sf(_SQRT2 * np.abs(z), stack.k, np.inf))
    if name == "steel":
        from ..distributions import dunnett_sf
        lam = _steel_lambda(family, stack.n)
        return np.maximum(p, dunnett_sf(np.abs(z), lam, np.inf))
    raise KeyError(name)


@lru_cache(maxsize=128)
def _range_inf(alpha: float, k: int) -> float:
    from ..distributions import srange_ppf
    return float(srange_ppf(1.0 - alpha, k, np.inf)) / _SQRT2


@lru_cache(maxsize=128)
def _dunnett_inf(alpha: float, lam: tuple) -> float:
    from ..distributions import dunnett_ppf
    return float(dunnett_ppf(1.0 - alpha, np.array(lam), np.inf))


def rank_rejects(name: str, family: Family, stack, alpha: float) -> np.ndarray:
    """Which comparisons an asymptotic rank procedure rejects in each row, (R, m).

    Steel-Dwass and Steel compare |z| with one critical value (the
    studentized range or Dunnett's quantile at df = inf), which is the same
    decision as their adjusted p-value at alpha (the tail is monotone).
    """
    if name.startswith("dunn"):
        return rank_pvalues(name, family, stack) <= alpha
    z = np.abs(_statistic(name, family, stack))
    if name == "steel-dwass":
        return z >= _range_inf(float(alpha), stack.k)
    if name == "steel":
        lam = tuple(np.round(_steel_lambda(family, stack.n), 15))
        return z >= _dunnett_inf(float(alpha), lam)
    raise KeyError(name)


def rank_warp_statistics(name: str, family: Family, stack, rng) -> tuple[np.ndarray, np.ndarray]:
    """``(|T|, |T*|)``, each (R, m): the observed rank statistics of every row
    and those of one permutation of the row's N labels (re-ranked, and
    re-studentised for Brunner-Munzel)."""
    from .stacked_procedures import Stack
    observed = _statistic(name, family, stack)
    permuted = Stack(rng.permuted(stack.x, axis=1), stack.blocks)
    return np.abs(observed), np.abs(_statistic(name, family, permuted))


def rank_warp_rejects(name: str, t_obs: np.ndarray, t_star: np.ndarray,
                      alpha: float) -> np.ndarray:
    """Warp-speed decisions (R, m) of a permutation rank procedure.

    Steel-Dwass, Steel, Brunner-Munzel: single-step max-T against the pooled
    permuted maxima.  Dunn: each pair's permutation p-value from the pooled
    permuted |z| of that pair, (1 + #{|z*| >= |z|}) / (1 + R), then Holm or
    Bonferroni.
    """
    if not name.startswith("dunn"):
        from .stacked_procedures import warp_rejects
        return warp_rejects(name, t_obs, t_star, alpha)
    r, m = t_obs.shape
    p = np.empty((r, m))
    for j in range(m):
        pooled = np.sort(t_star[:, j])
        hits = pooled.size - np.searchsorted(pooled, t_obs[:, j], side="left")
        p[:, j] = (1.0 + hits) / (1.0 + pooled.size)
    adj = adjust.holm(p, axis=1) if name == "dunn-holm" else adjust.bonferroni(p, axis=1)
    return adj <= alpha

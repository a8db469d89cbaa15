"""The procedures on stacked replicates: which comparisons each one rejects.

For a simulation (calibration under the null, power under an alternative)
the replicates of one design are the rows of an array; this module returns,
for a procedure and a family, a boolean array ``(R, m)``: which comparisons
the procedure declares different in each replicate, at one alpha.

* Pooled procedures (Fisher's LSD, Bonferroni, Šidák, Holm, Benjamini–
  Hochberg, Tukey–Kramer, Scheffé, Dunnett, multivariate-t): the t statistics of every row
  from its group means and the pooled variance; the df N - k is the same in
  every row, so each procedure's critical value is computed once
  (studentized range, F, Dunnett's multivariate t, the general multivariate
  t of the family's correlation) and a rejection is one
  comparison; step-wise rules adjust the rows' p-values along the
  comparisons axis (:mod:`famwise.procedures.adjust`).
* Unequal-variance procedures: Games–Howell and Dunnett's T3 through the
  one-alpha cores of :mod:`famwise.procedures.unequal` (critical values
  interpolated over the rows' Welch df); Welch t unadjusted and with Holm;
  Welch–Dunnett's multivariate t at each row's own Welch df, evaluated only
  where the marginal and Šidák bounds leave the decision open; Yuen's
  (1974) trimmed-mean Welch test with Holm.
* Resampling procedures: the warp-speed method of Giacomini, Politis & White
  (2013, *Econometric Theory* 29:567–589).  Each replicate contributes one
  resample (a permutation of its values, or a within-group bootstrap of its
  centred values); a replicate rejects a comparison when its observed |t|
  exceeds the (1 - alpha) quantile of the max |t*| pooled over all
  replicates.  For the step-down procedures each step's critical value is
  the quantile of the pooled maxima over the comparisons still in play
  (Westfall & Young 1993, algorithm 2.8, with the pooled resamples in place
  of each replicate's own).  ``tests/test_stacked.py`` checks the method
  against the full nested computation (every replicate with its own B
  resamples through :mod:`famwise.resample`) on a small case.
"""

from __future__ import annotations

from functools import lru_cache

import numpy as np
from scipy import stats

from ..core.families import Family
from ..distributions import simultaneous as dist
from ..procedures import adjust
from ..procedures.catalogue import CATALOGUE

__all__ = ["Stack", "pooled_t", "welch_t", "closed_form_rejects", "warp_statistics",
           "warp_rejects", "single_step_name", "is_resampling", "SIMULATED"]

_SQRT2 = np.sqrt(2.0)

#: The procedures this module simulates: the closed forms of
#: :func:`closed_form_rejects` and the resampling procedures of
#: :func:`warp_statistics` (others, such as the rank, censored and wild-bootstrap
#: procedures, have statistics of their own that are not simulated here).
SIMULATED = frozenset((
    "lsd", "bonferroni", "sidak", "holm", "bh", "tukey-kramer", "scheffe", "dunnett",
    "multivariate-t", "games-howell", "dunnett-t3", "welch", "welch-holm", "welch-dunnett",
    "yuen-holm", "permutation-maxt", "permutation-stepdown", "bootstrap-maxt",
    "bootstrap-stepdown", "bootstrap-hall"))


class Stack:
    """R replicates of one design: values in group blocks, with their summaries."""

    def __init__(self, x: np.ndarray, blocks):
        self.x = np.ascontiguousarray(x, dtype=np.float64)
        self.blocks = blocks
        self.n = blocks.n
        self.k = blocks.k
        self.codes = blocks.codes
        self.bounds = blocks.bounds
        self.means, self.vars = blocks.summaries(self.x)

    @property
    def replicates(self) -> int:
        return int(self.x.shape[0])


def is_resampling(name: str) -> bool:
    return CATALOGUE[name].route == "resample"


def single_step_name(name: str) -> str:
    return name.replace("stepdown", "maxt")


def welch_t(w, means, variances, n):
    """Welch t of each row and contrast, and its Satterthwaite df."""
    est = means @ w.T
    v = (variances / n) @ (w * w).T
    den = ((variances / n) ** 2 / (n - 1)) @ (w ** 4).T
    with np.errstate(invalid="ignore", divide="ignore"):
        return est / np.sqrt(v), v ** 2 / den


def pooled_t(w, means, variances, n):
    """Pooled-variance t of each row and contrast, and the df N - k."""
    df = int(n.sum() - n.size)
    mse = np.sum((n - 1) * variances, axis=1, keepdims=True) / df
    est = means @ w.T
    with np.errstate(invalid="ignore", divide="ignore"):
        return est / np.sqrt(mse * ((w * w) @ (1 / n))), df


def anova_f(means, variances, n):
    """The one-way ANOVA F of each row."""
    k, big_n = n.size, n.sum()
    grand = (means * n).sum(axis=1, keepdims=True) / big_n
    ssb = ((means - grand) ** 2 * n).sum(axis=1)
    ssw = ((n - 1) * variances).sum(axis=1)
    return (ssb / (k - 1)) / (ssw / (big_n - k))


@lru_cache(maxsize=256)
def _range_crit(alpha: float, k: int, df: int) -> float:
    return float(dist.srange_ppf(1.0 - alpha, k, df))


@lru_cache(maxsize=256)
def _dunnett_crit(alpha: float, lam: tuple, df: int) -> float:
    return float(dist.dunnett_ppf(1.0 - alpha, np.array(lam), df))


@lru_cache(maxsize=64)
def _mvt_crit(alpha: float, w_bytes: bytes, shape: tuple, n: tuple, df: int) -> float:
    """Critical value of max |T| for the pooled contrasts (correlation from w and n)."""
    from ..distributions.multivariate_t import max_t_ppf
    w = np.frombuffer(w_bytes).reshape(shape)
    cov = (w / np.asarray(n)) @ w.T
    se = np.sqrt(np.diag(cov))
    return float(max_t_ppf(1.0 - alpha, cov / np.outer(se, se), df, tolerance=2.5e-4).value)


def _involved(family: Family) -> int:
    return int(np.unique(family.pairs).size) if family.pairs is not None else family.k


def closed_form_rejects(name: str, family: Family, stack: Stack, alpha: float,
                        options: dict | None = None) -> np.ndarray:
    """Return which comparisons a closed-form procedure rejects in each row, (R, m).

    ``options`` are the procedure's own (validated) options; ``yuen-holm``
    reads ``trim``.
    """
    w, n = family.weights, stack.n
    m = family.m
    means, variances = stack.means, stack.vars
    if name in ("lsd", "bonferroni", "sidak", "holm", "bh", "tukey-kramer", "scheffe",
                "dunnett", "multivariate-t"):
        t, df = pooled_t(w, means, variances, n)
        a = np.abs(t)
        if name == "multivariate-t":
            # exact single-step maximum of the pooled t's (famwise.distributions.multivariate_t)
            return a >= _mvt_crit(alpha, np.ascontiguousarray(w, float).tobytes(), w.shape,
                                  tuple(float(x) for x in n), df)
        if name == "tukey-kramer":
            # Tukey (1953), Kramer (1956): |t| sqrt(2) against q(1 - alpha; k', N - k).
            return _SQRT2 * a >= _range_crit(alpha, _involved(family), df)
        if name == "scheffe":
            # Scheffé (1953): t^2 / (k - 1) against F(1 - alpha; k - 1, N - k).
            return t * t / (stack.k - 1) >= stats.f.ppf(1 - alpha, stack.k - 1, df)
        if name == "dunnett":
            lam = np.sqrt(1.0 / (1.0 + n[family.reference] / n[family.pairs[:, 0]]))
            return a >= _dunnett_crit(alpha, tuple(np.round(lam, 15)), df)
        p = 2 * stats.t.sf(a, df)
        if name == "lsd":
            gate = stats.f.sf(anova_f(means, variances, n), stack.k - 1, df) <= alpha
            return (p <= alpha) & gate[:, None]
        if name == "bonferroni":
            return m * p <= alpha
        if name == "sidak":
            return -np.expm1(m * np.log1p(-p)) <= alpha
        return getattr(adjust, name)(p, axis=1) <= alpha          # holm, bh
    from ..procedures.unequal import dunnett_t3_rejects, games_howell_rejects
    if name == "games-howell":
        return games_howell_rejects(means, variances, n, alpha, family.pairs)
    if name == "dunnett-t3":
        return dunnett_t3_rejects(means, variances, n, alpha, w)
    if name in ("welch", "welch-holm"):
        t, df = welch_t(w, means, variances, n)
        p = 2 * stats.t.sf(np.abs(t), df)
        return p <= alpha if name == "welch" else adjust.holm(p, axis=1) <= alpha
    if name == "welch-dunnett":
        return _welch_dunnett_rejects(family, means, variances, n, alpha)
    if name == "yuen-holm":
        trim = (options or {}).get("trim", 0.2)
        return adjust.holm(_yuen_p(family, stack, trim), axis=1) <= alpha
    raise KeyError(name)


def _welch_dunnett_rejects(family, means, variances, n, alpha):
    """Welch–Dunnett's decisions, exact where they are not already settled.

    A cell's adjusted p lies between its marginal t p-value and Šidák's
    1 - (1 - p)^m (Šidák 1967: the two-sided maximum of positively
    correlated t's with a common scale), so only the cells in between are
    evaluated, with the multivariate t at the replicate's own Welch
    correlations and the cell's own df (as
    :func:`famwise.procedures.unequal.welch_dunnett` does), each directly
    (:func:`famwise.distributions.dunnett_rows.dunnett_rows_at_most`: no
    table per replicate).
    """
    from ..distributions.dunnett_rows import dunnett_rows_at_most
    t, df = welch_t(family.weights, means, variances, n)
    m = family.m
    p = 2 * stats.t.sf(np.abs(t), df)
    out = -np.expm1(m * np.log1p(-p)) <= alpha
    band = (p <= alpha) & ~out & np.isfinite(t) & np.isfinite(df) & (df >= 1)
    if band.any():
        v = variances / n
        ref, others = family.reference, family.pairs[:, 0]
        lam = np.sqrt(v[:, [ref]] / (v[:, [ref]] + v[:, others]))
        rows, cols = np.nonzero(band)
        out[rows, cols] = dunnett_rows_at_most(t[rows, cols], df[rows, cols],
                                               np.minimum(lam[rows], 1.0 - 1e-15), alpha)
    return out


def _yuen_p(family, stack, trim=0.2):
    """Yuen (1974) trimmed-mean Welch p-values of each pair in each row (eq. 2.2)."""
    tm, d, h = [], [], []
    for s, size in zip(stack.blocks.slices(), stack.n):
        block = np.sort(stack.x[:, s], axis=1)
        cut = int(np.floor(trim * size))
        tm.append(block[:, cut:size - cut].mean(axis=1))
        wins = np.clip(block, block[:, [cut]], block[:, [size - cut - 1]])
        hh = size - 2 * cut
        d.append((size - 1) * wins.var(axis=1, ddof=1) / (hh * (hh - 1)))
        h.append(hh)
    tm, d, h = np.array(tm).T, np.array(d).T, np.array(h)
    a, b = family.pairs[:, 0], family.pairs[:, 1]
    with np.errstate(invalid="ignore", divide="ignore"):
        t = (tm[:, a] - tm[:, b]) / np.sqrt(d[:, a] + d[:, b])
        df = (d[:, a] + d[:, b]) ** 2 / (d[:, a] ** 2 / (h[a] - 1) + d[:, b] ** 2 / (h[b] - 1))
    return np.nan_to_num(2 * stats.t.sf(np.abs(t), df), nan=1.0)


# --- resampling procedures: the warp-speed method ----------------------------------

def _hall_t(w, x, means, variances, stack: Stack):
    """Hall-transformed Welch t of each row, the skewness pooled over groups
    (:mod:`famwise.resample.statistics`)."""
    from ..resample.statistics import SE_FLOOR, hall_skew, hall_transform, pooled_skewness
    n = stack.n
    t, _ = welch_t(w, means, variances, n)
    dev = x - means[:, stack.codes]
    ssq = np.add.reduceat(dev * dev, stack.bounds[:-1], axis=1)
    m3 = np.add.reduceat(dev ** 3, stack.bounds[:-1], axis=1)
    scale = x.std(axis=1, keepdims=True)
    gamma = pooled_skewness(ssq, m3, n, (SE_FLOOR * scale) ** 2 * n)
    v2 = (variances / n) @ (w * w).T
    return hall_transform(t, hall_skew(w, variances, n, gamma, v2))


#: The procedure options the warp-speed simulation honours (others are refused
#: by :func:`famwise.diagnostics.calibrate.calibrate_layout`).
WARP_STATISTICS = ("welch", "pooled")


def warp_statistics(name: str, family: Family, stack: Stack, rng,
                    options: dict | None = None) -> tuple[np.ndarray, np.ndarray]:
    """Return ``(|t|, |t*|)``, each (R, m): each row's observed statistics and
    those of its one resample (permutation, or within-group bootstrap of the
    centred values), for the single-step procedure behind ``name``.
    ``options["statistic"]`` (``"welch"`` or ``"pooled"``) picks the t."""
    name = single_step_name(name)
    w, n = family.weights, stack.n
    hall = name == "bootstrap-hall"
    t_of = pooled_t if (options or {}).get("statistic", "welch") == "pooled" else welch_t
    if hall:
        t_obs = _hall_t(w, stack.x, stack.means, stack.vars, stack)
    else:
        t_obs, _ = t_of(w, stack.means, stack.vars, n)
    x = stack.x
    if name.startswith("permutation"):
        xs = rng.permuted(x, axis=1)
    else:
        centred = x - stack.means[:, stack.codes]
        idx = np.empty(x.shape, dtype=np.int64)
        for lo, hi in zip(stack.bounds[:-1], stack.bounds[1:]):
            idx[:, lo:hi] = rng.integers(lo, hi, size=(x.shape[0], hi - lo))
        xs = np.take_along_axis(centred, idx, axis=1)
    ms, vs = stack.blocks.summaries(xs)
    vs = np.maximum(vs, 1e-300)
    if hall:
        t_star = _hall_t(w, xs, ms, vs, stack)
    else:
        t_star, _ = t_of(w, ms, vs, n)
    return np.abs(t_obs), np.abs(t_star)


def _quantile(values: np.ndarray, alpha: float) -> float:
    return float(np.quantile(values, 1 - alpha))


def warp_rejects(name: str, t_obs: np.ndarray, t_star: np.ndarray,
                 alpha: float) -> np.ndarray:
    """Warp-speed decisions (R, m) from the observed and pooled resampled |t|.

    Single-step: ``|t_obs| > c``, c the (1 - alpha) quantile of the pooled
    max |t*|.  Step-down: the comparisons of each row in decreasing order of
    |t_obs|; step j's critical value is the quantile of the pooled max |t*|
    over the comparisons not yet rejected, and the steps stop at the first
    comparison that falls short.
    """
    r, m = t_obs.shape
    if not name.endswith("stepdown"):
        return t_obs > _quantile(t_star.max(axis=1), alpha)
    order_star = np.argsort(-t_star, axis=1)            # each resample's columns, largest first
    sorted_star = np.take_along_axis(t_star, order_star, axis=1)
    cache: dict[int, float] = {}

    def crit(mask: int) -> float:
        if mask not in cache:
            keep = np.array([(mask >> c) & 1 for c in range(m)], dtype=bool)
            inside = keep[order_star]                     # (R, m): column in play?
            first = np.argmax(inside, axis=1)
            cache[mask] = _quantile(sorted_star[np.arange(r), first], alpha)
        return cache[mask]

    order = np.argsort(-t_obs, axis=1)
    out = np.zeros((r, m), dtype=bool)
    alive = np.ones(r, dtype=bool)
    masks = np.full(r, (1 << m) - 1, dtype=object)
    for step in range(m):
        rows = np.flatnonzero(alive)
        if rows.size == 0:
            break
        col = order[rows, step]
        values = t_obs[rows, col]
        c = np.array([crit(int(masks[i])) for i in rows])
        ok = values > c
        out[rows[ok], col[ok]] = True
        alive[rows[~ok]] = False
        for i, cc in zip(rows[ok], col[ok]):
            masks[i] = int(masks[i]) & ~(1 << int(cc))
    return out

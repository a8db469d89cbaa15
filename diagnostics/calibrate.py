"""Error-rate calibration: the familywise error at the observed design.

Routing on preliminary tests is itself a procedure, and several procedures'
error control depends on the design (Games–Howell with small groups,
permutation max-T when small groups carry large spreads).  This module
estimates, by Monte Carlo under the complete null hypothesis (all group means
equal) at the observed group sizes and SDs:

* the familywise error rate of every candidate procedure for the family;
* the familywise error rate of the whole automatic pipeline, checks and
  routing included;

with errors drawn from the normal distribution or, by option, resampled from
the observed standardised within-group residuals (``shape="observed"``).

Methods.  Closed-form procedures are evaluated from each replicate's group
means and variances in one vectorised pass.  Resampling procedures use the
warp-speed method of Giacomini, Politis & White (2013, *Econometric Theory*
29:567–589): one resample per replicate, and the replicate rejects when its
max statistic exceeds the (1 - alpha) quantile of the pooled resampled max
statistics.  Under the complete null a step-down procedure rejects something
exactly when its single-step counterpart does (the first step is the same),
so Holm's FWER equals Bonferroni's and each step-down resampling procedure's
equals its single-step one; the table says so.  Welch–Dunnett's
multivariate t is evaluated only in the replicates whose decision the
marginal and Bonferroni bounds leave open.  Within the pipeline, the route's own
quick Games–Howell / Dunnett T3 calibration is evaluated once at the observed
design, not in every replicate.

The small closed-form estimate the router uses to choose between
Games–Howell and Dunnett's T3 is :func:`famwise.diagnostics.quick.quick_fwer`.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np
import pandas as pd
from scipy import stats

from ..distributions import simultaneous as dist
from ..core.errors import FamwiseInputError
from ..core.families import Family
from ..core.layout import Layout
from ..procedures.catalogue import CATALOGUE
from .policy import Policy

from .quick import _null_summaries, independent_fwer, quick_fwer  # noqa: F401 (re-exported)

__all__ = ["quick_fwer", "Calibration", "calibrate_layout", "independent_fwer"]

_SQRT2 = np.sqrt(2.0)


# --- the full calibration ------------------------------------------------------

@dataclass(frozen=True)
class Calibration:
    """Estimated familywise error rates at the observed design.

    ``table`` has one row per procedure: ``procedure``, ``fwer``, ``se``
    (binomial Monte Carlo SE), ``replicates``, ``method`` and ``holds``
    (``fwer <= alpha + 2 se``); the last row, ``automatic pipeline``, is the
    whole route-then-test procedure.
    """

    alpha: float
    m: int
    shape: str
    replicates: int
    seed: int
    design: dict
    table: pd.DataFrame = field(repr=False)
    routes: dict = field(default_factory=dict)

    @property
    def independent(self) -> float:
        """The FWER of m unadjusted independent tests, for comparison."""
        return independent_fwer(self.m, self.alpha)

    def to_dict(self) -> dict:
        return {"alpha": self.alpha, "m": self.m, "shape": self.shape,
                "replicates": self.replicates, "seed": self.seed, "design": self.design,
                "independent_tests_fwer": self.independent, "routes": self.routes,
                "table": self.table.to_dict(orient="records")}

    def sentence(self) -> str:
        pipe = self.table[self.table["procedure"] == "automatic pipeline"]
        text = (f"Under the complete null at the observed sizes and SDs ({self.shape} errors, "
                f"{self.replicates} replicates), {self.m} unadjusted independent tests would "
                f"err with probability {self.independent:.3f}.")
        if len(pipe):
            row = pipe.iloc[0]
            text += (f" The automatic pipeline's estimated familywise error is "
                     f"{row.fwer:.3f} (SE {row.se:.3f}), "
                     + ("within" if row.holds else "above") + f" alpha = {self.alpha:g} "
                     f"+ 2 SE.")
        return text


def _candidates(family: Family) -> list[str]:
    out = []
    for name, info in CATALOGUE.items():
        ok = family.kind in info.families or (
            family.kind == "contrasts" and family.is_pairwise and "all-pairs" in info.families)
        if ok:
            out.append(name)
    return out


class _Replicates:
    """Null data sets at the observed design, in group blocks, with summaries."""

    def __init__(self, layout: Layout, shape: str, replicates: int, rng):
        st = layout.stats
        self.n = st.n.astype(np.int64)
        self.sd = st.sd
        self.k = layout.k
        self.bounds = np.r_[0, np.cumsum(self.n)]
        self.codes = np.repeat(np.arange(self.k), self.n)
        size = (replicates, int(self.n.sum()))
        if shape == "normal":
            e = rng.standard_normal(size)
        elif shape == "observed":
            from .shape import standardised_residuals
            pool = standardised_residuals(layout)
            e = rng.choice(pool, size=size, replace=True)
        else:
            raise FamwiseInputError(f"shape must be 'normal' or 'observed'; got {shape!r}")
        self.x = e * self.sd[self.codes]
        self.means, self.vars = self.summaries(self.x)

    def summaries(self, x):
        sums = np.add.reduceat(x, self.bounds[:-1], axis=1)
        means = sums / self.n
        dev = x - means[:, self.codes]
        var = np.add.reduceat(dev * dev, self.bounds[:-1], axis=1) / (self.n - 1)
        return means, var

    def layout(self, r: int) -> Layout:
        return Layout(self.x[r], self.codes, tuple(f"g{i}" for i in range(self.k)))


def _welch_t(w, means, variances, n):
    est = means @ w.T
    v = (variances / n) @ (w * w).T
    num = v ** 2
    den = ((variances / n) ** 2 / (n - 1)) @ (w ** 4).T
    return est / np.sqrt(v), num / den


def _pooled_t(w, means, variances, n):
    df = n.sum() - n.size
    mse = np.sum((n - 1) * variances, axis=1, keepdims=True) / df
    est = means @ w.T
    return est / np.sqrt(mse * ((w * w) @ (1 / n))), df


def _closed_form_min_p(name, family, rep: _Replicates, alpha):
    """Return (min adjusted p per replicate, replicates used) for a closed form.

    For Games-Howell and Dunnett's T3 the value is only the decision at alpha
    (0 = rejects, 1 = does not), from the fast one-alpha cores of
    famwise.procedures.unequal; every caller compares it with alpha.
    """
    from ..procedures.adjust import bh
    w, n = family.weights, rep.n
    m = family.m
    means, variances = rep.means, rep.vars
    if name in ("lsd", "bonferroni", "sidak", "holm", "bh", "tukey-kramer", "scheffe",
                "dunnett"):
        t, df = _pooled_t(w, means, variances, n)
        p = 2 * stats.t.sf(np.abs(t), df)
        if name == "lsd":
            f = _anova_f(means, variances, n)
            gate = stats.f.sf(f, n.size - 1, df) <= alpha
            return np.where(gate, p.min(axis=1), 1.0), len(p)
        if name in ("bonferroni", "holm"):
            return np.minimum(1.0, m * p.min(axis=1)), len(p)
        if name == "sidak":
            return 1 - (1 - p.min(axis=1)) ** m, len(p)
        if name == "bh":
            return bh(p, axis=1).min(axis=1), len(p)
        if name == "tukey-kramer":
            return dist.srange_sf(_SQRT2 * np.abs(t), rep.k, df).min(axis=1), len(p)
        if name == "scheffe":
            return stats.f.sf(t * t / (rep.k - 1), rep.k - 1, df).min(axis=1), len(p)
        lam = np.sqrt(1.0 / (1.0 + n[family.reference] / n[family.pairs[:, 0]]))
        return dist.dunnett_sf(np.abs(t).max(axis=1), lam, df), len(p)
    from ..procedures.unequal import dunnett_t3_rejects, games_howell_rejects
    if name == "games-howell":
        hits = games_howell_rejects(means, variances, n, alpha, family.pairs).any(axis=1)
        return np.where(hits, 0.0, 1.0), len(means)
    if name == "dunnett-t3":
        hits = dunnett_t3_rejects(means, variances, n, alpha, w).any(axis=1)
        return np.where(hits, 0.0, 1.0), len(means)
    if name in ("welch", "welch-holm"):
        t, df = _welch_t(w, means, variances, n)
        p = 2 * stats.t.sf(np.abs(t), df)
        return (p.min(axis=1) if name == "welch" else np.minimum(1.0, m * p.min(axis=1))), \
            len(p)
    if name == "welch-dunnett":
        return _welch_dunnett_min_p(family, means, variances, n, alpha), len(means)
    if name == "yuen-holm":
        return _yuen_min_p(family, rep, m), len(means)
    raise KeyError(name)


def _welch_dunnett_min_p(family, means, variances, n, alpha):
    """Welch-Dunnett's smallest adjusted p per replicate, exact where it matters.

    Each row's adjusted p lies between its marginal t p-value and m times
    that (the Bonferroni bound), so a replicate whose smallest Bonferroni p is
    at most alpha rejects and one whose smallest marginal p exceeds alpha
    does not.  Only the rows in between are evaluated with the multivariate t
    at their own Welch df (as famwise.procedures.unequal.welch_dunnett does); the
    returned value is exact for the decision at alpha.
    """
    t, df = _welch_t(family.weights, means, variances, n)
    m = family.m
    p = 2 * stats.t.sf(np.abs(t), df)
    out = np.minimum(1.0, m * p.min(axis=1))
    v = variances / n
    ref, others = family.reference, family.pairs[:, 0]
    for r in np.flatnonzero((p.min(axis=1) <= alpha) & (out > alpha)):
        lam = np.sqrt(v[r, ref] / (v[r, ref] + v[r, others]))
        for i in np.argsort(p[r]):
            if p[r, i] > alpha:
                break
            pi = float(dist.dunnett_sf(abs(t[r, i]), lam, float(df[r, i])))
            out[r] = min(out[r], pi)
            if pi <= alpha:
                break
    return out


def _anova_f(means, variances, n):
    k, big_n = n.size, n.sum()
    grand = (means * n).sum(axis=1, keepdims=True) / big_n
    ssb = ((means - grand) ** 2 * n).sum(axis=1)
    ssw = ((n - 1) * variances).sum(axis=1)
    return (ssb / (k - 1)) / (ssw / (big_n - k))


def _yuen_min_p(family, rep, m, trim=0.2):
    """Yuen (1974) trimmed-mean Welch test for each pair, Bonferroni on the minimum."""
    tm, d, h = [], [], []
    for g in range(rep.k):
        block = np.sort(rep.x[:, rep.bounds[g]:rep.bounds[g + 1]], axis=1)
        n = block.shape[1]
        cut = int(np.floor(trim * n))
        tm.append(block[:, cut:n - cut].mean(axis=1))
        wins = np.clip(block, block[:, [cut]], block[:, [n - cut - 1]])
        hh = n - 2 * cut
        d.append((n - 1) * wins.var(axis=1, ddof=1) / (hh * (hh - 1)))
        h.append(hh)
    tm, d, h = np.array(tm).T, np.array(d).T, np.array(h)
    a, b = family.pairs[:, 0], family.pairs[:, 1]
    t = (tm[:, a] - tm[:, b]) / np.sqrt(d[:, a] + d[:, b])
    df = (d[:, a] + d[:, b]) ** 2 / (d[:, a] ** 2 / (h[a] - 1) + d[:, b] ** 2 / (h[b] - 1))
    p = 2 * stats.t.sf(np.abs(t), df)
    return np.minimum(1.0, m * p.min(axis=1))


def _hall_t(w, x, means, variances, rep: _Replicates):
    """Hall-transformed Welch t of each replicate (rows of ``x``), with the
    skewness pooled over groups (:mod:`famwise.resample.statistics`)."""
    from ..resample.statistics import SE_FLOOR, hall_skew, hall_transform, pooled_skewness
    n = rep.n
    t, _ = _welch_t(w, means, variances, n)
    dev = x - means[:, rep.codes]
    ssq = np.add.reduceat(dev * dev, rep.bounds[:-1], axis=1)
    m3 = np.add.reduceat(dev ** 3, rep.bounds[:-1], axis=1)
    scale = x.std(axis=1, keepdims=True)
    gamma = pooled_skewness(ssq, m3, n, (SE_FLOOR * scale) ** 2 * n)
    v2 = (variances / n) @ (w * w).T
    return hall_transform(t, hall_skew(w, variances, n, gamma, v2))


def _warp_speed_reject(name, family, rep: _Replicates, alpha, rng):
    """Warp-speed rejection indicators for a resampling max-T procedure."""
    w, n = family.weights, rep.n
    hall = name == "bootstrap-hall"
    if hall:
        t_obs = _hall_t(w, rep.x, rep.means, rep.vars, rep)
    else:
        t_obs, _ = _welch_t(w, rep.means, rep.vars, n)
    t_obs = np.abs(t_obs).max(axis=1)
    x = rep.x
    if name.startswith("permutation"):
        xs = rng.permuted(x, axis=1)
    else:
        centred = x - rep.means[:, rep.codes]
        idx = np.empty(x.shape, dtype=np.int64)
        for g in range(rep.k):
            lo, hi = rep.bounds[g], rep.bounds[g + 1]
            idx[:, lo:hi] = rng.integers(lo, hi, size=(x.shape[0], hi - lo))
        xs = np.take_along_axis(centred, idx, axis=1)
    ms, vs = rep.summaries(xs)
    vs = np.maximum(vs, 1e-300)
    if hall:
        t_star = _hall_t(w, xs, ms, vs, rep)
    else:
        t_star, _ = _welch_t(w, ms, vs, n)
    t_star = np.abs(t_star).max(axis=1)
    crit = np.quantile(t_star, 1 - alpha)
    return t_obs > crit


def calibrate_layout(layout: Layout, family: Family, *, alpha: float = 0.05,
                     replicates: int = 2000, shape: str = "normal", seed: int = 0,
                     procedures=None, pipeline: bool = True,
                     policy: Policy | None = None) -> Calibration:
    """Estimate every candidate's FWER, and the pipeline's, at ``layout``'s design."""
    from . import run_checks
    from .route import choose
    policy = policy or Policy()
    if replicates < 100:
        raise FamwiseInputError(f"replicates must be at least 100; got {replicates}")
    rng = np.random.default_rng(seed)
    rep = _Replicates(layout, shape, replicates, rng)
    names = list(procedures) if procedures is not None else _candidates(family)
    rows, reject = [], {}
    for name in names:
        info = CATALOGUE[name]
        single = name.replace("stepdown", "maxt")
        if info.route == "resample":
            # A step-down procedure errs under the complete null exactly when
            # its single-step counterpart does, so both share one estimate.
            if single not in reject:
                reject[single] = _warp_speed_reject(single, family, rep, alpha, rng)
            hits = reject[single]
            used, method = replicates, "warp-speed (one resample per replicate)"
        else:
            minp, used = _closed_form_min_p(name, family, rep, alpha)
            hits = minp <= alpha
            method = "closed form per replicate"
        if name == "holm" or name.endswith("stepdown") or name in ("welch-holm", "yuen-holm"):
            method += "; under the complete null it errs exactly when its single-step " \
                      "counterpart does"
        if name == "bh":
            method += "; under the complete null the FDR equals the FWER"
        reject[name] = hits
        rows.append(_row(name, hits, used, method, alpha))
    routes = {}
    if pipeline:
        observed = choose(run_checks(layout, policy), family, layout, policy, "auto", alpha)
        quiet = policy.replace(calibrate_candidates=False)
        chosen = []
        for r in range(replicates):
            lay = rep.layout(r)
            route = choose(run_checks(lay, quiet), family, lay, quiet, "auto", alpha)
            proc = route.procedure
            if proc == "dunnett-t3" and observed.procedure == "games-howell" \
                    and family.kind == "all-pairs":
                proc = "games-howell"      # the observed design's calibration decided
            chosen.append(proc)
        chosen = np.array(chosen)
        for proc in np.unique(chosen):
            if proc not in reject:
                info = CATALOGUE[proc]
                if info.route == "resample":
                    single = proc.replace("stepdown", "maxt")
                    if single not in reject:
                        reject[single] = _warp_speed_reject(single, family, rep, alpha, rng)
                    reject[proc] = reject[single]
                else:
                    minp, _ = _closed_form_min_p(proc, family, rep, alpha)
                    reject[proc] = minp <= alpha
        hits = np.array([reject[p][r] for r, p in enumerate(chosen)])
        routes = {str(p): int(c) for p, c in zip(*np.unique(chosen, return_counts=True))}
        rows.append(_row("automatic pipeline", hits, replicates,
                         "checks and routing re-run on every replicate", alpha))
    table = pd.DataFrame(rows)
    st = layout.stats
    design = {"labels": list(layout.labels), "n": st.n.tolist(), "sd": st.sd.tolist(),
              "family": family.kind}
    return Calibration(alpha, family.m, shape, replicates, int(seed), design, table, routes)


def _row(name, hits, used, method, alpha):
    hits = np.asarray(hits, dtype=bool)
    fwer = float(hits.mean())
    se = float(np.sqrt(fwer * (1 - fwer) / used))
    return {"procedure": name, "fwer": fwer, "se": se, "replicates": int(used),
            "method": method, "holds": bool(fwer <= alpha + 2 * se)}

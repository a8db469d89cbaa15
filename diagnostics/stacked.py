"""The checks on stacked replicates: every diagnostic as an array operation.

A simulation (calibration, planning) re-runs the checks of
:mod:`famwise.diagnostics` on thousands of data sets of one design.  Here the
data sets are the rows of one array ``x`` of shape ``(R, N)``, each row
holding the groups in contiguous blocks of the design's sizes ``n``, and
every check is computed for all rows at once.  The results equal the
one-data-set checks (``tests/test_stacked.py`` compares them with scipy and
with :func:`famwise.diagnostics.run_checks` row by row):

* Brown–Forsythe (median-centred Levene; Brown & Forsythe 1974, *JASA*
  69:364–367), Bartlett (1937) and Fligner–Killeen (Conover, Johnson &
  Johnson 1981, *Technometrics* 23:351–361, the median-centred form
  ``scipy.stats.fligner`` uses): the statistic of each row in closed form, the
  p-value from the F or chi-squared tail, equal to scipy's to 1e-10;
* Shapiro–Wilk: Royston's (1995, *Applied Statistics* 44:547–551, algorithm
  AS R94) coefficients depend only on the sample size, which is the same in
  every row, so they are computed once and W is a row-wise correlation of the
  sorted residuals with them; the p-value is Royston's normalising
  transformation.  The percentage points come from ``scipy.special.ndtri``
  rather than AS R94's seven-digit PPND7, so W and p differ from
  ``scipy.stats.shapiro`` by at most about 1e-8 absolute and 1e-7 relative
  (measured in ``tests/test_stacked.py``), far below any routing threshold;
* Anderson–Darling above ``policy.shapiro_max`` residuals, as in
  :func:`famwise.diagnostics.shape.anderson_darling`;
* skewness G1 and excess kurtosis G2, the SD ratio, the size–spread pairing
  and the modified z-scores of Iglewicz & Hoaglin (1993), row-wise.

Each check returns its statistic, p-value (or NaN) and a verdict code
(``0`` ok, ``1`` concern, ``2`` violated, in the order of
:data:`famwise.diagnostics.VERDICTS`), judged exactly as the one-data-set
check judges it.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np
from scipy import special, stats

from .policy import Policy

__all__ = ["Blocks", "StackedCheck", "modified_z_rows", "StackedFindings", "stacked_checks",
           "shapiro_wilk", "shapiro_coefficients", "brown_forsythe", "bartlett", "fligner",
           "anderson_darling", "moments", "outliers", "sd_ratio", "pairing"]

OK, CONCERN, VIOLATED = 0, 1, 2


@dataclass(frozen=True)
class Blocks:
    """The fixed design of stacked replicates: group sizes and their blocks."""

    n: np.ndarray                              # (k,) int64
    bounds: np.ndarray = field(repr=False)     # (k + 1,) block edges
    codes: np.ndarray = field(repr=False)      # (N,) group code of each column

    @classmethod
    def of(cls, n) -> "Blocks":
        n = np.asarray(n, dtype=np.int64)
        return cls(n, np.r_[0, np.cumsum(n)], np.repeat(np.arange(n.size), n))

    @property
    def k(self) -> int:
        return int(self.n.size)

    @property
    def total(self) -> int:
        return int(self.n.sum())

    def slices(self):
        return [slice(int(a), int(b)) for a, b in zip(self.bounds[:-1], self.bounds[1:])]

    def summaries(self, x: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        """Return each row's group means and variances (ddof 1), by two passes."""
        starts = self.bounds[:-1]
        means = np.add.reduceat(x, starts, axis=1) / self.n
        dev = x - means[:, self.codes]
        corr = np.add.reduceat(dev, starts, axis=1) / self.n
        means = means + corr
        dev = dev - corr[:, self.codes]
        with np.errstate(invalid="ignore", divide="ignore"):
            var = np.add.reduceat(dev * dev, starts, axis=1) / (self.n - 1)
        return means, var

    def medians(self, x: np.ndarray) -> np.ndarray:
        """Return each row's group medians, shape (R, k)."""
        return np.column_stack([np.median(x[:, s], axis=1) for s in self.slices()])


@dataclass(frozen=True)
class StackedCheck:
    """One check over R replicates: statistic, p-value (NaN if none), verdict code."""

    name: str
    statistic: np.ndarray
    p_value: np.ndarray
    verdict: np.ndarray        # int8: 0 ok, 1 concern, 2 violated


@dataclass(frozen=True)
class StackedFindings:
    """All checks of R replicates; ``shape_poor`` and ``spread_unequal`` are the
    two facts of each replicate that the route reads."""

    checks: dict

    def get(self, name: str) -> StackedCheck:
        return self.checks[name]

    @property
    def shape_poor(self) -> np.ndarray:
        return np.any([self.checks[c].verdict == VIOLATED
                       for c in ("normality", "skewness", "kurtosis", "outliers")], axis=0)

    @property
    def spread_unequal(self) -> np.ndarray:
        return np.any([self.checks[c].verdict == VIOLATED
                       for c in ("brown-forsythe", "sd-ratio", "size-spread-pairing")], axis=0)


# --- Shapiro–Wilk ---------------------------------------------------------------

# Royston (1995), AS R94: polynomial coefficients.
_C1 = (0.0, 0.221157, -0.147981, -2.071190, 4.434685, -2.706056)
_C2 = (0.0, 0.042981, -0.293762, -1.752461, 5.682633, -3.582633)
_C3 = (0.5440, -0.39978, 0.025054, -6.714e-4)
_C4 = (1.3822, -0.77857, 0.062767, -0.0020322)
_C5 = (-1.5861, -0.31082, -0.083751, 0.0038915)
_C6 = (-0.4803, -0.082676, 0.0030302)
_G = (-2.273, 0.459)


def _poly(c, x):
    """c[0] + c[1] x + c[2] x^2 + ... (AS R94's ``poly``)."""
    out = np.zeros_like(np.asarray(x, dtype=float)) + c[-1]
    for a in c[-2::-1]:
        out = out * x + a
    return out


def shapiro_coefficients(n: int) -> np.ndarray:
    """Return the n Shapiro–Wilk coefficients a (antisymmetric, ascending order).

    Royston (1995), AS R94: m_i = Phi^-1((i - 3/8) / (n + 1/4)); the two
    extreme coefficients from polynomials in 1/sqrt(n), the others m_i
    scaled so that sum a^2 = 1.
    """
    if n < 3:
        raise ValueError("Shapiro-Wilk needs at least 3 values")
    half = n // 2
    a = np.zeros(half)
    if n == 3:
        a[0] = np.sqrt(0.5)
    else:
        i = np.arange(1, half + 1)
        m = special.ndtri((i - 0.375) / (n + 0.25))        # negative: lower half
        summ2 = 2.0 * np.sum(m * m)
        ssumm2 = np.sqrt(summ2)
        rsn = 1.0 / np.sqrt(n)
        a1 = _poly(_C1, rsn) - m[0] / ssumm2
        if n > 5:
            a2 = -m[1] / ssumm2 + _poly(_C2, rsn)
            fac = np.sqrt((summ2 - 2 * m[0] ** 2 - 2 * m[1] ** 2)
                          / (1 - 2 * a1 ** 2 - 2 * a2 ** 2))
            a[1] = a2
            first = 2
        else:
            fac = np.sqrt((summ2 - 2 * m[0] ** 2) / (1 - 2 * a1 ** 2))
            first = 1
        a[0] = a1
        a[first:] = -m[first:] / fac
    full = np.zeros(n)
    full[:half] = -a                     # smallest values get negative weights
    full[n - half:] = a[::-1]
    return full


def _shapiro_p(w: np.ndarray, n: int) -> np.ndarray:
    """Royston's (1995) p-value of W for sample size n (upper tail of a normal)."""
    w = np.clip(w, 0.0, 1.0)
    if n == 3:
        # Exact for n = 3: p = (6/pi) (asin(sqrt(W)) - asin(sqrt(3/4))).
        return np.maximum(1.90985931710274 * (np.arcsin(np.sqrt(w)) - 1.04719755119660), 0.0)
    with np.errstate(divide="ignore", invalid="ignore"):
        y = np.log1p(-w)
    if n <= 11:
        gamma = _poly(_G, float(n))
        small = y >= gamma
        with np.errstate(divide="ignore", invalid="ignore"):
            y = -np.log(gamma - y)
        mu = _poly(_C3, float(n))
        s = np.exp(_poly(_C4, float(n)))
        p = special.ndtr(-(y - mu) / s)
        return np.where(small, 1e-99, p)
    xx = np.log(float(n))
    mu = _poly(_C5, xx)
    s = np.exp(_poly(_C6, xx))
    return special.ndtr(-(y - mu) / s)


def shapiro_wilk(z: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Return Shapiro–Wilk W and p-value of every row of ``z`` (R, n), n >= 3."""
    z = np.sort(np.asarray(z, dtype=np.float64), axis=1)
    n = z.shape[1]
    a = shapiro_coefficients(n)
    zc = z - z.mean(axis=1, keepdims=True)
    num = zc @ a
    ssq = np.einsum("ij,ij->i", zc, zc)
    with np.errstate(invalid="ignore", divide="ignore"):
        w = num * num / (ssq * np.dot(a, a))
    w = np.where(ssq > 0, np.minimum(w, 1.0), 1.0)
    return w, _shapiro_p(w, n)


def anderson_darling(z: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Row-wise Anderson–Darling A*^2 and p-value (D'Agostino & Stephens 1986,
    Table 4.9, case 3), as :func:`famwise.diagnostics.shape.anderson_darling`."""
    x = np.sort(np.asarray(z, dtype=np.float64), axis=1)
    n = x.shape[1]
    u = (x - x.mean(axis=1, keepdims=True)) / x.std(axis=1, ddof=1, keepdims=True)
    logcdf, logsf = special.log_ndtr(u), special.log_ndtr(-u)
    i = np.arange(1, n + 1)
    a2 = -n - np.sum((2 * i - 1) * (logcdf + logsf[:, ::-1]), axis=1) / n
    a = a2 * (1 + 0.75 / n + 2.25 / n ** 2)
    p = np.select([a >= 0.6, a >= 0.34, a >= 0.2],
                  [np.exp(1.2937 - 5.709 * a + 0.0186 * a * a),
                   np.exp(0.9177 - 4.279 * a - 1.38 * a * a),
                   1 - np.exp(-8.318 + 42.796 * a - 59.938 * a * a)],
                  1 - np.exp(-13.436 + 101.14 * a - 223.73 * a * a))
    return a, np.clip(p, 0.0, 1.0)


# --- spread tests ----------------------------------------------------------------

def _oneway_f(y: np.ndarray, blocks: Blocks) -> np.ndarray:
    """The one-way ANOVA F of each row of ``y`` (groups in ``blocks``)."""
    means, var = blocks.summaries(y)
    n, k, total = blocks.n, blocks.k, blocks.total
    grand = (means * n).sum(axis=1, keepdims=True) / total
    ssb = ((means - grand) ** 2 * n).sum(axis=1)
    ssw = ((n - 1) * var).sum(axis=1)
    with np.errstate(invalid="ignore", divide="ignore"):
        return (total - k) / (k - 1) * ssb / ssw


def brown_forsythe(x: np.ndarray, blocks: Blocks) -> tuple[np.ndarray, np.ndarray]:
    """Brown–Forsythe (median-centred Levene) W and p of every row:
    the ANOVA F of |x - group median|, as ``scipy.stats.levene(center="median")``."""
    dev = np.abs(x - blocks.medians(x)[:, blocks.codes])
    w = _oneway_f(dev, blocks)
    return w, stats.f.sf(w, blocks.k - 1, blocks.total - blocks.k)


def bartlett(variances: np.ndarray, blocks: Blocks) -> tuple[np.ndarray, np.ndarray]:
    """Bartlett's (1937) statistic and p from each row's group variances."""
    n, k, total = blocks.n, blocks.k, blocks.total
    with np.errstate(invalid="ignore", divide="ignore"):
        sp2 = np.sum((n - 1) * variances, axis=1) / (total - k)
        numer = (total - k) * np.log(sp2) - np.sum((n - 1) * np.log(variances), axis=1)
        denom = 1 + (np.sum(1.0 / (n - 1)) - 1.0 / (total - k)) / (3 * (k - 1))
        t = numer / denom
    return t, stats.chi2.sf(t, k - 1)


def fligner(x: np.ndarray, blocks: Blocks) -> tuple[np.ndarray, np.ndarray]:
    """Fligner–Killeen statistic and p of every row (median-centred, normal
    scores of the ranks of |x - median|), as ``scipy.stats.fligner``."""
    dev = np.abs(x - blocks.medians(x)[:, blocks.codes])
    total = blocks.total
    ranks = stats.rankdata(dev, axis=1)
    a = special.ndtri(ranks / (2.0 * (total + 1.0)) + 0.5)
    group_mean = np.add.reduceat(a, blocks.bounds[:-1], axis=1) / blocks.n
    abar = a.mean(axis=1, keepdims=True)
    varsq = a.var(axis=1, ddof=1)
    with np.errstate(invalid="ignore", divide="ignore"):
        stat = np.sum(blocks.n * (group_mean - abar) ** 2, axis=1) / varsq
    return stat, stats.chi2.sf(stat, blocks.k - 1)


# --- the checks with their verdicts ------------------------------------------------

def _test_verdict(p, policy: Policy, decides: bool) -> np.ndarray:
    low = np.isfinite(p) & (p < policy.check_alpha)
    return np.where(low, VIOLATED if decides else CONCERN, OK).astype(np.int8)


def standardised(x, blocks: Blocks, means, var) -> np.ndarray:
    """Residuals over their group SD with the sqrt(n/(n-1)) correction
    (:func:`famwise.diagnostics.shape.standardised_residuals`)."""
    sd = np.sqrt(var)
    sd = np.where(sd > 0, sd, 1.0)
    scale = sd * np.sqrt((blocks.n - 1) / blocks.n)
    return (x - means[:, blocks.codes]) / scale[:, blocks.codes]


def normality(z: np.ndarray, policy: Policy) -> StackedCheck:
    r, n = z.shape
    if n < 3:
        zero = np.zeros(r)
        return StackedCheck("normality", zero * np.nan, zero * np.nan,
                            np.zeros(r, dtype=np.int8))
    stat, p = shapiro_wilk(z) if n <= policy.shapiro_max else anderson_darling(z)
    decides = n < policy.pvalue_decides_below
    verdict = np.where(decides & (p < policy.check_alpha), VIOLATED, OK).astype(np.int8)
    return StackedCheck("normality", stat, p, verdict)


def moments(z: np.ndarray, policy: Policy) -> tuple[StackedCheck, StackedCheck]:
    """Skewness G1 and excess kurtosis G2 of each row, judged as
    :func:`famwise.diagnostics.shape.moments` judges them."""
    r, n = z.shape
    skew = stats.skew(z, axis=1, bias=False) if n > 2 else np.zeros(r)
    kurt = stats.kurtosis(z, axis=1, fisher=True, bias=False) if n > 3 else np.zeros(r)
    se_skew = np.sqrt(6.0 * n * (n - 1) / ((n - 2) * (n + 1) * (n + 3))) if n > 2 else np.inf
    se_kurt = (2 * se_skew * np.sqrt((n * n - 1) / ((n - 3) * (n + 5)))) if n > 3 else np.inf

    def judge(value, limit, se):
        a = np.abs(value)
        big, clear = a > limit, a > 2 * se
        severe = (a > 2 * limit) | (n >= policy.pvalue_decides_below)
        return np.select([big & clear & severe, big & clear, big | (clear & (a > limit / 2))],
                         [VIOLATED, CONCERN, CONCERN], OK).astype(np.int8)

    nan = np.full(r, np.nan)
    return (StackedCheck("skewness", skew, nan, judge(skew, policy.skew_limit, se_skew)),
            StackedCheck("kurtosis", kurt, nan, judge(kurt, policy.kurtosis_limit, se_kurt)))


def modified_z_rows(x: np.ndarray, blocks: Blocks) -> tuple[np.ndarray, np.ndarray]:
    """(R, N) modified z-scores of every value within its group and on the
    pooled scale, row by row, as :func:`famwise.diagnostics.shape.modified_z`
    and :func:`~famwise.diagnostics.shape.pooled_scale` compute them for one
    data set (0 in groups of fewer than three)."""
    within = np.zeros(x.shape)
    dev_all = np.zeros(x.shape)
    used = np.zeros(x.shape[1], dtype=bool)
    for s, size in zip(blocks.slices(), blocks.n):
        if size < 3:
            continue
        g = x[:, s]
        dev = g - np.median(g, axis=1, keepdims=True)
        mad = np.median(np.abs(dev), axis=1, keepdims=True)
        mean_ad = np.mean(np.abs(dev), axis=1, keepdims=True)
        with np.errstate(invalid="ignore", divide="ignore"):
            within[:, s] = np.where(mad > 0, 0.6745 * dev / mad,
                                    np.where(mean_ad > 0, dev / (1.2533 * mean_ad), 0.0))
        dev_all[:, s] = dev
        used[s] = True
    pooled = np.zeros(x.shape)
    if used.any():
        a = np.abs(dev_all[:, used])
        mad = np.median(a, axis=1)
        scale = np.where(mad > 0, mad / 0.6745, 1.2533 * a.mean(axis=1))
        with np.errstate(invalid="ignore", divide="ignore"):
            pooled = np.where(scale[:, None] > 0, dev_all / scale[:, None], 0.0)
    return within, pooled


def outliers(x: np.ndarray, blocks: Blocks, policy: Policy) -> StackedCheck:
    """The largest flagged |modified z| within a group of each row (0 when none),
    violated when a value is gross (:func:`famwise.diagnostics.shape.is_gross`),
    as :func:`famwise.diagnostics.shape.outliers` judges one data set."""
    from .shape import is_gross
    r = x.shape[0]
    within, pooled = modified_z_rows(x, blocks)
    worst = np.abs(within).max(axis=1) if x.shape[1] else np.zeros(r)
    gross = is_gross(within, pooled, policy).any(axis=1)
    found = worst > policy.outlier_z
    verdict = np.where(found, np.where(gross, VIOLATED, CONCERN), OK)
    return StackedCheck("outliers", np.where(found, worst, 0.0), np.full(r, np.nan),
                        verdict.astype(np.int8))


def sd_ratio(variances: np.ndarray, policy: Policy) -> StackedCheck:
    sd = np.sqrt(variances)
    lo, hi = sd.min(axis=1), sd.max(axis=1)
    with np.errstate(invalid="ignore", divide="ignore"):
        ratio = np.where(lo > 0, hi / lo, np.inf)
    limit = policy.sd_ratio_limit
    verdict = np.where(ratio > limit, VIOLATED, np.where(ratio > (1 + limit) / 2, CONCERN, OK))
    return StackedCheck("sd-ratio", ratio, np.full(len(ratio), np.nan), verdict.astype(np.int8))


def pairing(variances: np.ndarray, blocks: Blocks, policy: Policy) -> StackedCheck:
    """Spearman's correlation of group size and SD in each row, judged as
    :func:`famwise.diagnostics.spread.pairing`."""
    n = blocks.n.astype(float)
    sd = np.sqrt(variances)
    r = sd.shape[0]
    size_ratio = n.max() / n.min()
    with np.errstate(invalid="ignore", divide="ignore"):
        ratio = np.where(sd.min(axis=1) > 0, sd.max(axis=1) / sd.min(axis=1), np.inf)
    flat = np.all(sd == sd[:, :1], axis=1)
    if blocks.k < 3:
        rho = np.sign((n[0] - n[1]) * (sd[:, 0] - sd[:, 1]))
    elif np.all(n == n[0]):
        rho = np.zeros(r)
    else:
        rn = stats.rankdata(n) - (blocks.k + 1) / 2
        rs = stats.rankdata(sd, axis=1) - (blocks.k + 1) / 2
        with np.errstate(invalid="ignore", divide="ignore"):
            rho = (rs @ rn) / np.sqrt(np.sum(rs * rs, axis=1) * np.sum(rn * rn))
        rho = np.where(flat, 0.0, rho)
    small_large = (rho <= -0.5) & (size_ratio >= 1.5)
    limit = policy.sd_ratio_limit
    verdict = np.where(small_large & (ratio > limit), VIOLATED,
                       np.where(small_large & (ratio > (1 + limit) / 2), CONCERN, OK))
    return StackedCheck("size-spread-pairing", rho, np.full(r, np.nan), verdict.astype(np.int8))


def stacked_checks(x: np.ndarray, blocks: Blocks, policy: Policy | None = None, *,
                   summaries=None) -> StackedFindings:
    """Run the shape and spread checks on every row of ``x`` (R, N).

    ``summaries`` may pass the rows' ``(means, variances)`` when the caller
    has them already.  The design checks depend on the sizes alone, the same
    in every row; :func:`famwise.diagnostics.simulate.route_table` reads them once.
    """
    policy = policy or Policy()
    x = np.asarray(x, dtype=np.float64)
    means, var = summaries if summaries is not None else blocks.summaries(x)
    z = standardised(x, blocks, means, var)
    skew, kurt = moments(z, policy)
    bf_stat, bf_p = brown_forsythe(x, blocks)
    fk_stat, fk_p = fligner(x, blocks)
    ba_stat, ba_p = bartlett(var, blocks)
    checks = {
        "normality": normality(z, policy), "skewness": skew, "kurtosis": kurt,
        "outliers": outliers(x, blocks, policy),
        "brown-forsythe": StackedCheck("brown-forsythe", bf_stat, bf_p,
                                       _test_verdict(bf_p, policy, True)),
        "sd-ratio": sd_ratio(var, policy),
        "size-spread-pairing": pairing(var, blocks, policy),
        "fligner-killeen": StackedCheck("fligner-killeen", fk_stat, fk_p,
                                        _test_verdict(fk_p, policy, False)),
        "bartlett": StackedCheck("bartlett", ba_stat, ba_p, _test_verdict(ba_p, policy, False)),
    }
    return StackedFindings(checks)

"""Shape of the within-group residuals: normality, skew, tails, outliers.

Residuals are ``x - mean(group)``.  For the normality test and the moments
they are also divided by their group's SD, so unequal spreads do not pass
for heavy tails (the spread checks judge spread).  At large N every normality
test rejects trivially, so above ``policy.pvalue_decides_below`` residuals
the verdict comes from the magnitudes of skewness and excess kurtosis and the
p-value is reported for information only.
"""

from __future__ import annotations

import numpy as np
from scipy import stats

from ..core.layout import Layout
from .check import Check
from .policy import Policy

__all__ = ["residuals", "standardised_residuals", "normality", "moments", "outliers",
           "pooled_scale", "is_gross",
           "anderson_darling", "shape_checks"]


def residuals(layout: Layout) -> np.ndarray:
    """Return the within-group residuals ``x - mean(group)`` in input order."""
    return layout.values - layout.stats.mean[layout.codes]


def standardised_residuals(layout: Layout) -> np.ndarray:
    """Return residuals divided by their group SD, with the ``sqrt(n/(n-1))``
    correction that gives each standardised residual unit variance."""
    st = layout.stats
    sd = np.where(st.sd > 0, st.sd, 1.0)
    scale = sd * np.sqrt((st.n - 1) / st.n)
    return residuals(layout) / scale[layout.codes]


def anderson_darling(x: np.ndarray) -> tuple[float, float]:
    """Anderson–Darling test of normality with estimated mean and variance.

    Returns the modified statistic A*^2 = A^2 (1 + 0.75/n + 2.25/n^2) and its
    p-value from the piecewise formulas of D'Agostino & Stephens (1986),
    *Goodness-of-Fit Techniques*, Table 4.9 (case 3: both parameters
    estimated).
    """
    x = np.sort(np.asarray(x, dtype=np.float64))
    n = x.size
    z = (x - x.mean()) / x.std(ddof=1)
    logcdf = stats.norm.logcdf(z)
    logsf = stats.norm.logsf(z)
    i = np.arange(1, n + 1)
    a2 = -n - np.sum((2 * i - 1) * (logcdf + logsf[::-1])) / n
    a = a2 * (1 + 0.75 / n + 2.25 / n ** 2)
    if a >= 0.6:
        p = np.exp(1.2937 - 5.709 * a + 0.0186 * a * a)
    elif a >= 0.34:
        p = np.exp(0.9177 - 4.279 * a - 1.38 * a * a)
    elif a >= 0.2:
        p = 1 - np.exp(-8.318 + 42.796 * a - 59.938 * a * a)
    else:
        p = 1 - np.exp(-13.436 + 101.14 * a - 223.73 * a * a)
    return float(a), float(min(max(p, 0.0), 1.0))


def normality(layout: Layout, policy: Policy) -> Check:
    """Shapiro–Wilk (N <= policy.shapiro_max) or Anderson–Darling above."""
    z = standardised_residuals(layout)
    n = z.size
    if n < 3:
        return Check("normality", "none (fewer than 3 residuals)", None, None, "-", "ok",
                     "Too few residuals to test normality.")
    if n <= policy.shapiro_max:
        method = "Shapiro-Wilk on standardised within-group residuals"
        stat, p = stats.shapiro(z)
    else:
        method = "Anderson-Darling on standardised within-group residuals"
        stat, p = anderson_darling(z)
    stat, p = float(stat), float(p)
    decides = n < policy.pvalue_decides_below
    if decides:
        threshold = f"p < {policy.check_alpha:g} (p decides below {policy.pvalue_decides_below} residuals)"
        verdict = "violated" if p < policy.check_alpha else "ok"
        sentence = (f"The residuals depart from normality (p = {p:.3g})." if verdict != "ok"
                    else f"No clear departure from normality (p = {p:.3g}).")
    else:
        threshold = (f"for information only at {n} residuals; skewness and kurtosis decide")
        verdict = "ok"
        sentence = (f"With {n} residuals the test (p = {p:.3g}) detects even trivial "
                    f"departures, so the size of the skew and tails decides instead.")
    return Check("normality", method, stat, p, threshold, verdict, sentence,
                 {"n_residuals": n, "p_value_decides": decides})


def moments(layout: Layout, policy: Policy) -> tuple[Check, Check]:
    """Skewness and excess kurtosis of the standardised residuals."""
    z = standardised_residuals(layout)
    n = z.size
    skew = float(stats.skew(z, bias=False)) if n > 2 else 0.0
    kurt = float(stats.kurtosis(z, fisher=True, bias=False)) if n > 3 else 0.0
    # Standard errors of the sample skewness and kurtosis under normality
    # (e.g. Joanes & Gill 1998, The Statistician 47:183-189, eqs. for G1, G2).
    se_skew = np.sqrt(6.0 * n * (n - 1) / ((n - 2) * (n + 1) * (n + 3))) if n > 2 else np.inf
    se_kurt = (2 * se_skew * np.sqrt((n * n - 1) / ((n - 3) * (n + 5)))) if n > 3 else np.inf

    def judge(value, limit, se, what):
        big = abs(value) > limit
        clear = abs(value) > 2 * se          # larger than sampling noise
        if big and clear:
            verdict = "violated" if abs(value) > 2 * limit or n >= policy.pvalue_decides_below \
                else "concern"
        elif big or (clear and abs(value) > limit / 2):
            verdict = "concern"
        else:
            verdict = "ok"
        words = {"ok": "modest", "concern": "noticeable", "violated": "large"}[verdict]
        return verdict, f"The residuals' {what} is {words} ({value:+.2f}; SE about {se:.2f})."

    v1, s1 = judge(skew, policy.skew_limit, se_skew, "skewness")
    v2, s2 = judge(kurt, policy.kurtosis_limit, se_kurt, "excess kurtosis")
    return (Check("skewness", "adjusted Fisher-Pearson G1 of standardised residuals", skew,
                  None, f"|G1| > {policy.skew_limit:g}", v1, s1, {"se": float(se_skew)}),
            Check("kurtosis", "adjusted excess kurtosis G2 of standardised residuals", kurt,
                  None, f"|G2| > {policy.kurtosis_limit:g}", v2, s2, {"se": float(se_kurt)}))


def modified_z(x: np.ndarray) -> np.ndarray:
    """Modified z-scores 0.6745 (x - median) / MAD (Iglewicz & Hoaglin 1993).

    When the MAD is zero (more than half the values tie), the mean absolute
    deviation is used instead, scaled by 1.2533 (= sqrt(pi/2)) so that it too
    estimates the SD of normal data (common practice, no source).
    """
    med = np.median(x)
    mad = np.median(np.abs(x - med))
    if mad > 0:
        return 0.6745 * (x - med) / mad
    mean_ad = np.mean(np.abs(x - med))
    if mean_ad == 0:
        return np.zeros_like(x)
    return (x - med) / (1.2533 * mean_ad)


def pooled_scale(values: np.ndarray, codes: np.ndarray, k: int) -> float:
    """A robust scale pooled over the groups: the MAD of every value about its
    own group's median, over the groups of three or more, times 1/0.6745 (so
    that it estimates the SD of normal data); the scaled mean absolute
    deviation when that MAD is zero, as :func:`modified_z`.  0 when no group
    has three values."""
    dev = []
    for code in range(k):
        g = values[codes == code]
        if g.size >= 3:
            dev.append(np.abs(g - np.median(g)))
    if not dev:
        return 0.0
    dev = np.concatenate(dev)
    mad = float(np.median(dev))
    return mad / 0.6745 if mad > 0 else 1.2533 * float(np.mean(dev))


def is_gross(within_z, pooled_z, policy: Policy):
    """Whether a value is gross: its modified z exceeds ``policy.gross_outlier_z``
    both within its group and on the pooled scale (:func:`pooled_scale`).

    Within its group alone, a group of four to six normal values has a MAD
    so noisy that one value in a few hundred such groups passes 7 (the
    error-rate matrix's unbalanced normal designs sent about 6% of null data
    sets to the robust route); on the pooled scale alone, every value of a
    group with a genuinely larger spread would pass.  A decimal slip or a
    contaminated sample stands out on both (the demo's typo: 7.6 within
    its group, 10.5 pooled).  Our policy, no source."""
    g = policy.gross_outlier_z
    return (np.abs(within_z) > g) & (np.abs(pooled_z) > g)


def outliers(layout: Layout, policy: Policy) -> Check:
    """Values whose modified z-score within their group exceeds ``policy.outlier_z``;
    gross (:func:`is_gross`) when it exceeds ``policy.gross_outlier_z`` both
    within the group and on the pooled scale."""
    found = []
    scale = pooled_scale(layout.values, layout.codes, len(layout.labels))
    for code, label in enumerate(layout.labels):
        idx = np.flatnonzero(layout.codes == code)
        if idx.size < 3:
            continue
        g = layout.values[idx]
        mz = modified_z(g)
        pz = (g - np.median(g)) / scale if scale > 0 else np.zeros_like(g)
        for j in np.flatnonzero(np.abs(mz) > policy.outlier_z):
            found.append({"row": int(layout.rows[idx[j]]), "group": label,
                          "value": float(layout.values[idx[j]]), "modified_z": float(mz[j]),
                          "pooled_z": float(pz[j]),
                          "gross": bool(is_gross(mz[j], pz[j], policy))})
    found.sort(key=lambda d: -abs(d["modified_z"]))
    worst = max((abs(d["modified_z"]) for d in found), default=0.0)
    if not found:
        verdict, sentence = "ok", f"No value has a modified z-score above {policy.outlier_z:g}."
    else:
        listed = "; ".join(f"row {d['row']} ({d['group']}, {d['value']:g}, z = "
                           f"{d['modified_z']:+.1f}" + (", gross" if d["gross"] else "") + ")"
                           for d in found[:5])
        more = f" and {len(found) - 5} more" if len(found) > 5 else ""
        gross = any(d["gross"] for d in found)
        verdict = "violated" if gross else "concern"
        sentence = (f"{len(found)} value{'s' if len(found) > 1 else ''} "
                    f"{'lie' if len(found) > 1 else 'lies'} far from "
                    f"{'their' if len(found) > 1 else 'its'} group's median: {listed}{more}."
                    + (" Check them against the field or lab records." if gross else ""))
    return Check("outliers", "modified z-score within each group (Iglewicz & Hoaglin 1993)",
                 float(worst), None,
                 f"|z| > {policy.outlier_z:g}; gross above {policy.gross_outlier_z:g} within "
                 f"the group and on the pooled scale",
                 verdict, sentence, {"outliers": found, "pooled_scale": float(scale)})


def shape_checks(layout: Layout, policy: Policy | None = None) -> tuple[Check, ...]:
    """Run every shape check."""
    policy = policy or Policy()
    skew, kurt = moments(layout, policy)
    return (normality(layout, policy), skew, kurt, outliers(layout, policy))

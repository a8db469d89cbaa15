"""Spread across groups: equal variances, SD ratio, and size-variance pairing.

The classical pooled procedures assume one common variance.  They are most
liberal when the small groups carry the large variances (the pooled estimate
is then dominated by the large, quiet groups), so that pairing is checked on
its own.
"""

from __future__ import annotations

import numpy as np
from scipy import stats

from ..core.layout import Layout
from .check import Check
from .policy import Policy

__all__ = ["brown_forsythe", "fligner_killeen", "bartlett", "sd_ratio", "pairing",
           "spread_checks"]


def _test(name, method, fn, layout, policy, decides=True) -> Check:
    groups = layout.split()
    stat, p = fn(*groups)
    stat, p = float(stat), float(p)
    if not np.isfinite(p):
        return Check(name, method, stat, None, "-", "ok",
                     f"{method} could not be computed (a group has no spread).")
    verdict = "violated" if (p < policy.check_alpha and decides) else "ok"
    if p < policy.check_alpha and not decides:
        verdict = "concern"
    sentence = (f"{method}: the group spreads differ (p = {p:.3g})." if p < policy.check_alpha
                else f"{method}: no clear difference in spread (p = {p:.3g}).")
    return Check(name, method, stat, p, f"p < {policy.check_alpha:g}", verdict, sentence)


def brown_forsythe(layout: Layout, policy: Policy) -> Check:
    """Brown & Forsythe (1974): Levene's test on deviations from group medians."""
    return _test("brown-forsythe", "Brown-Forsythe (median-centred Levene)",
                 lambda *g: stats.levene(*g, center="median"), layout, policy)


def fligner_killeen(layout: Layout, policy: Policy) -> Check:
    """Fligner–Killeen rank test of equal spread (reported, does not route)."""
    return _test("fligner-killeen", "Fligner-Killeen",
                 lambda *g: stats.fligner(*g, center="median"), layout, policy, decides=False)


def bartlett(layout: Layout, policy: Policy) -> Check:
    """Bartlett's test (sensitive to non-normality; reported, does not route)."""
    return _test("bartlett", "Bartlett", stats.bartlett, layout, policy, decides=False)


def sd_ratio(layout: Layout, policy: Policy) -> Check:
    """Largest over smallest group SD (rule of thumb: above 2 is unequal)."""
    sd = layout.stats.sd
    hi, lo = int(np.argmax(sd)), int(np.argmin(sd))
    ratio = float(sd[hi] / sd[lo]) if sd[lo] > 0 else np.inf
    limit = policy.sd_ratio_limit
    verdict = "violated" if ratio > limit else ("concern" if ratio > (1 + limit) / 2 else "ok")
    sentence = (f"The largest SD ({layout.labels[hi]}, {sd[hi]:.4g}) is {ratio:.3g} times "
                f"the smallest ({layout.labels[lo]}, {sd[lo]:.4g}).")
    return Check("sd-ratio", "largest / smallest group SD", ratio, None, f"> {limit:g}",
                 verdict, sentence, {"largest": layout.labels[hi], "smallest": layout.labels[lo]})


def pairing(layout: Layout, policy: Policy) -> Check:
    """Whether the small groups carry the large variances.

    Statistic: Spearman's correlation between group size and group SD.  The
    pairing matters when sizes and spreads both differ; it is judged
    ``violated`` when the correlation is at most -0.5 with an SD ratio above
    the policy's limit and a size ratio of 1.5 or more (our policy, no source).
    """
    st = layout.stats
    n, sd = st.n.astype(float), st.sd
    size_ratio = float(n.max() / n.min())
    ratio = float(sd.max() / sd.min()) if sd.min() > 0 else np.inf
    if layout.k < 3 or np.all(n == n[0]) or np.all(sd == sd[0]):
        # Two groups (or no variation): the sign of the size-spread relation.
        rho = 0.0 if layout.k >= 3 else float(np.sign((n[0] - n[1]) * (sd[0] - sd[1])))
    else:
        rho = float(stats.spearmanr(n, sd).statistic)
    small_large = rho <= -0.5 and size_ratio >= 1.5
    if small_large and ratio > policy.sd_ratio_limit:
        verdict = "violated"
        sentence = ("The smaller groups have the larger spreads; pooled-variance procedures "
                    "are liberal in this pattern.")
    elif small_large and ratio > (1 + policy.sd_ratio_limit) / 2:
        verdict = "concern"
        sentence = "The smaller groups tend to have the larger spreads."
    else:
        verdict = "ok"
        sentence = "Group sizes and spreads are not paired in the harmful direction."
    return Check("size-spread-pairing", "Spearman correlation of group size and SD", rho, None,
                 "rho <= -0.5 with size ratio >= 1.5 and SD ratio above the limit", verdict,
                 sentence, {"size_ratio": size_ratio, "sd_ratio": ratio})


def spread_checks(layout: Layout, policy: Policy | None = None) -> tuple[Check, ...]:
    """Run every spread check."""
    policy = policy or Policy()
    return (brown_forsythe(layout, policy), sd_ratio(layout, policy), pairing(layout, policy),
            fligner_killeen(layout, policy), bartlett(layout, policy))

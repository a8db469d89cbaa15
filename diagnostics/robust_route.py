"""The routes for data with non-detects and for data with gross values.

Called by :func:`famwise.diagnostics.route.choose` before the shape and
spread branches:

* **censored** (the data hold non-detects): a rank procedure for censored
  values, ``gehan-maxt`` with one detection limit and ``peto-maxt`` when
  the limits differ between groups (``policy.peto_when_limits_differ``);
  the other is the cross-check.  Procedures on means would need invented
  values for the non-detects; the substitution sensitivity table of the
  result shows whether that would change any decision.
* **robust** (the outlier check found a gross value, modified z above
  ``policy.gross_outlier_z``, that stands apart: without it the rest of the
  data pass the shape checks, :func:`isolated`; ``policy.gross_outlier_route``):
  no procedure on means, whose estimate and interval one value can
  dominate.  Far values in the long tail of skewed data are not gross
  errors; such data keep the skewed-data route.  Yuen's
  trimmed means (``yuen-holm``) when every group holding a gross value has
  at least ``policy.trimmed_min_n`` values, so that 20% trimming removes it;
  otherwise ranks: the pair's own Wilcoxon statistic by permutation
  (``steel-dwass`` / ``steel`` when installed, else ``gehan-maxt``, which
  without non-detects is that statistic).  The rows to check are listed.
"""

from __future__ import annotations

import numpy as np

from ..core.errors import FamwiseInputError
from ..core.families import Family
from ..core.layout import Layout
from ..procedures.catalogue import CATALOGUE
from .check import Findings
from .policy import Policy

__all__ = ["censored_route", "gross_values", "gross_route", "isolated"]


def _alt(procedure, why):
    """An alternative set aside, as (procedure, why); the route makes it an Alternative."""
    return (procedure, why)


def censored_route(layout: Layout, family: Family, policy: Policy):
    """Return (procedure, reasons, alternatives, warnings, crosscheck)."""
    if getattr(layout, "design", None) is not None:
        raise FamwiseInputError(
            "the data hold non-detects, and the censored procedures compare the groups as "
            "a one-way layout; with blocks or covariates set the non-detects aside "
            "(nondetects='drop', --nondetects drop: this biases means upward) or drop the "
            "blocks")
    if not family.is_pairwise:
        raise FamwiseInputError(
            "the data hold non-detects, and the censored procedures (gehan-maxt, "
            "peto-maxt) compare pairs of groups; use family 'all-pairs' or 'vs-reference', "
            "or set the non-detects aside with nondetects='drop' (this biases means upward)")
    cens = layout.censored
    n_cens = int(cens.sum())
    per_group = []
    limits_by_group = []
    for g, label in enumerate(layout.labels):
        sel = layout.codes == g
        c = int(cens[sel].sum())
        per_group.append((label, c, int(sel.sum())))
        limits_by_group.append(frozenset(layout.values[sel & cens].tolist()))
    all_limits = sorted(set().union(*limits_by_group))
    with_nd = [s for s in limits_by_group if s]
    differ = len(set(with_nd)) > 1 or any(len(s) > 1 for s in with_nd)
    shown = ", ".join(f"{lab} {c}/{n}" for lab, c, n in per_group if c)
    reasons = [f"{n_cens} of the {layout.n_total} values are non-detects ({shown}); famwise "
               f"keeps them as left-censored values (known only to lie below their "
               f"detection limit) instead of inventing values for them."]
    limits_text = ", ".join(f"{x:g}" for x in all_limits[:6]) + (
        ", ..." if len(all_limits) > 6 else "")
    if differ and policy.peto_when_limits_differ:
        proc, second = "peto-maxt", "gehan-maxt"
        reasons.append(
            f"The detection limits differ ({limits_text}), so each pair is compared by the "
            f"Peto-Prentice generalised Wilcoxon statistic, whose weights depend less on "
            f"the censoring pattern than Gehan's, with a permutation max-T over all pairs "
            f"of the family.")
    else:
        proc, second = "gehan-maxt", "peto-maxt"
        reasons.append(
            f"With {'one detection limit (' + limits_text + ')' if len(all_limits) == 1 else 'these limits'}, "
            f"each pair is compared by Gehan's generalised Wilcoxon statistic (the "
            f"non-detects rank below every value measured at or above their limit), with "
            f"a permutation max-T over the family.")
    reasons.append("These are rank tests: they ask whether one group tends to higher "
                   "values than another, not how far apart the means are; no simultaneous "
                   "intervals are given.")
    alternatives = [
        _alt(second, "the other censored score; run as the cross-check"),
        _alt("substitution", "replacing non-detects by 0, half the limit or the limit "
                             "invents values (see the sensitivity table for whether it "
                             "would change a decision)"),
        _alt("nondetects='drop'", "setting non-detects aside biases every summary upward "
                                  "and throws away the information that a group is low"),
    ]
    warnings = []
    heavy = [(lab, c, n) for lab, c, n in per_group if n and 100.0 * c / n
             > policy.censored_warn_percent]
    if heavy:
        listed = ", ".join(f"{lab!r} ({100.0 * c / n:.0f}%)" for lab, c, n in heavy)
        warnings.append(f"More than {policy.censored_warn_percent:g}% of the values are "
                        f"non-detects in {listed}: such a group carries little information "
                        f"beyond 'mostly below the limit'.")
    return proc, reasons, alternatives, warnings, second


def gross_values(findings: Findings, policy: Policy) -> list[dict]:
    """The outliers the check marked gross (:func:`famwise.diagnostics.shape.is_gross`:
    the modified z beyond the policy's gross threshold within the group and
    on the pooled scale); a model's outlier check, which has no pooled
    scale, by its modified z alone."""
    check = findings.get("outliers")
    found = (check.details or {}).get("outliers", []) if check is not None else []
    return [d for d in found if d.get("gross", abs(d.get("modified_z", 0.0))
                                      > policy.gross_outlier_z)]


def isolated(gross: list[dict], layout: Layout, policy: Policy) -> bool:
    """Whether the gross values stand apart from an otherwise well-shaped sample.

    The shape checks are re-run without the gross values' rows: when the
    rest is still skewed or heavy-tailed (normality, skewness or kurtosis
    violated), the far values are the long tail of a
    skewed distribution, not errors, and the skewed-data route applies
    (trimmed means or ranks would then answer a different question than the
    means the user asked about).  A value that stands alone is what a
    decimal slip or a contaminated sample looks like.
    """
    from .shape import shape_checks
    rows = {d["row"] for d in gross}
    keep = ~np.isin(layout.rows, list(rows))
    if keep.sum() == layout.n_total:
        return False
    rest = Layout(values=layout.values[keep], codes=layout.codes[keep], labels=layout.labels,
                  rows=layout.rows[keep], response=layout.response, group=layout.group,
                  source=layout.source)
    if np.any(rest.stats.n < 2):
        return True
    checks = {c.name: c for c in shape_checks(rest, policy)}
    return not any(checks[n].verdict == "violated"
                   for n in ("normality", "skewness", "kurtosis"))


def gross_route(gross: list[dict], layout: Layout, family: Family, policy: Policy,
                unequal: list[str]):
    """Return (procedure, reasons, alternatives, warnings, crosscheck) or None."""
    if not family.is_pairwise:
        return None
    rows = ", ".join(f"row {d['row']} ({d['group']}, {d['value']:g}, modified z "
                     f"{d['modified_z']:+.1f})" for d in gross[:8])
    more = f" and {len(gross) - 8} more" if len(gross) > 8 else ""
    reasons = [f"Gross values (modified z above {policy.gross_outlier_z:g}): {rows}{more}. "
               f"One such value can dominate a mean, its standard error and every "
               f"interval built on it, so no procedure on means is used. Check these rows "
               f"against the field or laboratory records; exclude a row only for a "
               f"documented reason (exclude_rows=, --exclude-rows)."]
    n = layout.stats.n
    label_code = {lab: g for g, lab in enumerate(layout.labels)}
    sizes = [int(n[label_code[d["group"]]]) for d in gross]
    trimmable = min(sizes) >= policy.trimmed_min_n
    ranks = "steel-dwass" if family.kind == "all-pairs" else "steel"
    if ranks not in CATALOGUE:
        ranks = "gehan-maxt"
    alternatives = []
    if trimmable:
        proc = "yuen-holm"
        reasons.append(
            f"Every group holding a gross value has at least {policy.trimmed_min_n} "
            f"values, so Yuen's 20%-trimmed means set it aside within its group; they are "
            f"compared by Welch-type tests with winsorised variances (unequal spreads "
            f"allowed), Holm adjusted.  They estimate trimmed means, not means.")
        second = ranks
        alternatives.append(_alt(ranks, "a rank test answers a different question (which "
                                        "group tends higher), and is the cross-check"))
    else:
        proc = ranks
        small = sorted({d["group"] for d in gross
                        if int(n[label_code[d["group"]]]) < policy.trimmed_min_n})
        method = (" by permutation (groups under "
                  f"{policy.rank_permutation_below})"
                  if ranks != "gehan-maxt" and policy.rank_method(n) == "permutation"
                  else "")
        reasons.append(
            f"A gross value sits in a group of fewer than {policy.trimmed_min_n} values "
            f"({', '.join(map(repr, small))}), where 20% trimming removes nothing, so "
            f"ranks are used: each pair's own Wilcoxon statistic ({ranks}{method}); one "
            f"value can move a rank by at most one place.")
        second = "yuen-holm"
        alternatives.append(_alt("yuen-holm", "20% trimming removes nothing from a group "
                                              "under " + str(policy.trimmed_min_n)))
    alternatives.append(_alt("bootstrap-hall", "a procedure on means: one gross value "
                                               "dominates its estimate and intervals"))
    warnings = []
    if proc != "yuen-holm" and unequal:
        warnings.append("The spreads differ as well; a permutation of ranks assumes the "
                        "groups would share one distribution under the null, so treat "
                        "borderline results with caution.")
    return proc, reasons, alternatives, warnings, second

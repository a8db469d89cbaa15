"""The text summary for the terminal: groups, comparisons, the route, a caution.

Fits the given width (100 columns by default): long labels are clipped with
an ellipsis in the tables and the prose is wrapped.
"""

from __future__ import annotations

import textwrap

import numpy as np
import pandas as pd

from .estimates import censoring_sentence, estimate_sentence
from .textformat import format_number, frame_text

__all__ = ["summary_text", "model_lines", "anova_display", "CAUTION"]

CAUTION = ("Caution: significance is not importance, field data do not prove causes, and "
           "regulated or safety decisions need the applicable rules and a qualified "
           "statistician's review.")


def _interval(lo, hi) -> str:
    if not (np.isfinite(lo) or np.isfinite(hi)) and np.isnan(lo) and np.isnan(hi):
        return "none"
    return f"[{format_number(lo)}, {format_number(hi)}]"


def anova_display(fit) -> pd.DataFrame:
    """The adjusted ANOVA table as shown in reports (source as a column)."""
    tab = fit.anova("adjusted").reset_index()
    tab = tab.rename(columns={"sum_of_squares": "sum of squares", "mean_square": "mean square",
                              "f": "F"})
    return tab[["source", "kind", "df", "sum of squares", "mean square", "F", "p"]]


def model_lines(result, wrap) -> list[str]:
    """The model section of the summary: terms, ANOVA table, efficiency, CV."""
    from ..model import fit_model
    fit = fit_model(result.layout)
    lines = [wrap(f"Model: {fit.describe()}."),
             "Analysis of variance (each term adjusted for the others)",
             frame_text(anova_display(fit))]
    eff = fit.efficiency()
    extra = []
    if eff is not None:
        extra.append(eff.sentence())
    if np.isfinite(fit.cv):
        extra.append(f"Coefficient of variation {fit.cv:.3g}%.")
    if fit.means_correlated:
        extra.append("The adjusted means are correlated (covariates or incomplete blocks); "
                     "each comparison uses its own standard error from the model.")
    if extra:
        lines.append(wrap(" ".join(extra)))
    return lines


def summary_text(result, width: int = 100) -> str:
    """Return the plain-text summary of a :class:`~famwise.comparison.Comparison`."""
    rec = result.decision
    lay = result.layout
    led = rec.input["ledger"]
    wrap = lambda s: textwrap.fill(s, width=width, subsequent_indent="  ")  # noqa: E731
    out = [wrap(f"famwise: {lay.response} by {lay.group}: {lay.k} groups, {led['used']} of "
                f"{led['read']} {led['unit']}s used ({led['dropped']} set aside; see the "
                f"ledger)."),
           wrap(f"Procedure: {rec.route['procedure']} ({rec.route['route']} route, chosen by "
                f"the {rec.route['chosen_by']}); familywise alpha {rec.alpha:g}."), ""]
    model = lay.design is not None
    if model:
        out += model_lines(result, wrap) + [""]
    key = "adjusted_mean" if model else "mean"
    groups = result.groups.sort_values(key, ascending=False)
    cols = (["group", "n", "adjusted_mean", "adjusted_se", "mean"] if model
            else ["group", "n", "mean", "sd"]) + (
        ["geometric_mean"] if "geometric_mean" in groups else []) + (
        ["letters"] if "letters" in groups else [])
    km = "censored" in groups
    if km:
        groups = groups.assign(**{"non-detects": [f"{c} ({p:.0f}%)" for c, p in zip(
            groups["censored"], groups["percent_censored"])]})
        cols.insert(2, "non-detects")
    out.append(("Groups, largest adjusted mean first" if model else
                "Groups, largest Kaplan-Meier mean first" if km else
                "Groups, largest mean first")
               + (" (groups sharing a letter were not declared different)"
                  if "letters" in groups else ""))
    out.append(frame_text(groups[cols].reset_index(drop=True)))
    out.append("")
    t = result.comparisons
    level = int(round(100 * (1 - rec.alpha)))
    if "ratio" in t:
        shown = pd.DataFrame({
            "comparison": t["comparison"],
            "ratio": t["ratio"],
            f"{level}% interval": [_interval(a, b) for a, b in zip(t["ratio_lower"],
                                                                   t["ratio_upper"])],
            "p adjusted": t["p_adjusted"],
            "verdict": np.where(t["reject"], "differ", "not shown to differ"),
        })
    else:
        shown = pd.DataFrame({
            "comparison": t["comparison"],
            "difference": t["difference"],
            f"{level}% interval": [_interval(a, b) for a, b in zip(t["ci_lower"],
                                                                   t["ci_upper"])],
            "p adjusted": t["p_adjusted"],
            "verdict": np.where(t["reject"], "differ", "not shown to differ"),
        })
    if "practical" in t:
        shown["practical"] = t["practical"]
    out.append(f"Comparisons ({len(t)})")
    out.append(frame_text(shown, max_label=min(40, max(12, width // 3))))
    out.append(wrap(estimate_sentence(result)))
    withheld = t.attrs.get("intervals_withheld")
    if withheld:
        out.append(wrap(f"Intervals withheld for {len(withheld['comparisons'])} comparison(s): "
                        f"{withheld['reason']}."))
    out.append("")
    reasons = " ".join(rec.route["reasons"][:3]) or "see the decision record."
    if rec.route["chosen_by"] == "user" and rec.route["against"]:
        reasons += " Checks that argue against it: " + "; ".join(rec.route["against"]) + "."
    out.append(wrap("Why: " + reasons))
    for w in rec.route["warnings"]:
        out.append(wrap("Note: " + w))
    if rec.route.get("proposal"):
        out.append(wrap("Scale: " + rec.route["proposal"]))
    if getattr(rec, "transform", None):
        out.append(wrap("Scale: " + rec.transform["sentence"] + "."))
    nd_text = censoring_sentence(result)
    if nd_text:
        out.append(wrap("Non-detects: " + nd_text))
    if rec.crosscheck:
        out.append(wrap("Cross-check: " + rec.crosscheck["sentence"]))
    if rec.resampling:
        r = rec.resampling
        out.append(wrap(f"Resampling: the reference distribution is resampled (no degrees "
                        f"of freedom apply); B = {r['resamples']}, seed {r['seed']}, largest "
                        f"Monte Carlo SE {r['max_mc_error']:.2g}"
                        + (f", unsettled: {', '.join(r['unsettled'])}" if r["unsettled"]
                           else "")))
    out.append(wrap(CAUTION))
    return "\n".join(out)

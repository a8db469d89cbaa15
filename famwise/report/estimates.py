"""What a result estimates, in plain words, for the text summary and the HTML report.

One sentence for the scale of the ``difference`` column and one for what
the procedure's test is about: differences of means, of trimmed means, a
shift or relative effect of ranks, or, for censored data, whether one
group tends to higher values.
"""

from __future__ import annotations

__all__ = ["estimate_sentence", "censoring_sentence"]

_RANKS = {
    "gehan-maxt": "Gehan's generalised Wilcoxon statistic",
    "peto-maxt": "the Peto-Prentice generalised Wilcoxon statistic",
}


def estimate_sentence(result) -> str:
    """Return one or two plain sentences on what the comparisons table estimates."""
    t = result.comparisons
    proc = str(t["procedure"].iloc[0]) if len(t) else ""
    censored = getattr(result.layout, "has_censoring", False)
    if proc in _RANKS:
        what = (f"Rank test for {'values with non-detects' if censored else 'any values'}: "
                f"each pair is compared by {_RANKS[proc]} of its own two groups, which asks "
                f"whether one group tends to higher values than the other, not how far "
                f"apart the means are; no simultaneous intervals are given.")
        if censored:
            what += (" 'difference' is the difference of the groups' Kaplan-Meier means "
                     "(non-detects kept below their limits), for description only.")
        else:
            what += " 'difference' is the difference of means, for description only."
        if "relative_effect" in t:
            what += (" 'relative_effect' is the chance that a value of the first group lies "
                     "above one of the second (order unknown or tied counted as half): 0.5 "
                     "means neither tends higher.")
        return what
    if proc == "yuen-holm":
        return ("Scale: differences of 20%-trimmed means (the mean of the middle 60% of each "
                "group), which one extreme value cannot move far.")
    if "ratio" in t:
        return ("Scale: ratios of geometric means (analysis on the log scale, then "
                "back-transformed); a ratio of 1 means no difference.")
    return "Scale: differences of means (first group minus second)."


def censoring_sentence(result) -> str | None:
    """Return the non-detect account of a result (None when there were none)."""
    info = getattr(result.decision, "censoring", None)
    if not info:
        return None
    out = info["sentence"] + "."
    sens = info.get("sensitivity")
    if sens:
        out += " " + sens["sentence"]
    return out

"""The terminal summary of a plan (:class:`famwise.planning.plan.Plan`)."""

from __future__ import annotations

import textwrap

from .textformat import format_number

__all__ = ["plan_text", "plan_statements", "liberal_procedures", "placement_sentence",
           "margin_words", "PLAN_CAUTIONS"]

PLAN_CAUTIONS = (
    "Power is estimated at the assumed spreads and error shape; if the next trial's "
    "spreads are larger, or its data more skewed, the power will be lower. A pilot's SDs "
    "are themselves estimates, and small pilots understate them about as often as they "
    "overstate them.",
    "Every figure is a Monte Carlo estimate; its standard error is shown beside it. "
    "Sizes whose power lies within two standard errors of the target are borderline.",
    "Planning a regulated or safety-critical study (clinical, food safety, environmental "
    "compliance) needs the applicable rules and a qualified statistician; these figures "
    "support that review, they do not replace it.",
)


def _fmt(x) -> str:
    return "-" if x is None else format_number(x)


def liberal_procedures(result) -> dict:
    """Procedures judged not to hold the familywise level at this design.

    Each size's ``fwer`` comes from ``r`` data sets at the complete null, with
    Monte Carlo SE ``se = sqrt(alpha (1 - alpha) / r)`` at a true rate of
    alpha.  A procedure is flagged when the mean of its estimates over the
    ``S`` sizes tried exceeds ``alpha + 2 se / sqrt(S)``, or when one size
    alone exceeds ``alpha + z se``, ``z`` the one-sided ``1 - 0.025 / S``
    normal quantile (Bonferroni over the sizes).  The largest of ``S``
    estimates held against a fixed ``alpha + 2 se`` would flag a procedure
    whose level is exactly alpha about ``1 - 0.977**S`` of the time (17% at
    eight sizes).  Returns name -> ``{"mean", "worst", "worst_n"}``.
    """
    from statistics import NormalDist
    s = result.settings
    alpha, r = s["alpha"], s["replicates"]
    se = (alpha * (1 - alpha) / r) ** 0.5
    out = {}
    for p, rows in result.table.groupby("procedure", sort=False):
        fwer = rows["fwer"].to_numpy(float)
        fwer = fwer[fwer == fwer]
        if fwer.size == 0:
            continue
        z = NormalDist().inv_cdf(1 - 0.025 / fwer.size)
        at = int(fwer.argmax())
        if fwer.mean() > alpha + 2 * se / fwer.size ** 0.5 or fwer[at] > alpha + z * se:
            out[p] = {"mean": float(fwer.mean()), "worst": float(fwer[at]),
                      "worst_n": int(rows["n_per_group"].to_numpy()[fwer == fwer][at])}
    return out


def margin_words(s: dict) -> str:
    """The margin with its scale: "margin 5" or "margin: a ratio of 1.5 of geometric
    means (log-scale difference 0.4055)"."""
    if s.get("transform") == "log":
        return (f"margin: a ratio of {s['margin']:g} of geometric means (log-scale "
                f"difference {s['log_margin']:.4g})")
    return f"margin {_fmt(s['margin'])}"


def placement_sentence(s: dict) -> str:
    """Where the margin sits, in words (all pairs or against the reference)."""
    labels, ref = s["labels"], s.get("reference")
    place = s["placement"]
    if place == "observed":
        return (f"the pilot's observed {'log-scale ' if s.get('transform') else ''}means "
                f"(optimistic: a pilot's differences are estimates, and the largest of them "
                f"is usually an overestimate)")
    others = [g for g in labels if g != ref]
    if s.get("transform") == "log":
        r = f"{s['margin']:g} times"
        if ref is None and place == "one-pair":
            return (f"the geometric mean of {labels[0]} is {r} that of {labels[1]} and the "
                    f"others sit at their geometric midpoint")
        if ref is None:
            return f"the geometric mean of {labels[0]} is {r} that of the rest"
        if place == "one-pair":
            return (f"the geometric mean of {others[0]} is {r} that of the reference {ref} "
                    f"and the other groups sit at the reference's")
        return f"every group's geometric mean is {r} that of the reference {ref}"
    if ref is None and place == "one-pair":
        return (f"the first two groups ({labels[0]}, {labels[1]}) differ by the margin and "
                f"the others sit at their midpoint")
    if ref is None:
        return f"group {labels[0]} is shifted by the margin from the rest"
    if place == "one-pair":
        return (f"group {others[0]} differs from the reference {ref} by the margin and the "
                f"other groups sit at the reference's mean")
    return f"every group differs from the reference {ref} by the margin"


def family_words(s: dict) -> str:
    if s.get("family") == "vs-reference":
        return (f"each group against the reference {s['reference']} ({s['m']} "
                f"comparison{'s' if s['m'] != 1 else ''}, two-sided)")
    return f"all pairs ({s['m']} comparison{'s' if s['m'] != 1 else ''})"


def plan_statements(result) -> list[str]:
    """The plan's plain statements: what was assumed and what it found."""
    s = result.settings
    goal = s["goal"]
    what = {"any": "at least one true difference", "each": "each true difference (on average)",
            "all": "every true difference"}[goal]
    log = s.get("transform") == "log"
    sds = ("SDs of the natural log " if log else "SDs ") + ", ".join(_fmt(v) for v in s["sd"])
    out = [f"Assumed{' (on the log scale: ratios of geometric means)' if log else ''}: "
           f"{s['k']} groups with {sds}; comparisons: {family_words(s)}; "
           f"{placement_sentence(s)}; {margin_words(s)}; "
           f"{'normal errors' if s['shape'] == 'normal' else 'errors resampled from the pilot'}"
           f"; familywise alpha {s['alpha']:g}; {s['replicates']} simulated data sets per size "
           f"(seed {s['seed']})."]
    rec = result.recommended
    # a blocked plan counts complete blocks (one plot of every group in each)
    per = "blocks" if s.get("blocks") else "per group"
    lines = []
    for p, v in rec.items():
        name = "the automatic pipeline" if p == "auto" else p
        if v is None:
            lines.append(f"{name}: not reached among the sizes tried")
        else:
            lines.append(f"{name}: {v} {per}")
    out.append(f"Smallest {'number of blocks' if s.get('blocks') else 'size per group'} "
               f"with power {s['target_power']:g} to find {what}: "
               + "; ".join(lines) + ".")
    liberal = liberal_procedures(result)
    if liberal:
        listed = ", ".join(f"{'the automatic pipeline' if p == 'auto' else p} "
                           f"({v['mean']:.3f} on average over the sizes tried, "
                           f"{v['worst']:.3f} at {v['worst_n']} {per})"
                           for p, v in liberal.items())
        out.append(f"Not holding the familywise level at this design (estimated error at the "
                   f"complete null above alpha by more than Monte Carlo error, judged over "
                   f"all the sizes tried): {listed}. Their power is partly bought with false "
                   f"differences and is not comparable with the others'.")
    auto = rec.get("auto")
    if auto is not None:
        route = result.route_at(auto)
        if route:
            out.append(f"At {auto} {per} the route would choose {route[0]} for "
                       f"{100 * route[1]:.0f}% of data sets like these.")
    return out + list(result.notes)


def plan_text(result) -> str:
    """Return the plan's summary for a terminal (fits 100 columns)."""
    from .textformat import frame_text
    paras = [textwrap.fill(t, width=100) for t in plan_statements(result)]
    table = frame_text(result.table)
    s = result.settings
    caption = (f"Power at a ratio of {s['margin']:g} of geometric means (on the log scale):"
               if s.get("transform") == "log" else
               f"Power at a difference of {_fmt(s['margin'])} (the margin):")
    table = caption + "\n\n" + table
    cautions = "\n".join(textwrap.fill(c, width=100, initial_indent="* ",
                                       subsequent_indent="  ") for c in PLAN_CAUTIONS)
    return "\n\n".join([paras[0], table] + paras[1:] + [cautions])

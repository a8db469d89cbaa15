"""The terminal summary of a plan (:class:`famwise.planning.plan.Plan`)."""

from __future__ import annotations

import textwrap

from .textformat import format_number

__all__ = ["plan_text", "plan_statements", "liberal_procedures", "PLAN_CAUTIONS"]

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
    """Procedures whose estimated familywise error exceeds alpha + 2 Monte Carlo SEs
    (the SE at a true rate of alpha) at some size tried: name -> the largest estimate."""
    s = result.settings
    alpha, r = s["alpha"], s["replicates"]
    limit = alpha + 2 * (alpha * (1 - alpha) / r) ** 0.5
    worst = result.table.groupby("procedure", sort=False)["fwer"].max()
    return {p: float(v) for p, v in worst.items() if v > limit}


def plan_statements(result) -> list[str]:
    """The plan's plain statements: what was assumed and what it found."""
    s = result.settings
    goal = s["goal"]
    what = {"any": "at least one true difference", "each": "each true difference (on average)",
            "all": "every true difference"}[goal]
    place = {"one-pair": f"the first two groups ({s['labels'][0]}, {s['labels'][1]}) differ "
                         f"by the margin and the others sit at their midpoint",
             "one-vs-rest": f"group {s['labels'][0]} is shifted by the margin from the rest",
             "observed": "the pilot's observed means (optimistic: a pilot's differences are "
                         "estimates, and the largest of them is usually an overestimate)"}
    out = [f"Assumed: {s['k']} groups with SDs {', '.join(_fmt(v) for v in s['sd'])}; "
           f"{place[s['placement']]}; margin {_fmt(s['margin'])}; "
           f"{'normal errors' if s['shape'] == 'normal' else 'errors resampled from the pilot'}"
           f"; familywise alpha {s['alpha']:g}; {s['replicates']} simulated data sets per size "
           f"(seed {s['seed']})."]
    rec = result.recommended
    lines = []
    for p, v in rec.items():
        name = "the automatic pipeline" if p == "auto" else p
        if v is None:
            lines.append(f"{name}: not reached among the sizes tried")
        else:
            lines.append(f"{name}: {v} per group")
    out.append(f"Smallest size per group with power {s['target_power']:g} to find {what}: "
               + "; ".join(lines) + ".")
    liberal = liberal_procedures(result)
    if liberal:
        listed = ", ".join(f"{'the automatic pipeline' if p == 'auto' else p} "
                           f"(up to {v:.3f})" for p, v in liberal.items())
        out.append(f"Not holding the familywise level at this design (estimated error at the "
                   f"complete null above alpha + 2 SE): {listed}. Their power is partly bought "
                   f"with false differences and is not comparable with the others'.")
    auto = rec.get("auto")
    if auto is not None:
        route = result.route_at(auto)
        if route:
            out.append(f"At {auto} per group the route would choose {route[0]} for "
                       f"{100 * route[1]:.0f}% of data sets like these.")
    return out + list(result.notes)


def plan_text(result) -> str:
    """Return the plan's summary for a terminal (fits 100 columns)."""
    from .textformat import frame_text
    paras = [textwrap.fill(t, width=100) for t in plan_statements(result)]
    table = frame_text(result.table)
    cautions = "\n".join(textwrap.fill(c, width=100, initial_indent="* ",
                                       subsequent_indent="  ") for c in PLAN_CAUTIONS)
    return "\n\n".join([paras[0], table] + paras[1:] + [cautions])

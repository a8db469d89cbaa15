"""The design: balance and the smallest groups."""

from __future__ import annotations


from ..core.layout import Layout
from .check import Check
from .policy import Policy

__all__ = ["balance", "small_groups", "design_checks"]


def balance(layout: Layout, policy: Policy) -> Check:
    """Largest over smallest group size (1 means balanced)."""
    n = layout.stats.n
    ratio = float(n.max() / n.min())
    verdict = "ok" if ratio <= 1.5 else "concern"
    sentence = ("All groups have the same size." if ratio == 1 else
                f"Group sizes range from {n.min()} to {n.max()} (ratio {ratio:.3g}); "
                f"Tukey-Kramer is then conservative and unequal spreads matter more.")
    return Check("balance", "largest / smallest group size", ratio, None, "> 1.5", verdict,
                 sentence, {"sizes": dict(zip(layout.labels, map(int, n)))})


def small_groups(layout: Layout, policy: Policy) -> Check:
    """Groups with fewer than ``policy.small_group`` observations."""
    n = layout.stats.n
    small = [(lab, int(c)) for lab, c in zip(layout.labels, n) if c < policy.small_group]
    if not small:
        verdict = "ok"
        sentence = f"Every group has at least {policy.small_group} observations."
    else:
        verdict = "concern"
        listed = ", ".join(f"{lab} (n = {c})" for lab, c in small)
        sentence = (f"Small groups: {listed}; large-sample approximations are weak there, "
                    f"so exact or resampling procedures are preferred.")
    return Check("small-groups", f"groups under {policy.small_group} observations",
                 float(n.min()), None, f"n < {policy.small_group}", verdict, sentence,
                 {"small": dict(small), "smallest": int(n.min())})


def design_checks(layout: Layout, policy: Policy | None = None) -> tuple[Check, ...]:
    """Run every design check."""
    policy = policy or Policy()
    return (balance(layout, policy), small_groups(layout, policy))

"""The checks of :func:`famwise.planning.plan.plan`'s inputs, each failing in one line.

Every check names the parameter, the value received and what to give
instead (:class:`famwise.core.errors.FamwiseInputError`).
"""

from __future__ import annotations

import math
import numbers

from ..core.errors import FamwiseInputError

__all__ = ["FAMILIES", "check_margin", "check_target", "check_n", "check_sd",
           "check_procedures", "check_family", "check_log_options"]

#: The families plan simulates (a contrast family has no natural placement of a margin).
FAMILIES = ("all-pairs", "vs-reference")

_RATIO_FIX = "a ratio of geometric means, e.g. 1.5 (50% higher) or 0.8 (20% lower)"


def _number(value, name, fix) -> float:
    if isinstance(value, bool) or not isinstance(value, numbers.Real) or not math.isfinite(value):
        raise FamwiseInputError(f"{name} must be a number; got {value!r} ({fix})")
    return float(value)


def check_margin(margin, transform: str | None) -> tuple[float, float]:
    """Return (the margin as given, its signed size on the simulated scale).

    On the original scale the margin is a positive difference in the
    response's unit.  With ``transform="log"`` it is a ratio of geometric
    means r > 0, r != 1, simulated as the difference log r of the logs: r > 1
    puts the shifted group(s) above, r < 1 the same distance log(1/r) below
    (0.8 is a 20% lower geometric mean; 1/1.25 = 0.8 is as far from 1 as 1.25).
    """
    if transform is None:
        value = _number(margin, "margin", "the smallest difference that matters, in the "
                                          "response's unit")
        if value <= 0:
            raise FamwiseInputError(
                f"margin must be positive (the smallest difference that matters, in the "
                f"response's unit); got {margin!r}")
        return value, value
    value = _number(margin, "margin", f"with transform='log', {_RATIO_FIX}")
    if value <= 0:
        raise FamwiseInputError(
            f"with transform='log' the margin is {_RATIO_FIX}, so it must be positive; got "
            f"{margin!r}")
    if value == 1.0:
        raise FamwiseInputError(
            f"with transform='log' the margin is {_RATIO_FIX}; a ratio of 1 means no "
            f"difference at all; got {margin!r}")
    return value, math.log(value)


def check_target(target) -> float:
    value = _number(target, "target_power", "e.g. 0.8")
    if not 0.0 < value < 1.0:
        raise FamwiseInputError(
            f"target_power must lie strictly between 0 and 1 (e.g. 0.8); got {target!r}")
    return value


def check_n(n) -> list[int] | None:
    if n is None:
        return None
    values = [n] if isinstance(n, numbers.Integral) and not isinstance(n, bool) else n
    try:
        values = list(values)
    except TypeError:
        raise FamwiseInputError(f"n must be a whole number or a list of them; got {n!r}") \
            from None
    if not values:
        raise FamwiseInputError("n must list at least one group size; got an empty list")
    out = []
    for v in values:
        if isinstance(v, bool) or not isinstance(v, numbers.Integral):
            raise FamwiseInputError(f"n must hold whole numbers of observations per group; "
                                    f"got {v!r}")
        if v < 2:
            raise FamwiseInputError(f"n must be at least 2 per group (a group needs two "
                                    f"values for its spread); got {v}")
        out.append(int(v))
    return sorted(set(out))


def check_sd(sd) -> list[float]:
    try:
        values = [float(v) for v in sd]
    except (TypeError, ValueError):
        raise FamwiseInputError(f"sd must be a list of group SDs, e.g. [1, 1, 2]; got {sd!r}") \
            from None
    if len(values) < 2:
        raise FamwiseInputError(f"sd must give one SD per group for at least 2 groups; "
                                f"got {sd!r}")
    for v in values:
        if not math.isfinite(v) or v <= 0:
            raise FamwiseInputError(f"every group SD must be a positive number; got {v!r} "
                                    f"in sd={list(sd)!r}")
    return values


_FAMILY_WORDS = {"all-pairs": "compare all pairs",
                 "vs-reference": "compare each group with a reference"}


def check_procedures(procedures, family: str) -> list[str] | None:
    """Procedure identifiers (and ``"auto"``) that handle ``family`` and that the
    stacked-replicate engine simulates."""
    if procedures is None:
        return None
    from ..diagnostics.stacked_procedures import SIMULATED as CLOSED_AND_WARP
    from ..diagnostics.stacked_ranks import RANK_PROCEDURES
    from ..procedures.catalogue import CATALOGUE, check_procedure
    # the censored-score procedures (gehan-maxt, peto-maxt) are for non-detects,
    # which a plan's pilot may not hold; they are simulated on censored scenarios only
    SIMULATED = CLOSED_AND_WARP | frozenset(RANK_PROCEDURES)
    if isinstance(procedures, str):
        procedures = [procedures]
    fits = [n for n, i in CATALOGUE.items() if family in i.families and n in SIMULATED]
    out = []
    for p in procedures:
        if p != "auto":
            info = check_procedure(p)
            if family not in info.families:
                raise FamwiseInputError(
                    f"procedure {p!r} does not {_FAMILY_WORDS[family]}, which plan simulates "
                    f"for family {family!r}; choose one of: {', '.join(fits)}")
            if p not in SIMULATED:
                raise FamwiseInputError(
                    f"plan does not simulate procedure {p!r} yet (its {info.route} statistics "
                    f"are not on the stacked-replicate engine); choose one of: "
                    f"{', '.join(fits)}")
        if p not in out:
            out.append(p)
    return out


def check_family(family, reference, labels) -> tuple[str, str | None]:
    """Return (family, the reference's label or None).

    ``reference`` is a group label, or an integer index into the groups
    (0 for the first; without a pilot the groups are g1, g2, ...).
    """
    if family not in FAMILIES:
        from ..core.errors import did_you_mean
        hint = did_you_mean(str(family), FAMILIES) if isinstance(family, str) else ""
        raise FamwiseInputError(
            f"plan simulates the families {' and '.join(FAMILIES)}; got family={family!r}"
            f"{hint}")
    if family == "all-pairs":
        if reference is not None:
            raise FamwiseInputError(
                f"reference={reference!r} is used only with family='vs-reference' "
                f"(--family vs-reference); drop it or choose that family")
        return family, None
    if reference is None:
        raise FamwiseInputError(
            "family 'vs-reference' needs a reference group: reference=LABEL or an index "
            "(--reference LABEL on the command line; without a pilot the groups are "
            f"{', '.join(labels)})")
    if isinstance(reference, numbers.Integral) and not isinstance(reference, bool):
        if not 0 <= int(reference) < len(labels):
            raise FamwiseInputError(
                f"reference index {int(reference)} is out of range for {len(labels)} groups "
                f"(0 to {len(labels) - 1}: {', '.join(labels)})")
        return family, labels[int(reference)]
    from ..core.families import vs_reference
    vs_reference(labels, reference)          # fails, naming the labels, if it is not one
    return family, reference


def check_log_options(transform, log_offset, pilot: bool):
    """The scale: :class:`famwise.model.scale.Transform` (``transform`` None or "log")."""
    from ..model.scale import check_transform
    scale = check_transform(transform, log_offset)
    if scale.offset and not pilot:
        raise FamwiseInputError(
            f"log_offset={log_offset!r} shifts a pilot's values before the log; with stated "
            f"SDs (of the natural log) there are no values to shift: drop it or give the "
            f"pilot")
    return scale

"""Non-detects read as left-censored values: "<0.5", "< 0.5", "<DL", "n.d.".

A laboratory reports a value below its detection (or reporting) limit as
text: the limit with a ``<`` (``"<0.5"``, ``"< 0.5 ug/L"``, ``"≤0.5"``), or a
bare token (``"<DL"``, ``"<LOD"``, ``"n.d."``, ``"ND"``, ``"not detected"``,
``"BDL"``).  With ``nondetects="keep"`` (the default) famwise keeps each one
as a *left-censored* observation: the value is known to lie below its limit.
The layout holds the limit in ``values`` and True in ``censored``.  A bare
token needs its limit from ``detection_limit``: one number for every row,
or the name of a column holding each row's limit.  With
``nondetects="drop"`` they are set aside, listed in the ledger, as before.

Right-censored text (``">1000"``, too numerous to count) is not a non-detect
and is set aside with its reason.
"""

from __future__ import annotations

import re
import warnings as _warnings
from dataclasses import dataclass

import numpy as np

from ..core.errors import FamwiseInputError, FamwiseWarning

__all__ = ["NONDETECT_MODES", "CensoredValueWarning", "LimitSpec", "check_mode",
           "limit_spec", "interpret", "row_limits", "Censoring", "censor_cells",
           "check_below_limit", "flag_texts", "validate_censored", "setup", "drop_note",
           "ledger_entries"]

NONDETECT_MODES = ("keep", "drop")

_NUMBER = r"[-+\u2212]?(?:\d+(?:[.,]\d*)?|[.,]\d+)(?:[eE][-+]?\d+)?"
#: A limit written with the value: "<0.5", "< 0.5", "<=0.5", "≤ 0.5 mg/L".
LEFT = re.compile(rf"^(?:<=?|\u2264)\s*({_NUMBER})\s*(\S.*)?$")
#: A bare non-detect token (its limit comes from ``detection_limit``).
BARE = re.compile(
    r"^(?:n\.?\s?d\.?|not\s+detected|non[-\s]?detect|bdl|b\.d\.l\.|"
    r"(?:<|\u2264)\s*(?:dl|lod|loq|mdl|rl|pql|mrl))$", re.IGNORECASE)
RIGHT = re.compile(rf"^(?:>=?|\u2265)\s*{_NUMBER}\s*\S*$")


class CensoredValueWarning(FamwiseWarning):
    """Something about the non-detects deserves a look (named rows)."""


def check_mode(nondetects) -> str:
    if nondetects not in NONDETECT_MODES:
        raise FamwiseInputError(
            f"nondetects must be one of {', '.join(map(repr, NONDETECT_MODES))}; "
            f"got {nondetects!r}")
    return nondetects


@dataclass(frozen=True)
class LimitSpec:
    """The ``detection_limit`` option, validated: a number, or a column's index."""

    value: float | None = None
    column: int | None = None
    name: str | None = None


def limit_spec(detection_limit, header, source, find_column) -> LimitSpec:
    """Validate ``detection_limit`` (None, a positive number or a column name)."""
    if detection_limit is None:
        return LimitSpec()
    if isinstance(detection_limit, (bool, np.bool_)):
        raise FamwiseInputError(
            f"detection_limit must be a positive number or a column name; got "
            f"{detection_limit!r}")
    if isinstance(detection_limit, (int, float, np.integer, np.floating)):
        value = float(detection_limit)
    else:
        text = str(detection_limit).strip()
        try:
            value = float(text.replace(",", ".")) if LEFT.match("<" + text) else None
        except ValueError:
            value = None
        if value is None:
            j = find_column(header, text, source, "detection-limit")
            return LimitSpec(column=j, name=header[j])
    if not np.isfinite(value) or value <= 0:
        raise FamwiseInputError(
            f"detection_limit must be a positive number; got {detection_limit!r}")
    return LimitSpec(value=value)


def _number(text: str, decimal: str) -> float:
    t = text.replace("\u2212", "-")
    if decimal == ",":
        t = t.replace(",", ".")
    return float(t)


def interpret(text: str, decimal: str, row_limit: float | None, where: str,
              limit_name: str | None) -> tuple[str, float]:
    """Return ``("censored", limit)``, ``("right", nan)`` or ``("text", nan)``.

    Raises a one-line error for a non-detect that cannot be used: ``"<"``
    without a number, a negative or zero limit, or a bare token without a
    limit (``where`` names the row and column for the message).
    """
    s = text.strip()
    m = LEFT.match(s)
    if m:
        limit = _number(m.group(1), decimal)
        if not limit > 0 or not np.isfinite(limit):
            raise FamwiseInputError(
                f"{where} holds {text!r}: a detection limit must be a positive number; "
                f"correct the cell")
        return "censored", limit
    if BARE.match(s):
        if row_limit is None:
            raise FamwiseInputError(
                f"{where} holds the non-detect {text!r} without a number; give its limit "
                f"with detection_limit= (a number or a column of limits; CLI "
                f"--detection-limit), or set non-detects aside with nondetects='drop' "
                f"(--nondetects drop)")
        if not np.isfinite(row_limit):
            raise FamwiseInputError(
                f"{where} holds the non-detect {text!r} but the detection-limit column "
                f"{limit_name!r} is empty there; fill in that row's limit")
        if row_limit <= 0:
            raise FamwiseInputError(
                f"{where} holds {text!r} and its detection limit is {row_limit:g}; a "
                f"detection limit must be a positive number")
        return "censored", float(row_limit)
    if RIGHT.match(s):
        return "right", float("nan")
    if re.match(r"^(?:<=?|\u2264)\s*$", s):
        raise FamwiseInputError(
            f"{where} holds {text!r}: '<' must be followed by the limit as a number "
            f"(write '<0.5') or a limit token such as '<DL' with detection_limit=")
    return "text", float("nan")


def row_limits(cells, decimal: str, spec: LimitSpec, source: str,
               rows) -> np.ndarray | None:
    """Each row's limit from a ``detection_limit`` column (NaN where empty)."""
    if spec.column is None:
        return None
    out = np.full(len(cells), np.nan)
    for i, x in enumerate(cells):
        if x is None or (isinstance(x, float) and np.isnan(x)):
            continue
        if isinstance(x, (int, float, np.integer, np.floating)) and not isinstance(x, bool):
            out[i] = float(x)
            continue
        t = str(x).strip()
        if not t:
            continue
        try:
            out[i] = _number(t, decimal)
        except ValueError:
            raise FamwiseInputError(
                f"the detection-limit column {spec.name!r} of {source!r} holds {t!r} in "
                f"row {int(rows[i])}, not a number; write the limit as a number") from None
    return out


# --- used by the reader ---------------------------------------------------------

@dataclass(frozen=True)
class Censoring:
    keep: bool
    spec: LimitSpec


def censor_cells(values, reasons, texts, how: Censoring, limits, rows, column: str,
            src: str, decimal: str, skip) -> np.ndarray:
    """Turn non-detect cells into censored values in place; return the flags.

    Only the cells parsed as censored text or non-detect markers (and text
    starting with '<') are looked at one by one.
    """
    flags = np.zeros(len(values), dtype=bool)
    candidates = np.flatnonzero(np.isin(reasons, ("below-limit", "not-detected", "text"))
                                & ~skip)
    for i in candidates.tolist():
        text = str(texts[i])
        if reasons[i] == "text" and not text.startswith(("<", "\u2264")):
            continue
        if not how.keep:
            if reasons[i] != "text" and RIGHT.match(text):
                reasons[i] = "above-limit"
            continue
        row_limit = how.spec.value if limits is None else float(limits[i])
        where = f"row {int(rows[i])}, column {column!r} of {src!r}"
        kind, limit = interpret(text, decimal, row_limit, where, how.spec.name)
        if kind == "censored":
            values[i], reasons[i], flags[i] = limit, "", True
        elif kind == "right":
            reasons[i] = "above-limit"
    return flags


def check_below_limit(values, flags, limits, keep, rows, src, name) -> None:
    """Warn (naming rows) when a detected value lies below its row's own limit."""
    if limits is None:
        return
    with np.errstate(invalid="ignore"):
        low = keep & ~flags & np.isfinite(limits) & (values < limits)
    if low.any():
        shown = ", ".join(f"row {int(rows[i])} ({values[i]:g} < {limits[i]:g})"
                          for i in np.flatnonzero(low)[:5])
        more = f" and {int(low.sum()) - 5} more" if low.sum() > 5 else ""
        _warnings.warn(CensoredValueWarning(
            f"{int(low.sum())} detected value(s) in {src!r} lie below the detection limit "
            f"given for their own row in column {name!r}: {shown}{more}; they are kept as "
            f"measured values; check them against the laboratory report"), stacklevel=4)


def flag_texts(texts, flags, keep) -> np.ndarray:
    """The texts of the kept cells that are non-detects ("" elsewhere)."""
    out = np.full(int(keep.sum()), "", dtype=object)
    if flags.any():
        position = np.cumsum(keep) - 1
        for i in np.flatnonzero(flags & keep).tolist():
            out[position[i]] = str(texts[i])
    return out


def validate_censored(layout, src: str) -> None:
    """Checks of data with non-detects: something measured, groups all censored."""
    cens = layout.censored
    if cens.all():
        raise FamwiseInputError(
            f"every usable value of {layout.response!r} in {src!r} is a non-detect; with "
            f"nothing measured there is no difference to estimate")
    v = layout.values
    span = float(np.max(v) - np.min(v))
    if not span <= 1e150:
        raise FamwiseInputError(
            f"the values of {layout.response!r} in {src!r} span more than 1e150; rescale "
            f"the unit")
    all_cens = [layout.labels[c] for c in range(layout.k)
                if cens[layout.codes == c].all()]
    if all_cens:
        _warnings.warn(CensoredValueWarning(
            f"in {src!r}, every value of group(s) {', '.join(map(repr, all_cens))} is a "
            f"non-detect: their Kaplan-Meier mean and median are undefined, but the "
            f"censored comparisons still use them (all below their limits)"), stacklevel=4)


def setup(detection_limit, nondetects, header, source, wide, find_column) -> Censoring:
    """Validate the reading options for non-detects; return how to read them."""
    check_mode(nondetects)
    spec = limit_spec(detection_limit, header, source, find_column)
    if wide and spec.column is not None:
        raise FamwiseInputError(
            "with a wide layout detection_limit must be a number; a column of limits "
            "needs the long layout (one row per sample)")
    return Censoring(nondetects == "keep", spec)


def drop_note(dropped) -> str:
    """The ledger note of ``nondetects="drop"``."""
    n_nd = sum(d.reason in ("below-limit", "not-detected") for d in dropped)
    return (f"non-detects set aside on request (nondetects='drop'): {n_nd}"
            + ("; keeping them as censored values is the default" if n_nd else ""))


def ledger_entries(flags, texts, columns, values, rows, groups, wide_names=None) -> list:
    """The ledger's :class:`~famwise.intake.ledger.Censored` entries, in source order."""
    from .ledger import Censored
    where = np.flatnonzero(flags)
    cens = [Censored(int(rows[i]), col, str(texts[i]), float(values[i]), grp)
            for i, col, grp in zip(where, columns, groups)]
    if wide_names is not None:
        order_of = {name: k for k, name in enumerate(wide_names)}
        cens.sort(key=lambda c: (c.row, order_of.get(c.column, 0)))
    return cens

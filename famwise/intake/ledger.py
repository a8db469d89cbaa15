"""The Ledger: an account of every input row (or cell), used or set aside.

Nothing famwise reads is dropped silently.  Each value that cannot be used is
recorded with its 1-based row number in the source, the column, the raw text
and the reason.  ``read == used + len(dropped)`` always holds.

Row numbers
-----------
* CSV/TSV and Excel: the row number a spreadsheet shows, counting the header
  as a row (the first data row under a header on line 1 is row 2);
* Parquet files and DataFrames: the 1-based position of the record.

Non-detects
-----------
With ``nondetects="keep"`` (the default) a non-detect such as ``"<0.5"`` is
*used*: it is kept as a left-censored value, listed in
:attr:`Ledger.censored` (row, column, text, limit, group), and counted in
``used``.  With ``nondetects="drop"`` it is set aside with reason
``below-limit`` or ``not-detected``.
"""

from __future__ import annotations

from collections import Counter
from dataclasses import dataclass, field

import pandas as pd

__all__ = ["Dropped", "Censored", "Ledger", "REASONS"]

#: Reasons a value is set aside, in the order they are tested.
REASONS = {
    "excluded": "excluded by the user",
    "blank-row": "blank row",
    "missing-group": "missing group label",
    "missing-response": "missing response value",
    "below-limit": "censored text such as '<0.5' (a detection or reporting limit), set "
                   "aside on request (nondetects='drop')",
    "not-detected": "text marking a non-detect such as 'n.d.', set aside on request "
                    "(nondetects='drop')",
    "above-limit": "right-censored text such as '>1000' (above a reporting limit; not "
                   "supported)",
    "text": "text where a number was expected",
    "infinite": "infinite value",
    "empty-cell": "empty cell (wide layout)",
    "missing-block": "missing block label",
    "missing-covariate": "missing covariate value",
    "covariate-text": "text where a covariate number was expected",
}


@dataclass(frozen=True)
class Dropped:
    """One value set aside: where it was, what it held, and why."""

    row: int
    column: str
    value: str
    reason: str     # a key of REASONS
    group: str = ""

    @property
    def explanation(self) -> str:
        return REASONS[self.reason]


@dataclass(frozen=True)
class Censored:
    """One non-detect kept as a left-censored value: known to lie below ``limit``."""

    row: int
    column: str
    value: str      # the text as read ("<0.5", "n.d.")
    limit: float
    group: str = ""


@dataclass(frozen=True)
class Ledger:
    """Counts and details of what was read, used and set aside.

    Attributes
    ----------
    source : str
        File path, or ``"<DataFrame>"``.
    unit : {"row", "cell"}
        What was counted: rows of a long layout or cells of a wide one.
    read, used : int
        Entries read and entries that became observations.
    dropped : tuple of Dropped
        Every entry set aside, in source order.
    notes : tuple of str
        Plain sentences about the reading (delimiter, sheet, merged labels,
        spelling variants ...).
    censored : tuple of Censored
        Every non-detect kept as a left-censored value (counted in ``used``).
    """

    source: str
    unit: str
    read: int
    used: int
    dropped: tuple[Dropped, ...] = field(default=())
    notes: tuple[str, ...] = field(default=())
    censored: tuple[Censored, ...] = field(default=())

    def __post_init__(self):
        if self.read != self.used + len(self.dropped):
            raise AssertionError(
                f"ledger does not balance: read {self.read}, used {self.used}, "
                f"dropped {len(self.dropped)}")

    def counts(self) -> dict[str, int]:
        """Return the number of entries set aside per reason."""
        return dict(Counter(d.reason for d in self.dropped))

    def to_frame(self) -> pd.DataFrame:
        """Return the set-aside entries as a table (one row each)."""
        return pd.DataFrame(
            [(d.row, d.column, d.group, d.value, d.reason, d.explanation)
             for d in self.dropped],
            columns=["row", "column", "group", "value", "reason", "explanation"])

    def censored_counts(self) -> dict[str, int]:
        """Return the number of non-detects kept per group (first-seen order)."""
        return dict(Counter(c.group for c in self.censored))

    def censored_frame(self) -> pd.DataFrame:
        """Return the non-detects kept as left-censored values (one row each)."""
        return pd.DataFrame([(c.row, c.column, c.group, c.value, c.limit)
                             for c in self.censored],
                            columns=["row", "column", "group", "value", "limit"])

    def to_dict(self) -> dict:
        return {"source": self.source, "unit": self.unit, "read": self.read,
                "used": self.used, "dropped": len(self.dropped),
                "dropped_by_reason": self.counts(), "notes": list(self.notes),
                "kept_censored": len(self.censored),
                "kept_censored_by_group": self.censored_counts()}

    def lines(self, limit: int = 20) -> list[str]:
        """Return a plain-text account, listing up to ``limit`` dropped entries."""
        unit = self.unit + "s"
        kept = (f" ({len(self.censored)} of them non-detects kept as left-censored values)"
                if self.censored else "")
        out = [f"{self.source}: {self.read} {unit} read, {self.used} used{kept}, "
               f"{len(self.dropped)} set aside"]
        for reason, count in self.counts().items():
            out.append(f"  {count:>5}  {REASONS[reason]}")
        for d in self.dropped[:limit]:
            where = f"row {d.row}, column {d.column!r}"
            group = f" (group {d.group!r})" if d.group else ""
            shown = repr(d.value) if d.value != "" else "empty"
            out.append(f"  - {where}{group}: {shown}: {d.explanation}")
        if len(self.dropped) > limit:
            out.append(f"  ... and {len(self.dropped) - limit} more (see the ledger table)")
        out.extend(f"  note: {note}" for note in self.notes)
        return out

"""The Ledger: an account of every input row (or cell), used or set aside.

Nothing famwise reads is dropped silently.  Each value that cannot be used is
recorded with its 1-based row number in the source, the column, the raw text
and the reason.  ``read == used + len(dropped)`` always holds.

Row numbers
-----------
* CSV/TSV and Excel: the row number a spreadsheet shows, counting the header
  as a row (the first data row under a header on line 1 is row 2);
* Parquet files and DataFrames: the 1-based position of the record.
"""

from __future__ import annotations

from collections import Counter
from dataclasses import dataclass, field

import pandas as pd

__all__ = ["Dropped", "Ledger", "REASONS"]

#: Reasons a value is set aside, in the order they are tested.
REASONS = {
    "excluded": "excluded by the user",
    "blank-row": "blank row",
    "missing-group": "missing group label",
    "missing-response": "missing response value",
    "below-limit": "censored text such as '<0.5' (a detection or reporting limit)",
    "not-detected": "text marking a non-detect such as 'n.d.'",
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
    """

    source: str
    unit: str
    read: int
    used: int
    dropped: tuple[Dropped, ...] = field(default=())
    notes: tuple[str, ...] = field(default=())

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

    def to_dict(self) -> dict:
        return {"source": self.source, "unit": self.unit, "read": self.read,
                "used": self.used, "dropped": len(self.dropped),
                "dropped_by_reason": self.counts(), "notes": list(self.notes)}

    def lines(self, limit: int = 20) -> list[str]:
        """Return a plain-text account, listing up to ``limit`` dropped entries."""
        unit = self.unit + "s"
        out = [f"{self.source}: {self.read} {unit} read, {self.used} used, "
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

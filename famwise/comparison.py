"""The Comparison that :func:`famwise.compare` returns.

It sits above the report (its methods render through :mod:`famwise.report`), so
the report takes it as a plain object and never imports it.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Any

import pandas as pd

from .core.results import DecisionRecord

__all__ = ["Comparison"]


@dataclass(frozen=True)
class Comparison:
    """What :func:`famwise.compare` returns.

    Attributes
    ----------
    groups : DataFrame
        One row per group: the summary (n, mean, SD, ...) and, for all-pairs
        families, the compact letters (``letters``; ``a`` = largest mean).
    comparisons : DataFrame
        The comparisons table of the chosen procedure (famwise.core.table).
    decision : DecisionRecord
        Why the procedure was chosen, and everything needed to reproduce it.
    crosscheck : CrossCheck or None
        Agreement with the independent second route.
    ledger : Ledger
        Every input row: used, or set aside and why.
    findings : Findings
        The diagnostic checks.
    omnibus : Omnibus or None
        The route's omnibus test (ANOVA F, Welch's ANOVA or Kruskal-Wallis):
        ``.test``, ``.statistic``, ``.df``, ``.p``
        (:mod:`famwise.procedures.omnibus`).
    """

    groups: pd.DataFrame = field(repr=False)
    comparisons: pd.DataFrame = field(repr=False)
    decision: DecisionRecord = field(repr=False)
    crosscheck: Any = field(repr=False)
    ledger: Any = field(repr=False)
    findings: Any = field(repr=False)
    layout: Any = field(repr=False)
    family: Any = field(repr=False)
    calibration: Any = field(default=None, repr=False)
    omnibus: Any = field(default=None, repr=False)

    @property
    def procedure(self) -> str:
        return self.decision.route["procedure"]

    def __repr__(self) -> str:
        n_rej = int(self.comparisons["reject"].sum())
        return (f"Comparison(procedure={self.procedure!r}, comparisons={len(self.comparisons)}, "
                f"declared_different={n_rej}, alpha={self.decision.alpha:g})")

    def summary(self, width: int = 100) -> str:
        """Return the text summary (fits ``width`` columns)."""
        from .report.text import summary_text
        return summary_text(self, width=width)

    def save(self, folder, force: bool = False) -> list[str]:
        """Write comparisons.csv, groups.csv, decision.json, report.html and
        summary.txt into ``folder`` (atomically; refuses to overwrite without
        ``force``).  Returns the paths written."""
        from .report.files import save
        return save(self, folder, force=force)

    def to_html(self, path=None) -> str:
        """Return the self-contained HTML report; write it to ``path`` if given."""
        from .report.html import html_report
        text = html_report(self)
        if path is not None:
            from .report.output import write_atomic
            write_atomic(str(path), text)
        return text

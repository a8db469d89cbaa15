"""The result of one diagnostic check, and the set of them (Findings).

Every check returns a :class:`Check`: what was examined, by which method,
the statistic and p-value (when the method has one), the threshold it was
judged against, a verdict in ``{"ok", "concern", "violated"}`` and one plain
sentence.  Details (for example the outlying rows) go in ``details``.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from typing import Any

__all__ = ["Check", "Findings", "VERDICTS"]

VERDICTS = ("ok", "concern", "violated")


@dataclass(frozen=True)
class Check:
    """One diagnostic check and its verdict."""

    name: str
    method: str
    statistic: float | None
    p_value: float | None
    threshold: str
    verdict: str
    sentence: str
    details: dict[str, Any] = field(default_factory=dict, repr=False)

    def __post_init__(self):
        if self.verdict not in VERDICTS:
            raise ValueError(f"verdict must be one of {VERDICTS}; got {self.verdict!r}")

    def to_dict(self) -> dict:
        def clean(x):
            if isinstance(x, float) and not math.isfinite(x):
                return None if math.isnan(x) else ("inf" if x > 0 else "-inf")
            return x
        return {"name": self.name, "method": self.method,
                "statistic": clean(self.statistic), "p_value": clean(self.p_value),
                "threshold": self.threshold, "verdict": self.verdict,
                "sentence": self.sentence, "details": self.details}


@dataclass(frozen=True)
class Findings:
    """All checks of one data set, by area (shape, spread, design)."""

    shape: tuple[Check, ...]
    spread: tuple[Check, ...]
    design: tuple[Check, ...]

    @property
    def checks(self) -> tuple[Check, ...]:
        return self.shape + self.spread + self.design

    def get(self, name: str) -> Check:
        """Return the check called ``name``."""
        for c in self.checks:
            if c.name == name:
                return c
        raise KeyError(name)

    def worst(self, area: str) -> str:
        """Return the worst verdict among the checks of ``area``."""
        verdicts = [c.verdict for c in getattr(self, area)]
        return max(verdicts, key=VERDICTS.index) if verdicts else "ok"

    def to_records(self) -> list[dict]:
        return [dict(c.to_dict(), area=area) for area in ("shape", "spread", "design")
                for c in getattr(self, area)]

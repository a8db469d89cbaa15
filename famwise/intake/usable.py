"""What makes read data comparable: two groups, two values each, some variation.

:func:`validate_layout` runs at the end of :func:`famwise.intake.read`; each
refusal is one line naming the file, group or value and the fix.  Data with
non-detects are checked by :func:`famwise.intake.nondetects.validate_censored`.
"""

from __future__ import annotations

from collections import Counter

import numpy as np

from ..core.errors import FamwiseInputError
from ..core.layout import Layout
from . import nondetects as nd
from .ledger import Ledger

__all__ = ["validate_layout"]


def _count(n: int, word: str) -> str:
    return f"{n} {word}" if n == 1 else f"{n} {word}s"


def validate_layout(layout: Layout, ledger: Ledger) -> None:
    """Refuse data that cannot be compared, with one line naming the fix."""
    src = ledger.source
    if layout.k < 2:
        only = f" (only {layout.labels[0]!r})" if layout.k == 1 else ""
        raise FamwiseInputError(
            f"{src!r} has fewer than two groups with usable values{only}; "
            f"a comparison needs at least two")
    n = layout.stats.n
    lost = Counter(d.group for d in ledger.dropped)
    for code in np.flatnonzero(n < 2):
        label = layout.labels[code]
        extra = (f" ({_count(lost[label], ledger.unit)} set aside)" if lost[label] else "")
        raise FamwiseInputError(
            f"group {label!r} in {src!r} has only {_count(int(n[code]), 'usable value')}{extra}; "
            f"each group needs at least two (fix its {ledger.unit}s or remove the group)")
    v = layout.values
    if layout.has_censoring:
        nd.validate_censored(layout, src)
        return
    if np.all(v == v[0]):
        raise FamwiseInputError(
            f"all {v.size} usable values of {layout.response!r} in {src!r} equal {v[0]:g}; "
            f"there is no variation to compare")
    span = float(np.max(v) - np.min(v))
    if not span <= 1e150 or span < 1e-150:
        raise FamwiseInputError(
            f"the values of {layout.response!r} in {src!r} span "
            f"{f'{span:g}' if np.isfinite(span) else 'more than 1.8e308'}, beyond what "
            f"squares of double-precision numbers can hold (1e-150 to 1e150); rescale the "
            f"unit (for example to thousands or to millionths)")
    st = layout.stats
    if not np.any(st.var > 0.0):
        shown = ", ".join(f"{lab!r} = {m:g}" for lab, m in zip(layout.labels[:4], st.mean))
        more = ", ..." if layout.k > 4 else ""
        raise FamwiseInputError(
            f"every group of {layout.response!r} in {src!r} is constant ({shown}{more}); "
            f"there is no within-group variation to judge the differences against")


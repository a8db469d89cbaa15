"""Plain fixed-width text tables for the terminal (our own layout)."""

from __future__ import annotations

import math

import numpy as np
import pandas as pd

__all__ = ["format_number", "frame_text"]


def format_number(x, digits: int = 4) -> str:
    """Format a number with ``digits`` significant digits, p-values included."""
    if x is None or (isinstance(x, float) and math.isnan(x)):
        return "-"
    if isinstance(x, (bool, np.bool_)):
        return "yes" if x else "no"
    if isinstance(x, (int, np.integer)):
        return str(int(x))
    x = float(x)
    if math.isinf(x):
        return "inf" if x > 0 else "-inf"
    if x == 0:
        return "0"
    if abs(x) >= 1e6 or abs(x) < 1e-4:
        return f"{x:.{digits - 1}e}"
    return f"{x:.{digits}g}" if abs(x) >= 10 ** digits else \
        f"{x:.{max(0, digits - 1 - int(math.floor(math.log10(abs(x)))))}f}"


def frame_text(frame: pd.DataFrame, digits: int = 4, max_label: int = 28) -> str:
    """Render ``frame`` as an aligned text table: text left, numbers right."""
    cols = list(frame.columns)
    cells = []
    numeric = []
    for c in cols:
        series = frame[c]
        is_num = pd.api.types.is_numeric_dtype(series.dtype) or pd.api.types.is_bool_dtype(series.dtype)
        numeric.append(is_num)
        if is_num:
            cells.append([format_number(v, digits) for v in series])
        else:
            cells.append([_clip(str(v), max_label) for v in series])
    widths = [max(len(str(c)), *(len(v) for v in col)) if len(col) else len(str(c))
              for c, col in zip(cols, cells)]
    def line(values):
        return "  ".join(v.rjust(w) if num else v.ljust(w)
                         for v, w, num in zip(values, widths, numeric)).rstrip()
    out = [line([str(c) for c in cols]), line(["-" * w for w in widths])]
    out.extend(line([col[i] for col in cells]) for i in range(len(frame)))
    return "\n".join(out)


def _clip(text: str, width: int) -> str:
    return text if len(text) <= width else text[:width - 1] + "…"

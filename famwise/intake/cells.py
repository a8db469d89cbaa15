"""Cells to numbers and labels, a column at a time.

Numeric columns pass through as arrays.  Text columns are stripped, and the
cells that look like plain decimal numbers are converted in one vectorised
cast (pyarrow's, correctly rounded like Python's ``float``, or numpy's);
only the cells that fail that test are looked at one by one, by the same
rules as always (missing-value words, non-detects, censored text, other
text).  Labels are factorised first and normalised once per distinct value.
The reasons are those of :data:`famwise.intake.ledger.REASONS`.
"""

from __future__ import annotations

import re
from collections.abc import Sequence

import numpy as np
import pandas as pd

__all__ = ["CellTexts", "parse_values", "label_codes", "blank_mask", "is_blank"]

NA_TEXT = frozenset({"", "na", "n/a", "nan", "null", "none", "-", ".", "#n/a", "missing",
                     "?"})
NOT_DETECTED = re.compile(
    r"^(n\.?\s?d\.?|not\s+detected|bdl|<\s*(dl|lod|loq|mdl|rl))$", re.IGNORECASE)
CENSORED = re.compile(r"^[<>≤≥]=?\s*[-+]?[\d.,]+(e[-+]?\d+)?\s*\S*$", re.IGNORECASE)
# A plain decimal number in ASCII digits: every such text is read the same by
# Python's float() and by the vectorised casts (both correctly rounded).
_PLAIN = r"[-+]?(?:[0-9]+\.?[0-9]*|\.[0-9]+)(?:[eE][-+]?[0-9]+)?"
#: Label texts that mean "no group".
MISSING_LABELS = frozenset({"", "nan", "na", "n/a", "null", "none"})


def is_blank(x) -> bool:
    """Whether one cell is empty: None, a missing value, or only white space."""
    if isinstance(x, str):
        return x.strip() == ""
    try:
        return bool(pd.isna(x))
    except (TypeError, ValueError):
        return False


class CellTexts(Sequence):
    """The text of each cell as the ledger shows it, made only when asked for.

    Cells that could not be used keep the text they were read with; a usable
    number read from a numeric cell shows as ``repr(float)``, one read from
    text as its stripped text.
    """

    def __init__(self, values: np.ndarray, kept: np.ndarray, strings=None):
        self._values = values
        self._kept = kept            # object array: the text, or None to derive
        self._strings = strings      # stripped texts (array-like) or None

    def __len__(self) -> int:
        return len(self._kept)

    def __getitem__(self, i):
        if isinstance(i, slice):
            return [self[j] for j in range(*i.indices(len(self)))]
        text = self._kept[i]
        if text is not None:
            return text
        if self._strings is not None:
            return str(self._strings[i])
        v = self._values[i]
        return "" if np.isnan(v) else repr(float(v))


def parse_values(cells: pd.Series, decimal: str) -> tuple[np.ndarray, np.ndarray, CellTexts]:
    """Return (values, reason codes, texts) for a column; reason '' means usable.

    ``texts`` is a :class:`CellTexts` (a sequence of str, one per cell).
    """
    n = len(cells)
    dtype = cells.dtype
    if isinstance(dtype, pd.CategoricalDtype):
        return _categorical(cells, decimal)
    if pd.api.types.is_numeric_dtype(dtype) and not pd.api.types.is_bool_dtype(dtype):
        values = cells.to_numpy(dtype=np.float64, na_value=np.nan)
        reasons = np.full(n, "", dtype=object)
        reasons[np.isnan(values)] = "missing-response"
        reasons[np.isinf(values)] = "infinite"
        return values, reasons, CellTexts(values, np.full(n, None, dtype=object))
    kind = _kind(cells)
    if kind == "string":
        return _parse_strings(cells, decimal)
    if kind == "number":
        values = cells.to_numpy(dtype=np.float64, na_value=np.nan)
        reasons = np.full(n, "", dtype=object)
        reasons[np.isnan(values)] = "missing-response"
        reasons[np.isinf(values)] = "infinite"
        return values, reasons, CellTexts(values, np.full(n, None, dtype=object))
    return _parse_mixed(cells.to_numpy(dtype=object), decimal)


def _kind(cells: pd.Series) -> str:
    """'string', 'number' or 'mixed' for a column that is not of a numeric dtype."""
    if pd.api.types.is_string_dtype(cells.dtype) and cells.dtype != object:
        return "string"
    if cells.dtype != object:
        return "mixed"
    inferred = pd.api.types.infer_dtype(cells, skipna=True)
    if inferred in ("string", "empty"):
        return "string"
    if inferred in ("floating", "integer", "mixed-integer-float"):
        return "number"
    return "mixed"


def _categorical(cells: pd.Series, decimal: str):
    codes = cells.cat.codes.to_numpy()
    cats = pd.Series(np.asarray(cells.cat.categories, dtype=object), dtype=object)
    cv, cr, ct = parse_values(cats, decimal)
    cv = np.append(cv, np.nan)                   # code -1: a missing cell
    cr = np.append(cr, "missing-response").astype(object)
    texts = np.array([ct[j] for j in range(len(cats))] + [""], dtype=object)
    return cv[codes], cr[codes], CellTexts(cv[codes], texts[codes])


def _to_float(strings: pd.Series) -> np.ndarray:
    """Cast texts that all match the plain-number pattern to float64."""
    try:
        import pyarrow as pa
        import pyarrow.compute as pc
        arr = pa.array(strings, from_pandas=True)
        return pc.cast(arr, pa.float64()).to_numpy(zero_copy_only=False)
    except Exception:  # no pyarrow, or a text it will not cast: numpy calls float()
        return np.asarray(strings.to_numpy(dtype=object), dtype=object).astype(np.float64)


def _parse_strings(cells: pd.Series, decimal: str):
    """Text cells: one vectorised pass, then the cells that failed, one by one."""
    n = len(cells)
    text = (cells.where(cells.notna(), "") if cells.dtype == object else cells.fillna(""))
    stripped = text.str.strip()
    probe = stripped.str.replace(",", ".", regex=False) if decimal == "," else stripped
    probe = probe.str.replace("\u2212", "-", regex=False)
    plain = probe.str.fullmatch(_PLAIN).fillna(False).to_numpy(dtype=bool)
    values = np.full(n, np.nan)
    reasons = np.full(n, "", dtype=object)
    kept = np.full(n, None, dtype=object)
    if plain.any():
        values[plain] = _to_float(probe[plain])
    rest = np.flatnonzero(~plain)
    if rest.size:
        others = stripped.iloc[rest]
        missing = others.str.lower().isin(NA_TEXT).to_numpy(dtype=bool)
        kept[rest] = others.to_numpy(dtype=object)
        reasons[rest[missing]] = "missing-response"
        for i in rest[~missing].tolist():
            values[i], reasons[i] = _one_text(kept[i], decimal)
    inf = (reasons == "") & np.isinf(values)
    reasons[inf] = "infinite"
    return values, reasons, CellTexts(values, kept, _Positional(stripped))


class _Positional:
    """Index a Series by position without converting it whole."""

    def __init__(self, series: pd.Series):
        self._s = series

    def __getitem__(self, i):
        return self._s.iat[i]


def _one_text(s: str, decimal: str) -> tuple[float, str]:
    """Read one stripped text cell: (value, reason)."""
    if s.lower() in NA_TEXT:
        return np.nan, "missing-response"
    t = s.replace(",", ".") if decimal == "," else s
    try:
        v = float(t.replace("\u2212", "-"))
    except ValueError:
        if NOT_DETECTED.match(s):
            return np.nan, "not-detected"
        if CENSORED.match(s):
            return np.nan, "below-limit"
        return np.nan, "text"
    if np.isnan(v):
        return v, "missing-response"
    return v, ""


def _parse_mixed(raw: np.ndarray, decimal: str):
    """Cells of any Python type (an Excel sheet, a mixed DataFrame column)."""
    n = raw.size
    values = np.full(n, np.nan)
    reasons = np.full(n, "", dtype=object)
    kept = np.full(n, None, dtype=object)
    for i, x in enumerate(raw.tolist()):
        if isinstance(x, (bool, np.bool_)):
            s = str(x)
        elif isinstance(x, (int, float, np.integer, np.floating)):
            if np.isnan(x):
                kept[i], reasons[i] = "", "missing-response"
            else:
                values[i] = float(x)
            continue
        elif is_blank(x) and not isinstance(x, str):
            kept[i], reasons[i] = "", "missing-response"
            continue
        else:
            s = str(x).strip()
        kept[i] = s
        values[i], reasons[i] = _one_text(s, decimal)
    inf = (reasons == "") & np.isinf(values)
    reasons[inf] = "infinite"
    return values, reasons, CellTexts(values, kept)


# --- labels ------------------------------------------------------------------

def _label_text(x) -> str:
    if isinstance(x, str):
        return x.strip()
    if is_blank(x):
        return ""
    if isinstance(x, float) and x.is_integer():
        return str(int(x))               # Excel reads label 3 as 3.0
    return str(x).strip()


def label_codes(cells: pd.Series) -> tuple[np.ndarray, list[str]]:
    """Return (code per cell, labels): ``labels[code]`` is the cell's label.

    Labels are stripped of surrounding space; a missing or blank cell has
    the label ``""``; a whole float (Excel's 3.0) reads as ``"3"``.  The
    labels are distinct, in order of first appearance.
    """
    if cells.dtype == object and pd.api.types.infer_dtype(cells, skipna=True) not in (
            "string", "empty", "floating", "integer", "mixed-integer-float"):
        # Booleans and numbers would share hash keys (True == 1): text first.
        cells = pd.Series([_label_text(x) for x in cells.tolist()], dtype=object)
    raw_codes, uniques = pd.factorize(cells, use_na_sentinel=True)
    names: dict[str, int] = {}
    remap = np.empty(len(uniques) + 1, dtype=np.int64)
    for j, u in enumerate(list(uniques) + [None]):
        remap[j] = names.setdefault(_label_text(u), len(names))
    labels = list(names)
    if len(labels) == len(uniques) + 1 and labels[-1] == "" and (
            raw_codes.size == 0 or raw_codes.min() >= 0):
        return raw_codes.astype(np.int64, copy=False), labels[:-1]   # nothing to merge
    codes = remap[raw_codes]                     # -1 indexes the trailing None
    # Renumber in order of first appearance (a blank label may come first).
    first = np.full(len(names), codes.size, dtype=np.int64)
    np.minimum.at(first, codes, np.arange(codes.size))
    seen = np.argsort(first, kind="stable")
    seen = seen[first[seen] < codes.size]
    renumber = np.full(len(names), -1, dtype=np.int64)
    renumber[seen] = np.arange(seen.size)
    return renumber[codes], [labels[j] for j in seen]


def blank_mask(col: pd.Series) -> np.ndarray:
    """Whether each cell of a column is blank (missing, or only white space)."""
    na = col.isna().to_numpy(dtype=bool)
    if pd.api.types.is_numeric_dtype(col.dtype) or pd.api.types.is_bool_dtype(col.dtype):
        return na
    if isinstance(col.dtype, pd.CategoricalDtype):
        codes = col.cat.codes.to_numpy()
        cats = blank_mask(pd.Series(np.asarray(col.cat.categories, dtype=object)))
        return (codes < 0) | cats[np.maximum(codes, 0)]
    try:
        space = col.str.strip() == ""
    except AttributeError:      # no text in the column at all
        return na
    return na | space.fillna(False).to_numpy(dtype=bool)

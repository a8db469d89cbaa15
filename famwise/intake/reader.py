"""Read a file or DataFrame into a :class:`~famwise.core.layout.Layout` and a Ledger.

Sources: CSV/TSV/TXT (delimiter sniffed among ``, ; tab |``; UTF-8 with or
without a byte-order mark, UTF-16 with one, or an encoding you name; decimal
comma by option), Excel (``.xlsx``/``.xlsm``, a sheet by name or the first),
Parquet, or a pandas DataFrame.

Layouts: *long* (one row per observation: a response column and a group
column) or *wide* (one column per group, one value per cell).

Group order (the order of codes and of every table): the ``order`` you give;
else, for a DataFrame whose group column is an ordered ``Categorical``, its
categories; else the order of first appearance in the source.

Every value read is either used or listed in the Ledger with its reason:
missing response, other text, an infinite value, a missing group label, a
blank row, or (wide layout) an empty cell; non-detects (``"<0.5"``) are
kept as left-censored values (:mod:`famwise.intake.nondetects`).  Labels
are stripped; labels that differ only by case or inner spacing raise a
:class:`~famwise.core.errors.LabelSpellingWarning`, merged only with
``merge_spellings=True``.
"""

from __future__ import annotations

import csv
import io
import os
import re
import warnings
from collections import Counter
from dataclasses import dataclass
from typing import Sequence

import numpy as np
import pandas as pd

from ..core.errors import FamwiseInputError, did_you_mean, LabelSpellingWarning
from ..core.layout import Layout
from .cells import MISSING_LABELS, blank_mask, is_blank, label_codes, parse_values
from .ledger import Dropped, Ledger
from . import nondetects as nd
from .usable import validate_layout
from .model_columns import build_design, column_names, fractional_labels, model_columns

__all__ = ["Intake", "read", "file_sha256", "load_table", "parse_values", "find_column", "RawTable", "TEXT_SUFFIXES", "EXCEL_SUFFIXES", "PARQUET_SUFFIXES"]

TEXT_SUFFIXES = (".csv", ".tsv", ".txt", ".tab", ".dat")
EXCEL_SUFFIXES = (".xlsx", ".xlsm")
PARQUET_SUFFIXES = (".parquet", ".pq")


@dataclass(frozen=True)
class Intake:
    """What :func:`read` returns: the data to compare and their account."""

    layout: Layout
    ledger: Ledger


def file_sha256(path) -> str | None:
    """Return the SHA-256 of the file at ``path`` (None if it cannot be read)."""
    import hashlib
    try:
        h = hashlib.sha256()
        with open(path, "rb") as fh:
            for block in iter(lambda: fh.read(1 << 20), b""):
                h.update(block)
        return h.hexdigest()
    except OSError:
        return None


# --- loading a raw table -----------------------------------------------------

@dataclass(frozen=True)
class RawTable:
    header: list[str]
    body: pd.DataFrame      # object cells, positional columns
    rows: np.ndarray        # 1-based source row number of each body row
    source: str
    notes: tuple[str, ...]


_MAGIC = (
    (b"\x1f\x8b", "is gzip-compressed; decompress it first (gunzip)"),
    (b"PK\x03\x04", "is a zip archive (an Excel workbook is one); give a workbook the "
                    ".xlsx suffix, or unzip the archive"),
    (b"PAR1", "is a Parquet file; give it the .parquet suffix"),
    (b"\xd0\xcf\x11\xe0", "is an old-style Excel (.xls) or other OLE file; save it as "
                          ".xlsx or CSV"),
)


def _check_binary(data: bytes, encoding: str | None, path: str) -> None:
    """Refuse compressed, binary and BOM-less UTF-16 files with a clear line."""
    for magic, what in _MAGIC:
        if data.startswith(magic):
            raise FamwiseInputError(f"{path!r} {what}; famwise reads it as text")
    utf8 = encoding is None or encoding.lower().replace("_", "-") in ("utf-8", "utf8",
                                                                      "utf-8-sig")
    nul = data.find(b"\x00")
    if nul < 0 or not utf8:
        return
    head = data[:4096]
    # ASCII text in UTF-16 puts a NUL in every other byte.
    even, odd = head[0::2].count(0), head[1::2].count(0)
    if max(even, odd) > 0.3 * (len(head) / 2) and min(even, odd) < 0.05 * (len(head) / 2):
        order = "le" if odd > even else "be"
        raise FamwiseInputError(
            f"{path!r} looks like UTF-16 text without a byte-order mark; pass "
            f"--encoding utf-16-{order} (encoding='utf-16-{order}')")
    line = data.count(b"\n", 0, nul) + 1
    raise FamwiseInputError(
        f"{path!r} holds a NUL byte (line {line}, offset {nul}); it is a binary file or "
        f"damaged text, not delimited text")


def _decode(data: bytes, encoding: str | None, path: str) -> str:
    if data.startswith((b"\xff\xfe", b"\xfe\xff")):
        return data.decode("utf-16")
    _check_binary(data, encoding, path)
    enc = encoding or "utf-8-sig"
    if enc.lower().replace("_", "-") in ("utf-8", "utf8"):
        enc = "utf-8-sig"
    try:
        text = data.decode(enc)
    except LookupError:
        raise FamwiseInputError(f"unknown encoding {encoding!r}") from None
    except UnicodeDecodeError as exc:
        raise FamwiseInputError(
            f"{path!r} is not valid {encoding or 'UTF-8'} (byte 0x{data[exc.start]:02x} at "
            f"offset {exc.start}); pass the file's encoding, e.g. encoding='latin-1' "
            f"(--encoding latin-1)"
        ) from None
    if "\x00" in text:
        line = text.count("\n", 0, text.index("\x00")) + 1
        raise FamwiseInputError(
            f"{path!r} holds a NUL character (line {line}) after decoding as {enc}; "
            f"check the encoding")
    return text


def _sniff(lines: list[str], decimal: str) -> str:
    candidates = [d for d in (",", ";", "\t", "|") if not (d == decimal == ",")]
    best, best_score = None, (0, 0.0)
    for d in candidates:
        counts = [len(r) for r in csv.reader(lines, delimiter=d)]
        if not counts:
            continue
        mode, freq = Counter(counts).most_common(1)[0]
        if mode < 2:
            continue
        score = (freq / len(counts), mode)
        if score > best_score:
            best, best_score = d, score
    return best if best is not None else (";" if decimal == "," else ",")


def _read_text(path: str, delimiter, decimal, encoding) -> tuple[pd.DataFrame, list[str], int]:
    """Return the cells (as text), notes, and how many leading blank lines were skipped."""
    with open(path, "rb") as fh:
        data = fh.read()
    text = _decode(data, encoding, path)
    if not text.strip():
        raise FamwiseInputError(f"{path!r} is empty")
    # Leading blank lines confuse the parser's column count: skip them and
    # count them, so row numbers stay those of the file.
    text, skipped = _skip_blank_lines(text)
    sample = [ln for ln in _head_lines(text, 50) if ln.strip()]
    detected = delimiter is None
    if detected:
        delimiter = "\t" if path.lower().endswith((".tsv", ".tab")) else _sniff(sample, decimal)
        named = {",": "comma", ";": "semicolon", "\t": "tab", "|": "vertical bar"}[delimiter]
        notes = [f"delimiter: {named} (detected)"]
    else:
        notes = [f"delimiter: {delimiter!r} (given)"]
    try:
        frame = pd.read_csv(io.StringIO(text), sep=delimiter, header=None, dtype=str,
                            keep_default_na=False, skip_blank_lines=False,
                            engine="c", quotechar='"')
    except pd.errors.ParserError as exc:
        m = re.search(r"Expected (\d+) fields in line (\d+), saw (\d+)", str(exc))
        if m:
            raise FamwiseInputError(
                f"{path!r} line {int(m.group(2)) + skipped} has {m.group(3)} fields but "
                f"earlier lines have {m.group(1)}; check the delimiter or quote the "
                f"field") from None
        m = re.search(r"EOF inside string starting at row (\d+)", str(exc))
        if m:
            raise FamwiseInputError(
                f"{path!r} line {int(m.group(1)) + 1 + skipped} opens a quote (\") that is "
                f"never closed; close or remove it") from None
        raise FamwiseInputError(f"{path!r} cannot be read as delimited text: "
                                f"{str(exc).strip().splitlines()[0]}") from None
    if detected:
        _check_mixed_delimiters(sample, delimiter, path)
    return frame, notes, skipped


def _skip_blank_lines(text: str) -> tuple[str, int]:
    """Drop the blank lines before the first line holding anything; count them."""
    lead = text[:len(text) - len(text.lstrip())]
    pieces = lead.splitlines(keepends=True)
    # Pieces that end in a line break are whole blank lines; a last piece
    # without one is the indentation of the first filled line.
    whole = [p for p in pieces if p != p.rstrip("\r\n\x0b\x0c\x1c\x1d\x1e\x85\u2028\u2029")]
    cut = sum(len(p) for p in whole)
    return text[cut:], len(whole)


def _head_lines(text: str, n: int) -> list[str]:
    """The first ``n`` lines of ``text`` (as ``str.splitlines`` cuts them)."""
    size = 1 << 16
    while True:
        lines = text[:size].splitlines()
        if len(lines) > n or size >= len(text):
            return lines[:n]
        size *= 4


def _check_mixed_delimiters(sample: list[str], delimiter: str, path: str) -> None:
    """Refuse a file whose lines use different delimiters (say ';' and ',')."""
    rows = list(csv.reader(sample, delimiter=delimiter))
    if not rows:
        return
    width = len(rows[0])
    for i, row in enumerate(rows[1:], start=1):
        if len(row) >= width:
            continue
        for other in (",", ";", "\t", "|"):
            if other == delimiter:
                continue
            if len(next(csv.reader([sample[i]], delimiter=other))) == width:
                names = {",": "','", ";": "';'", "\t": "tab", "|": "'|'"}
                raise FamwiseInputError(
                    f"{path!r} mixes delimiters: the header uses {names[delimiter]} but a "
                    f"line ({sample[i][:40]!r}) uses {names[other]}; use one delimiter "
                    f"throughout")


def _text_hint(path: str) -> str:
    """``"; it looks like delimited text ..."`` when a binary-format file is text."""
    try:
        with open(path, "rb") as fh:
            head = fh.read(4096)
        text = head.decode("utf-8-sig")
    except (OSError, UnicodeDecodeError):
        return ""
    if "\x00" in text or not any(d in text for d in (",", ";", "\t", "|")):
        return ""
    return "; it looks like delimited text: give it the .csv suffix"


def _read_excel(path: str, sheet) -> tuple[pd.DataFrame, list[str]]:
    try:
        import openpyxl
    except ImportError:  # pragma: no cover - depends on the install
        raise FamwiseInputError(
            "reading Excel files needs openpyxl: pip install 'famwise[excel]'") from None
    try:
        book = openpyxl.load_workbook(path, read_only=True, data_only=True)
    except Exception as exc:
        raise FamwiseInputError(f"{path!r} cannot be opened as an Excel workbook "
                                f"({type(exc).__name__}){_text_hint(path)}") from None
    names = book.sheetnames
    book.close()
    if sheet is None:
        sheet = names[0]
    elif isinstance(sheet, int):
        if not 0 <= sheet < len(names):
            raise FamwiseInputError(
                f"{path!r} has {len(names)} sheet(s); sheet index {sheet} is out of range")
        sheet = names[sheet]
    elif sheet not in names:
        hint = did_you_mean(str(sheet), names)
        raise FamwiseInputError(
            f"{path!r} has no sheet {sheet!r} (sheets: {', '.join(map(repr, names))}){hint}")
    frame = pd.read_excel(path, sheet_name=sheet, header=None, dtype=object)
    if frame.size == 0 or _blank_rows(frame).all():
        raise FamwiseInputError(f"sheet {sheet!r} of {path!r} is empty")
    return frame, [f"sheet: {sheet!r}"]


def load_table(source, *, sheet, delimiter, decimal, encoding) -> RawTable:
    if isinstance(source, pd.DataFrame):
        if source.shape[1] == 0 or source.shape[0] == 0:
            raise FamwiseInputError("the DataFrame is empty")
        body = source.reset_index(drop=True)
        header = [str(c) for c in body.columns]
        body.columns = range(body.shape[1])
        return RawTable(header, body, np.arange(1, len(body) + 1), "<DataFrame>", ())
    path = os.fspath(source)
    if not os.path.exists(path):
        raise FamwiseInputError(f"file not found: {path!r}")
    if os.path.isdir(path):
        raise FamwiseInputError(f"{path!r} is a folder, not a data file")
    if os.path.getsize(path) == 0:
        raise FamwiseInputError(f"{path!r} is empty")
    suffix = os.path.splitext(path)[1].lower()
    if suffix in PARQUET_SUFFIXES:
        try:
            body = pd.read_parquet(path)
        except ImportError:  # pragma: no cover - depends on the install
            raise FamwiseInputError(
                "reading Parquet files needs pyarrow: pip install 'famwise[parquet]'") from None
        except Exception as exc:
            raise FamwiseInputError(f"{path!r} cannot be read as Parquet "
                                    f"({type(exc).__name__}){_text_hint(path)}") from None
        if body.shape[0] == 0:
            raise FamwiseInputError(f"{path!r} has no records")
        header = [str(c) for c in body.columns]
        body = body.reset_index(drop=True)
        body.columns = range(body.shape[1])
        return RawTable(header, body, np.arange(1, len(body) + 1), path, ())
    skipped = 0
    if suffix in EXCEL_SUFFIXES:
        frame, notes = _read_excel(path, sheet)
    elif suffix in TEXT_SUFFIXES or suffix == "":
        frame, notes, skipped = _read_text(path, delimiter, decimal, encoding)
    elif suffix == ".xls":
        raise FamwiseInputError(
            f"{path!r} is an old-style .xls workbook; save it as .xlsx or CSV")
    else:
        raise FamwiseInputError(
            f"{path!r}: unsupported file type {suffix!r} (expected one of "
            f"{', '.join(TEXT_SUFFIXES + EXCEL_SUFFIXES + PARQUET_SUFFIXES)})")
    # The header is the first row holding anything; rows before it are blank.
    blank = _blank_rows(frame)
    filled = np.flatnonzero(~blank)
    if filled.size == 0:
        raise FamwiseInputError(f"{path!r} is empty")
    h = int(filled[0])
    header = ["" if is_blank(x) else str(x).strip() for x in frame.iloc[h]]
    body = frame.iloc[h + 1:].reset_index(drop=True)
    if body.shape[0] == 0:
        raise FamwiseInputError(f"{path!r} has a header row but no data rows")
    # Source row of body row i: frame index h + 1 + i (after the skipped
    # leading blank lines), shown 1-based.
    first = h + 2 + skipped
    return RawTable(header, body, np.arange(first, first + len(body)), path, tuple(notes))


def _blank_rows(frame: pd.DataFrame) -> np.ndarray:
    """Whether each row of a frame is blank in every column."""
    blank = np.ones(len(frame), dtype=bool)
    for j in frame.columns:
        blank &= blank_mask(frame[j])
    return blank


_DECIMAL_COMMA = re.compile(r"^[-+]?\d+,\d+$")
_THOUSANDS = re.compile(r"^[-+]?\d{1,3}([,.' \u00a0]\d{3})+([.,]\d+)?$")


def _number_hint(texts, decimal: str) -> str:
    """Suggest the fix when text cells look like numbers written another way."""
    texts = [t for t in texts if t]
    if not texts:
        return ""
    half = len(texts) / 2
    comma = decimal == "." and sum(bool(_DECIMAL_COMMA.match(t)) for t in texts) > half
    thousands = sum(bool(_THOUSANDS.match(t)) for t in texts) > half
    if thousands and any("," in t and "." in t for t in texts):
        comma = False                     # 1,050.5: the comma cannot be a decimal mark
    if thousands and comma:
        return ("; they look like numbers with thousands separators or a decimal comma: "
                "remove the separators (write 1050, not 1,050), or pass --decimal-comma "
                "(decimal=',')")
    if thousands:
        return ("; they look like numbers with thousands separators: remove the "
                "separators (write 1050.5, not 1,050.5)")
    if comma:
        return ("; they look like numbers with a decimal comma: pass --decimal-comma "
                "(decimal=',')")
    return ""


#: Longest group label accepted; longer ones are nearly always a quoting error.
MAX_LABEL = 500


def find_column(header: list[str], name, source: str, role: str) -> int:
    """Return the position of the column ``name`` in ``header``; the rule for every column option.

    Every option that names a column (response, group, the wide layout's
    columns, a batch's responses and strata, and any column option added
    later: call this function) follows one rule: **the name must match a
    header exactly**, letter case and inner spacing included.  A header read
    from a text file or a sheet has its surrounding white space removed
    first; a name given with surrounding white space does not match.  A
    name that matches no header, or matches only when case or surrounding
    space is ignored, is refused with a one-line error that lists the
    columns and suggests the closest (``did you mean 'Nitrate'?``).

    Why exact: the name goes into the decision record and the command line
    that reproduces the run, so it should be the file's own spelling; and a
    file that holds both ``Nitrate`` and ``nitrate`` (or gains one later)
    must not change meaning under a rerun.

    Parameters
    ----------
    header : list of str
        The column names, in file order.
    name : str or None
        The name asked for (None: the option was not given).
    source : str
        The file path or ``"<DataFrame>"``, for the message.
    role : str
        What the column is for (``"response"``, ``"group"``, ``"block"`` ...),
        for the message.

    Raises
    ------
    FamwiseInputError
        When ``name`` is None, names no column, or names two columns.
    """
    if name is None:
        raise FamwiseInputError(f"name the {role} column (columns in {source!r}: "
                                f"{', '.join(map(repr, header))})")
    name = str(name)
    if header.count(name) > 1:
        raise FamwiseInputError(f"{source!r} has {header.count(name)} columns named {name!r}")
    if name in header:
        return header.index(name)
    hint = did_you_mean(name, header)
    folded = [h.casefold() for h in header]
    why = ("; column names must match exactly, letter case and spacing included"
           if name.strip().casefold() in folded else "")
    raise FamwiseInputError(
        f"{source!r} has no {role} column {name!r} (columns: "
        f"{', '.join(map(repr, header))}){hint}{why}")


def _count(n: int, word: str) -> str:
    return f"{n} {word}" if n == 1 else f"{n} {word}s"


def _spelling_key(label: str) -> str:
    return " ".join(label.split()).casefold()


# --- public ------------------------------------------------------------------

def read(source, response: str | None = None, group: str | None = None, *,
         wide: bool = False, columns: Sequence[str] | None = None,
         sheet: str | int | None = None, delimiter: str | None = None,
         decimal: str = ".", encoding: str | None = None,
         order: Sequence[str] | None = None,
         merge_spellings: bool = False,
         exclude_rows: Sequence[int] = (),
         block: str | Sequence[str] | None = None,
         covariates: str | Sequence[str] | None = None,
         detection_limit=None, nondetects: str = "keep") -> Intake:
    """Read ``source`` and return the usable data and an account of every row.

    Parameters
    ----------
    source : path-like or pandas.DataFrame
        A CSV/TSV/TXT, Excel (.xlsx) or Parquet file, or a DataFrame.
    response, group : str
        Long layout: the column holding the measured values and the column
        holding the group labels.  Ignored when ``wide=True``.
    wide : bool, default=False
        Wide layout: every column (or those in ``columns``) is a group.
    columns : list of str, optional
        Wide layout: the group columns to use (default: all).
    sheet : str or int, optional
        Excel sheet by name or 0-based index (default: the first).
    delimiter : str, optional
        Field delimiter of a text file (default: detected).
    decimal : {".", ","}, default="."
        Decimal mark of numbers in a text file.
    encoding : str, optional
        Text encoding (default UTF-8, with or without a byte-order mark).
    order : list of str, optional
        The group order to use; it must list every group exactly once.
    merge_spellings : bool, default=False
        Merge labels that differ only by case or inner spacing into their most
        frequent spelling.
    exclude_rows : sequence of int, optional
        Source row numbers (as the ledger counts them) to set aside, for
        example after checking a flagged value against the field records.
        Each is listed in the ledger as excluded by the user.
    block : str or list of str, optional
        Long layout: the blocking column (replicate, block), or two columns
        for the rows and columns of a Latin square.  Values are labels (text;
        integer codes are labels too); a row without a block label is set
        aside (ledger reason ``missing-block``).  A column of non-integer
        numbers draws a :class:`~famwise.core.errors.ModelWarning` (it looks
        like a measurement: pass it as a covariate).
    covariates : str or list of str, optional
        Long layout: numeric covariate columns (baseline measurements).  A
        row without a value is set aside (``missing-covariate``), as is a
        text cell among numbers (``covariate-text``); a column with no
        numbers at all is refused.
    detection_limit : float or str, optional
        Limit of bare non-detects (``"n.d."``, ``"<DL"``): a number, or a
        column of each row's limit (:mod:`famwise.intake.nondetects`).
    nondetects : {"keep", "drop"}, default="keep"
        Keep non-detects as left-censored values, or set them aside.

    Returns
    -------
    Intake
        ``.layout`` (values, group codes, labels, source rows) and ``.ledger``.

    Raises
    ------
    FamwiseInputError
        With a one-line message naming the file, column, row or value.
    """
    if decimal not in (".", ","):
        raise FamwiseInputError(f"decimal must be '.' or ','; got {decimal!r}")
    if delimiter is not None and (not isinstance(delimiter, str) or len(delimiter) != 1):
        raise FamwiseInputError(f"delimiter must be a single character; got {delimiter!r}")
    raw = load_table(source, sheet=sheet, delimiter=delimiter, decimal=decimal,
                encoding=encoding)
    src = raw.source
    excluded = _excluded_rows(exclude_rows, raw)
    notes = list(raw.notes)
    block_names = column_names(block, "block")
    covariate_names = column_names(covariates, "covariates")
    design_cells = None
    if wide and (block_names or covariate_names):
        raise FamwiseInputError(
            "blocks and covariates need the long layout (one row per plot with its "
            "response, group and block columns); reshape the wide table to long")
    how = nd.setup(detection_limit, nondetects, raw.header, src, wide, find_column)
    if wide:
        values, codes, names, rows, dropped, n_read, (flags, cens_text) = _wide(
            raw, columns, decimal, excluded, how)
        unit, response_name, group_name = "cell", "value", "column"
        cens_column = [names[c] for c in codes[flags]]
    else:
        values, codes, names, rows, dropped, n_read, response_name, group_name, \
            (design_cells, (flags, cens_text)) = _long(raw, response, group, decimal,
                                                       excluded, how, block_names,
                                                       covariate_names)
        unit, cens_column = "row", [response_name] * int(flags.sum())
    notes += [nd.drop_note(dropped)] if nondetects == "drop" else []
    # From here on, labels are handled once per distinct label (``names``),
    # each value carrying the code of its label.
    counts = np.bincount(codes, minlength=len(names))
    first = np.full(len(names), codes.size, dtype=np.int64)
    np.minimum.at(first, codes, np.arange(codes.size))
    used = [j for j in np.argsort(first, kind="stable").tolist() if counts[j] > 0]
    _check_labels(names, used, first, rows, src, unit)
    # Spelling variants among the labels that are used, in order of first use.
    by_key: dict[str, list[int]] = {}
    for j in used:
        by_key.setdefault(_spelling_key(names[j]), []).append(j)
    merged = list(names)
    for spellings in by_key.values():
        if len(spellings) < 2:
            continue
        spellings.sort(key=lambda j: -counts[j])     # stable: ties keep first seen
        listed = ", ".join(f"{names[j]!r} ({_count(int(counts[j]), unit)})"
                           for j in spellings)
        if merge_spellings:
            for j in spellings[1:]:
                merged[j] = names[spellings[0]]
            notes.append(f"merged spellings {listed} into {names[spellings[0]]!r}")
        else:
            warnings.warn(LabelSpellingWarning(
                f"group labels {listed} in {src!r} differ only by case or spacing; "
                f"they are kept apart (pass merge_spellings=True, or --merge-spellings, "
                f"to merge them)"), stacklevel=2)
            notes.append(f"labels {listed} differ only by case or spacing; kept apart")
    # Group order.
    first_seen = list(dict.fromkeys(merged[j] for j in used))
    if order is not None:
        order = [str(o).strip() for o in order]
        missing = [g for g in first_seen if g not in order]
        extra = [g for g in order if g not in first_seen]
        if extra:
            raise FamwiseInputError(
                f"order names {extra[0]!r}, which is not a group in {src!r} "
                f"(groups: {', '.join(map(repr, first_seen))})")
        if missing:
            raise FamwiseInputError(f"order leaves out group {missing[0]!r}")
        if len(set(order)) != len(order):
            raise FamwiseInputError("order lists a group twice")
        label_order = order
    elif (not wide and isinstance(source, pd.DataFrame)
          and isinstance(source[group_name].dtype, pd.CategoricalDtype)
          and source[group_name].cat.ordered):
        label_order = [str(c).strip() for c in source[group_name].cat.categories
                       if str(c).strip() in first_seen]
    else:
        label_order = first_seen
    index = {lab: i for i, lab in enumerate(label_order)}
    to_group = np.array([index.get(lab, -1) for lab in merged], dtype=np.int64)
    codes = to_group[codes] if codes.size else codes
    values = np.asarray(values, dtype=np.float64)
    design = None
    if design_cells is not None:
        design, design_notes = build_design(design_cells, src)
        notes.extend(design_notes)
    rows = np.asarray(rows, dtype=np.int64)
    cens = nd.ledger_entries(flags, cens_text, cens_column, values, rows,
                             [label_order[c] for c in codes[flags]], names if wide else None)
    if cens:
        notes.append(f"{len(cens)} non-detect{'s' if len(cens) != 1 else ''} kept as "
                     f"left-censored values (below their detection limit)")
    ledger = Ledger(src, unit, n_read, int(values.size), tuple(dropped), tuple(notes),
                    tuple(cens))
    layout = Layout(values=values, codes=codes, labels=tuple(label_order),
                    rows=rows, response=response_name, group=group_name, source=src,
                    design=design, censored=flags if flags.any() else None)
    with np.errstate(over="ignore", invalid="ignore"):
        validate_layout(layout, ledger)  # huge values are refused there, not warned about
    return Intake(layout, ledger)


def _long(raw: RawTable, response, group, decimal, excluded, how: nd.Censoring,
          block_names=(), covariate_names=()):
    src = raw.source
    r = find_column(raw.header, response, src, "response")
    g = find_column(raw.header, group, src, "group")
    if r == g:
        raise FamwiseInputError(
            f"response and group are the same column {raw.header[r]!r}")
    if how.spec.column is not None and how.spec.column in (r, g):
        raise FamwiseInputError(
            f"the detection-limit column {how.spec.name!r} is also the response or group "
            f"column; name the column holding each row's limit")
    rname, gname = raw.header[r], raw.header[g]
    b_cols, c_cols = model_columns(raw.header, src, {r: "response", g: "group"},
                                   block_names, covariate_names, find_column)
    b_labels, b_fractional, b_missing = [], [], []
    for j in b_cols:
        b_codes, b_names = label_codes(raw.body[j])
        lab = np.array(b_names, dtype=object)[b_codes] if b_codes.size else \
            np.empty(0, dtype=object)
        b_labels.append(lab)
        b_fractional.append(fractional_labels(raw.body[j], lab))
        b_missing.append(np.array([x.lower() in MISSING_LABELS for x in b_names],
                                  dtype=bool)[b_codes])
    c_values, c_reasons = [], []
    for j in c_cols:
        v, reasons, texts = parse_values(raw.body[j], decimal)
        if not np.any(reasons == ""):
            shown = ", ".join(repr(t) for t in dict.fromkeys(x for x in texts if x))
            raise FamwiseInputError(
                f"covariate column {raw.header[j]!r} in {src!r} holds no numbers (it holds "
                f"{shown[:80] or 'only empty cells'}); a covariate is a measurement: pass a "
                f"text column as block= instead{_number_hint(texts, decimal)}")
        c_values.append((v, texts))
        c_reasons.append(reasons)
    values, reasons, texts = parse_values(raw.body[r], decimal)
    values, reasons = np.array(values, dtype=np.float64), np.array(reasons, dtype=object)
    codes, names = label_codes(raw.body[g])
    excl0 = (np.isin(raw.rows, np.fromiter(excluded, dtype=np.int64, count=len(excluded)))
             if excluded else np.zeros(len(values), dtype=bool))
    limits = nd.row_limits(raw.body[how.spec.column].to_numpy(dtype=object), decimal,
                           how.spec, src, raw.rows) if how.spec.column is not None else None
    flags = nd.censor_cells(values, reasons, texts, how, limits, raw.rows, rname, src,
                            decimal, excl0)
    usable = reasons == ""
    if not usable.any():
        shown = ", ".join(repr(t) for t in dict.fromkeys(x for x in texts if x)) or "only empty cells"
        raise FamwiseInputError(
            f"response column {rname!r} in {src!r} has no numeric values "
            f"(it holds {shown[:80]}){_number_hint(texts, decimal)}")
    no_group = np.array([lab.lower() in MISSING_LABELS for lab in names], dtype=bool)[codes]
    excl = (np.isin(raw.rows, np.fromiter(excluded, dtype=np.int64, count=len(excluded)))
            if excluded else np.zeros(len(values), dtype=bool))
    # A blank row is blank in every column; look only where the response and
    # the label are blank.
    blank_row = np.zeros(len(values), dtype=bool)
    maybe = (np.flatnonzero(~usable & (codes == names.index(""))) if "" in names
             else np.zeros(0, dtype=np.int64))
    maybe = maybe[[reasons[i] == "missing-response" and texts[i] == ""
                   for i in maybe.tolist()]] if maybe.size else maybe
    if maybe.size:
        blank_row[maybe] = _blank_rows(raw.body.iloc[maybe])
    keep = usable & ~no_group & ~excl & ~blank_row
    for miss in b_missing:
        keep &= ~miss
    for rs in c_reasons:
        keep &= rs == ""
    dropped = []
    for i in np.flatnonzero(~keep).tolist():
        label = names[codes[i]]
        if excl[i]:
            reason, col, text = "excluded", rname, texts[i]
        elif blank_row[i]:
            reason, col, text = "blank-row", "", ""
        elif reasons[i]:
            reason, col, text = reasons[i], rname, texts[i]
        else:
            reason, col, text = None, "", ""
            if no_group[i]:
                reason, col, text = "missing-group", gname, label
            for j, lab, miss in zip(b_cols, b_labels, b_missing):
                if reason is not None:
                    break
                if miss[i]:
                    reason, col, text = "missing-block", raw.header[j], lab[i]
                    break
            if reason is None:
                for j, (v, ctexts), rs in zip(c_cols, c_values, c_reasons):
                    if rs[i]:
                        reason = ("missing-covariate" if rs[i] == "missing-response"
                                  else "covariate-text")
                        col, text = raw.header[j], ctexts[i]
                        break
            if reason is None:
                reason, col, text = "missing-group", gname, label
        dropped.append(Dropped(int(raw.rows[i]), col, text, reason, label))
    nd.check_below_limit(values, flags, limits, keep, raw.rows, src, how.spec.name)
    kept_text = nd.flag_texts(texts, flags, keep)
    cells = None
    if b_cols or c_cols:
        cells = {"blocks": [(raw.header[j], lab[keep], frac)
                            for j, lab, frac in zip(b_cols, b_labels, b_fractional)],
                 "covariates": [(raw.header[j], v[keep])
                                for j, (v, _) in zip(c_cols, c_values)]}
    return (values[keep], codes[keep], names, raw.rows[keep], dropped,
            len(values), rname, gname, (cells, (flags[keep], kept_text)))


def _wide(raw: RawTable, columns, decimal, excluded, how: nd.Censoring):
    src = raw.source
    header = raw.header
    if columns is None:
        use = [j for j, h in enumerate(header) if h]
        if len(use) < len(header):
            raise FamwiseInputError(
                f"{src!r} has a column without a header (column {header.index('') + 1}); "
                f"name it or choose the group columns")
    else:
        use = [find_column(header, c, src, "group") for c in columns]
    names = list(dict.fromkeys(header[j] for j in use))
    excl = (np.isin(raw.rows, np.fromiter(excluded, dtype=np.int64, count=len(excluded)))
            if excluded else np.zeros(len(raw.body), dtype=bool))
    values, codes, rows, dropped, flag_parts, text_parts = [], [], [], [], [], []
    for j in use:
        v, reasons, texts = parse_values(raw.body[j], decimal)
        v, reasons = np.array(v, dtype=np.float64), np.array(reasons, dtype=object)
        f = nd.censor_cells(v, reasons, texts, how, None, raw.rows, header[j], src, decimal, excl)
        keep = (reasons == "") & ~excl
        flag_parts.append(f[keep])
        text_parts.append(nd.flag_texts(texts, f, keep))
        values.append(v[keep])
        codes.append(np.full(int(keep.sum()), names.index(header[j]), dtype=np.int64))
        rows.append(raw.rows[keep])
        for i in np.flatnonzero(~keep).tolist():
            row = int(raw.rows[i])
            if excl[i]:
                dropped.append(Dropped(row, header[j], texts[i], "excluded", header[j]))
            elif reasons[i] == "missing-response" and texts[i] == "":
                dropped.append(Dropped(row, header[j], "", "empty-cell", header[j]))
            else:
                dropped.append(Dropped(row, header[j], texts[i], reasons[i], header[j]))
    if not use:
        raise FamwiseInputError(f"name at least one group column of {src!r}")
    values, codes, rows = np.concatenate(values), np.concatenate(codes), np.concatenate(rows)
    if not values.size:
        texts = [d.value for d in dropped]
        raise FamwiseInputError(f"the group columns of {src!r} hold no numeric values"
                                f"{_number_hint(texts, decimal)}")
    dropped.sort(key=lambda d: (d.row, use.index(header.index(d.column))))
    return (values, codes, names, rows, dropped, len(use) * len(raw.body),
            (np.concatenate(flag_parts), np.concatenate(text_parts)))


def _check_labels(names, used, first, rows, src: str, unit: str) -> None:
    """Refuse labels that are too long or hold a line break (a quoting error)."""
    for j in used:                       # in order of first use
        lab = names[j]
        if len(lab) > MAX_LABEL or "\n" in lab or "\r" in lab:
            what = (f"is {len(lab)} characters long" if len(lab) > MAX_LABEL
                    else "holds a line break")
            raise FamwiseInputError(
                f"the group label in {unit} {int(rows[first[j]])} of {src!r} {what} (it "
                f"starts {lab[:30]!r}); this usually means an unbalanced quote in the file")


def _excluded_rows(exclude_rows, raw: RawTable) -> set:
    rows = set()
    data_rows = None
    for r in exclude_rows or ():
        try:
            value = int(r)
        except (TypeError, ValueError):
            raise FamwiseInputError(f"row to exclude must be a whole number; got {r!r}") \
                from None
        if value != r and not isinstance(r, str):
            raise FamwiseInputError(f"row to exclude must be a whole number; got {r!r}")
        if data_rows is None:
            data_rows = set(raw.rows.tolist())       # once, not once per row asked for
        if value not in data_rows:
            raise FamwiseInputError(
                f"row {value} to exclude is not a data row of {raw.source!r} (data rows "
                f"{raw.rows[0]} to {raw.rows[-1]})")
        rows.add(value)
    return rows

"""Writing results safely: atomic files, no silent overwrite, safe CSV cells.

Each file is written to a temporary file in the destination folder and then
renamed over its final name, so an interrupted run never leaves a half-written
file.  A folder that already holds any of the files is refused unless
``force=True``.  CSV cells that a spreadsheet would run as a formula (text
starting with ``=``, ``+``, ``-``, ``@``, tab or carriage return, other than
plain numbers) are prefixed with a single quote.
"""

from __future__ import annotations

import os
import re
import tempfile
from typing import Iterable

import pandas as pd

from .errors import FamwiseInputError

__all__ = ["prepare_folder", "write_atomic", "safe_csv_text", "neutralise_cell"]

_NUMBER = re.compile(r"^[-+]?(\d+\.?\d*|\.\d+)([eE][-+]?\d+)?$")


def neutralise_cell(value):
    """Return ``value`` made inert for spreadsheets (see module notes)."""
    if isinstance(value, str) and value[:1] in ("=", "+", "-", "@", "\t", "\r") \
            and not _NUMBER.match(value):
        return "'" + value
    return value


def safe_csv_text(frame: pd.DataFrame) -> str:
    """Return ``frame`` as CSV text with formula-like cells neutralised."""
    safe = frame.copy()
    safe.columns = [neutralise_cell(str(c)) for c in safe.columns]
    for col in safe.columns:
        if safe[col].dtype == object or pd.api.types.is_string_dtype(safe[col].dtype):
            safe[col] = safe[col].map(neutralise_cell)
    return safe.to_csv(index=False, lineterminator="\n")


def prepare_folder(folder: str, names: Iterable[str], force: bool = False) -> str:
    """Create ``folder`` if needed and check that ``names`` may be written."""
    folder = os.fspath(folder)
    if os.path.exists(folder) and not os.path.isdir(folder):
        raise FamwiseInputError(f"output path {folder!r} exists and is not a folder")
    try:
        os.makedirs(folder, exist_ok=True)
    except OSError as exc:
        raise FamwiseInputError(
            f"cannot create output folder {folder!r}: {exc.strerror}") from None
    if not os.access(folder, os.W_OK):
        raise FamwiseInputError(f"output folder {folder!r} is not writable")
    present = [n for n in names if os.path.exists(os.path.join(folder, n))]
    if present and not force:
        raise FamwiseInputError(
            f"output folder {folder!r} already holds {', '.join(present)}; "
            f"pass --force (force=True) to replace them")
    return folder


def write_atomic(path: str, text: str | bytes) -> None:
    """Write ``text`` to ``path`` through a temporary file and a rename.

    A failure to write (no space, a file-size limit, a read-only place) is
    a :class:`FamwiseInputError` naming the file; the temporary file is
    removed and ``path`` is left as it was.
    """
    folder = os.path.dirname(os.path.abspath(path))
    mode = "wb" if isinstance(text, bytes) else "w"
    tmp = None
    try:
        fd, tmp = tempfile.mkstemp(prefix=".famwise-", suffix=".tmp", dir=folder)
        with os.fdopen(fd, mode, **({} if mode == "wb" else {"encoding": "utf-8",
                                                             "newline": ""})) as fh:
            fh.write(text)
            fh.flush()
            os.fsync(fh.fileno())
        os.replace(tmp, path)
    except BaseException as exc:
        if tmp is not None:
            try:
                os.unlink(tmp)
            except OSError:
                pass
        if isinstance(exc, OSError):
            raise FamwiseInputError(
                f"cannot write {path!r}: {exc.strerror or exc}") from None
        raise

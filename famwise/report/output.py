"""Writing results safely: atomic files, no silent overwrite, safe CSV cells.

Each file is written to a temporary file in the destination folder and then
renamed over its final name, so an interrupted run never leaves a half-written
file.  The files get the permissions a plain ``open(path, "w")`` would give
them (0666 less the user's umask, so 0644 under the usual 022), not the
owner-only 0600 of the temporary file.  A folder that already holds any of the files is refused unless
``force=True``.  CSV cells that a spreadsheet would run as a formula (text
starting with ``=``, ``+``, ``-``, ``@``, tab or carriage return, other than
plain numbers) are prefixed with a single quote.
"""

from __future__ import annotations

import os
import re
import tempfile
from typing import Iterable, Mapping

import pandas as pd

from ..core.errors import FamwiseInputError

__all__ = ["prepare_folder", "write_atomic", "write_files", "safe_csv_text",
           "neutralise_cell"]

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


def _umask() -> int:
    """The process's file-creation mask, read without changing it where possible."""
    try:
        with open("/proc/self/status", encoding="ascii") as fh:
            for line in fh:
                if line.startswith("Umask:"):
                    return int(line.split()[1], 8)
    except (OSError, ValueError):
        pass
    mask = os.umask(0o022)          # elsewhere: read it by setting it, then put it back
    os.umask(mask)
    return mask


def _temporary(folder: str, suffix: str) -> tuple[int, str]:
    """``mkstemp`` in ``folder``, with the mode an ordinary new file would get."""
    fd, tmp = tempfile.mkstemp(prefix=".famwise-", suffix=suffix, dir=folder)
    if hasattr(os, "fchmod"):
        try:
            os.fchmod(fd, 0o666 & ~_umask())
        except OSError:
            pass
    return fd, tmp


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
        fd, tmp = _temporary(folder, ".tmp")
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


def write_files(folder: str, texts: Mapping[str, str | bytes]) -> list[str]:
    """Write several files into ``folder`` as one set: all of them or none.

    Every file is first written to a temporary file in ``folder`` (the slow
    part, where an interruption or a full disk usually strikes); only when
    all are written are they renamed into place.  If anything fails or is
    interrupted before the last rename, the temporary files are removed, the
    files this call had already put in place are removed again, and any file
    they replaced is put back, so the folder holds the old set or the new
    one, never a mixture or a part.  Returns the paths written.

    Raises
    ------
    FamwiseInputError
        When a file cannot be written (no space, a file-size limit, a
        read-only place), naming it.
    """
    folder = os.fspath(folder)
    staged: list[tuple[str, str]] = []          # (temporary, final)
    placed: list[dict] = []                    # renames done or under way
    try:
        for name, text in texts.items():
            path = os.path.join(folder, name)
            mode = "wb" if isinstance(text, bytes) else "w"
            try:
                fd, tmp = _temporary(folder, ".tmp")
            except OSError as exc:
                raise FamwiseInputError(
                    f"cannot write {path!r}: {exc.strerror or exc}") from None
            staged.append((tmp, path))
            try:
                with os.fdopen(fd, mode, **({} if mode == "wb" else
                                            {"encoding": "utf-8", "newline": ""})) as fh:
                    fh.write(text)
                    fh.flush()
                    os.fsync(fh.fileno())
            except OSError as exc:
                raise FamwiseInputError(
                    f"cannot write {path!r}: {exc.strerror or exc}") from None
        for tmp, path in staged:
            entry = {"tmp": tmp, "path": path, "backup": None, "old_moved": False}
            placed.append(entry)
            if os.path.exists(path):
                fd, entry["backup"] = tempfile.mkstemp(prefix=".famwise-", suffix=".old",
                                                       dir=folder)
                os.close(fd)
                os.replace(path, entry["backup"])
                entry["old_moved"] = True
            os.replace(tmp, path)
    except BaseException as exc:
        for entry in reversed(placed):
            try:
                if not os.path.exists(entry["tmp"]) and os.path.exists(entry["path"]):
                    os.unlink(entry["path"])            # the new file was in place
                if entry["old_moved"]:
                    os.replace(entry["backup"], entry["path"])
                elif entry["backup"] is not None:
                    os.unlink(entry["backup"])
            except OSError:
                pass
        for tmp, _ in staged:
            try:
                os.unlink(tmp)
            except OSError:
                pass
        if isinstance(exc, OSError):
            raise FamwiseInputError(f"cannot write into {folder!r}: "
                                    f"{exc.strerror or exc}") from None
        raise
    for entry in placed:
        if entry["backup"] is not None:
            try:
                os.unlink(entry["backup"])
            except OSError:
                pass
    return [path for _, path in staged]

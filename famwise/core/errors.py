"""Errors and warnings raised by famwise.

Every problem with the user's input is a :class:`FamwiseInputError` whose
message is one line naming the file, column, row or value at fault and, where
one exists, the fix.  The command line prints that line and exits with code 2;
anything else escaping is an internal error (exit code 1).
"""

import difflib

__all__ = [
    "did_you_mean",
    "FamwiseError",
    "FamwiseInputError",
    "FamwiseWarning",
    "LabelSpellingWarning",
    "SmallGroupWarning",
    "DroppedRowsWarning",
    "ModelWarning",
]


class FamwiseError(Exception):
    """Base class of every error famwise raises on purpose."""


class FamwiseInputError(FamwiseError, ValueError):
    """Bad input or usage; the message is a single line meant for the user."""

    def __init__(self, message: str):
        message = " ".join(str(message).split("\n"))
        super().__init__(message)


class FamwiseWarning(UserWarning):
    """Base class of famwise's warnings."""


class LabelSpellingWarning(FamwiseWarning):
    """Group labels that differ only by letter case or inner spacing."""


class SmallGroupWarning(FamwiseWarning):
    """A group is too small for the asymptotics a procedure relies on."""


class DroppedRowsWarning(FamwiseWarning):
    """Input rows were set aside (each one is listed in the Ledger)."""


class ModelWarning(FamwiseWarning):
    """The design weakens some comparisons (a group confined to one block, a
    block column that looks like measurements, ...)."""


def did_you_mean(value, options) -> str:
    """Return ``"; did you mean 'x'?"`` for the option closest to ``value``, or ``""``.

    Tries, in turn: the same text ignoring case, a unique option containing
    the value (or contained in it), then the closest by ``difflib``.
    """
    text = str(value).strip().casefold()
    options = [str(o) for o in options]
    folded = [o.casefold() for o in options]
    if text in folded:
        return f"; did you mean {options[folded.index(text)]!r}?"
    if text:
        holders = [o for o, f in zip(options, folded) if text in f or (f and f in text)]
        if len(holders) == 1:
            return f"; did you mean {holders[0]!r}?"
    close = difflib.get_close_matches(text, folded, n=1, cutoff=0.5)
    return f"; did you mean {options[folded.index(close[0])]!r}?" if close else ""

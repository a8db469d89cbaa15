"""Errors and warnings raised by famwise.

Every problem with the user's input is a :class:`FamwiseInputError` whose
message is one line naming the file, column, row or value at fault and, where
one exists, the fix.  The command line prints that line and exits with code 2;
anything else escaping is an internal error (exit code 1).
"""

__all__ = [
    "FamwiseError",
    "FamwiseInputError",
    "FamwiseWarning",
    "LabelSpellingWarning",
    "SmallGroupWarning",
    "DroppedRowsWarning",
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

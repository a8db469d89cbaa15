"""famwise: compare groups robustly on messy data.

Reads a file or DataFrame and accounts for every row, checks the data,
routes them to a classical, unequal-variance or resampling simultaneous
procedure, cross-checks the result and records why the procedure was chosen.
"""

from importlib.metadata import PackageNotFoundError, version as _version

from .api import calibrate, compare, inspect
from .batch import batch
from .errors import FamwiseError, FamwiseInputError, FamwiseWarning
from .layout import Layout

try:
    __version__ = _version("famwise")
except PackageNotFoundError:  # running from a source tree without install
    __version__ = "0.0.0+unknown"

__all__ = ["__version__", "compare", "inspect", "calibrate", "batch", "FamwiseError",
           "FamwiseInputError", "FamwiseWarning", "Layout"]

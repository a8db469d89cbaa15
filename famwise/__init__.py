"""famwise: compare groups robustly on messy data.

Reads a file or DataFrame and accounts for every row, checks the data,
routes them to a classical, unequal-variance or resampling simultaneous
procedure, cross-checks the result and records why the procedure was chosen.

The public names below load on first use, so ``import famwise`` (and the
command line's ``--help``) stays fast: neither scipy.stats, pandas nor
matplotlib is imported until a function that needs them is called.
"""

from .core.errors import FamwiseError, FamwiseInputError, FamwiseWarning
from .core.version import __version__

# public name -> (module, attribute), imported on first access (PEP 562)
_LAZY = {
    "compare": ("famwise.api", "compare"),
    "inspect": ("famwise.api", "inspect"),
    "calibrate": ("famwise.api", "calibrate"),
    "batch": ("famwise.batching.run", "batch"),
    "plan": ("famwise.planning.plan", "plan"),
    "Layout": ("famwise.core.layout", "Layout"),
    "Comparison": ("famwise.comparison", "Comparison"),
}

__all__ = ["__version__", "compare", "inspect", "calibrate", "batch", "plan", "FamwiseError",
           "FamwiseInputError", "FamwiseWarning", "Layout", "Comparison"]


def __getattr__(name):
    try:
        module, attribute = _LAZY[name]
    except KeyError:
        raise AttributeError(f"module 'famwise' has no attribute {name!r}") from None
    from importlib import import_module
    value = getattr(import_module(module), attribute)
    globals()[name] = value
    return value


def __dir__():
    return sorted(set(globals()) | set(_LAZY))

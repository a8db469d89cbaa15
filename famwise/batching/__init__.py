"""Many responses (and strata) at once, with false discovery control across them."""

from .run import *  # noqa: F401,F403
from .run import __all__  # noqa: F401

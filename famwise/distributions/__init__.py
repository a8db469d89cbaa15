"""Distributions behind the simultaneous procedures (studentized range, Dunnett's
product-correlation maximum, studentized maximum modulus, Welch df)."""

from .simultaneous import *  # noqa: F401,F403  (the public functions, listed in __all__)
from .simultaneous import __all__  # noqa: F401

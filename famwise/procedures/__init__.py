"""The procedures by family (classical, unequal-variance, trimmed means; the
resampling family is :mod:`famwise.resample`), their catalogue, the cross-check,
letters and margins.  The catalogue imports each procedure module only when used."""

from .catalogue import *  # noqa: F401,F403
from .catalogue import __all__  # noqa: F401

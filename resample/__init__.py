"""Resampling procedures: permutation and bootstrap max-statistic adjustments.

Installed as ``famwise.resample`` (setuptools package-dir mapping).  The five
procedures live in :mod:`famwise.resample.procedures`; the chunked, seeded,
parallel engine in :mod:`famwise.resample.engine`; the compiled loops in
:mod:`famwise.resample.kernels`.
"""

from .procedures import (UnsettledWarning, bootstrap_hall, bootstrap_maxt,
                         bootstrap_stepdown, permutation_maxt, permutation_stepdown)

__all__ = ["permutation_maxt", "permutation_stepdown", "bootstrap_maxt",
           "bootstrap_stepdown", "bootstrap_hall", "UnsettledWarning"]

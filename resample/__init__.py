"""Resampling procedures: permutation and bootstrap max-statistic adjustments.

Installed as ``famwise.resample`` (setuptools package-dir mapping).  The
permutation and bootstrap procedures live in
:mod:`famwise.resample.procedures` (with blocks or covariates the
permutation runs within blocks, on the design algebra of
:mod:`famwise.resample.design`), the wild bootstrap with HC standard errors
in :mod:`famwise.resample.wild`; the chunked, seeded, parallel engine in
:mod:`famwise.resample.engine`; the compiled loops in
:mod:`famwise.resample.kernels` and :mod:`famwise.resample.model_kernels`.
"""

from .procedures import (UnsettledWarning, bootstrap_hall, bootstrap_maxt,
                         bootstrap_stepdown, permutation_maxt, permutation_stepdown)
from .wild import wild_bootstrap_maxt, wild_bootstrap_stepdown

__all__ = ["permutation_maxt", "permutation_stepdown", "bootstrap_maxt",
           "bootstrap_stepdown", "bootstrap_hall", "wild_bootstrap_maxt",
           "wild_bootstrap_stepdown", "UnsettledWarning"]

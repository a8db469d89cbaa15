"""Adjusted p-values for a family of tests: Bonferroni, Sidak, Holm, Hochberg, BH, BY.

Each function takes the unadjusted p-values of one family and returns the
adjusted p-values in the same order, so that the procedure rejects hypothesis
``i`` at level ``alpha`` exactly when ``adjusted[i] <= alpha`` (the adjusted
p-value is the smallest level at which the procedure rejects; Wright 1992).
Arrays of any shape are accepted; the family runs along ``axis`` (default:
the last), so many families of one size are adjusted in one call (batch
runs across responses use this).

Which error rate each controls:

==========  ===========================  ==================================
function    method                       error rate controlled
==========  ===========================  ==================================
bonferroni  single-step, m * p           familywise, any dependence
sidak       single-step, 1 - (1 - p)^m   familywise, independence or
                                         positive orthant dependence (Sidak 1967)
holm        step-down Bonferroni         familywise, any dependence (Holm 1979)
hochberg    step-up                      familywise, independence or
                                         positive dependence (Hochberg 1988)
bh          step-up, m * p_(i) / i       false discovery rate, independence or
                                         positive regression dependence
                                         (Benjamini & Hochberg 1995)
by          bh times sum_{i<=m} 1/i      false discovery rate, any dependence
                                         (Benjamini & Yekutieli 2001)
==========  ===========================  ==================================

The false discovery rate is *not* the familywise error rate: ``bh`` and
``by`` are for exploratory families and screening across many responses.

References
----------
Holm, S. (1979). A simple sequentially rejective multiple test procedure.
*Scand. J. Statist.* 6(2):65-70.
Sidak, Z. (1967). Rectangular confidence regions for the means of
multivariate normal distributions. *JASA* 62:626-633. doi:10.1080/01621459.1967.10482935
Hochberg, Y. (1988). A sharper Bonferroni procedure for multiple tests of
significance. *Biometrika* 75(4):800-802. doi:10.1093/biomet/75.4.800
Benjamini, Y. and Hochberg, Y. (1995). Controlling the false discovery rate.
*JRSS B* 57(1):289-300. doi:10.1111/j.2517-6161.1995.tb02031.x
Benjamini, Y. and Yekutieli, D. (2001). The control of the false discovery
rate in multiple testing under dependency. *Ann. Statist.* 29(4):1165-1188.
doi:10.1214/aos/1013699998
Wright, S. P. (1992). Adjusted p-values for simultaneous inference.
*Biometrics* 48(4):1005-1013. doi:10.2307/2532694
"""

from __future__ import annotations

import numpy as np

from ..core.errors import FamwiseInputError

__all__ = ["bonferroni", "sidak", "holm", "hochberg", "bh", "by", "ADJUSTMENTS",
           "adjust"]


def _check(p, axis: int) -> tuple[np.ndarray, int]:
    p = np.asarray(p, dtype=np.float64)
    if p.ndim == 0:
        p = p.reshape(1)
    if p.shape[axis] == 0:
        raise FamwiseInputError("p-values: the family is empty; give at least one p-value")
    bad = ~((p >= 0.0) & (p <= 1.0))  # also catches nan
    if bad.any():
        raise FamwiseInputError(
            f"p-values must lie in [0, 1]; got {p[bad].ravel()[0]!r}")
    return p, p.shape[axis]


def bonferroni(p, axis: int = -1) -> np.ndarray:
    """Return Bonferroni-adjusted p-values, ``min(1, m * p)``.

    Parameters
    ----------
    p : array_like
        Unadjusted p-values; the family runs along ``axis``.
    axis : int, default=-1

    Returns
    -------
    ndarray
        Adjusted p-values, same shape and order as ``p``.
    """
    p, m = _check(p, axis)
    return np.minimum(1.0, m * p)


def sidak(p, axis: int = -1) -> np.ndarray:
    """Return Sidak-adjusted p-values, ``1 - (1 - p)^m`` (Sidak 1967).

    Computed as ``-expm1(m * log1p(-p))`` so that tiny p-values keep their
    precision.  Never above the Bonferroni value.
    """
    p, m = _check(p, axis)
    with np.errstate(divide="ignore"):
        return np.minimum(1.0, -np.expm1(m * np.log1p(-p)))


def _sorted(p, axis):
    p = np.moveaxis(p, axis, -1)
    order = np.argsort(p, axis=-1, kind="stable")
    ps = np.take_along_axis(p, order, axis=-1)
    return ps, order


def _unsort(adj_sorted, order, axis):
    out = np.empty_like(adj_sorted)
    np.put_along_axis(out, order, adj_sorted, axis=-1)
    return np.moveaxis(out, -1, axis)


def holm(p, axis: int = -1) -> np.ndarray:
    """Return Holm's step-down adjusted p-values (Holm 1979).

    With the p-values sorted ascending, ``p_(1) <= ... <= p_(m)``, the adjusted
    value of the i-th is ``max_{j <= i} min(1, (m - j + 1) p_(j))``.  Never
    above Bonferroni's and never below the unadjusted p-value.
    """
    p, m = _check(p, axis)
    ps, order = _sorted(p, axis)
    factor = m - np.arange(m)
    adj = np.maximum.accumulate(np.minimum(1.0, factor * ps), axis=-1)
    return _unsort(adj, order, axis)


def hochberg(p, axis: int = -1) -> np.ndarray:
    """Return Hochberg's step-up adjusted p-values (Hochberg 1988).

    ``min_{j >= i} min(1, (m - j + 1) p_(j))`` over the sorted p-values.
    """
    p, m = _check(p, axis)
    ps, order = _sorted(p, axis)
    factor = m - np.arange(m)
    adj = np.minimum(1.0, factor * ps)
    adj = np.flip(np.minimum.accumulate(np.flip(adj, -1), axis=-1), -1)
    return _unsort(adj, order, axis)


def bh(p, axis: int = -1) -> np.ndarray:
    """Return Benjamini-Hochberg adjusted p-values (false discovery rate).

    ``min_{j >= i} min(1, m p_(j) / j)`` over the sorted p-values (Benjamini
    & Hochberg 1995).  This controls the false discovery rate, not the
    familywise error rate.
    """
    p, m = _check(p, axis)
    ps, order = _sorted(p, axis)
    adj = ps * m / np.arange(1, m + 1)
    adj = np.flip(np.minimum.accumulate(np.flip(adj, -1), axis=-1), -1)
    return _unsort(np.minimum(1.0, adj), order, axis)


def by(p, axis: int = -1) -> np.ndarray:
    """Return Benjamini-Yekutieli adjusted p-values (FDR, any dependence).

    The BH values before the cap, multiplied by ``c(m) = sum_{i=1}^m 1/i``
    (Benjamini & Yekutieli 2001, Theorem 1.3), then capped at 1.
    """
    p, m = _check(p, axis)
    ps, order = _sorted(p, axis)
    c_m = np.sum(1.0 / np.arange(1, m + 1))
    adj = ps * m * c_m / np.arange(1, m + 1)
    adj = np.flip(np.minimum.accumulate(np.flip(adj, -1), axis=-1), -1)
    return _unsort(np.minimum(1.0, adj), order, axis)


ADJUSTMENTS = {"bonferroni": bonferroni, "sidak": sidak, "holm": holm,
               "hochberg": hochberg, "bh": bh, "by": by}


def adjust(p, method: str, axis: int = -1) -> np.ndarray:
    """Return ``p`` adjusted by ``method`` (one of :data:`ADJUSTMENTS`)."""
    try:
        fn = ADJUSTMENTS[method]
    except (KeyError, TypeError):
        raise FamwiseInputError(
            f"adjustment must be one of {{{', '.join(map(repr, ADJUSTMENTS))}}}; "
            f"got {method!r}") from None
    return fn(p, axis=axis)

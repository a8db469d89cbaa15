"""Heteroscedasticity-consistent algebra of the wild bootstrap (see
:mod:`famwise.resample.wild` for the procedure and the argument for it).

HC3 (MacKinnon & White 1985) and HC4 (Cribari-Neto 2004) weights of the
squared residuals, the HC covariance of least-squares coefficients, and the
set-up of a wild-bootstrap run: observed HC t statistics of the family and
the kernel problem (:func:`famwise.resample.model_kernels.wild_chunk`).
"""

from __future__ import annotations

import numpy as np

from ..core.errors import FamwiseInputError
from . import engine
from .design import DesignInputs, permutation_design
from .statistics import SE_FLOOR, TIE_ATOL, TIE_RTOL, ObservedStatistics

__all__ = ["COVARIANCES", "WEIGHTS", "hc_factors", "hc_covariance", "wild_setup"]

COVARIANCES = ("hc3", "hc4")
WEIGHTS = ("rademacher", "webb")
# Leverage at which an observation counts as fitted exactly (its residual is
# rounding only): it gets no weight in the HC sums.
_LEVERAGE_ONE = 1.0 - 1e-10


def _columns(layout, inputs: DesignInputs | None):
    """Group indicators, block indicators (first level dropped), covariates."""
    n, k = layout.n_total, layout.k
    group = (layout.codes[:, None] == np.arange(k)[None, :]).astype(np.float64)
    nuisance = []
    if inputs is not None:
        nb = inputs.n_blocks
        nuisance += [(inputs.blocks == b).astype(np.float64) for b in range(1, nb)]
        for j in range(inputs.q):
            c = inputs.covariates[:, j]
            c = c - c.mean()
            scale = float(np.sqrt(np.mean(c * c))) or 1.0
            nuisance.append(c / scale)
    nuisance = np.column_stack(nuisance) if nuisance else np.empty((n, 0))
    return group, nuisance


def _basis(x):
    q, r = np.linalg.qr(x)
    return np.ascontiguousarray(q), r


def hc_factors(leverage: np.ndarray, covariance: str, rank: int) -> np.ndarray:
    """kappa_i with omega_i = kappa_i e_i^2: HC3 (1 - h)^-2 [1]; HC4
    (1 - h)^-delta, delta = min(4, N h / p) [2]; 0 where h is 1."""
    h = np.asarray(leverage, dtype=np.float64)
    exact = h >= _LEVERAGE_ONE
    one_minus = np.where(exact, 1.0, 1.0 - h)
    if covariance == "hc3":
        kappa = one_minus ** -2.0
    else:
        delta = np.minimum(4.0, h.size * h / rank)
        kappa = one_minus ** -delta
    return np.where(exact, 0.0, kappa)


def hc_covariance(x, y, covariance="hc3") -> np.ndarray:
    """The HC3 or HC4 covariance matrix of the least-squares coefficients.

    (X'X)^-1 X' diag(kappa_i e_i^2) X (X'X)^-1 [1]_, [2]_; ``x`` of full
    column rank.  Exposed for checks against other least-squares libraries.
    """
    x = np.asarray(x, dtype=np.float64)
    q, r = _basis(x)
    y = np.asarray(y, dtype=np.float64)
    e = y - q @ (q.T @ y)
    kappa = hc_factors(np.einsum("ij,ij->i", q, q), covariance, x.shape[1])
    rinv = np.linalg.inv(r)
    b = q @ rinv.T                       # X (X'X)^-1 = Q R^-T
    return (b * (kappa * e * e)[:, None]).T @ b


def wild_setup(layout, family, inputs, opts, weights):
    """Observed HC statistics and the wild-bootstrap kernel problem."""
    if inputs is not None:
        permutation_design(layout, inputs)     # estimability, collinearity, df
    group, nuisance = _columns(layout, inputs)
    x = np.column_stack([group, nuisance])
    n, p = x.shape
    qb, r = _basis(x)
    if np.min(np.abs(np.diag(r))) <= 1e-10 * np.max(np.abs(np.diag(r))):
        raise FamwiseInputError("the group effects are not estimable in this design")
    if n - p < 1:
        raise FamwiseInputError(
            f"the model has {p} terms for {n} values: no residual degrees of freedom")
    weights_m = np.asarray(family.weights, dtype=np.float64)
    lmat = np.zeros((family.m, p))
    lmat[:, :layout.k] = weights_m
    # A = L (X'X)^-1 X' = L R^-1 Q': each contrast's coefficients on the data.
    amat = np.ascontiguousarray((qb @ np.linalg.solve(r.T, lmat.T)).T)
    a2 = amat * amat
    lev = np.einsum("ij,ij->i", qb, qb)
    kappa = hc_factors(lev, opts.statistic, p)
    y = layout.values - float(np.median(layout.values))
    e = y - qb @ (qb.T @ y)
    est = amat @ y
    se2 = a2 @ (kappa * e * e)
    bad = ~(se2 > 0)
    if np.any(bad):
        j = int(np.flatnonzero(bad)[0])
        raise FamwiseInputError(
            f"comparison {family.names[j]!r} has a zero standard error (no residual "
            f"spread left by the model); its studentized statistic is undefined")
    se = np.sqrt(se2)
    t = est / se
    alt = opts.alternative
    u = np.abs(t) if alt == "two-sided" else (t if alt == "greater" else -t)
    thr = u - (TIE_RTOL * np.abs(u) + TIE_ATOL)
    scale = float(np.sqrt(np.mean(e * e))) or 1.0
    se2_floor = (SE_FLOOR * scale) ** 2 * a2.sum(axis=1)
    obs = ObservedStatistics(est, se, t, u, thr, se2_floor)
    # Restricted residuals: the model without groups (intercept, blocks,
    # covariates), rescaled by 1/sqrt(1 - h0).
    q0, _ = _basis(np.column_stack([np.ones(n), nuisance]))
    e0 = y - q0 @ (q0.T @ y)
    h0 = np.einsum("ij,ij->i", q0, q0)
    e0 = np.where(h0 >= _LEVERAGE_ONE, 0.0, e0 / np.sqrt(np.where(h0 >= _LEVERAGE_ONE, 1.0,
                                                                   1.0 - h0)))
    sign, two_sided = (1.0 if alt != "less" else -1.0), alt == "two-sided"
    order = np.argsort(-u, kind="stable").astype(np.int64)
    args = (np.ascontiguousarray(e0), qb, amat, np.ascontiguousarray(a2), kappa,
            weights == "webb", se2_floor, sign, two_sided, thr, order)
    info = {
        "blocks": 0 if inputs is None or inputs.block_labels == ("all",) else inputs.n_blocks,
        "covariates": [] if inputs is None else list(inputs.covariate_names),
        "df_error": int(n - p),
        "covariance": opts.statistic,
        "weights": weights,
        "residuals": "restricted (model without groups), rescaled by 1/sqrt(1 - h)",
    }
    problem = engine.ResamplingProblem("model_kernels.wild_chunk", args,
                                       n * (family.m + p), family.m)
    return obs, problem, info

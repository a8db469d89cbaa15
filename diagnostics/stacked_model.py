"""The blocked or covariate model on stacked replicates: fit, checks, resampling.

A simulation at a blocked design (calibration under the null, planning
under an alternative) draws thousands of responses ``Y`` (R, N) for one
fixed design: the same groups, blocks, covariates and missing plots in every
replicate.  Everything the model stage, the checks and the resampling
procedures compute is then linear algebra on the fixed design matrix ``X``
applied to all rows of ``Y`` at once, and one decomposition of ``X`` serves
every replicate (:class:`ModelAlgebra`):

* the fit: an orthonormal basis ``Q`` of the column space of ``X`` (from
  its singular value decomposition, so a rank-deficient ``X`` is handled as
  the model stage handles it), residuals ``E = Y - Y Q Q'``, leverages
  ``h_i = |Q_i|^2``, the adjusted means ``Y A'`` with ``A = L X^+`` (the
  least-squares means of :func:`famwise.model.fit_model`; estimable, so any
  generalised inverse gives them), each contrast's coefficients on the data
  ``W A`` and its variance factor, and the group F test;
* the checks of :mod:`famwise.diagnostics.model_checks`, row-wise and judged
  as there: normality (Shapiro–Wilk or Anderson–Darling) and the moments of
  the residuals scaled by ``s_g sqrt(1 - h_i)``; outliers by externally
  studentised residual with the Bonferroni outlier test; Brown–Forsythe,
  Fligner–Killeen and Bartlett on the leverage-scaled residuals by group;
  the ratio of the groups' residual SDs and the size–spread pairing.
  Tukey's non-additivity test only adds a warning (it never routes), so it
  is not simulated;
* the statistics of the resampling procedures, for the warp-speed method
  (Giacomini, Politis & White 2013, *Econometric Theory* 29:567–589): each
  replicate contributes one resample, studentised as the real procedure
  studentises it.  The within-block permutation
  (:func:`famwise.resample.permutation_maxt` with blocks): the residuals of
  the model without groups (``M0 Y``: block-centred values, or with
  covariates the Freedman–Lane residuals) permuted within the blocks of the
  first blocking factor, and the model's pooled t recomputed; adding the
  fitted nuisance part back would change no contrast or residual, so it is
  left out.  The wild bootstrap
  (:func:`famwise.resample.wild.wild_bootstrap_maxt`): the restricted
  residuals rescaled by ``1 / sqrt(1 - h0_i)`` times Rademacher signs, the
  contrasts studentised by their HC3 standard errors.

Block and covariate effects need not be simulated: every statistic here is
unchanged when a vector of the nuisance column space is added to ``Y``.
``tests/test_stacked_model.py`` compares every part with the one-data-set
path (:func:`famwise.model.fit_model`, :func:`famwise.diagnostics.run_checks`,
the route, and the resampling procedures' observed statistics).
"""

from __future__ import annotations

from functools import cached_property

import numpy as np
from scipy import stats

from ..core.families import Family
from ..core.layout import Layout
from ..model import fit_model
from .policy import Policy
from .stacked import (CONCERN, OK, VIOLATED, Blocks, StackedCheck, StackedFindings,
                      _test_verdict, bartlett, brown_forsythe, fligner, moments, normality,
                      pairing)

__all__ = ["ModelAlgebra", "model_checks_stacked", "WARP_MODEL"]

#: The resampling procedures of a blocked or covariate layout simulated here.
WARP_MODEL = ("permutation-maxt", "permutation-stepdown", "wild-bootstrap-maxt",
              "wild-bootstrap-stepdown")


def _basis(x: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray, int]:
    """Orthonormal basis of the columns of ``x`` and its pseudo-inverse parts."""
    u, s, vt = np.linalg.svd(x, full_matrices=False)
    tol = max(x.shape) * np.finfo(float).eps * (s[0] if s.size else 0.0)
    rank = int(np.sum(s > tol))
    return np.ascontiguousarray(u[:, :rank]), s[:rank], vt[:rank], rank


class ModelAlgebra:
    """The fixed algebra of one design (groups, blocks, covariates) and family.

    Built from any layout of the design (the values are not read, except by
    :func:`famwise.model.fit_model`'s checks of the design).
    """

    def __init__(self, layout: Layout, family: Family):
        fit = fit_model(layout)
        self.fit = fit
        self.layout = layout
        self.family = family
        x = fit.design.matrix()
        self.n_obs, self.k = x.shape[0], layout.k
        q, s, vt, rank = _basis(x)
        self.q, self.rank = q, rank
        self.df = int(fit.df)
        pinv = (vt.T / s) @ q.T                                  # X^+ (p, N)
        self.amean = np.ascontiguousarray(fit.design.lsmean_matrix() @ pinv)   # (k, N)
        w = np.asarray(family.weights, dtype=np.float64)
        self.a = np.ascontiguousarray(w @ self.amean)            # (m, N)
        self.a2 = self.a * self.a
        self.var_factor = self.a2.sum(axis=1)                    # (m,)
        self.leverage = np.einsum("ij,ij->i", q, q)
        self.codes = np.asarray(layout.codes, dtype=np.int64)
        self.indicator = (self.codes[:, None] == np.arange(self.k)[None, :]).astype(float)
        self.n_g = self.indicator.sum(axis=0).astype(np.int64)
        one_minus = np.clip(1.0 - self.leverage, 1e-12, None)
        self.inv_sqrt_one_minus = 1.0 / np.sqrt(one_minus)
        self.dof_g = self.indicator.T @ (1.0 - self.leverage)   # (k,)
        # The groups in contiguous runs (what the one-way spread tests read).
        self.group_order = np.argsort(self.codes, kind="stable")
        self.group_blocks = Blocks.of(self.n_g)
        # The model without groups: intercept, blocks and covariates.
        x0 = np.column_stack([np.ones(self.n_obs), x[:, self.k:]])
        q0, _, _, _ = _basis(x0)
        self.q0 = q0
        h0 = np.einsum("ij,ij->i", q0, q0)
        self.restricted_scale = np.where(h0 >= 1.0 - 1e-10, 0.0,
                                         1.0 / np.sqrt(np.clip(1.0 - h0, 1e-300, None)))
        design = layout.design
        first = (np.asarray(design.block_codes[0], dtype=np.int64)
                 if design is not None and design.block_codes else
                 np.zeros(self.n_obs, dtype=np.int64))
        self.permutation_blocks = [np.flatnonzero(first == b)
                                   for b in range(int(first.max()) + 1)]
        self.permutation_blocks = [b for b in self.permutation_blocks if b.size > 1]
        from ..resample.hc import hc_factors
        self.kappa = hc_factors(self.leverage, "hc3", rank)

    # --- the fit on every row ----------------------------------------------------

    def residuals(self, y: np.ndarray) -> np.ndarray:
        return y - (y @ self.q) @ self.q.T

    def means(self, y: np.ndarray) -> np.ndarray:
        """Adjusted means of every row (R, k) (without the response's shift)."""
        return y @ self.amean.T

    def pooled_t(self, y: np.ndarray, e: np.ndarray | None = None):
        """The model's pooled t of every contrast (R, m) and the rows' MSE (R,)."""
        e = self.residuals(y) if e is None else e
        mse = np.einsum("ij,ij->i", e, e) / self.df
        est = y @ self.a.T
        with np.errstate(invalid="ignore", divide="ignore"):
            t = est / np.sqrt(np.maximum(mse, 1e-300)[:, None] * self.var_factor[None, :])
        return t, mse

    def hc_t(self, y: np.ndarray, e: np.ndarray | None = None) -> np.ndarray:
        """Each contrast over its HC3 standard error (R, m), as the wild bootstrap."""
        e = self.residuals(y) if e is None else e
        se2 = (self.kappa * e * e) @ self.a2.T
        scale2 = np.mean(e * e, axis=1, keepdims=True)
        floor = (1e-10 ** 2) * np.maximum(scale2, 1e-300) * self.var_factor[None, :]
        return (y @ self.a.T) / np.sqrt(np.maximum(se2, floor))

    @cached_property
    def _f_parts(self):
        k = self.k
        d = np.zeros((k - 1, k))
        d[:, 0] = -1.0
        d[np.arange(k - 1), np.arange(1, k)] = 1.0
        da = d @ self.amean                                      # (k-1, N)
        return da, np.linalg.pinv(da @ da.T)

    def group_f(self, y: np.ndarray, mse: np.ndarray) -> np.ndarray:
        """The adjusted F test for groups of every row, its p-value (R,)."""
        da, cinv = self._f_parts
        dvals = y @ da.T                                         # (R, k-1)
        f = np.einsum("ri,ij,rj->r", dvals, cinv, dvals) / (self.k - 1) / mse
        return stats.f.sf(f, self.k - 1, self.df)

    # --- one resample per replicate -----------------------------------------------

    def permuted(self, y: np.ndarray, rng) -> np.ndarray:
        """The reduced model's residuals of every row, permuted within blocks."""
        r = y - (y @ self.q0) @ self.q0.T
        out = r.copy()
        for idx in self.permutation_blocks:
            out[:, idx] = rng.permuted(r[:, idx], axis=1)
        return out

    def wild(self, y: np.ndarray, rng) -> np.ndarray:
        """Restricted residuals (rescaled) times Rademacher signs, every row."""
        r = (y - (y @ self.q0) @ self.q0.T) * self.restricted_scale
        signs = rng.integers(0, 2, size=r.shape, dtype=np.int8) * 2 - 1
        return r * signs

    def warp_statistics(self, name: str, y: np.ndarray, rng, e=None, t_pooled=None):
        """``(|t|, |t*|)`` (R, m) of the single-step procedure behind ``name``."""
        if name.startswith("permutation"):
            t_obs = self.pooled_t(y, e)[0] if t_pooled is None else t_pooled
            t_star = self.pooled_t(self.permuted(y, rng))[0]
        elif name.startswith("wild-bootstrap"):
            t_obs = self.hc_t(y, e)
            t_star = self.hc_t(self.wild(y, rng))
        else:
            raise KeyError(name)
        return np.abs(t_obs), np.abs(t_star)


# --- the checks of model_checks, row-wise ---------------------------------------

def _group_sd(alg: ModelAlgebra, e: np.ndarray) -> np.ndarray:
    ss = (e * e) @ alg.indicator                                 # (R, k)
    with np.errstate(invalid="ignore", divide="ignore"):
        return np.sqrt(np.where(alg.dof_g > 1e-12, ss / alg.dof_g, np.nan))


def _outliers(alg: ModelAlgebra, e: np.ndarray, mse: np.ndarray, policy: Policy):
    r_count = e.shape[0]
    df = alg.df
    if df < 2:
        zero = np.zeros(r_count)
        return StackedCheck("outliers", zero, zero * np.nan, np.zeros(r_count, np.int8))
    one_minus = 1.0 - alg.leverage
    ok = one_minus > 1e-10
    with np.errstate(invalid="ignore", divide="ignore"):
        r = e / np.sqrt(np.maximum(mse, 1e-300)[:, None] * np.maximum(one_minus, 1e-300))
        t = r * np.sqrt((df - 1) / np.maximum(df - r * r, 1e-300))
    t = np.where(ok[None, :], t, 0.0)
    worst = np.abs(t).max(axis=1)
    found = worst > policy.outlier_z
    p_bonf = np.minimum(1.0, alg.n_obs * 2.0 * stats.t.sf(worst, df - 1))
    verdict = np.where(found, np.where(p_bonf < policy.check_alpha, VIOLATED, CONCERN), OK)
    return StackedCheck("outliers", worst, np.full(r_count, np.nan), verdict.astype(np.int8))


def _sd_ratio(sd: np.ndarray, policy: Policy) -> StackedCheck:
    with np.errstate(invalid="ignore", divide="ignore"):
        hi, lo = np.nanmax(sd, axis=1), np.nanmin(sd, axis=1)
        ratio = np.where(lo > 0, hi / lo, np.inf)
    limit = policy.sd_ratio_limit
    verdict = np.where(ratio > limit, VIOLATED, np.where(ratio > (1 + limit) / 2, CONCERN, OK))
    return StackedCheck("sd-ratio", ratio, np.full(ratio.size, np.nan), verdict.astype(np.int8))


def model_checks_stacked(alg: ModelAlgebra, y: np.ndarray, policy: Policy | None = None,
                         *, e: np.ndarray | None = None,
                         mse: np.ndarray | None = None) -> StackedFindings:
    """The shape and spread checks of the model's residuals, every row of ``y``.

    Equal, replicate by replicate, to :func:`famwise.diagnostics.run_checks`
    on the layout of that row (``tests/test_stacked_model.py``).
    """
    policy = policy or Policy()
    e = alg.residuals(y) if e is None else e
    if mse is None:
        mse = np.einsum("ij,ij->i", e, e) / alg.df
    scaled = e * alg.inv_sqrt_one_minus
    sd = _group_sd(alg, e)
    safe = np.where(np.isfinite(sd) & (sd > 0), sd, 1.0)
    z = scaled / safe[:, alg.codes]
    skew, kurt = moments(z, policy)
    by_group = scaled[:, alg.group_order]
    blocks = alg.group_blocks
    _, var = blocks.summaries(by_group)
    bf_stat, bf_p = brown_forsythe(by_group, blocks)
    fk_stat, fk_p = fligner(by_group, blocks)
    ba_stat, ba_p = bartlett(var, blocks)
    checks = {
        "normality": normality(z, policy), "skewness": skew, "kurtosis": kurt,
        "outliers": _outliers(alg, e, mse, policy),
        "brown-forsythe": StackedCheck("brown-forsythe", bf_stat, bf_p,
                                       _test_verdict(bf_p, policy, True)),
        "sd-ratio": _sd_ratio(sd, policy),
        "size-spread-pairing": pairing(var, blocks, policy),
        "fligner-killeen": StackedCheck("fligner-killeen", fk_stat, fk_p,
                                        _test_verdict(fk_p, policy, False)),
        "bartlett": StackedCheck("bartlett", ba_stat, ba_p, _test_verdict(ba_p, policy, False)),
    }
    return StackedFindings(checks)

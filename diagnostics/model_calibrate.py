"""Error-rate calibration at the observed design of a blocked or covariate model.

Under the complete null (no group differences) at the observed design
(blocks, covariates, missing plots), with errors of each group's residual SD
under the model (:func:`famwise.diagnostics.model_checks.group_residual_sd`)
drawn from the normal distribution or resampled from the model's scaled
residuals (``shape="observed"``).  The block and covariate effects need not
be simulated: every model procedure is invariant to them.

Methods.  The design is fixed, so one QR of the design matrix serves every
replicate: the adjusted means, residual mean squares and contrast t
statistics of all replicates come from one matrix product.  A single-step
procedure whose intervals are dual to its decisions rejects a comparison
exactly when ``|t_j| > c_j``, and its critical values ``c_j`` (half-width
over standard error) depend only on the design, so they are read once from
the procedure run on the observed data: Tukey–Kramer, Dunnett, Bonferroni,
Šidák, Scheffé and any such procedure registered for the model
(``multivariate-t``).  Under the complete null Holm errs exactly when
Bonferroni does; LSD errs when its F gate opens and some ``|t_j|`` exceeds
the unadjusted critical value; Benjamini–Hochberg's FDR equals its FWER and
is evaluated from each replicate's sorted p-values.  The resampling
procedures (within-block permutation, wild bootstrap) are estimated by the
warp-speed method, and the pipeline's checks and route run on stacked
replicates (:mod:`famwise.diagnostics.model_simulate`); a procedure that
does not read the model is listed as not simulated.
"""

from __future__ import annotations

import numpy as np
from scipy import stats

from ..core.errors import FamwiseInputError
from ..core.families import Family
from ..core.layout import Layout
from ..model import fit_model
from ..procedures.catalogue import CATALOGUE
from .policy import Policy

__all__ = ["calibrate_model"]


def _replicates(layout: Layout, shape: str, replicates: int, rng) -> np.ndarray:
    from .model_checks import group_residual_sd, model_scaled_residuals
    fit = fit_model(layout)
    sd = group_residual_sd(fit)
    n = layout.n_total
    if shape == "normal":
        e = rng.standard_normal((replicates, n))
    elif shape == "observed":
        pool = model_scaled_residuals(fit)
        e = rng.choice(pool, size=(replicates, n), replace=True)
    else:
        raise FamwiseInputError(f"shape must be 'normal' or 'observed'; got {shape!r}")
    return e * sd[layout.codes]


def _statistics(layout: Layout, family: Family, Y: np.ndarray):
    """Contrast t statistics (R, m), p-values and the group F of every replicate."""
    from scipy.linalg import qr, solve_triangular
    fit = fit_model(layout)
    X = fit.design.matrix()
    Q, R, piv = qr(X, mode="economic", pivoting=True)
    qty = Q.T @ Y.T                                    # (p, R)
    coef = np.empty_like(qty)
    coef[piv] = solve_triangular(R, qty)
    resid = Y.T - X @ coef
    mse = np.einsum("ij,ij->j", resid, resid) / fit.df  # (R,)
    means = fit.design.lsmean_matrix() @ coef          # (k, R)
    W = family.weights
    est = W @ means                                     # (m, R)
    var = fit.contrast_variance_factor(W)
    t = (est / np.sqrt(var[:, None] * mse[None, :])).T  # (R, m)
    k = layout.k
    D = np.zeros((k - 1, k))
    D[:, 0] = -1.0
    D[np.arange(k - 1), np.arange(1, k)] = 1.0
    d = D @ means
    Cinv = np.linalg.inv(D @ fit.mean_cov_unscaled @ D.T)
    f = np.einsum("ir,ij,jr->r", d, Cinv, d) / (k - 1) / mse
    p_f = stats.f.sf(f, k - 1, fit.df)
    p_t = 2.0 * stats.t.sf(np.abs(t), fit.df)
    return t, p_t, p_f, fit


def calibrate_model(layout: Layout, family: Family, *, alpha: float = 0.05,
                    replicates: int = 2000, shape: str = "normal", seed: int = 0,
                    procedures=None, pipeline: bool = True,
                    policy: Policy | None = None, row=None, n_jobs=1,
                    backend: str = "threads"):
    """Estimate the FWER of the model's candidates, and the pipeline's.

    Returns ``(rows, routes, design)``; :func:`calibrate.calibrate_layout`
    wraps them in a Calibration (``row`` is its row maker).  A procedure the
    model simulation does not cover gets a row with ``holds`` None and the
    method "not simulated ..." (never a verdict).
    """
    from .model_checks import group_residual_sd, model_scaled_residuals
    from .model_simulate import ModelScenario, model_simulated, simulate_model
    _row = row
    policy = policy or Policy()
    if replicates < 100:
        raise FamwiseInputError(f"replicates must be at least 100; got {replicates}")
    if shape not in ("normal", "observed"):
        raise FamwiseInputError(f"shape must be 'normal' or 'observed'; got {shape!r}")
    fit = fit_model(layout)
    if procedures is None:
        names = [n for n, info in CATALOGUE.items() if "model" in info.designs and (
            family.kind in info.families or (family.kind == "contrasts" and family.is_pairwise
                                             and "all-pairs" in info.families))]
    else:
        names = list(procedures)
    simulated = [n for n in names if model_simulated(n)]
    sd = group_residual_sd(fit)
    errors = model_scaled_residuals(fit) if shape == "observed" else None
    scenario = ModelScenario(layout, (0.0,) * layout.k, tuple(float(v) for v in sd), errors)
    sim = simulate_model(scenario, family, simulated + (["auto"] if pipeline else []),
                         replicates=replicates, seed=np.random.SeedSequence(seed),
                         alpha=alpha, policy=policy, n_jobs=n_jobs, backend=backend)
    rows = []
    for name in names:
        if name not in simulated:
            rows.append({"procedure": name, "fwer": float("nan"), "se": float("nan"),
                         "replicates": 0, "holds": None,
                         "method": "not simulated: the procedure does not read the "
                                   "blocked or covariate model"})
            continue
        method = sim.methods[name]
        if name == "holm" or name.endswith("stepdown"):
            method += ("; under the complete null it errs exactly when its single-step "
                       "counterpart does")
        if name == "bh":
            method += "; under the complete null the FDR equals the FWER"
        rows.append(_row(name, sim.rejects[name].any(axis=1), replicates, method, alpha))
    routes = {}
    if pipeline:
        rows.append(_row("automatic pipeline", sim.rejects["auto"].any(axis=1), replicates,
                         "checks and routing re-run on every replicate (the model's "
                         "checks on stacked replicates)", alpha))
        routes = sim.route_counts()
    design = {"labels": list(layout.labels), "n": fit.n.tolist(), "sd": sd.tolist(),
              "blocks": list(layout.design.block_names),
              "covariates": list(layout.design.covariate_names),
              "df_residual": fit.df, "family": family.kind}
    return rows, routes, design

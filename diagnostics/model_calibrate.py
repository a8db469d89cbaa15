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
is evaluated from each replicate's sorted p-values.  Resampling procedures
are not estimated here (the table says so).  The pipeline re-runs the
checks and the route on every replicate and counts the error of the
procedure it chose.
"""

from __future__ import annotations

import numpy as np
from scipy import stats

from ..core.errors import FamwiseInputError
from ..core.families import Family
from ..core.layout import Layout
from ..model import fit_model
from ..procedures.catalogue import CATALOGUE, run_procedure
from .policy import Policy

__all__ = ["calibrate_model"]

_DUAL = ("tukey-kramer", "dunnett", "bonferroni", "sidak", "scheffe", "multivariate-t")


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


def _hits(name, family, layout, t, p_t, p_f, fit, alpha, observed_tables):
    if name in ("holm", "welch-holm"):
        name = "bonferroni"
    if name == "lsd":
        crit = stats.t.isf(alpha / 2.0, fit.df)
        return (p_f <= alpha) & (np.abs(t).max(axis=1) > crit), "closed form per replicate"
    if name == "bh":
        m = family.m
        srt = np.sort(p_t, axis=1)
        return np.any(srt <= alpha * np.arange(1, m + 1) / m, axis=1), \
            "closed form per replicate; under the complete null the FDR equals the FWER"
    table = observed_tables.get(name)
    if table is None:
        table = run_procedure(name, layout, family, alpha=alpha)
        observed_tables[name] = table
    crit = ((table["ci_upper"] - table["difference"]) / table["std_error"]).to_numpy()
    return np.any(np.abs(t) > crit[None, :], axis=1), \
        "critical values of the observed design, t statistics per replicate"


def calibrate_model(layout: Layout, family: Family, *, alpha: float = 0.05,
                    replicates: int = 2000, shape: str = "normal", seed: int = 0,
                    procedures=None, pipeline: bool = True,
                    policy: Policy | None = None, row=None):
    """Estimate the FWER of the model's candidates, and the pipeline's.

    Returns ``(rows, routes, design)``; :func:`calibrate.calibrate_layout`
    wraps them in a Calibration (``row`` is its row maker).
    """
    from . import run_checks
    from .route import choose
    _row = row
    policy = policy or Policy()
    if replicates < 100:
        raise FamwiseInputError(f"replicates must be at least 100; got {replicates}")
    rng = np.random.default_rng(seed)
    Y = _replicates(layout, shape, replicates, rng)
    t, p_t, p_f, fit = _statistics(layout, family, Y)
    if procedures is None:
        names = [n for n, info in CATALOGUE.items() if "model" in info.designs and (
            family.kind in info.families or (family.kind == "contrasts" and family.is_pairwise
                                             and "all-pairs" in info.families))]
    else:
        names = list(procedures)
    rows, reject, tables = [], {}, {}
    for name in names:
        info = CATALOGUE[name]
        if info.route == "resample" or (name not in _DUAL and name not in
                                        ("holm", "lsd", "bh")):
            rows.append({"procedure": name, "fwer": float("nan"), "se": float("nan"),
                         "replicates": 0, "method": "not estimated for blocked or "
                                                   "covariate designs", "holds": False})
            continue
        hits, method = _hits(name, family, layout, t, p_t, p_f, fit, alpha, tables)
        if name == "holm":
            method += "; under the complete null it errs exactly when Bonferroni does"
        reject[name] = hits
        rows.append(_row(name, hits, replicates, method, alpha))
    routes = {}
    if pipeline:
        quiet = policy.replace(calibrate_candidates=False)
        chosen, hits = [], []
        for r in range(replicates):
            lay = Layout(values=Y[r], codes=layout.codes, labels=layout.labels,
                         design=layout.design)
            proc = choose(run_checks(lay, quiet), family, lay, quiet, "auto", alpha).procedure
            chosen.append(proc)
            if proc not in reject:
                dual = proc in _DUAL or proc in ("holm", "lsd", "bh")
                # a resampling route is not estimated here (module notes)
                reject[proc] = (_hits(proc, family, layout, t, p_t, p_f, fit, alpha,
                                      tables)[0]
                                if dual and CATALOGUE[proc].route != "resample" else None)
            if reject[proc] is not None:
                hits.append(bool(reject[proc][r]))
        routes = {str(p): int(c) for p, c in zip(*np.unique(chosen, return_counts=True))}
        if hits:
            rows.append(_row("automatic pipeline", np.array(hits), len(hits),
                             "checks and routing re-run on every replicate"
                             + ("" if len(hits) == replicates else
                                f"; {replicates - len(hits)} replicates routed to a "
                                f"resampling procedure not estimated"), alpha))
    design = {"labels": list(layout.labels), "n": fit.n.tolist(),
              "blocks": list(layout.design.block_names),
              "covariates": list(layout.design.covariate_names),
              "df_residual": fit.df, "family": family.kind}
    return rows, routes, design

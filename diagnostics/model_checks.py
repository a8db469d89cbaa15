"""Checks on the residuals of a blocked or covariate model.

When a layout has a design (blocks, covariates), the one-way checks on
within-group residuals would judge the block effects as noise.  These
checks use the residuals of :func:`famwise.model.fit_model` instead, with
the same names, thresholds and verdicts as the one-way checks, so the route
reads them as it reads the others:

* shape: normality and the moments of the residuals scaled by
  ``s_g sqrt(1 - h_i)`` (``h_i`` the leverage, ``s_g`` the residual scale of
  the observation's group), so that unequal spread does not pass for heavy
  tails; outliers by externally studentised residual, with the Bonferroni
  outlier test (Cook & Weisberg 1982, section 2.2.2: ``t_i`` is Student t on
  ``df - 1`` under the model; a value is flagged above ``policy.outlier_z``
  and gross when its Bonferroni p over the N residuals is below
  ``policy.check_alpha``);
* spread by group: Brown–Forsythe on the leverage-scaled residuals split by
  group, the ratio of the groups' residual SDs
  ``s_g = sqrt(sum e_i^2 / sum (1 - h_i))``, and the size-spread pairing;
* design: Tukey's (1949) one-degree-of-freedom test of non-additivity
  (:func:`famwise.model.anova.nonadditivity`), judged a concern at
  ``p < policy.check_alpha``.

References
----------
Cook, R. D. and Weisberg, S. (1982). *Residuals and Influence in
Regression*. Chapman & Hall.
Tukey, J. W. (1949). One degree of freedom for non-additivity. *Biometrics*
5(3):232-242. doi:10.2307/3001938
"""

from __future__ import annotations

import numpy as np
from scipy import stats

from ..core.layout import Layout
from ..model import fit_model
from .check import Check
from .policy import Policy
from . import shape as _shape

__all__ = ["model_scaled_residuals", "group_residual_sd", "model_shape_checks",
           "model_spread_checks", "nonadditivity_check"]


def _leverage_scaled(fit) -> np.ndarray:
    one_minus = np.clip(1.0 - fit.leverage, 1e-12, None)
    return fit.residuals / np.sqrt(one_minus)


def group_residual_sd(fit) -> np.ndarray:
    """Residual SD of each group, ``sqrt(sum e^2 / sum (1 - h))`` over its plots."""
    codes = fit.design.group_codes
    ss = np.bincount(codes, weights=fit.residuals ** 2, minlength=fit.k)
    dof = np.bincount(codes, weights=1.0 - fit.leverage, minlength=fit.k)
    with np.errstate(invalid="ignore", divide="ignore"):
        return np.sqrt(np.where(dof > 1e-12, ss / dof, np.nan))


def model_scaled_residuals(fit) -> np.ndarray:
    """Residuals divided by ``s_g sqrt(1 - h_i)`` (unit variance under the model)."""
    sd = group_residual_sd(fit)
    sd = np.where(np.isfinite(sd) & (sd > 0), sd, 1.0)
    return _leverage_scaled(fit) / sd[fit.design.group_codes]


def _normality(fit, policy: Policy) -> Check:
    z = model_scaled_residuals(fit)
    n = z.size
    if n < 3:
        return Check("normality", "none (fewer than 3 residuals)", None, None, "-", "ok",
                     "Too few residuals to test normality.")
    if n <= policy.shapiro_max:
        method = "Shapiro-Wilk on scaled residuals of the model"
        stat, p = stats.shapiro(z)
    else:
        method = "Anderson-Darling on scaled residuals of the model"
        stat, p = _shape.anderson_darling(z)
    stat, p = float(stat), float(p)
    decides = n < policy.pvalue_decides_below
    if decides:
        threshold = (f"p < {policy.check_alpha:g} (p decides below "
                     f"{policy.pvalue_decides_below} residuals)")
        verdict = "violated" if p < policy.check_alpha else "ok"
        sentence = (f"The model's residuals depart from normality (p = {p:.3g})."
                    if verdict != "ok" else
                    f"No clear departure from normality in the model's residuals "
                    f"(p = {p:.3g}).")
    else:
        threshold = f"for information only at {n} residuals; skewness and kurtosis decide"
        verdict = "ok"
        sentence = (f"With {n} residuals the test (p = {p:.3g}) detects even trivial "
                    f"departures, so the size of the skew and tails decides instead.")
    return Check("normality", method, stat, p, threshold, verdict, sentence,
                 {"n_residuals": n, "p_value_decides": decides})


def _moments(fit, policy: Policy) -> tuple[Check, Check]:
    z = model_scaled_residuals(fit)
    # the one-way judgement on one group of the scaled residuals (skewness and
    # kurtosis do not change when that group is standardised again)
    lay = Layout(values=z, codes=np.zeros(z.size, dtype=np.int64), labels=("all",))
    skew, kurt = _shape.moments(lay, policy)
    return (Check(skew.name, skew.method.replace("standardised residuals",
                                                 "scaled model residuals"),
                  skew.statistic, skew.p_value, skew.threshold, skew.verdict,
                  skew.sentence, skew.details),
            Check(kurt.name, kurt.method.replace("standardised residuals",
                                                 "scaled model residuals"),
                  kurt.statistic, kurt.p_value, kurt.threshold, kurt.verdict,
                  kurt.sentence, kurt.details))


def _outliers(layout: Layout, fit, policy: Policy) -> Check:
    t = fit.studentized_residuals()
    N = t.size
    dfo = max(fit.df - 1, 1)
    with np.errstate(invalid="ignore"):
        p_bonf = np.minimum(1.0, N * 2.0 * stats.t.sf(np.abs(t), dfo))
    flagged = np.flatnonzero(np.nan_to_num(np.abs(t)) > policy.outlier_z)
    found = [{"row": int(layout.rows[i]), "group": layout.labels[layout.codes[i]],
              "value": float(layout.values[i]), "studentized": float(t[i]),
              "p_bonferroni": float(p_bonf[i])} for i in flagged]
    found.sort(key=lambda d: -abs(d["studentized"]))
    worst = float(np.nanmax(np.abs(t))) if np.any(np.isfinite(t)) else 0.0
    if not found:
        verdict = "ok"
        sentence = (f"No plot has a studentised residual beyond {policy.outlier_z:g} "
                    f"(largest {worst:.2f}).")
    else:
        listed = "; ".join(f"row {d['row']} ({d['group']}, {d['value']:g}, t = "
                           f"{d['studentized']:+.1f})" for d in found[:5])
        more = f" and {len(found) - 5} more" if len(found) > 5 else ""
        gross = min(d["p_bonferroni"] for d in found) < policy.check_alpha
        verdict = "violated" if gross else "concern"
        sentence = (f"{len(found)} plot{'s' if len(found) > 1 else ''} "
                    f"{'lie' if len(found) > 1 else 'lies'} far from the model's fit: "
                    f"{listed}{more}."
                    + (" The largest is an outlier by the Bonferroni test; check it "
                       "against the field or lab records." if gross else ""))
    return Check("outliers", "externally studentised residuals of the model, Bonferroni "
                 "outlier test (Cook & Weisberg 1982)", worst, None,
                 f"|t| > {policy.outlier_z:g}; gross when Bonferroni p < "
                 f"{policy.check_alpha:g}", verdict, sentence, {"outliers": found})


def model_shape_checks(layout: Layout, policy: Policy | None = None) -> tuple[Check, ...]:
    """Normality, skewness, kurtosis and outliers on the model's residuals."""
    policy = policy or Policy()
    fit = fit_model(layout)
    skew, kurt = _moments(fit, policy)
    return (_normality(fit, policy), skew, kurt, _outliers(layout, fit, policy))


def model_spread_checks(layout: Layout, policy: Policy | None = None) -> tuple[Check, ...]:
    """Spread by group of the model's residuals (same checks as one-way)."""
    from . import spread as _spread
    policy = policy or Policy()
    fit = fit_model(layout)
    scaled = _leverage_scaled(fit)
    # A layout of the leverage-scaled residuals by group: the spread checks'
    # tests (which centre each group at its median) then judge the spread
    # left after the blocks and covariates.  Its group SDs are the residual
    # SDs of the groups up to the (n-1)/n factor the pairing ignores.
    lay = Layout(values=scaled, codes=layout.codes, labels=layout.labels, rows=layout.rows,
                 response=layout.response, group=layout.group, source=layout.source)
    checks = _spread.spread_checks(lay, policy)
    sd = group_residual_sd(fit)
    hi, lo = int(np.nanargmax(sd)), int(np.nanargmin(sd))
    ratio = float(sd[hi] / sd[lo]) if sd[lo] > 0 else np.inf
    limit = policy.sd_ratio_limit
    verdict = "violated" if ratio > limit else ("concern" if ratio > (1 + limit) / 2 else "ok")
    sd_check = Check(
        "sd-ratio", "largest / smallest residual SD of the groups under the model", ratio,
        None, f"> {limit:g}", verdict,
        f"The largest residual SD ({layout.labels[hi]}, {sd[hi]:.4g}) is {ratio:.3g} times "
        f"the smallest ({layout.labels[lo]}, {sd[lo]:.4g}).",
        {"largest": layout.labels[hi], "smallest": layout.labels[lo]})
    return tuple(sd_check if c.name == "sd-ratio" else c for c in checks)


def nonadditivity_check(layout: Layout, policy: Policy | None = None) -> Check | None:
    """Tukey's one-degree-of-freedom test for group x block non-additivity."""
    from ..model.anova import nonadditivity
    policy = policy or Policy()
    fit = fit_model(layout)
    res = nonadditivity(fit)
    if res is None:
        return None
    concern = res.p < policy.check_alpha
    sentence = (f"Tukey's test finds the group differences change with the level of the "
                f"blocks (F = {res.f:.3g} on 1 and {res.df_residual} df, p = {res.p:.3g}); "
                f"effects may be multiplicative, so a log scale may make them additive."
                if concern else
                f"No sign that group differences change with the blocks (Tukey's test, "
                f"p = {res.p:.3g}).")
    return Check("non-additivity", "Tukey's one-degree-of-freedom test (Tukey 1949)",
                 res.f, res.p, f"p < {policy.check_alpha:g}",
                 "concern" if concern else "ok", sentence,
                 {"ss": res.ss, "df_residual": res.df_residual})

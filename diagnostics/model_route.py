"""The route for a layout with blocks or covariates (the additive model).

The checks have run on the model's residuals
(:mod:`famwise.diagnostics.model_checks`); the candidates are the
procedures that read the model (``"model"`` in the catalogue entry's
``designs``):

1. shape and spread fine -> the pooled procedures on the model's adjusted
   means, covariance and residual df.  When the adjusted means are
   correlated (covariates, incomplete blocks), ``multivariate-t`` (the exact
   adjustment from the multivariate t with the model's correlation matrix)
   is preferred where it is available, since Tukey–Kramer's and Dunnett's
   one-way forms are then approximations; otherwise Tukey–Kramer for all
   pairs, Dunnett against a reference, and the shorter of Šidák and
   Scheffé for contrasts;
2. shape poor -> the within-block permutation (or Freedman–Lane with
   covariates) max-T, where available;
3. spreads unequal -> the heteroscedasticity-consistent route, where
   available.

When the route a check asks for is not available the pooled model route is
used and a warning says which check argued against it.  One-way procedures
(Welch, Games–Howell, the one-way permutation and bootstrap) are set aside:
they would ignore the blocks and covariates.  The cross-check is the
within-block permutation for a model-based primary, and the pooled model
procedure for a resampling primary.
"""

from __future__ import annotations

import numpy as np

from ..core.families import Family
from ..core.layout import Layout
from ..model import fit_model
from ..procedures.catalogue import CATALOGUE, check_design
from .check import Findings
from .policy import Policy
from .pooled_choice import pooled_procedure

__all__ = ["choose_model", "model_crosscheck", "model_summary"]


def model_summary(layout: Layout) -> dict:
    """The model's terms, df, mean square, efficiency and CV, for the record."""
    fit = fit_model(layout)
    eff = fit.efficiency()
    f, df1, df2, p = fit.group_test()
    return {"description": fit.describe(),
            "terms": [{"name": t.name, "kind": t.kind, "df": t.df} for t in fit.terms],
            "df_residual": fit.df, "mean_square_error": fit.mse,
            "group_f": f, "group_df": [df1, df2], "group_p": p,
            "efficiency": eff.to_dict() if eff is not None else None,
            "efficiency_sentence": eff.sentence() if eff is not None else None,
            "cv_percent": fit.cv if np.isfinite(fit.cv) else None,
            "means_correlated": fit.means_correlated,
            "notes": list(fit.notes)}


#: The resampling procedures of a blocked or covariate layout, by role: the
#: permutation within blocks (Freedman-Lane with covariates) and the wild
#: bootstrap of heteroscedasticity-consistent t (used when registered for
#: the model, ``"model"`` in their catalogue ``designs``).
PERMUTATION = "permutation-maxt"
HETEROSCEDASTIC = "wild-bootstrap-maxt"


def _available(name: str) -> str | None:
    info = CATALOGUE.get(name)
    return name if info is not None and "model" in info.designs else None


def model_crosscheck(procedure: str, family: Family, layout: Layout) -> str | None:
    """The independent second procedure for a model layout (None if there is none)."""
    info = CATALOGUE[procedure]
    if info.route in ("classical", "fdr") or procedure == "multivariate-t":
        return _available(PERMUTATION)
    fit = fit_model(layout)
    exact = (fit.means_correlated and "multivariate-t" in CATALOGUE
             and family.m <= Policy().multivariate_t_max_comparisons)
    if family.kind == "vs-reference":
        return "multivariate-t" if exact else "dunnett"
    if family.kind == "all-pairs":
        return "multivariate-t" if exact else "tukey-kramer"
    return "scheffe"


def _one_way_set_aside(design) -> str:
    what = " and ".join((["blocks"] if design.block_names else []) +
                        (["covariates"] if design.covariate_names else []))
    return f"compares the groups as a one-way layout and would ignore the {what}"


def choose_model(findings: Findings, family: Family, layout: Layout, policy: Policy,
                 procedure: str, alpha: float, poor: list[str], unequal: list[str],
                 warnings: list[str]) -> dict:
    """Return the parts of the Route for a blocked or covariate layout.

    A dict with route, procedure, chosen_by, reasons, alternatives (pairs of
    procedure and why), against, warnings and crosscheck; :func:`route.choose`
    builds the Route from it.
    """
    def Alternative(procedure, why):
        return (procedure, why)

    def Route(route, procedure, chosen_by, reasons, alternatives, against, warns, calib,
              crosscheck):
        return {"route": route, "procedure": procedure, "chosen_by": chosen_by,
                "reasons": tuple(reasons), "alternatives": tuple(alternatives),
                "against": tuple(against), "warnings": tuple(warns),
                "crosscheck": crosscheck}

    fit = fit_model(layout)
    for note in fit.notes:
        warnings.append(note[0].upper() + note[1:] + ".")
    nonadd = [c for c in findings.design if c.name == "non-additivity" and c.verdict != "ok"]
    for c in nonadd:
        warnings.append(c.sentence)
    if procedure != "auto":
        info = check_design(procedure, layout)
        against = []
        if info.route == "classical" and unequal:
            against += [f"pooled variance assumed, but: {s}" for s in unequal]
        if info.route in ("classical",) and poor:
            against += [f"normal errors assumed, but: {s}" for s in poor]
        if procedure in ("tukey-kramer", "dunnett") and fit.means_correlated:
            against.append("the adjusted means are correlated, so this procedure's one-way "
                           "form is an approximation ('multivariate-t' is exact)")
        if procedure == "lsd" and layout.k > 3:
            against.append(f"Fisher's LSD controls the familywise error rate only for three "
                           f"groups; here there are {layout.k}")
        if procedure == "bh":
            against.append("Benjamini-Hochberg controls the false discovery rate, not the "
                           "familywise error rate")
        return Route(info.route, procedure, "user", ("Chosen by the user.",), (),
                     tuple(against), tuple(warnings), None,
                     model_crosscheck(procedure, family, layout))
    reasons = []
    alternatives = [Alternative(p, _one_way_set_aside(layout.design))
                    for p in ("games-howell", "permutation-maxt", "bootstrap-maxt")
                    if p in CATALOGUE and "model" not in CATALOGUE[p].designs]
    route, proc = None, None
    if poor:
        perm = _available(PERMUTATION)
        if perm is not None:
            route, proc = "resample", perm
            reasons.append("The model's residuals are far from normal. " + " ".join(poor)
                           + " So the group labels are permuted within blocks (the "
                           "randomisation the trial used), with the model refitted in "
                           "every permutation.")
        else:
            warnings.append("The model's residuals are far from normal, but no resampling "
                            "procedure for blocked or covariate designs is available; the "
                            "pooled model procedures are used: treat borderline results "
                            "with caution.")
    if proc is None and unequal:
        hc = _available(HETEROSCEDASTIC)
        if hc is not None:
            route, proc = CATALOGUE[hc].route, hc
            reasons.append("The spread of the model's residuals differs between groups. "
                           + " ".join(unequal) + " So the contrasts get a "
                           "heteroscedasticity-consistent covariance, with a max-t "
                           "calibrated by the wild bootstrap.")
        else:
            warnings.append("The spread of the model's residuals differs between groups, but "
                            "no unequal-variance procedure for blocked or covariate designs "
                            "is available; the pooled model procedures are used.")
    if proc is None:
        route = "classical"
        if not poor and not unequal:
            reasons.append("The model's residuals look close enough to normal and their "
                           "spread agrees across groups, so procedures on the pooled error "
                           "mean square are exact.")
        else:
            reasons.append("Procedures on the model's pooled error mean square are used "
                           "(see the warnings for the checks that argue against them).")
        exact = "multivariate-t" in CATALOGUE and "model" in CATALOGUE["multivariate-t"].designs
        too_many = family.m > policy.multivariate_t_max_comparisons
        if fit.means_correlated and exact and too_many:
            reasons.append(f"The adjusted means are correlated, but the family has {family.m} "
                           f"comparisons, more than the policy's "
                           f"{policy.multivariate_t_max_comparisons} for the exact "
                           f"multivariate-t adjustment (its integral would take tens of "
                           f"seconds or more); the one-way forms on each comparison's own "
                           f"standard error are used instead.")
            alternatives.append(Alternative(
                "multivariate-t", f"exact, but slow for {family.m} comparisons "
                                  f"(policy multivariate_t_max_comparisons)"))
        if fit.means_correlated and exact and not too_many:
            proc = "multivariate-t"
            reasons.append("The adjusted means are correlated (covariates or incomplete "
                           "blocks), so the exact adjustment from the multivariate t with "
                           "the model's correlation matrix is used rather than the "
                           "one-way forms of Tukey-Kramer or Dunnett.")
            alternatives.append(Alternative(
                {"all-pairs": "tukey-kramer", "vs-reference": "dunnett"}.get(
                    family.kind, "scheffe"),
                "its one-way form is conservative or approximate when the adjusted means "
                "are correlated"))
        else:
            proc, why, aside = pooled_procedure(layout, family, alpha)
            if proc == "tukey-kramer" and fit.means_correlated:
                reasons.append("The adjusted means are correlated; Tukey-Kramer's form is "
                               "used on each difference's own standard error.")
            reasons += why
            alternatives += aside
    return Route(route, proc, "policy", tuple(reasons), tuple(alternatives), (),
                 tuple(warnings), None, model_crosscheck(proc, family, layout))

"""The routing policy: from the checks to a procedure, with reasons.

:func:`choose` applies the policy of DESIGN.md to the :class:`Findings`:

1. shape poor (normality rejected while the p-value decides, large skew or
   tails, or gross outliers) -> resampling: permutation max-T with Welch
   statistics when the spreads agree, otherwise the bootstrap max-t with
   Hall's skewness correction (the permutation is liberal when small groups
   carry large spreads, the uncorrected bootstrap when they are skewed too);
2. shape fine, spreads unequal -> unequal-variance procedures: Games–Howell
   for all pairs with groups of ``policy.games_howell_min_n`` or more,
   otherwise Dunnett's T3 (with ``policy.calibrate_candidates``, unless a
   quick calibration at the observed sizes and SDs shows Games–Howell within
   alpha + 2 Monte Carlo SE); Welch–Dunnett against a reference; Dunnett's
   T3 for contrasts;
   unbalanced designs with a group under ``games_howell_min_n`` are treated
   as having unequal spreads even when the spread checks pass
   (``policy.welch_when_small_unbalanced``), here and in step 1;
3. shape and spread fine -> classical: Tukey–Kramer for all pairs, Dunnett
   against a reference, and for contrasts the shorter of Šidák and Scheffé.

Before these: data with non-detects take the censored route, and data with
gross values the robust route (:mod:`famwise.diagnostics.robust_route`).

Groups under ``policy.small_group`` observations add a warning.  A user can
force a procedure; the route then says so and lists the checks that argue
against it.  Every alternative set aside is listed with the reason.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from ..core.families import Family
from ..core.layout import Layout
from ..procedures.catalogue import CATALOGUE, check_procedure
from .check import Findings
from .policy import Policy
from .pooled_choice import pooled_procedure

__all__ = ["Route", "Alternative", "choose", "crosscheck_procedure", "power_step",
           "shape_poor", "spread_unequal"]


@dataclass(frozen=True)
class Alternative:
    """A procedure that was considered and set aside, and why."""

    procedure: str
    why: str


@dataclass(frozen=True)
class Route:
    """The chosen procedure, who chose it, and the reasons."""

    route: str     # "classical" | "unequal" | "resample" | "fdr" | "censored" | "robust"
    procedure: str
    chosen_by: str                   # "policy" | "user"
    reasons: tuple[str, ...]
    alternatives: tuple[Alternative, ...] = ()
    against: tuple[str, ...] = ()    # checks that argue against a user's choice
    warnings: tuple[str, ...] = ()
    calibration: dict | None = field(default=None)
    crosscheck: str | None = None    # the independent second procedure
    proposal: str | None = None      # a change of scale the checks suggest

    def to_dict(self) -> dict:
        return {"route": self.route, "procedure": self.procedure, "chosen_by": self.chosen_by,
                "reasons": list(self.reasons),
                "alternatives": [{"procedure": a.procedure, "why": a.why}
                                 for a in self.alternatives],
                "against": list(self.against), "warnings": list(self.warnings),
                "calibration": self.calibration, "crosscheck": self.crosscheck,
                "proposal": self.proposal}


def shape_poor(findings: Findings) -> list[str]:
    """Return the sentences of the shape checks that send data to resampling."""
    out = []
    for name in ("normality", "skewness", "kurtosis", "outliers"):
        c = findings.get(name)
        if c.verdict == "violated":
            out.append(c.sentence)
    return out


def spread_unequal(findings: Findings) -> list[str]:
    """Return the sentences of the spread checks that rule out a pooled variance."""
    return [findings.get(n).sentence for n in ("brown-forsythe", "sd-ratio",
                                                "size-spread-pairing")
            if findings.get(n).verdict == "violated"]


def crosscheck_procedure(procedure: str, family: Family) -> str:
    """Return the independent second procedure for ``procedure`` (DESIGN.md):
    classical -> permutation; unequal-variance -> bootstrap; resampling -> its
    closed-form counterpart; ranks -> Brunner-Munzel (or, from it, Steel-Dwass
    or Steel)."""
    if procedure in ("gehan-maxt", "peto-maxt"):
        return "peto-maxt" if procedure == "gehan-maxt" else "gehan-maxt"
    route = CATALOGUE[procedure].route
    if route in ("classical", "fdr"):
        return "permutation-maxt"
    if route == "unequal":
        return "bootstrap-maxt"
    if route == "ranks":
        # rank procedures: shift-type ranks <-> relative effects (Brunner-Munzel)
        if procedure != "brunner-munzel-maxt":
            return "brunner-munzel-maxt"
        return "steel" if family.kind == "vs-reference" else "steel-dwass"
    if procedure.startswith("permutation"):
        return {"all-pairs": "tukey-kramer", "vs-reference": "dunnett"}.get(family.kind, "scheffe")
    return {"all-pairs": "dunnett-t3", "vs-reference": "welch-dunnett"}.get(family.kind,
                                                                             "dunnett-t3")


def _unequal_all_pairs(layout, policy, alpha, seed):
    """Games–Howell or Dunnett's T3 for all pairs under unequal spreads."""
    n_min = int(layout.stats.n.min())
    if n_min >= policy.games_howell_min_n:
        return "games-howell", [
            f"Every group has at least {policy.games_howell_min_n} observations, where "
            f"Games-Howell holds its level closely and is less conservative than "
            f"Dunnett's T3."], None, [Alternative(
                "dunnett-t3", "more conservative than Games-Howell at these group sizes")]
    if not policy.calibrate_candidates:
        return "dunnett-t3", [
            f"The smallest group has {n_min} observations; Games-Howell is mildly liberal "
            f"with small groups, so Dunnett's T3 is used."], None, [Alternative(
                "games-howell", "mildly liberal with small groups")]
    from .quick import quick_fwer
    st = layout.stats
    cal = {name: quick_fwer(name, st.n, st.sd, alpha=alpha,
                            replicates=policy.calibration_replicates, seed=seed)
           for name in ("games-howell", "dunnett-t3")}
    gh = cal["games-howell"]
    limit = alpha + 2 * gh["se"]
    record = {"method": "normal errors at the observed sizes and SDs, complete null",
              "replicates": policy.calibration_replicates, "limit": limit,
              "estimates": cal}
    if gh["fwer"] <= limit:
        return "games-howell", [
            f"The smallest group has {n_min} observations, but a calibration at the observed "
            f"sizes and SDs puts Games-Howell's familywise error at {gh['fwer']:.3f} "
            f"(SE {gh['se']:.3f}), within alpha + 2 SE = {limit:.3f}."], record, [Alternative(
                "dunnett-t3", f"more conservative (estimated familywise error "
                              f"{cal['dunnett-t3']['fwer']:.3f})")]
    return "dunnett-t3", [
        f"The smallest group has {n_min} observations; a calibration at the observed sizes "
        f"and SDs puts Games-Howell's familywise error at {gh['fwer']:.3f} (SE {gh['se']:.3f}), "
        f"above alpha + 2 SE = {limit:.3f}, and Dunnett's T3 at "
        f"{cal['dunnett-t3']['fwer']:.3f}."], record, [Alternative(
            "games-howell", f"liberal at this design (estimated familywise error "
                            f"{gh['fwer']:.3f})")]


def power_step(route: Route, layout: Layout, family: Family, policy: Policy, alpha: float,
               seed, margin: float | None = None, spreads_agree: bool = False) -> Route:
    """The route's last step (``policy.power_route``): keep the rules' choice, or
    replace it by the most powerful candidate that holds alpha at the observed
    design (:func:`famwise.diagnostics.power_choice.choose_by_power`;
    ``spreads_agree``: the spread checks passed, so the calibration may pool
    the SDs)."""
    import dataclasses
    if not policy.power_route or route.chosen_by != "policy" \
            or route.route not in ("classical", "unequal", "resample"):
        return route
    from .power_choice import choose_by_power
    picked = choose_by_power(route.procedure, layout, family, policy, alpha=alpha,
                             seed=seed, margin=margin, spreads_agree=spreads_agree)
    if picked is None:
        return route
    record = picked["record"]
    if route.calibration is not None:
        record = dict(record, quick=route.calibration)
    proc = picked["procedure"]
    alternatives = route.alternatives
    if proc != route.procedure:
        alternatives = tuple(a for a in alternatives if a.procedure != proc) + (
            Alternative(route.procedure, picked["set_aside"]),)
    return dataclasses.replace(
        route, route=CATALOGUE[proc].route, procedure=proc,
        reasons=route.reasons + (picked["sentence"],), alternatives=alternatives,
        calibration=record, crosscheck=crosscheck_procedure(proc, family))


def choose(findings: Findings, family: Family, layout: Layout, policy: Policy | None = None,
           procedure: str = "auto", alpha: float = 0.05, seed: int | None = 0,
           scale: str | None = None, margin: float | None = None) -> Route:
    """Choose the procedure for ``family`` from the checks, or record a user's choice.

    ``margin`` (the user's smallest difference that matters) sets the
    alternative of the power step (:func:`power_step`).

    ``scale`` is the transform already applied ("log" or None); on the
    original scale, a spread-level slope near 1 adds a proposal of the log
    scale (:func:`log_proposal`).
    """
    route = _choose(findings, family, layout, policy or Policy(), procedure, alpha, seed,
                    margin)
    if scale is None:
        proposal = log_proposal(layout, policy or Policy())
        if proposal:
            import dataclasses
            route = dataclasses.replace(route, proposal=proposal)
    return route


def log_proposal(layout: Layout, policy: Policy) -> str | None:
    """The sentence proposing transform='log' when spread grows with the level."""
    if layout.has_censoring or np.any(layout.values <= 0):
        return None
    from ..model.scale import spread_level_slope
    fit = spread_level_slope(layout)
    if fit is None or fit[1] < policy.log_min_groups:
        return None
    slope, used = fit
    if abs(slope - 1.0) > policy.log_slope_tolerance:
        return None
    return (f"The spread grows in proportion to the level (slope of log SD on log mean "
            f"{slope:.2f} over {used} groups; near 1 means the log scale equalises the "
            f"spreads, Box & Cox 1964): consider transform='log' (--transform log), which "
            f"compares ratios of geometric means; famwise does not change the scale on "
            f"its own.")


def _choose(findings: Findings, family: Family, layout: Layout, policy: Policy,
            procedure: str, alpha: float, seed, margin=None) -> Route:
    poor, unequal = shape_poor(findings), spread_unequal(findings)
    warnings = []
    small = findings.get("small-groups")
    if small.verdict != "ok":
        warnings.append(small.sentence)
    if layout.design is not None:
        from .model_route import choose_model
        parts = choose_model(findings, family, layout, policy, procedure, alpha, poor, unequal,
                             warnings)
        return Route(parts["route"], parts["procedure"], parts["chosen_by"], parts["reasons"],
                     tuple(Alternative(p, w) for p, w in parts["alternatives"]),
                     parts["against"], parts["warnings"], None, parts["crosscheck"])
    if procedure != "auto":
        info = check_procedure(procedure)
        against = []
        if info.route == "classical" and unequal:
            against += [f"pooled variance assumed, but: {s}" for s in unequal]
        if info.route in ("classical", "unequal") and poor:
            against += [f"normal errors assumed, but: {s}" for s in poor]
        if procedure.startswith("permutation") and unequal and small.verdict != "ok":
            against.append("permutation max-T is liberal when small groups carry large "
                           "spreads")
        if procedure == "games-howell" and layout.stats.n.min() < policy.games_howell_min_n:
            against.append("Games-Howell is mildly liberal with small groups")
        if procedure == "lsd" and layout.k > 3:
            against.append(f"Fisher's LSD controls the familywise error rate only for three "
                           f"groups; here there are {layout.k}")
        if procedure == "bh":
            against.append("Benjamini-Hochberg controls the false discovery rate, not the "
                           "familywise error rate")
        from .robust_route import gross_values
        robust = ("gehan-maxt", "peto-maxt", "yuen-holm", "steel-dwass", "steel", "dunn-holm",
                  "dunn-bonferroni", "brunner-munzel-maxt")
        if procedure not in robust and gross_values(findings, policy):
            against.append("gross values are present; a procedure on means lets one "
                           "value dominate its estimate and intervals")
        return Route(info.route, procedure, "user", ("Chosen by the user.",), (),
                     tuple(against), tuple(warnings), None,
                     crosscheck_procedure(procedure, family))
    from .robust_route import censored_route, gross_route, gross_values, isolated
    if layout.has_censoring:
        proc, why, alts, warn, second = censored_route(layout, family, policy)
        return Route("censored", proc, "policy", tuple(why),
                     tuple(Alternative(*a) for a in alts), (),
                     tuple(warnings + warn), None, second)
    gross = gross_values(findings, policy) if policy.gross_outlier_route else []
    if gross and isolated(gross, layout, policy):
        picked = gross_route(gross, layout, family, policy, unequal)
        if picked is not None:
            proc, why, alts, warn, second = picked
            return Route("robust", proc, "policy", tuple(why),
                         tuple(Alternative(*a) for a in alts), (),
                         tuple(warnings + warn), None, second)
    reasons, alternatives, calibration = [], [], None
    spreads_agree = not unequal
    n = layout.stats.n
    fragile = (policy.welch_when_small_unbalanced and not unequal
               and n.min() < policy.games_howell_min_n
               and n.max() / n.min() >= policy.unbalanced_ratio)
    if fragile:
        unequal = [f"The design is unbalanced (n from {n.min()} to {n.max()}) and the smallest "
                   f"group has fewer than {policy.games_howell_min_n} observations: the spread "
                   f"checks have little power there, and procedures that need equal spreads "
                   f"(a pooled variance, or permutations) are badly liberal if the small "
                   f"groups have the larger spreads, so famwise does not rely on equal "
                   f"spreads."]
    if poor:
        route = "resample"
        reasons.append("The residuals are far from normal. " + " ".join(poor))
        if unequal:
            proc = "bootstrap-hall"
            if layout.stats.n.min() < policy.small_group:
                warnings.append(
                    "With far-from-normal data, unequal spreads and groups under "
                    f"{policy.small_group}, the bootstrap's skewness correction leans on one "
                    "shape for all groups (estimated from all of them); where the groups' "
                    "shapes differ, treat borderline results with caution.")
            reasons.append(("" if fragile else "The spreads also differ. ")
                           + " ".join(unequal) + " So a bootstrap "
                           "max-t with Welch statistics and within-group resampling is used, "
                           "with Hall's skewness correction: a skewed small group's t "
                           "statistic is itself skewed, and the correction, using one "
                           "skewness pooled over all groups, keeps that from producing "
                           "false differences.")
            alternatives.append(Alternative("bootstrap-maxt",
                                            "without the skewness correction it is liberal "
                                            "when small groups of skewed data carry large "
                                            "spreads"))
            alternatives.append(Alternative("permutation-maxt",
                                            "liberal when spreads differ, most of all with "
                                            "small groups"))
            alternatives.append(Alternative("bootstrap-stepdown",
                                            "more powerful, but without the skewness "
                                            "correction, and its decisions are not dual to "
                                            "simultaneous intervals"))
        else:
            proc = "permutation-maxt"
            reasons.append("The spreads agree, so a permutation max-T with Welch statistics "
                           "is used; it is exact under exchangeability.")
            alternatives.append(Alternative("bootstrap-hall",
                                            "conservative with small groups; not needed when "
                                            "spreads agree"))
            alternatives.append(Alternative("permutation-stepdown",
                                            "more powerful, but its decisions are not dual to "
                                            "simultaneous intervals"))
        if family.is_pairwise:
            alternatives.append(Alternative("yuen-holm", "trimmed means answer a different "
                                            "question (a trimmed mean, not the mean)"))
    elif unequal:
        route = "unequal"
        reasons.append(" ".join(unequal) if fragile else
                       "The residuals look close enough to normal, but the spreads differ. "
                       + " ".join(unequal))
        if family.kind == "all-pairs":
            proc, why, calibration, alts = _unequal_all_pairs(layout, policy, alpha, seed)
            reasons += why
            alternatives += alts
        elif family.kind == "vs-reference":
            proc = "welch-dunnett"
            reasons.append("Each group is compared with the reference by Welch t with the "
                           "correlations the shared reference implies.")
        else:
            proc = "dunnett-t3"
            reasons.append("Dunnett's T3 covers any set of contrasts at each contrast's "
                           "Welch df.")
        alternatives.append(Alternative("tukey-kramer" if family.kind != "vs-reference"
                                        else "dunnett", "assumes one common variance"))
    else:
        route = "classical"
        reasons.append("The residuals look close enough to normal and the spreads agree, so "
                       "procedures with a pooled variance are exact and the most powerful.")
        proc, why, aside = pooled_procedure(layout, family, alpha)
        reasons += why
        alternatives += [Alternative(p, w) for p, w in aside]
    if small.verdict != "ok" and route == "classical":
        reasons.append("Some groups are small; the pooled procedures remain exact under "
                       "normal errors, but the checks have little power there.")
    return power_step(Route(route, proc, "policy", tuple(reasons), tuple(alternatives), (),
                            tuple(warnings), calibration, crosscheck_procedure(proc, family)),
                      layout, family, policy, alpha, seed, margin, spreads_agree)

"""The catalogue of procedures: identifier, home module, route and purpose.

Every procedure is a function ``fn(layout, family, *, alpha=0.05, **options)``
returning the comparisons table (:func:`famwise.core.table.comparisons_table`).
The catalogue names where each lives so that importing famwise stays cheap
(numba kernels compile only when a resampling procedure is first used).
``famwise procedures`` prints this catalogue.
"""

from __future__ import annotations

import importlib
from collections.abc import Mapping
from dataclasses import dataclass

from ..core.errors import FamwiseInputError, did_you_mean

__all__ = ["ProcedureInfo", "ProcedureOption", "CATALOGUE", "check_procedure",
           "check_design", "check_options", "option_arguments", "get_procedure",
           "model_procedures", "run_procedure", "CENSORED_PROCEDURES"]


@dataclass(frozen=True)
class ProcedureOption:
    """One option a procedure accepts beyond the common ones (alpha, resamples ...).

    ``kind`` is ``"choice"`` (one of ``choices``), ``"float"`` or ``"int"``
    (within ``[low, high)``; ``high=None``: no upper bound) or ``"bool"``.
    """

    name: str
    kind: str
    default: object
    doc: str
    choices: tuple = ()
    low: float | None = None
    high: float | None = None

    def parse(self, value, procedure: str):
        """Return ``value`` as this option's type (text from a command line too)."""
        where = f"option {self.name!r} of {procedure!r}"
        if self.kind == "choice":
            text = str(value).strip()
            if text not in self.choices:
                hint = did_you_mean(text, self.choices)
                raise FamwiseInputError(
                    f"{where} must be one of {', '.join(map(repr, self.choices))}; got "
                    f"{value!r}{hint}")
            return text
        if self.kind == "bool":
            if isinstance(value, bool):
                return value
            text = str(value).strip().lower()
            if text in ("true", "yes", "1", "on"):
                return True
            if text in ("false", "no", "0", "off"):
                return False
            raise FamwiseInputError(f"{where} must be true or false; got {value!r}")
        try:
            if isinstance(value, bool):
                raise ValueError
            number = float(str(value).strip()) if isinstance(value, str) else float(value)
            if self.kind == "int":
                if not number.is_integer():
                    raise ValueError
                number = int(number)
        except (TypeError, ValueError, OverflowError):
            what = "a whole number" if self.kind == "int" else "a number"
            raise FamwiseInputError(f"{where} must be {what}; got {value!r}") from None
        if (self.low is not None and not number >= self.low) or (
                self.high is not None and not number < self.high):
            span = " and ".join(part for part in (
                f"at least {self.low:g}" if self.low is not None else "",
                f"below {self.high:g}" if self.high is not None else "") if part)
            raise FamwiseInputError(f"{where} must be {span}; got {value!r}")
        return number


_STAT_PERM = ProcedureOption(
    "statistic", "choice", "welch",
    "the statistic maximised: 'welch' (the default for one-way data; stays valid "
    "under unequal spreads as groups grow) or 'pooled' (the pooled-variance t; the "
    "default with blocks or covariates, the model's error mean square recomputed "
    "for each permutation)", choices=("welch", "pooled"))
_COVARIANCE = ProcedureOption(
    "covariance", "choice", "hc3",
    "heteroscedasticity-consistent standard errors: 'hc3' (MacKinnon and White) "
    "or 'hc4' (Cribari-Neto; discounts high-leverage plots more)", choices=("hc3", "hc4"))
_WEIGHTS = ProcedureOption(
    "weights", "choice", "rademacher",
    "wild-bootstrap weights: 'rademacher' (+-1) or 'webb' (six points; more "
    "distinct resamples with few plots)", choices=("rademacher", "webb"))
_STAT_BOOT = ProcedureOption(
    "statistic", "choice", "welch",
    "the bootstrapped statistic: 'welch', 'pooled', or 'yuen' (trimmed means, "
    "see trim)", choices=("welch", "pooled", "yuen"))
_TRIM = ProcedureOption("trim", "float", 0.2,
                        "proportion trimmed from each end of every group", low=0.0, high=0.5)
_RANK_DOC = ("the reference distribution: 'asymptotic' (normal, studentized range or "
             "Dunnett's at df = inf), 'permutation' (all labels permuted, B resamples)")
_METHOD_ALL = ProcedureOption(
    "method", "choice", "asymptotic",
    _RANK_DOC + " or 'exact' (every assignment, tiny designs); compare's default is the "
    "policy's (permutation when a group is under rank_permutation_below)",
    choices=("asymptotic", "permutation", "exact"))
_METHOD_DUNN = ProcedureOption(
    "method", "choice", "asymptotic",
    _RANK_DOC + "; compare's default is the policy's (permutation when a group is under "
    "rank_permutation_below)", choices=("asymptotic", "permutation"))
_METHOD_BM = ProcedureOption(
    "method", "choice", "permutation",
    "'permutation' (all labels permuted, B resamples) or 'exact' (every assignment, "
    "tiny designs)", choices=("permutation", "exact"))

_QMC_TOL = ProcedureOption(
    "tolerance", "float", 1e-3,
    "target error bound (4 quasi-Monte Carlo standard errors) of adjusted p-values of 0.05 "
    "or more, smaller below and near alpha; the critical value gets a quarter of it",
    low=1e-6, high=0.1)


@dataclass(frozen=True)
class ProcedureInfo:
    """One catalogue entry: where the procedure lives, what it handles, its options."""

    name: str
    module: str
    function: str
    route: str            # "classical" | "unequal" | "resample" | "ranks" | "fdr"
    families: tuple[str, ...]
    purpose: str
    # "one-way": the layout's groups alone; "model": reads famwise.model's fit
    # (blocks and covariates), so it may run on a blocked or covariate layout.
    # Default: the pooled routes ("classical", "fdr") read the model (their
    # estimates come from famwise.procedures.classical.pooled_estimates), the
    # others do not.
    designs: tuple[str, ...] | None = None
    options: tuple[ProcedureOption, ...] = ()

    def __post_init__(self):
        if self.designs is None:
            object.__setattr__(self, "designs", ("one-way", "model")
                               if self.route in ("classical", "fdr") else ("one-way",))

    def option(self, key: str) -> ProcedureOption:
        for opt in self.options:
            if opt.name == key:
                return opt
        names = [o.name for o in self.options]
        if not names:
            raise FamwiseInputError(
                f"procedure {self.name!r} takes no options of its own; got {key!r}")
        raise FamwiseInputError(
            f"procedure {self.name!r} has no option {key!r}{did_you_mean(key, names)} "
            f"(its options: {', '.join(names)})")


_ALL = ("all-pairs", "vs-reference", "contrasts")
_BOTH = ("one-way", "model")     # runs one-way, or on the model (blocks, covariates)
_PAIRS = ("all-pairs", "vs-reference")
_MODEL = ("one-way", "model")

CATALOGUE: dict[str, ProcedureInfo] = {p.name: p for p in [
    ProcedureInfo("lsd", "famwise.procedures.classical", "lsd", "classical", _ALL,
                  "Fisher's least significant difference, unadjusted pooled t, "
                  "used only after a significant F test; controls the familywise "
                  "error rate only for three groups.", designs=_MODEL),
    ProcedureInfo("bonferroni", "famwise.procedures.classical", "bonferroni", "classical", _ALL,
                  "Pooled t with Bonferroni's m-fold adjustment; any family, "
                  "conservative when m is large.", designs=_MODEL),
    ProcedureInfo("sidak", "famwise.procedures.classical", "sidak", "classical", _ALL,
                  "Pooled t with Sidak's adjustment; slightly less conservative "
                  "than Bonferroni.", designs=_MODEL),
    ProcedureInfo("holm", "famwise.procedures.classical", "holm", "classical", _ALL,
                  "Pooled t with Holm's step-down adjustment; uniformly more "
                  "powerful than Bonferroni; no simultaneous intervals of its own.", designs=_MODEL),
    ProcedureInfo("tukey-kramer", "famwise.procedures.classical", "tukey_kramer", "classical",
                  ("all-pairs", "contrasts"),
                  "Studentized range for all pairwise differences, equal "
                  "variances; exact for equal n, conservative for unequal n.",
                  designs=_MODEL),
    ProcedureInfo("scheffe", "famwise.procedures.classical", "scheffe", "classical", _ALL,
                  "Scheffe's F-based intervals, valid for every contrast at once; "
                  "the choice for contrasts picked after seeing the data.", designs=_MODEL),
    ProcedureInfo("dunnett", "famwise.procedures.classical", "dunnett", "classical",
                  ("vs-reference",),
                  "Each group against a reference, equal variances; one- or "
                  "two-sided.", designs=_MODEL),
    ProcedureInfo("multivariate-t", "famwise.procedures.multivariate", "multivariate_t",
                  "classical", _ALL,
                  "Exact single-step adjustment from the multivariate t with the "
                  "estimates' own correlation, for any family; the choice when adjusted "
                  "means are correlated (missing plots, covariates).", designs=_MODEL,
                  options=(_QMC_TOL,)),
    ProcedureInfo("welch", "famwise.procedures.unequal", "welch", "unequal", _ALL,
                  "Welch t with Satterthwaite df for each comparison, unadjusted."),
    ProcedureInfo("welch-holm", "famwise.procedures.unequal", "welch_holm", "unequal", _ALL,
                  "Welch t with Holm's step-down adjustment."),
    ProcedureInfo("games-howell", "famwise.procedures.unequal", "games_howell", "unequal",
                  ("all-pairs",),
                  "All pairs under unequal variances: studentized range at each "
                  "pair's Welch df; mildly liberal with small groups."),
    ProcedureInfo("dunnett-t3", "famwise.procedures.unequal", "dunnett_t3", "unequal",
                  ("all-pairs", "contrasts"),
                  "Unequal variances, studentized maximum modulus at each "
                  "comparison's Welch df; holds its level with small groups."),
    ProcedureInfo("welch-dunnett", "famwise.procedures.unequal", "welch_dunnett", "unequal",
                  ("vs-reference",),
                  "Each group against a reference under unequal variances "
                  "(multivariate t with the Welch correlations)."),
    ProcedureInfo("yuen-holm", "famwise.procedures.unequal", "yuen_holm", "unequal", _PAIRS,
                  "Trimmed means with winsorised variances (Yuen), Holm "
                  "adjusted; resists outliers and heavy tails.",
                  options=(_TRIM,)),
    ProcedureInfo("permutation-maxt", "famwise.resample.procedures",
                  "permutation_maxt", "resample", _ALL,
                  "Single-step max-T over permutations of group labels "
                  "(Welch statistics one-way; with blocks, within blocks with "
                  "the block model's pooled t; with covariates, Freedman-Lane).",
                  options=(_STAT_PERM,), designs=_BOTH),
    ProcedureInfo("permutation-stepdown", "famwise.resample.procedures",
                  "permutation_stepdown", "resample", _ALL,
                  "Step-down max-T over permutations; more powerful than single-step.",
                  options=(_STAT_PERM,), designs=_BOTH),
    ProcedureInfo("bootstrap-maxt", "famwise.resample.procedures",
                  "bootstrap_maxt", "resample", _ALL,
                  "Bootstrap-t max statistic with within-group resampling of "
                  "centred data; unequal spreads and skew.",
                  options=(_STAT_BOOT, _TRIM)),
    ProcedureInfo("bootstrap-stepdown", "famwise.resample.procedures",
                  "bootstrap_stepdown", "resample", _ALL,
                  "Step-down version of the bootstrap max-t.",
                  options=(_STAT_BOOT, _TRIM)),
    ProcedureInfo("bootstrap-hall", "famwise.resample.procedures",
                  "bootstrap_hall", "resample", _ALL,
                  "Bootstrap max-t of Welch statistics with Hall's skewness "
                  "correction; skewed data with small groups."),
    ProcedureInfo("dunn-holm", "famwise.procedures.ranks", "dunn_holm", "ranks", _PAIRS,
                  "Dunn's z on the joint ranks (tie-corrected) with Holm's step-down "
                  "adjustment; skewed data, outliers or ordinal scores.",
                  options=(_METHOD_DUNN,)),
    ProcedureInfo("dunn-bonferroni", "famwise.procedures.ranks", "dunn_bonferroni", "ranks",
                  _PAIRS,
                  "Dunn's z on the joint ranks (tie-corrected) with Bonferroni's "
                  "adjustment, as Dunn proposed it.", options=(_METHOD_DUNN,)),
    ProcedureInfo("steel-dwass", "famwise.procedures.ranks", "steel_dwass", "ranks",
                  ("all-pairs",),
                  "All pairs by each pair's own Wilcoxon rank-sum z against the "
                  "studentized range (Steel-Dwass-Critchlow-Fligner), with "
                  "simultaneous intervals for the Hodges-Lehmann shift.",
                  options=(_METHOD_ALL,)),
    ProcedureInfo("steel", "famwise.procedures.ranks", "steel", "ranks", ("vs-reference",),
                  "Each group against a reference by its own Wilcoxon rank-sum z "
                  "(Steel), Dunnett-type joint distribution; one- or two-sided.",
                  options=(_METHOD_ALL,)),
    ProcedureInfo("brunner-munzel-maxt", "famwise.procedures.brunner_munzel",
                  "brunner_munzel_maxt", "ranks", _PAIRS,
                  "Brunner-Munzel relative effects with a studentised-permutation "
                  "max-T; rank comparisons that stay valid when spreads or shapes "
                  "differ.", options=(_METHOD_BM,)),
    ProcedureInfo("wild-bootstrap-maxt", "famwise.resample.wild",
                  "wild_bootstrap_maxt", "resample", _ALL,
                  "Max-t of heteroscedasticity-consistent (HC3) t statistics "
                  "calibrated by the wild bootstrap; unequal variances with "
                  "blocks or covariates.",
                  options=(_COVARIANCE, _WEIGHTS), designs=_BOTH),
    ProcedureInfo("wild-bootstrap-stepdown", "famwise.resample.wild",
                  "wild_bootstrap_stepdown", "resample", _ALL,
                  "Step-down version of the wild-bootstrap max-t.",
                  options=(_COVARIANCE, _WEIGHTS), designs=_BOTH),
    ProcedureInfo("gehan-maxt", "famwise.resample.censored", "gehan_maxt", "resample",
                  _PAIRS,
                  "Values with non-detects (left-censored, several limits allowed): "
                  "each pair's own Gehan generalised Wilcoxon statistic, permutation "
                  "max-T."),
    ProcedureInfo("peto-maxt", "famwise.resample.censored", "peto_maxt", "resample",
                  _PAIRS,
                  "Values with non-detects: each pair's own Peto-Peto statistic "
                  "(product-limit scores), permutation max-T; steadier than Gehan's "
                  "when detection limits differ between groups."),
    ProcedureInfo("bh", "famwise.procedures.classical", "bh", "fdr", _ALL,
                  "Benjamini-Hochberg false discovery rate (not familywise "
                  "error) on pooled t; exploratory families.", designs=_MODEL),
]}


def check_procedure(name: str) -> ProcedureInfo:
    """Return the catalogue entry of ``name`` or raise a one-line error."""
    try:
        return CATALOGUE[name]
    except (KeyError, TypeError):
        hint = did_you_mean(str(name), list(CATALOGUE))
        raise FamwiseInputError(
            f"unknown procedure {name!r}{hint} (known: {', '.join(CATALOGUE)}, "
            f"or 'auto')") from None


def check_options(name: str, options) -> dict:
    """Validate ``options`` for procedure ``name``; return them parsed to their types.

    ``options`` is a mapping of option names to values (numbers, booleans or
    text as a command line gives them) or None.  Each key must be one the
    procedure declares (:attr:`ProcedureInfo.options`); an unknown key, or a
    value of the wrong type or range, raises a one-line
    :class:`~famwise.core.errors.FamwiseInputError` that lists the allowed keys.
    The result keeps the order given.
    """
    if options is None:
        return {}
    if not isinstance(options, Mapping):
        raise FamwiseInputError(
            f"options must be a mapping of option names to values; got {options!r}")
    if not options:
        return {}
    if name == "auto":
        raise FamwiseInputError(
            f"options ({', '.join(map(str, options))}) belong to a procedure: name it "
            f"(procedure=..., --procedure NAME) rather than 'auto'")
    info = check_procedure(name)
    return {str(k): info.option(str(k)).parse(v, info.name) for k, v in options.items()}


def option_arguments(options: dict) -> list[str]:
    """Command-line arguments (``--option KEY=VALUE`` ...) that give ``options`` again."""
    out = []
    for key, value in options.items():
        text = ("true" if value else "false") if isinstance(value, bool) else (
            repr(value) if isinstance(value, float) else str(value))
        out += ["--option", f"{key}={text}"]
    return out


def get_procedure(name: str):
    """Import and return the function implementing procedure ``name``."""
    info = check_procedure(name)
    return getattr(importlib.import_module(info.module), info.function)


def model_procedures(route: str | None = None) -> list[str]:
    """Names of the procedures that read the model (blocks, covariates)."""
    return [p.name for p in CATALOGUE.values()
            if "model" in p.designs and (route is None or p.route == route)]


def check_design(name: str, layout) -> ProcedureInfo:
    """Refuse a one-way procedure on a layout with blocks or covariates."""
    info = check_procedure(name)
    design = getattr(layout, "design", None)
    if design is not None and "model" not in info.designs:
        what = " and ".join(
            ([f"the blocks {', '.join(map(repr, design.block_names))}"]
             if design.block_names else []) +
            ([f"the covariates {', '.join(map(repr, design.covariate_names))}"]
             if design.covariate_names else []))
        raise FamwiseInputError(
            f"procedure {name!r} compares the groups as a one-way layout and would ignore "
            f"{what}; use one that reads the model ({', '.join(model_procedures())}) or "
            f"procedure='auto'")
    return info


#: Procedures that read non-detects as left-censored values.
CENSORED_PROCEDURES = ("gehan-maxt", "peto-maxt")


def run_procedure(name, layout, family, *, alpha=0.05, **options):
    """Run procedure ``name`` on ``layout`` for ``family``."""
    info = check_design(name, layout)
    if getattr(layout, "has_censoring", False) and name not in CENSORED_PROCEDURES:
        n = int(layout.censored.sum())
        raise FamwiseInputError(
            f"procedure {name!r} needs measured values, but {n} value(s) of "
            f"{layout.response!r} are non-detects (below a detection limit); use "
            f"{' or '.join(CENSORED_PROCEDURES)} (or procedure='auto'), or set the "
            f"non-detects aside with nondetects='drop' (this biases means upward)")
    if family.kind not in info.families and not (
            family.kind == "contrasts" and family.is_pairwise and "all-pairs" in info.families):
        raise FamwiseInputError(
            f"procedure {name!r} does not handle the {family.kind!r} family "
            f"(it handles: {', '.join(info.families)})")
    return get_procedure(name)(layout, family, alpha=alpha, **options)

"""Error-rate calibration: the familywise error at the observed design.

Routing on preliminary tests is itself a procedure, and several procedures'
error control depends on the design (Games–Howell with small groups,
permutation max-T when small groups carry large spreads).  This module
estimates, by Monte Carlo under the complete null hypothesis (all group means
equal) at the observed group sizes and SDs:

* the familywise error rate of every candidate procedure for the family;
* the familywise error rate of the whole automatic pipeline, checks and
  routing included;

with errors drawn from the normal distribution or, by option, resampled from
the observed standardised within-group residuals (``shape="observed"``).

Methods.  Everything runs on stacked replicates
(:mod:`famwise.diagnostics.simulate`): the checks, the route and the
procedures are evaluated on all replicates at once.  Closed-form procedures
are evaluated from each replicate's group means and variances; the asymptotic
rank procedures from each replicate's ranks, the permutation ones and the
censored-data max-T by the warp-speed method below
(:mod:`famwise.diagnostics.stacked_ranks`, :mod:`~famwise.diagnostics.stacked_censored`).
Resampling procedures use the
warp-speed method of Giacomini, Politis & White (2013, *Econometric Theory*
29:567–589): one resample per replicate, and the replicate rejects when its
max statistic exceeds the (1 - alpha) quantile of the pooled resampled max
statistics.  Under the complete null a step-down procedure rejects something
exactly when its single-step counterpart does (the first step is the same),
so Holm's FWER equals Bonferroni's and each step-down resampling procedure's
equals its single-step one; the table says so.  Welch–Dunnett's
multivariate t is evaluated only in the replicates whose decision the
marginal and Šidák bounds leave open.  Within the pipeline, the route's own
quick Games–Howell / Dunnett T3 calibration (when the policy asks for it) is
evaluated once at the observed design, not in every replicate.

The small closed-form estimate the router uses to choose between
Games–Howell and Dunnett's T3 is :func:`famwise.diagnostics.quick.quick_fwer`.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np
import pandas as pd

from ..core.errors import FamwiseInputError
from ..core.families import Family
from ..core.layout import Layout
from ..procedures.catalogue import CATALOGUE
from .policy import Policy

from .quick import _null_summaries, independent_fwer, quick_fwer  # noqa: F401 (re-exported)

__all__ = ["quick_fwer", "Calibration", "calibrate_layout", "independent_fwer"]

_SQRT2 = np.sqrt(2.0)


# --- the full calibration ------------------------------------------------------

@dataclass(frozen=True)
class Calibration:
    """Estimated familywise error rates at the observed design.

    ``table`` has one row per procedure: ``procedure``, ``fwer``, ``se``
    (binomial Monte Carlo SE), ``replicates``, ``method`` and ``holds``
    (``fwer <= alpha + 2 se``; None for a procedure the simulation does not
    cover, whose ``method`` says "not simulated"); the last row, ``automatic pipeline``, is the
    whole route-then-test procedure.
    """

    alpha: float
    m: int
    shape: str
    replicates: int
    seed: int
    design: dict
    table: pd.DataFrame = field(repr=False)
    routes: dict = field(default_factory=dict)

    @property
    def independent(self) -> float:
        """The FWER of m unadjusted independent tests, for comparison."""
        return independent_fwer(self.m, self.alpha)

    def to_dict(self) -> dict:
        return {"alpha": self.alpha, "m": self.m, "shape": self.shape,
                "replicates": self.replicates, "seed": self.seed, "design": self.design,
                "independent_tests_fwer": self.independent, "routes": self.routes,
                "table": self.table.to_dict(orient="records")}

    def sentence(self) -> str:
        pipe = self.table[self.table["procedure"] == "automatic pipeline"]
        text = (f"Under the complete null at the observed sizes and SDs ({self.shape} errors, "
                f"{self.replicates} replicates), {self.m} unadjusted independent tests would "
                f"err with probability {self.independent:.3f}.")
        if len(pipe):
            row = pipe.iloc[0]
            text += (f" The automatic pipeline's estimated familywise error is "
                     f"{row.fwer:.3f} (SE {row.se:.3f}), "
                     + ("within" if row.holds else "above") + f" alpha = {self.alpha:g} "
                     f"+ 2 SE.")
        return text


def _candidates(family: Family) -> list[str]:
    out = []
    for name, info in CATALOGUE.items():
        ok = family.kind in info.families or (
            family.kind == "contrasts" and family.is_pairwise and "all-pairs" in info.families)
        if ok:
            out.append(name)
    return out


def null_design(layout: Layout, shape: str = "normal"):
    """The design of the complete null at ``layout``'s sizes and SDs, with
    normal errors or (``shape="observed"``) its standardised residuals."""
    from .simulate import Scenario
    st = layout.stats
    if shape == "normal":
        errors = None
    elif shape == "observed":
        from .shape import standardised_residuals
        errors = standardised_residuals(layout)
    else:
        raise FamwiseInputError(f"shape must be 'normal' or 'observed'; got {shape!r}")
    return Scenario(tuple(int(v) for v in st.n), (0.0,) * layout.k,
                  tuple(float(v) for v in st.sd), errors)


def calibrate_layout(layout: Layout, family: Family, *, alpha: float = 0.05,
                     replicates: int = 2000, shape: str = "normal", seed: int = 0,
                     procedures=None, pipeline: bool = True,
                     policy: Policy | None = None, n_jobs=1,
                     backend: str = "threads", options: dict | None = None) -> Calibration:
    """Estimate every candidate's FWER, and the pipeline's, at ``layout``'s design.

    Runs on the stacked-replicate engine (:mod:`famwise.diagnostics.simulate`):
    the checks, the route and every procedure evaluated on all replicates at
    once; the route's quick calibration, when the policy asks for it, once at
    the observed design.  A layout with blocks or covariates is calibrated
    under its model (:func:`famwise.diagnostics.model_calibrate.calibrate_model`).
    ``options`` (validated procedure options, see
    :func:`famwise.procedures.catalogue.check_options`) apply to every
    procedure in ``procedures``, which must then be given; the pipeline, if
    asked for, runs with every procedure's defaults in a simulation of its own.
    """
    if layout.design is not None:
        if options:
            raise FamwiseInputError(
                f"the calibration under a blocked or covariate model does not simulate "
                f"procedure options ({', '.join(options)}); calibrate without them")
        from .model_calibrate import calibrate_model
        rows, routes, design = calibrate_model(
            layout, family, alpha=alpha, replicates=replicates, shape=shape, seed=seed,
            procedures=procedures, pipeline=pipeline, policy=policy, row=_row,
            n_jobs=n_jobs, backend=backend)
        return Calibration(alpha, family.m, shape, replicates, int(seed), design,
                           pd.DataFrame(rows), routes)
    from .simulate import route_table, simulate
    from .stacked_procedures import WARP_STATISTICS
    policy = policy or Policy()
    if replicates < 100:
        raise FamwiseInputError(f"replicates must be at least 100; got {replicates}")
    options = dict(options or {})
    if options and procedures is None:
        raise FamwiseInputError(
            f"options ({', '.join(options)}) belong to the procedures you name: pass "
            f"procedures=[...] (--procedure NAME)")
    names = list(procedures) if procedures is not None else _candidates(family)
    if options.get("statistic", "welch") not in WARP_STATISTICS or (
            "trim" in options and any(CATALOGUE[p].route == "resample" for p in names)):
        shown = ", ".join(f"{k}={v}" for k, v in options.items())
        raise FamwiseInputError(
            f"the error-rate simulation does not cover the resampling procedures with "
            f"{shown} (it simulates their Welch or pooled statistics); calibrate "
            f"yuen-holm for trimmed means")
    design = null_design(layout, shape)
    table = route_table(family, layout, policy, alpha) if pipeline else None
    root = np.random.SeedSequence(seed)
    if options:
        sim = simulate(design, family, names, replicates=replicates, seed=root,
                       alpha=alpha, policy=policy, n_jobs=n_jobs, backend=backend,
                       options=options)
        auto = simulate(design, family, ["auto"], replicates=replicates, seed=root,
                        alpha=alpha, policy=policy, table=table, n_jobs=n_jobs,
                        backend=backend) if pipeline else None
    else:
        sim = simulate(design, family, names + (["auto"] if pipeline else []),
                       replicates=replicates, seed=root, alpha=alpha,
                       policy=policy, table=table, n_jobs=n_jobs, backend=backend)
        auto = sim
    given = ", ".join(f"{k} = {v}" for k, v in options.items())
    rows = []
    for name in names:
        hits = sim.rejects[name].any(axis=1)
        method = sim.methods[name] + (f"; options {given}" if given else "")
        if name == "holm" or name.endswith("stepdown") or name in ("welch-holm", "yuen-holm",
                                                                   "dunn-holm"):
            method += "; under the complete null it errs exactly when its single-step " \
                      "counterpart does"
        if name == "bh":
            method += "; under the complete null the FDR equals the FWER"
        rows.append(_row(name, hits, replicates, method, alpha))
    if pipeline:
        rows.append(_row("automatic pipeline", auto.rejects["auto"].any(axis=1), replicates,
                         "checks and routing re-run on every replicate", alpha))
    st = layout.stats
    design_record = {"labels": list(layout.labels), "n": st.n.tolist(), "sd": st.sd.tolist(),
                     "family": family.kind, "options": options}
    return Calibration(alpha, family.m, shape, replicates, int(seed), design_record,
                       pd.DataFrame(rows), auto.route_counts() if auto is not None else {})


def _row(name, hits, used, method, alpha):
    hits = np.asarray(hits, dtype=bool)
    fwer = float(hits.mean())
    se = float(np.sqrt(fwer * (1 - fwer) / used))
    return {"procedure": name, "fwer": fwer, "se": se, "replicates": int(used),
            "method": method, "holds": bool(fwer <= alpha + 2 * se)}

"""Planning the next trial: power and group sizes by simulation at the user's design.

:func:`plan` answers "how many plots (or samples) per group next time, so
that a difference that matters is found by a familywise procedure that holds
its level on data like mine?".  It simulates the design through the same
checks, route and procedures that :func:`famwise.compare` runs (vectorised
over replicates, :mod:`famwise.diagnostics.simulate`), so the power of the
automatic pipeline (``"auto"``) is the power of what ``compare`` would do.

For each candidate size and procedure, on ``replicates`` data sets drawn
with the alternative's true means and the assumed SDs and error shape:

* ``power_each``: the mean, over the true differences (the family's
  comparisons whose true means differ), of the probability of declaring
  that comparison different;
* ``power_any``: the probability of declaring at least one true difference;
* ``power_all``: the probability of declaring every true difference;
* ``fwer``: the familywise error rate on data sets drawn at the complete
  null (all means equal) with the same sizes, spreads and shape;
* ``mc_se``: the largest binomial Monte Carlo standard error of the row's
  four estimates, sqrt(p (1 - p) / replicates).

The family is all pairs, or each group against a reference
(``family="vs-reference"``): every figure counts only the family's
comparisons.  With ``transform="log"`` the plan runs on the natural log of
the values, as ``compare(..., transform="log")`` does, and the margin is a
ratio of geometric means (see :func:`plan`).

Resampling procedures are simulated by the warp-speed method (Giacomini,
Politis & White 2013); see :mod:`famwise.diagnostics.stacked_procedures`.
The inputs are checked in :mod:`famwise.planning.inputs`, the placements
and sizes built in :mod:`famwise.planning.scenario`.
"""

from __future__ import annotations

import dataclasses
import math
import numbers
from dataclasses import dataclass, field

import numpy as np
import pandas as pd

from ..core.errors import FamwiseInputError
from ..core.validate import check_alpha
from .inputs import (check_family, check_log_options, check_margin, check_n,
                     check_procedures, check_sd, check_target)
from .scenario import PLACEMENTS, blocked_pilot, first_size, group_sizes, true_means

__all__ = ["plan", "Plan", "PLACEMENTS", "GOALS", "SCHEMA"]

GOALS = ("any", "each", "all")
SCHEMA = "famwise.plan/1"
COLUMNS = ("n_per_group", "procedure", "power_each", "power_any", "power_all", "fwer",
           "mc_se")


@dataclass(frozen=True)
class Plan:
    """The result of :func:`plan`.

    Attributes
    ----------
    table : pandas.DataFrame
        One row per candidate size and procedure: ``n_per_group``,
        ``procedure``, ``power_each``, ``power_any``, ``power_all``, ``fwer``,
        ``mc_se`` (see the module notes); ``"auto"`` is the automatic pipeline.
    recommended : dict
        Procedure -> the smallest size per group whose ``power_<goal>``
        reaches ``target_power`` (None when no candidate reaches it).
    settings : dict
        What was assumed: groups, SDs, true means, margin, placement, shape,
        alpha, target, goal, replicates, seed, source.
    routes : dict
        Size -> how often the pipeline chose each procedure on the
        alternative's data sets.
    sizes : dict
        Size per group (the table's ``n_per_group``) -> the group sizes.
    """

    table: pd.DataFrame = field(repr=False)
    recommended: dict
    settings: dict = field(repr=False)
    routes: dict = field(repr=False)
    sizes: dict = field(repr=False)
    methods: dict = field(repr=False, default_factory=dict)
    notes: tuple = field(repr=False, default=())

    @property
    def target_power(self) -> float:
        return self.settings["target_power"]

    def route_at(self, n: int) -> tuple[str, float] | None:
        """The procedure the pipeline chose most often at size ``n``, and its share."""
        counts = self.routes.get(int(n))
        if not counts:
            return None
        name = max(counts, key=lambda p: (counts[p], p))
        return name, counts[name] / sum(counts.values())

    def summary(self) -> str:
        from ..report.plan_text import plan_text
        return plan_text(self)

    def to_dict(self) -> dict:
        """The plan's record (schema ``famwise.plan/1``), plain JSON data."""
        from ..core.results import environment
        rec = {str(k): v for k, v in self.recommended.items()}
        return {"schema": SCHEMA, "settings": self.settings,
                "recommended": rec,
                "route_at_recommended": (None if self.recommended.get("auto") is None else
                                         dict(zip(("procedure", "share"),
                                                  self.route_at(self.recommended["auto"])))),
                "table": self.table.to_dict(orient="records"),
                "routes": {str(k): v for k, v in self.routes.items()},
                "sizes": {str(k): list(v) for k, v in self.sizes.items()},
                "methods": self.methods, "notes": list(self.notes),
                "environment": environment()}

    def to_json(self) -> str:
        import json
        return json.dumps(_clean(self.to_dict()), indent=2, allow_nan=False)

    def to_html(self, path=None) -> str:
        from ..report.plan_html import plan_html
        text = plan_html(self)
        if path is not None:
            from ..report.output import write_atomic
            write_atomic(path, text)
        return text

    def save(self, folder, force: bool = False) -> list[str]:
        """Write ``power.csv``, ``power.json``, ``power.txt``, ``power.html`` and
        ``power.svg`` (the power curves as an image file)."""
        from ..report.plan_files import save_plan
        return save_plan(self, folder, force=force)


def _clean(x):
    if isinstance(x, dict):
        return {str(k): _clean(v) for k, v in x.items()}
    if isinstance(x, (list, tuple)):
        return [_clean(v) for v in x]
    if isinstance(x, (np.integer,)):
        return int(x)
    if isinstance(x, (float, np.floating)):
        return float(x) if math.isfinite(x) else None
    if isinstance(x, np.bool_):
        return bool(x)
    return x


# --- the simulation at one size --------------------------------------------------

def _summaries(rejects: np.ndarray, true: np.ndarray) -> tuple[float, float, float]:
    hit = rejects[:, true]
    return float(hit.mean()), float(hit.any(axis=1).mean()), float(hit.all(axis=1).mean())


def _se(p: float, r: int) -> float:
    return math.sqrt(max(p * (1 - p), 0.0) / r)


class _Evaluator:
    """Evaluates every procedure at one size per group, with its own seeds."""

    def __init__(self, *, k, sd, mu, errors, weights, family, procedures, alpha, policy,
                 replicates, root, n_jobs, backend, scheduler, bar, rcbd=None):
        self.__dict__.update(k=k, sd=sd, mu=mu, errors=errors, weights=weights,
                             family=family, procedures=procedures, alpha=alpha, policy=policy,
                             replicates=replicates, root=root, n_jobs=n_jobs, backend=backend,
                             scheduler=scheduler, bar=bar, rcbd=rcbd)
        scale = float(np.max(sd))
        diff = np.abs(family.weights @ mu)
        self.true = diff > 1e-9 * max(scale, float(np.max(np.abs(mu))))
        self.rows: dict[int, list[dict]] = {}
        self.routes: dict[int, dict] = {}
        self.sizes: dict[int, tuple] = {}
        self.methods: dict = {}

    def __call__(self, n: int) -> dict:
        if n in self.rows:
            return {r["procedure"]: r for r in self.rows[n]}
        from ..diagnostics.simulate import Scenario, design_layout, route_table, simulate
        from ..resample.engine import chunk_seed
        sizes = group_sizes(n, self.weights)
        key = chunk_seed(self.root, int(n))
        if self.rcbd is not None:        # n complete blocks (famwise.planning.blocked)
            alt, null = self.rcbd(int(n), self.mu, self.sd, self.errors,
                                  replicates=self.replicates, key=key, n_jobs=self.n_jobs,
                                  backend=self.backend, scheduler=self.scheduler,
                                  on_chunk=self.bar.update)
            return self._rows(n, sizes, alt, null)
        table = route_table(self.family, design_layout(sizes, self.sd), self.policy, self.alpha)
        common = dict(replicates=self.replicates, alpha=self.alpha, policy=self.policy,
                      table=table, n_jobs=self.n_jobs, backend=self.backend,
                      scheduler=self.scheduler, on_chunk=self.bar.update)
        alt = simulate(Scenario(sizes, tuple(self.mu), tuple(self.sd), self.errors),
                       self.family, self.procedures, seed=chunk_seed(key, 0), **common)
        null = simulate(Scenario(sizes, (0.0,) * self.k, tuple(self.sd), self.errors),
                        self.family, self.procedures, seed=chunk_seed(key, 1), **common)
        return self._rows(n, sizes, alt, null)

    def _rows(self, n, sizes, alt, null) -> dict:
        r = self.replicates
        rows = []
        for p in self.procedures:
            each, any_, all_ = _summaries(alt.rejects[p], self.true)
            fwer = float(null.rejects[p].any(axis=1).mean())
            # power_each is a mean of indicators: its SE is at most the largest binomial SE
            mc = max(_se(each, r), _se(any_, r), _se(all_, r), _se(fwer, r))
            rows.append({"n_per_group": int(n), "procedure": p, "power_each": each,
                         "power_any": any_, "power_all": all_, "fwer": fwer, "mc_se": mc})
            self.methods.setdefault(p, alt.methods[p])
        self.rows[n] = rows
        self.routes[n] = alt.route_counts()
        self.sizes[n] = sizes
        return {row["procedure"]: row for row in rows}


def _search(evaluate, procedures, goal, target, start, cap):
    """Smallest n per procedure whose power reaches ``target``: doubling from
    ``start`` up to ``cap``, then bisection on the integers for each procedure."""
    col = f"power_{goal}"
    below = {p: None for p in procedures}     # largest n known below target
    above = {p: None for p in procedures}     # smallest n known at or above target
    n = start
    while True:
        res = evaluate(n)
        for p in procedures:
            if res[p][col] >= target:
                if above[p] is None or n < above[p]:
                    above[p] = n
            elif above[p] is None:
                below[p] = n
        if all(a is not None for a in above.values()) or n >= cap:
            break
        n = min(cap, 2 * n)
    for p in procedures:
        if above[p] is None:
            continue
        lo = below[p] if below[p] is not None else 1
        hi = above[p]
        while hi - lo > 1:
            mid = (lo + hi) // 2
            if evaluate(mid)[p][col] >= target:
                hi = mid
            else:
                lo = mid
        above[p] = hi
    return above, n


#: The procedures the route can choose, per family, in the order the table lists them.
_CANDIDATES = {"all-pairs": ("tukey-kramer", "games-howell", "dunnett-t3", "permutation-maxt",
                             "bootstrap-hall"),
               "vs-reference": ("dunnett", "welch-dunnett", "permutation-maxt",
                                "bootstrap-hall")}


def _pilot(data, response, group, sd, scale, allocation, shape, read_options, block=None):
    """What a pilot gives: labels, SDs, means, proportions, errors (on the plan's scale)."""
    import os
    from ..api import load_data
    intake = load_data(data, response, group, **read_options)
    layout = intake.layout
    if layout.has_censoring:
        raise FamwiseInputError(
            f"the pilot data hold {int(layout.censored.sum())} non-detect(s); planning "
            f"simulates procedures on means from the pilot's spreads, which non-detects "
            f"do not give: pass nondetects='drop' (--nondetects drop) to plan from the "
            f"measured values, and say so")
    if scale.name is not None:
        if layout.design is not None:
            raise FamwiseInputError("transform='log' is not yet available with blocks or "
                                    "covariates; take the log of the column first")
        from ..model.scale import log_layout
        layout = log_layout(layout, scale)       # refuses zero or negative rows, naming them
    st = layout.stats
    if np.any(st.n < 2):
        small = layout.labels[int(np.argmin(st.n))]
        raise FamwiseInputError(f"group {small!r} of the pilot has fewer than 2 values, so "
                                f"its SD is unknown; give sd=[...] instead")
    k, labels = layout.k, layout.labels
    if block is not None:
        from .blocked import rcbd_pilot
        blocked = rcbd_pilot(layout, block)
    else:
        blocked = blocked_pilot(layout)
    pilot_sd = blocked["sd"] if blocked else [float(v) for v in st.sd]
    sds = check_sd(sd) if sd is not None else pilot_sd
    if len(sds) != k:
        raise FamwiseInputError(f"sd gives {len(sds)} SDs but the pilot has {k} groups "
                                f"({', '.join(labels)})")
    weights = st.n / st.n.min() if allocation == "pilot" else np.ones(k)
    shape = shape or "observed"
    if shape not in ("normal", "observed"):
        raise FamwiseInputError(f"shape must be 'normal' or 'observed'; got {shape!r}")
    from ..diagnostics.shape import standardised_residuals
    if shape != "observed":
        errors = None
    elif blocked:
        errors = blocked["errors"]
    else:
        errors = standardised_residuals(layout)
    sha = None
    if isinstance(data, (str, os.PathLike)):
        from ..intake.reader import file_sha256
        sha = file_sha256(data)
    return dict(k=k, labels=tuple(labels), sds=sds, pilot_means=st.mean, weights=weights,
                errors=errors, shape=shape, source=intake.ledger.source, sha=sha,
                pilot_n=[int(v) for v in st.n], blocked=blocked, ledger=intake.ledger)


def plan(data=None, response=None, group=None, *, sd=None, n=None, margin,
         placement="one-pair", target_power=0.8, procedures=None, replicates=2000,
         seed=None, n_jobs=1, backend="threads", alpha=0.05, shape=None, goal="any",
         allocation="equal", max_n=500, scheduler=None, progress=None, policy=None,
         family="all-pairs", reference=None, transform=None, log_offset=None,
         block=None, **read_options) -> Plan:
    """Estimate power and the group size that reaches a target, by simulation.

    Parameters
    ----------
    data : path-like, DataFrame, Intake or Layout, optional
        A pilot: its group SDs, residual shape and (for ``placement=
        "observed"``) means are what is assumed.  Omit it and give ``sd``.
    response, group : str, optional
        The pilot's value and group columns (long layout).
    sd : list of float, optional
        Group SDs when no pilot is given (k = its length; the groups are
        then g1, g2, ...); with a pilot it replaces the pilot's SDs.  With
        ``transform="log"`` these are SDs of the natural log of the values
        (for lognormal data with coefficient of variation c, the SD of the
        log is sqrt(log(1 + c**2)); about c itself when c is small).
    n : int or list of int, optional
        Group sizes to evaluate; omitted: search the smallest size that
        reaches ``target_power`` for each procedure (up to ``max_n``).
    margin : float
        The smallest difference that matters, in the response's unit (> 0).
        With ``transform="log"``: the smallest ratio of geometric means that
        matters, r > 0 and r != 1, simulated as the difference log r on the
        log scale; r > 1 puts the shifted group(s) above (1.5: a 50% higher
        geometric mean), r < 1 the same distance below (0.8: 20% lower, as
        far from 1 on the log scale as 1.25).  The direction matters only
        for skewed errors (``shape="observed"``).
    placement : {"one-pair", "one-vs-rest", "observed"}, default="one-pair"
        All pairs: "one-pair": the first two groups differ by the margin, the
        others sit at their midpoint; "one-vs-rest": the first group is
        shifted by the margin from the rest.  Against a reference: "one-pair":
        the first group other than the reference differs from it by the
        margin, the others sit at the reference's mean; "one-vs-rest": every
        other group differs from the reference by the margin.  "observed":
        the pilot's means (optimistic: a pilot's differences are estimates,
        not facts).
    target_power : float, default=0.8
    procedures : list of str, optional
        Procedure identifiers and ``"auto"`` (the pipeline); default: the
        procedures the route's rules can choose at this design (before its
        power step, so the table shows what each rule's choice costs), and
        ``"auto"``.
    replicates : int, default=2000
        Simulated data sets per size, for the alternative and for the null.
    seed : int, optional
        Drawn and recorded when not given; results never depend on ``n_jobs``
        or ``backend``, and a size gives the same row in a search and in a list.
    n_jobs, backend, scheduler
        Parallel chunks of replicates (joblib; ``"dask"`` on a scheduler).
    alpha : float, default=0.05
        Familywise level of every procedure.
    shape : {"normal", "observed"}, optional
        Errors normal, or resampled from the pilot's standardised residuals
        (default: "observed" with a pilot, "normal" without).
    goal : {"any", "each", "all"}, default="any"
        Which power the target applies to.
    allocation : {"equal", "pilot"}, default="equal"
        Equal groups, or the pilot's proportions (smallest group at n).
    max_n : int, default=500
        The largest size per group the search tries.
    progress : bool, optional
        A progress bar on a terminal (None: only there, outside CI).
    policy : Policy, dict or path, optional
        Routing thresholds, as for :func:`famwise.compare`.
    family : {"all-pairs", "vs-reference"}, default="all-pairs"
        The comparisons, as for :func:`famwise.compare`: all pairs, or each
        group against ``reference`` (two-sided).  ``power_each``,
        ``power_any``, ``power_all`` and ``fwer`` count the family's
        comparisons only.
    reference : str or int, optional
        The reference group for ``family="vs-reference"``: its label, or its
        index (0 for the first group).
    transform : {None, "log"}, default=None
        ``"log"``: plan the analysis ``compare(..., transform="log")`` runs:
        the pilot's SDs, means and residual shape are taken from the natural
        log of its values (zero or negative values are refused, naming their
        rows, unless ``log_offset`` lifts them), the data sets are simulated
        on the log scale and checked, routed and tested there, and the
        margin is a ratio.
    log_offset : float, optional
        A non-negative constant added to the pilot's values before the log
        (recorded; as for :func:`famwise.compare`).
    block : str, optional
        The pilot's block column: plan a randomised complete block design
        (one plot of every group in each block, so ``n`` and the table's
        ``n_per_group`` count blocks), analysed under group + block with
        (k - 1)(b - 1) error df, from each group's residual SD under the
        pilot's block model (missing plots and several plots per cell are
        fine; see :mod:`famwise.planning.blocked`).  The procedures are the
        model route's (default: its candidates and ``"auto"``).
    **read_options
        Passed to :func:`famwise.intake.read`.

    Returns
    -------
    Plan
        ``.table``, ``.recommended``, ``.summary()``, ``.to_dict()``,
        ``.to_json()``, ``.to_html(path)``, ``.save(folder)``.
    """
    from ..api import _policy, _seed
    from ..core.families import build_family
    from ..resample.engine import BACKENDS, Progress, want_progress
    scale = check_log_options(transform, log_offset, data is not None)
    margin, shift = check_margin(margin, scale.name)
    target = check_target(target_power)
    alpha = check_alpha(alpha)
    sizes = check_n(n)
    if placement not in PLACEMENTS:
        raise FamwiseInputError(f"placement must be one of {', '.join(PLACEMENTS)}; "
                                f"got {placement!r}")
    if goal not in GOALS:
        raise FamwiseInputError(f"goal must be one of {', '.join(GOALS)}; got {goal!r}")
    if allocation not in ("equal", "pilot"):
        raise FamwiseInputError(f"allocation must be 'equal' or 'pilot'; got {allocation!r}")
    if backend not in BACKENDS:
        raise FamwiseInputError(f"backend must be one of {', '.join(BACKENDS)}; "
                                f"got {backend!r}")
    if isinstance(replicates, bool) or not isinstance(replicates, numbers.Integral) \
            or replicates < 200:
        raise FamwiseInputError(f"replicates must be a whole number of at least 200; "
                                f"got {replicates!r}")
    if isinstance(max_n, bool) or not isinstance(max_n, numbers.Integral) or max_n < 2:
        raise FamwiseInputError(f"max_n must be a whole number of at least 2; got {max_n!r}")
    if block is not None:
        if data is None:
            raise FamwiseInputError(f"block={block!r} names a column of a pilot; give "
                                    f"data=FILE with response, group and that column")
        if not isinstance(block, str):
            raise FamwiseInputError(f"plan takes one block column (block='COL'); got "
                                    f"{block!r}")
        if allocation != "equal":
            raise FamwiseInputError("allocation='pilot' does not apply with block=: a complete "
                                    "block design has one plot of every group in each block")
        read_options = dict(read_options, block=block)
    seed = _seed(seed)
    pol = _policy(policy)
    if data is None:
        if sd is None:
            raise FamwiseInputError("plan needs a pilot (data=FILE with response and group) "
                                    "or the group SDs (sd=[...], one per group)")
        if placement == "observed":
            raise FamwiseInputError("placement='observed' uses a pilot's means; give data=FILE "
                                    "or choose 'one-pair' or 'one-vs-rest'")
        if allocation == "pilot":
            raise FamwiseInputError("allocation='pilot' needs a pilot (data=FILE)")
        sds = check_sd(sd)
        k = len(sds)
        shape = shape or "normal"
        if shape != "normal":
            raise FamwiseInputError("shape='observed' resamples a pilot's residuals; give "
                                    "data=FILE or use shape='normal'")
        pilot = dict(k=k, labels=tuple(f"g{i + 1}" for i in range(k)), sds=sds,
                     pilot_means=None, weights=np.ones(k), errors=None, shape=shape,
                     source=None, sha=None, pilot_n=None, blocked=None, ledger=None)
    else:
        pilot = _pilot(data, response, group, sd, scale, allocation, shape, read_options, block)
    k, labels, sds = pilot["k"], pilot["labels"], pilot["sds"]
    if k < 2:
        raise FamwiseInputError(f"plan needs at least 2 groups; got {k}")
    kind, ref_label = check_family(family, reference, labels)
    fam = build_family(labels, kind, ref_label)
    rcbd = None
    if block is not None:
        from .blocked import RcbdEvaluator, rcbd_procedures
        procs = rcbd_procedures(procedures, kind)
        rcbd = RcbdEvaluator(labels, pilot["blocked"]["block"], fam, procs, alpha, pol)
    else:
        procs = check_procedures(procedures, kind)
    mu = true_means(placement, k, shift, pilot["pilot_means"], fam.reference)
    weights, blocked = pilot["weights"], pilot["blocked"]
    start = first_size(shift, sds, alpha, fam.m)
    if procs is None:
        from ..diagnostics.simulate import design_layout, route_table
        start_n = sizes[0] if sizes else start
        rules = dataclasses.replace(pol, power_route=False)
        table = route_table(fam, design_layout(group_sizes(start_n, weights), sds), rules, alpha)
        # the rules' choices, before the power step (which "auto" runs, so the
        # table shows what a conservative rule would cost); the robust route's,
        # taken only on data sets with a gross value, are simulated within "auto"
        chosen = list(dict.fromkeys(v for key, v in table.items() if isinstance(key[0], bool)))
        order = _CANDIDATES[kind]
        procs = [p for p in order if p in chosen] + [p for p in chosen if p not in order] \
            + ["auto"]
    root = np.random.SeedSequence(seed)
    n_eval = len(sizes) if sizes else 12
    estimate = 2.5e-7 * replicates * k * (sizes[-1] if sizes else 20) * len(procs) * n_eval
    bar = Progress(2 * replicates * len(sizes) if sizes else None,
                   want_progress(progress, estimate), unit="data set", desc="planning")
    evaluate = _Evaluator(k=k, sd=np.asarray(sds), mu=mu, errors=pilot["errors"],
                          weights=weights, family=fam, procedures=procs, alpha=alpha,
                          policy=pol, replicates=int(replicates), root=root, n_jobs=n_jobs,
                          backend=backend, scheduler=scheduler, bar=bar, rcbd=rcbd)
    notes = []
    try:
        if sizes:
            for s in sizes:
                evaluate(s)
            col = f"power_{goal}"
            recommended = {p: next((s for s in sizes if evaluate(s)[p][col] >= target), None)
                           for p in procs}
        else:
            recommended, last = _search(evaluate, procs, goal, target,
                                        min(int(max_n), start), int(max_n))
            if all(v is None for v in recommended.values()):
                best = max(evaluate(last).values(), key=lambda r: r[f"power_{goal}"])
                raise FamwiseInputError(
                    f"target power {target:g} is not reached by {last} per group (the largest "
                    f"size tried, max_n={int(max_n)}): the largest power_{goal} there is "
                    f"{best[f'power_{goal}']:.3f} "
                    f"({best['procedure']}); plan for a larger margin or a lower target, or "
                    f"raise max_n")
            for p, v in recommended.items():
                if v is None:
                    notes.append(f"{p} does not reach power {target:g} by {last} per group "
                                 f"(the search's cap).")
    finally:
        bar.close()
    rows = [row for s in sorted(evaluate.rows) for row in evaluate.rows[s]]
    scale_name = "ratio" if scale.name == "log" else "difference"
    table = pd.DataFrame(rows, columns=list(COLUMNS))
    table.attrs.update(margin=margin, margin_scale=scale_name, transform=scale.name,
                       family=kind, reference=ref_label,
                       unit="blocks" if rcbd is not None else "observations")
    true_pairs = [name for name, t in zip(fam.names, evaluate.true) if t]
    settings = {
        "source": pilot["source"], "sha256": pilot["sha"], "response": response,
        "group": group, "labels": list(labels), "k": k, "sd": [float(v) for v in sds],
        "true_means": [float(v) for v in mu], "margin": margin, "margin_scale": scale_name,
        "transform": scale.name, "log_offset": scale.offset if scale.name else None,
        "log_margin": shift if scale.name else None, "placement": placement,
        "true_differences": true_pairs, "shape": pilot["shape"], "alpha": alpha,
        "target_power": target, "goal": goal, "allocation": allocation,
        "replicates": int(replicates), "seed": seed, "procedures": procs,
        "candidates": sizes, "max_n": int(max_n), "pilot_n": pilot["pilot_n"],
        "family": kind, "reference": ref_label, "comparisons": list(fam.names),
        "m": fam.m, "policy": pol.to_dict(),
        "pilot_ledger": pilot["ledger"].to_dict() if pilot["ledger"] else None,
        "pilot_model": blocked["model"] if blocked else None,
        "blocks": ({"column": blocked["block"], "design": "randomised complete blocks",
                    "plots_per_cell": 1, "error_df": "(k - 1)(b - 1)"}
                   if rcbd is not None else None),
    }
    if pilot["ledger"] is not None:
        notes.append(_pilot_note(pilot["ledger"]))
    if blocked:
        notes.append(blocked["note"])
    if scale.name:
        notes.append(_log_note(scale, margin, shift, data is not None))
    return Plan(table, recommended, settings, dict(evaluate.routes),
                {s: list(v) for s, v in evaluate.sizes.items()}, dict(evaluate.methods),
                tuple(notes))


def _pilot_note(ledger) -> str:
    """One sentence accounting for the pilot's rows (what was read, used, set aside)."""
    from ..intake.ledger import REASONS
    unit = ledger.unit + "s"
    text = f"The pilot ({ledger.source}): {ledger.read} {unit} read, {ledger.used} used"
    if ledger.dropped:
        parts = []
        for reason, count in ledger.counts().items():
            rows = [str(d.row) for d in ledger.dropped if d.reason == reason]
            more = f" and {len(rows) - 10} more" if len(rows) > 10 else ""
            parts.append(f"{count} {REASONS[reason]} (row{'s' if count > 1 else ''} "
                         f"{', '.join(rows[:10])}{more})")
        text += f", {len(ledger.dropped)} set aside: " + "; ".join(parts)
    return text + "."


def _log_note(scale, margin, shift, pilot: bool) -> str:
    where = ("the pilot's SDs, means and residual shape are those of "
             f"log(x{f' + {scale.offset:g}' if scale.offset else ''})" if pilot else
             "the SDs given are SDs of the natural log of the values")
    way = "higher" if margin > 1 else "lower"
    pct = abs(margin - 1) * 100
    return (f"On the log scale: {where}; the margin, a ratio of {margin:g} ({pct:.3g}% {way} "
            f"geometric mean), is a difference of {shift:.4g} in the natural log; every data "
            f"set is checked, routed and tested on the logs, as compare(..., "
            f"transform='log') does.")

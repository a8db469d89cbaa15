"""Planning the next trial: power and group sizes by simulation at the user's design.

:func:`plan` answers "how many plots (or samples) per group next time, so
that a difference that matters is found by a familywise procedure that holds
its level on data like mine?".  It simulates the design through the same
checks, route and procedures that :func:`famwise.compare` runs (vectorised
over replicates, :mod:`famwise.diagnostics.simulate`), so the power of the
automatic pipeline (``"auto"``) is the power of what ``compare`` would do.

For each candidate size and procedure, on ``replicates`` data sets drawn
with the alternative's true means and the assumed SDs and error shape:

* ``power_each``: the mean, over the true differences (pairs whose true
  means differ), of the probability of declaring that pair different;
* ``power_any``: the probability of declaring at least one true difference;
* ``power_all``: the probability of declaring every true difference;
* ``fwer``: the familywise error rate on data sets drawn at the complete
  null (all means equal) with the same sizes, spreads and shape;
* ``mc_se``: the largest binomial Monte Carlo standard error of the row's
  four estimates, sqrt(p (1 - p) / replicates).

Resampling procedures are simulated by the warp-speed method (Giacomini,
Politis & White 2013); see :mod:`famwise.diagnostics.stacked_procedures`.
"""

from __future__ import annotations

import math
import numbers
from dataclasses import dataclass, field

import numpy as np
import pandas as pd

from ..core.errors import FamwiseInputError
from ..core.validate import check_alpha

__all__ = ["plan", "Plan", "PLACEMENTS", "GOALS", "SCHEMA"]

PLACEMENTS = ("one-pair", "one-vs-rest", "observed")
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
        """Write ``power.csv``, ``power.json``, ``power.txt`` and ``power.html``."""
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


# --- validation -------------------------------------------------------------------

def _number(value, name, fix) -> float:
    if isinstance(value, bool) or not isinstance(value, numbers.Real) or not math.isfinite(value):
        raise FamwiseInputError(f"{name} must be a number; got {value!r} ({fix})")
    return float(value)


def _check_margin(margin) -> float:
    value = _number(margin, "margin", "the smallest difference that matters, in the "
                                      "response's unit")
    if value <= 0:
        raise FamwiseInputError(
            f"margin must be positive (the smallest difference that matters, in the "
            f"response's unit); got {margin!r}")
    return value


def _check_target(target) -> float:
    value = _number(target, "target_power", "e.g. 0.8")
    if not 0.0 < value < 1.0:
        raise FamwiseInputError(
            f"target_power must lie strictly between 0 and 1 (e.g. 0.8); got {target!r}")
    return value


def _check_n(n) -> list[int] | None:
    if n is None:
        return None
    values = [n] if isinstance(n, numbers.Integral) and not isinstance(n, bool) else n
    try:
        values = list(values)
    except TypeError:
        raise FamwiseInputError(f"n must be a whole number or a list of them; got {n!r}") \
            from None
    if not values:
        raise FamwiseInputError("n must list at least one group size; got an empty list")
    out = []
    for v in values:
        if isinstance(v, bool) or not isinstance(v, numbers.Integral):
            raise FamwiseInputError(f"n must hold whole numbers of observations per group; "
                                    f"got {v!r}")
        if v < 2:
            raise FamwiseInputError(f"n must be at least 2 per group (a group needs two "
                                    f"values for its spread); got {v}")
        out.append(int(v))
    return sorted(set(out))


def _check_sd(sd) -> list[float]:
    try:
        values = [float(v) for v in sd]
    except (TypeError, ValueError):
        raise FamwiseInputError(f"sd must be a list of group SDs, e.g. [1, 1, 2]; got {sd!r}") \
            from None
    if len(values) < 2:
        raise FamwiseInputError(f"sd must give one SD per group for at least 2 groups; "
                                f"got {sd!r}")
    for v in values:
        if not math.isfinite(v) or v <= 0:
            raise FamwiseInputError(f"every group SD must be a positive number; got {v!r} "
                                    f"in sd={list(sd)!r}")
    return values


def _check_procedures(procedures) -> list[str] | None:
    if procedures is None:
        return None
    from ..procedures.catalogue import CATALOGUE, check_procedure
    if isinstance(procedures, str):
        procedures = [procedures]
    out = []
    for p in procedures:
        if p != "auto":
            info = check_procedure(p)
            if "all-pairs" not in info.families:
                raise FamwiseInputError(
                    f"procedure {p!r} does not compare all pairs, which plan simulates; "
                    f"choose one of: {', '.join(n for n, i in CATALOGUE.items() if 'all-pairs' in i.families)}")
        if p not in out:
            out.append(p)
    return out


# --- the scenario -------------------------------------------------------------------

def _means(placement, k, margin, pilot_means):
    mu = np.zeros(k)
    if placement == "one-pair":
        mu[0], mu[1] = margin / 2, -margin / 2
    elif placement == "one-vs-rest":
        mu[0] = margin
    else:
        mu = np.asarray(pilot_means, dtype=float) - float(np.mean(pilot_means))
    return mu


def _sizes(n: int, weights) -> tuple:
    """Group sizes for ``n`` per group: equal, or the pilot's proportions with
    the smallest group at ``n``."""
    return tuple(max(2, int(round(n * w))) for w in weights)


def _blocked_pilot(layout) -> dict | None:
    """SDs and error shape of a pilot with blocks or covariates, from the model.

    The block and covariate effects are removed by the additive model
    (:func:`famwise.model.fit_model`); each group's SD is the root mean
    square of its residuals, rescaled so the groups pool to the model's
    residual mean square, and the errors to resample are the residuals over
    their group's SD.  The plan then simulates comparisons at that residual
    spread as a one-way design (df N - k; a complete block design has
    (n - 1)(k - 1), so the plan is slightly optimistic when n is small).
    """
    design = getattr(layout, "design", None)
    if design is None or design.is_empty:
        return None
    from ..model.fit import fit_model
    fit = fit_model(layout)
    res = fit.residuals
    n = np.bincount(layout.codes, minlength=layout.k).astype(float)
    ss = np.bincount(layout.codes, weights=res * res, minlength=layout.k)
    raw = ss / n
    scale = fit.mse / (float(np.sum(n * raw)) / float(np.sum(n)))
    var = raw * scale
    if np.any(var <= 0):
        raise FamwiseInputError("a group of the pilot has no residual spread after the "
                                "blocks are removed; give sd=[...] instead")
    sd = np.sqrt(var)
    z = res / sd[layout.codes]
    z = (z - z.mean()) / z.std()
    terms = [t.name for t in fit.terms[1:]]
    return {"sd": [float(v) for v in sd], "errors": z,
            "model": {"terms": terms, "residual_df": int(fit.df), "mse": float(fit.mse)},
            "note": (f"The pilot's {', '.join(terms)} effects were removed by the additive "
                     f"model; the plan simulates the comparisons at the residual spread "
                     f"(mean square {fit.mse:.4g} on {fit.df} df) as a one-way design, "
                     f"which is slightly optimistic for a small blocked trial (a complete "
                     f"block design has (n - 1)(k - 1) error df, not N - k).")}


def _summaries(rejects: np.ndarray, true: np.ndarray) -> tuple[float, float, float]:
    hit = rejects[:, true]
    return float(hit.mean()), float(hit.any(axis=1).mean()), float(hit.all(axis=1).mean())


def _se(p: float, r: int) -> float:
    return math.sqrt(max(p * (1 - p), 0.0) / r)


class _Evaluator:
    """Evaluates every procedure at one size per group, with its own seeds."""

    def __init__(self, *, k, sd, mu, errors, weights, family, procedures, alpha, policy,
                 replicates, root, n_jobs, backend, scheduler, bar):
        self.__dict__.update(k=k, sd=sd, mu=mu, errors=errors, weights=weights,
                             family=family, procedures=procedures, alpha=alpha, policy=policy,
                             replicates=replicates, root=root, n_jobs=n_jobs, backend=backend,
                             scheduler=scheduler, bar=bar)
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
        sizes = _sizes(n, self.weights)
        table = route_table(self.family, design_layout(sizes, self.sd), self.policy, self.alpha)
        common = dict(replicates=self.replicates, alpha=self.alpha, policy=self.policy,
                      table=table, n_jobs=self.n_jobs, backend=self.backend,
                      scheduler=self.scheduler, on_chunk=self.bar.update)
        key = chunk_seed(self.root, int(n))
        alt = simulate(Scenario(sizes, tuple(self.mu), tuple(self.sd), self.errors),
                       self.family, self.procedures, seed=chunk_seed(key, 0), **common)
        null = simulate(Scenario(sizes, (0.0,) * self.k, tuple(self.sd), self.errors),
                        self.family, self.procedures, seed=chunk_seed(key, 1), **common)
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


def _start(margin, sd, alpha, k):
    """A first size: the normal-theory n for a two-sided t at the Bonferroni level
    over all pairs (common practice, no source), halved and at least 3."""
    from scipy import stats
    m = k * (k - 1) / 2
    z = stats.norm.ppf(1 - alpha / (2 * m)) + stats.norm.ppf(0.8)
    n = 2 * (z * float(np.max(sd)) / margin) ** 2
    return int(max(3, min(64, math.floor(n / 2))))


def plan(data=None, response=None, group=None, *, sd=None, n=None, margin,
         placement="one-pair", target_power=0.8, procedures=None, replicates=2000,
         seed=None, n_jobs=1, backend="threads", alpha=0.05, shape=None, goal="any",
         allocation="equal", max_n=500, scheduler=None, progress=None, policy=None,
         **read_options) -> Plan:
    """Estimate power and the group size that reaches a target, by simulation.

    Parameters
    ----------
    data : path-like, DataFrame, Intake or Layout, optional
        A pilot: its group SDs, residual shape and (for ``placement=
        "observed"``) means are what is assumed.  Omit it and give ``sd``.
    response, group : str, optional
        The pilot's value and group columns (long layout).
    sd : list of float, optional
        Group SDs when no pilot is given (k = its length); with a pilot it
        replaces the pilot's SDs.
    n : int or list of int, optional
        Group sizes to evaluate; omitted: search the smallest size that
        reaches ``target_power`` for each procedure (up to ``max_n``).
    margin : float
        The smallest difference that matters, in the response's unit.
    placement : {"one-pair", "one-vs-rest", "observed"}, default="one-pair"
        "one-pair": the first two groups differ by the margin, the others sit
        at their midpoint; "one-vs-rest": the first group is shifted by the
        margin; "observed": the pilot's means (optimistic: a pilot's
        differences are estimates, not facts).
    target_power : float, default=0.8
    procedures : list of str, optional
        Procedure identifiers and ``"auto"`` (the pipeline); default: the
        procedures the route can choose at this design, and ``"auto"``.
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
    **read_options
        Passed to :func:`famwise.intake.read`.

    Returns
    -------
    Plan
        ``.table``, ``.recommended``, ``.summary()``, ``.to_dict()``,
        ``.to_json()``, ``.to_html(path)``, ``.save(folder)``.
    """
    from ..api import _policy, _seed, load_data
    from ..core.families import all_pairs
    from ..resample.engine import BACKENDS, Progress, want_progress
    margin = _check_margin(margin)
    target = _check_target(target_power)
    alpha = check_alpha(alpha)
    sizes = _check_n(n)
    procs = _check_procedures(procedures)
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
    seed = _seed(seed)
    pol = _policy(policy)
    source, sha = None, None
    if data is None:
        if sd is None:
            raise FamwiseInputError("plan needs a pilot (data=FILE with response and group) "
                                    "or the group SDs (sd=[...], one per group)")
        if placement == "observed":
            raise FamwiseInputError("placement='observed' uses a pilot's means; give data=FILE "
                                    "or choose 'one-pair' or 'one-vs-rest'")
        if allocation == "pilot":
            raise FamwiseInputError("allocation='pilot' needs a pilot (data=FILE)")
        sds = _check_sd(sd)
        k = len(sds)
        labels = tuple(f"g{i + 1}" for i in range(k))
        pilot_means, weights, errors = None, np.ones(k), None
        shape = shape or "normal"
        if shape != "normal":
            raise FamwiseInputError("shape='observed' resamples a pilot's residuals; give "
                                    "data=FILE or use shape='normal'")
    else:
        import os
        intake = load_data(data, response, group, **read_options)
        layout = intake.layout
        if layout.has_censoring:
            raise FamwiseInputError(
                f"the pilot data hold {int(layout.censored.sum())} non-detect(s); planning "
                f"simulates procedures on means from the pilot's spreads, which non-detects "
                f"do not give: pass nondetects='drop' (--nondetects drop) to plan from the "
                f"measured values, and say so")
        st = layout.stats
        if np.any(st.n < 2):
            small = layout.labels[int(np.argmin(st.n))]
            raise FamwiseInputError(f"group {small!r} of the pilot has fewer than 2 values, so "
                                    f"its SD is unknown; give sd=[...] instead")
        k, labels = layout.k, layout.labels
        blocked = _blocked_pilot(layout)
        pilot_sd = blocked["sd"] if blocked else [float(v) for v in st.sd]
        sds = _check_sd(sd) if sd is not None else pilot_sd
        if len(sds) != k:
            raise FamwiseInputError(f"sd gives {len(sds)} SDs but the pilot has {k} groups "
                                    f"({', '.join(labels)})")
        pilot_means = st.mean
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
        source = intake.ledger.source
        if isinstance(data, (str, os.PathLike)):
            from ..intake.reader import file_sha256
            sha = file_sha256(data)
    if k < 2:
        raise FamwiseInputError(f"plan needs at least 2 groups; got {k}")
    if placement == "one-pair" and k < 2 or placement == "one-vs-rest" and k < 2:
        raise FamwiseInputError("placement needs at least 2 groups")
    family = all_pairs(labels)
    mu = _means(placement, k, margin, pilot_means)
    if procs is None:
        from ..diagnostics.simulate import design_layout, route_table
        start_n = sizes[0] if sizes else _start(margin, sds, alpha, k)
        table = route_table(family, design_layout(_sizes(start_n, weights), sds), pol, alpha)
        candidates = ["tukey-kramer", "games-howell", "dunnett-t3", "permutation-maxt",
                      "bootstrap-hall"]
        chosen = set(table.values())
        procs = [p for p in candidates if p in chosen] + ["auto"]
    root = np.random.SeedSequence(seed)
    n_eval = len(sizes) if sizes else 12
    estimate = 2.5e-7 * replicates * k * (sizes[-1] if sizes else 20) * len(procs) * n_eval
    bar = Progress(2 * replicates * len(sizes) if sizes else None,
                   want_progress(progress, estimate), unit="data set", desc="planning")
    evaluate = _Evaluator(k=k, sd=np.asarray(sds), mu=mu, errors=errors, weights=weights,
                          family=family, procedures=procs, alpha=alpha, policy=pol,
                          replicates=int(replicates), root=root, n_jobs=n_jobs,
                          backend=backend, scheduler=scheduler, bar=bar)
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
                                        min(int(max_n), _start(margin, sds, alpha, k)),
                                        int(max_n))
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
    table = pd.DataFrame(rows, columns=list(COLUMNS))
    true_pairs = [name for name, t in zip(family.names, evaluate.true) if t]
    settings = {
        "source": source, "sha256": sha, "response": response, "group": group,
        "labels": list(labels), "k": k, "sd": [float(v) for v in sds],
        "true_means": [float(v) for v in mu], "margin": margin, "placement": placement,
        "true_differences": true_pairs, "shape": shape, "alpha": alpha,
        "target_power": target, "goal": goal, "allocation": allocation,
        "replicates": int(replicates), "seed": seed, "procedures": procs,
        "candidates": sizes, "max_n": int(max_n),
        "pilot_n": None if data is None else [int(v) for v in layout.stats.n],
        "family": "all-pairs", "m": family.m, "policy": pol.to_dict(),
        "pilot_model": None if data is None or not blocked else blocked["model"],
    }
    if data is not None and blocked:
        notes.append(blocked["note"])
    return Plan(table, recommended, settings, dict(evaluate.routes),
                {s: list(v) for s, v in evaluate.sizes.items()}, dict(evaluate.methods),
                tuple(notes))

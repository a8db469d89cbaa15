"""The simulation engine: many data sets of one design, checked, routed and tested.

Calibration (the familywise error under the complete null) and planning
(power under an alternative) ask the same question of many simulated data
sets: which comparisons would each procedure, and the automatic pipeline,
declare different?  This module answers it on stacked replicates:

1. draw R data sets of the design (group sizes, true means, SDs; normal
   errors or errors resampled from a pilot's standardised residuals) as one
   array, in chunks of fixed size;
2. run every check on all rows at once (:mod:`famwise.diagnostics.stacked`);
3. route each row: with the sizes, the family and the policy fixed, the
   route's choice depends on a replicate only through a few facts: "shape
   poor" and "spread unequal" for the rules, and before them whether the
   row holds non-detects (and whether their limits differ) or a gross value
   that stands apart (and whether its group can be trimmed)
   (:mod:`famwise.diagnostics.stacked_route`); :func:`route_table` asks
   :func:`famwise.diagnostics.route.choose` once for each of the four rule
   combinations (the quick Games–Howell calibration and the power step,
   when the policy asks for them, are evaluated there, once, at the
   design's own SDs and residuals) and the censored and robust routes once
   per key, and each row looks its procedure up;
4. run the procedures on all rows at once
   (:mod:`famwise.diagnostics.stacked_procedures`; resampling procedures by
   the warp-speed method; rank and censored-score procedures through
   :mod:`famwise.diagnostics.stacked_scores`), and give the pipeline each
   row's routed decisions.  A procedure that only the censored or robust
   route needs is computed in a chunk only when one of its rows takes it.

Chunk ``i`` draws from the ``i``-th child of the root ``SeedSequence`` (as
the resampling engine does), so results are identical for any ``n_jobs``
and backend; chunks run through :func:`famwise.resample.engine.run_tasks`
(threads, processes or dask).  The warp-speed critical values pool the
resamples of all chunks, so they are computed after the chunks return.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from ..core.families import Family
from ..core.layout import Layout
from .check import Check, Findings
from .policy import Policy
from .stacked import Blocks, stacked_checks
from .stacked_procedures import (Stack, closed_form_rejects, is_resampling, single_step_name,
                                 warp_rejects, warp_statistics)

__all__ = ["Scenario", "Simulation", "route_table", "design_layout", "draw", "simulate",
           "finish_simulation", "CHUNK"]

#: Replicates per chunk (fixed, so results never depend on n_jobs).
CHUNK = 500


@dataclass(frozen=True)
class Scenario:
    """What one simulated data set looks like (a scenario of the design).

    ``n``: group sizes; ``mean``, ``sd``: the true group means and SDs;
    ``errors``: ``None`` for normal errors, or a pool of standardised
    residuals (mean 0, SD 1) resampled with replacement.
    """

    n: tuple
    mean: tuple
    sd: tuple
    errors: np.ndarray | None = field(default=None, repr=False)

    @property
    def blocks(self) -> Blocks:
        return Blocks.of(self.n)


def draw(design: Scenario, replicates: int, rng) -> Stack:
    """Draw ``replicates`` data sets of ``design`` as a :class:`Stack` (a design
    with its own ``draw``, such as the censored-data scenario of
    :mod:`famwise.diagnostics.stacked_censored`, draws itself)."""
    if hasattr(design, "draw"):
        return design.draw(replicates, rng)
    blocks = design.blocks
    size = (int(replicates), blocks.total)
    if design.errors is None:
        e = rng.standard_normal(size)
    else:
        e = rng.choice(design.errors, size=size, replace=True)
    mean = np.asarray(design.mean, dtype=float)[blocks.codes]
    sd = np.asarray(design.sd, dtype=float)[blocks.codes]
    return Stack(mean + sd * e, blocks)


def design_layout(n, sd, mean=None, labels=None) -> Layout:
    """A layout whose groups have exactly the sizes ``n``, means and SDs ``sd``
    (what the route and the quick calibration read of a design)."""
    groups = []
    mean = np.zeros(len(n)) if mean is None else np.asarray(mean, dtype=float)
    for size, s, mu in zip(n, sd, mean):
        base = np.linspace(-1.0, 1.0, int(size))
        base = base / base.std(ddof=1) if size > 1 else base
        groups.append(mu + s * base)
    return Layout.from_groups(groups, labels)


def _synthetic_findings(layout: Layout, poor: bool, unequal: bool, policy: Policy) -> Findings:
    from .design import design_checks

    def c(name, bad):
        return Check(name, "stacked", None, None, "-", "violated" if bad else "ok",
                     f"{name} {'violated' if bad else 'ok'} in this replicate.")
    shape = tuple(c(n, poor and n == "normality")
                  for n in ("normality", "skewness", "kurtosis", "outliers"))
    spread = tuple(c(n, unequal and n == "brown-forsythe")
                   for n in ("brown-forsythe", "sd-ratio", "size-spread-pairing"))
    return Findings(shape, spread, design_checks(layout, policy))


def route_table(family: Family, layout: Layout, policy: Policy | None = None,
                alpha: float = 0.05, seed=0) -> dict:
    """Return ``{(shape_poor, spread_unequal): procedure}`` for ``layout``'s sizes.

    Each entry is :func:`famwise.diagnostics.route.choose` on findings with
    exactly that pair of facts and the design checks of ``layout``: with the
    sizes and the family fixed, nothing else the route reads varies between
    replicates.
    """
    from .route import choose
    from .stacked_route import robust_entries
    policy = policy or Policy()
    table = {(p, u): choose(_synthetic_findings(layout, p, u, policy), family, layout, policy,
                            "auto", alpha, seed=seed).procedure
             for p in (False, True) for u in (False, True)}
    # the censored and robust branches, taken before the rules (stacked_route)
    table.update(robust_entries(family, layout, policy))
    return table


@dataclass(frozen=True)
class Simulation:
    """What a simulation returns.

    ``rejects``: procedure -> bool array (R, m), the comparisons it declared
    different in each replicate (``"auto"`` is the automatic pipeline);
    ``routes``: the procedure the pipeline chose in each replicate (or
    ``None``); ``methods``: procedure -> how its decisions were computed.
    """

    replicates: int
    rejects: dict = field(repr=False)
    routes: np.ndarray | None = field(repr=False)
    methods: dict = field(repr=False)

    def route_counts(self) -> dict:
        if self.routes is None:
            return {}
        names, counts = np.unique(self.routes, return_counts=True)
        return {str(a): int(b) for a, b in zip(names, counts)}


@dataclass(frozen=True)
class _Task:
    design: Scenario
    family: Family
    closed: tuple
    warp: tuple
    alpha: float
    policy: Policy | None          # None: no pipeline
    options: dict | None = None    # the procedures' own options (same for every one)
    extra: tuple = ()              # (name, kind): rank and score procedures (stacked_scores)
    table: dict | None = None      # the route table (pipeline only)
    lazy: frozenset = frozenset()  # procedures only some route keys need: computed on demand


def _chunk(task: _Task, size: int, seed: np.random.SeedSequence) -> dict:
    from .stacked_route import route_keys
    from .stacked_scores import Skipped, chunk_part
    rng = np.random.default_rng(seed)
    stack = draw(task.design, size, rng)
    keys = None
    if task.policy is not None:
        found = stacked_checks(stack.x, stack.blocks, task.policy,
                               summaries=(stack.means, stack.vars))
        keys = route_keys(stack, found, task.policy, task.table)
    routed = set() if keys is None else {task.table[key] for key in set(keys)}
    use = [name for name in task.closed + task.warp
           if name not in task.lazy or name in routed]
    out = {"closed": {name: closed_form_rejects(name, task.family, stack, task.alpha,
                                                task.options)
                      for name in task.closed if name in use},
           "warp": {name: warp_statistics(name, task.family, stack, rng, task.options)
                    for name in task.warp if name in use},
           "extra": {name: (chunk_part(name, kind, task.family, stack, rng, task.alpha)
                            if name not in task.lazy or name in routed
                            else Skipped(size, task.family.m))
                     for name, kind in task.extra},
           "size": size}
    if keys is not None:
        out["keys"] = keys
    return out


def simulate(design: Scenario, family: Family, procedures, *, replicates: int,
             seed: np.random.SeedSequence, alpha: float = 0.05, pipeline: bool = False,
             policy: Policy | None = None, table: dict | None = None, n_jobs=1,
             backend: str = "threads", scheduler=None, on_chunk=None,
             options: dict | None = None) -> Simulation:
    """Simulate ``replicates`` data sets of ``design`` and record the decisions.

    Parameters
    ----------
    design : Scenario
    family : Family
    procedures : list of str
        Procedure identifiers (``"auto"`` may be among them: the pipeline).
    replicates : int
    seed : numpy.random.SeedSequence
        Root; chunk ``i`` draws from :func:`famwise.resample.engine.chunk_seed`
        (root, i).
    pipeline : bool, default=False
        Also check and route every replicate (implied by ``"auto"``).
    policy : Policy, optional
    table : dict, optional
        The route table (:func:`route_table`); built at the design's own
        sizes and SDs when omitted.
    n_jobs, backend, scheduler
        As for the resampling engine; results do not depend on them.
    on_chunk : callable, optional
        Called with each chunk's size (for a progress bar).
    options : dict, optional
        Procedure options (validated by the caller) applied to every named
        procedure: ``trim`` (``yuen-holm``) and ``statistic`` (``"welch"`` or
        ``"pooled"``, the resampling procedures).  Not with the pipeline.
    """
    from ..resample.engine import run_chunks
    policy = policy or Policy()
    names = [p for p in procedures if p != "auto"]
    pipeline = pipeline or "auto" in procedures
    if pipeline and table is None:
        table = route_table(family, design_layout(design.n, design.sd), policy, alpha)
    from .stacked_scores import finish, kind_of, method_text
    needed = list(dict.fromkeys(names + (list(table.values()) if pipeline else [])))
    # procedures only the censored or robust keys route to are computed in a
    # chunk only when one of its rows takes that route
    lazy = frozenset()
    if pipeline:
        rules = {v for k, v in table.items() if isinstance(k[0], bool)}
        lazy = frozenset(p for p in table.values() if p not in rules and p not in names)
    kinds = {p: kind_of(p, design.n, policy, options) for p in needed}
    extra = tuple((p, kinds[p]) for p in needed if kinds[p] is not None)
    own = [p for p in needed if kinds[p] is None]
    closed = tuple(p for p in own if not is_resampling(p))
    warp = tuple(dict.fromkeys(single_step_name(p) for p in own if is_resampling(p)))
    lazy_warp = frozenset(single_step_name(p) for p in lazy if p in own and is_resampling(p))
    if lazy_warp & {single_step_name(p) for p in own if p not in lazy and is_resampling(p)}:
        lazy_warp = frozenset()
    quiet = policy.replace(calibrate_candidates=False) if pipeline else None
    if options and pipeline:
        raise ValueError("procedure options apply to named procedures, not the pipeline")
    task = _Task(design, family, closed, warp, float(alpha), quiet, dict(options or {}),
                 extra, table if pipeline else None, lazy | lazy_warp)
    ordered = run_chunks(_chunk, task, replicates, CHUNK, seed, n_jobs, backend, scheduler,
                         on_chunk)
    rejects, methods = {}, {}
    m = family.m
    for name in closed:
        rejects[name] = np.concatenate([p["closed"].get(name, np.zeros((p["size"], m), bool))
                                        for p in ordered])
        methods[name] = "closed form per replicate"
    for name in warp:
        done = [p for p in ordered if name in p["warp"]]
        if not done:
            continue
        t_obs, t_star = (np.concatenate([p["warp"][name][j] for p in done]) for j in range(2))
        for full in needed:
            if kinds[full] is None and is_resampling(full) and single_step_name(full) == name:
                got = iter(np.split(warp_rejects(full, t_obs, t_star, alpha),
                                    np.cumsum([p["size"] for p in done])[:-1]))
                rejects[full] = np.concatenate([next(got) if name in p["warp"]
                                                else np.zeros((p["size"], m), bool)
                                                for p in ordered])
                methods[full] = "warp-speed (one resample per replicate)"
    for name, kind in extra:
        rejects[name] = finish(name, kind, [p["extra"][name] for p in ordered], alpha)
        methods[name] = method_text(name, kind)
    for name in needed:
        if name not in rejects:      # a procedure only the route needs, never routed to
            rejects[name] = np.zeros((replicates, m), dtype=bool)
            methods[name] = "not needed: no replicate took its route"
    routes = (np.array([table[key] for p in ordered for key in p["keys"]], dtype=object)
              if pipeline else None)
    return finish_simulation(rejects, methods, routes, procedures, replicates, family.m)


def finish_simulation(rejects: dict, methods: dict, routes, procedures, replicates: int,
                      m: int) -> Simulation:
    """The :class:`Simulation` of the procedures asked for, with the pipeline's
    rejections ("auto") taken row by row from the procedure each replicate was
    routed to (``routes``, None without the pipeline)."""
    if routes is not None:
        auto = np.zeros((replicates, m), dtype=bool)
        for proc in set(routes.tolist()):
            rows = routes == proc
            auto[rows] = rejects[proc][rows]
        rejects["auto"] = auto
        methods["auto"] = "checks and routing re-run on every replicate"
    return Simulation(int(replicates), {k: v for k, v in rejects.items()
                                        if k in procedures or k == "auto"},
                      routes, methods)

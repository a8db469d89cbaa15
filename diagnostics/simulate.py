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
   route's choice depends on a replicate only through two facts, "shape
   poor" and "spread unequal", so :func:`route_table` asks
   :func:`famwise.diagnostics.route.choose` once for each of the four
   combinations (the quick Games–Howell calibration and the power step,
   when the policy asks for them, are evaluated there, once, at the
   design's own SDs and residuals) and each row looks its procedure up;
4. run the procedures on all rows at once
   (:mod:`famwise.diagnostics.stacked_procedures`; resampling procedures by
   the warp-speed method), and give the pipeline each row's routed decisions.

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
           "CHUNK"]

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
    """Draw ``replicates`` data sets of ``design`` as a :class:`Stack`."""
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
    policy = policy or Policy()
    return {(p, u): choose(_synthetic_findings(layout, p, u, policy), family, layout, policy,
                           "auto", alpha, seed=seed).procedure
            for p in (False, True) for u in (False, True)}


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


def _chunk(task: _Task, size: int, seed: np.random.SeedSequence) -> dict:
    rng = np.random.default_rng(seed)
    stack = draw(task.design, size, rng)
    out = {"closed": {name: closed_form_rejects(name, task.family, stack, task.alpha,
                                                task.options)
                      for name in task.closed},
           "warp": {name: warp_statistics(name, task.family, stack, rng, task.options)
                    for name in task.warp}}
    if task.policy is not None:
        found = stacked_checks(stack.x, stack.blocks, task.policy,
                               summaries=(stack.means, stack.vars))
        out["facts"] = (found.shape_poor, found.spread_unequal)
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
    from ..resample.engine import chunk_seed, chunk_sizes, run_tasks
    policy = policy or Policy()
    names = [p for p in procedures if p != "auto"]
    pipeline = pipeline or "auto" in procedures
    if pipeline and table is None:
        table = route_table(family, design_layout(design.n, design.sd), policy, alpha)
    needed = list(dict.fromkeys(names + (list(table.values()) if pipeline else [])))
    closed = tuple(p for p in needed if not is_resampling(p))
    warp = tuple(dict.fromkeys(single_step_name(p) for p in needed if is_resampling(p)))
    quiet = policy.replace(calibrate_candidates=False) if pipeline else None
    if options and pipeline:
        raise ValueError("procedure options apply to named procedures, not the pipeline")
    task = _Task(design, family, closed, warp, float(alpha), quiet, dict(options or {}))
    sizes = chunk_sizes(replicates, CHUNK)
    parts: dict[int, dict] = {}

    def collect(index, result):
        parts[index] = result
        if on_chunk is not None:
            on_chunk(sizes[index])

    run_tasks(_chunk, [(i, (task, s, chunk_seed(seed, i))) for i, s in enumerate(sizes)],
              n_jobs, backend, scheduler, collect)
    ordered = [parts[i] for i in range(len(sizes))]
    rejects, methods = {}, {}
    for name in closed:
        rejects[name] = np.concatenate([p["closed"][name] for p in ordered])
        methods[name] = "closed form per replicate"
    stats = {name: tuple(np.concatenate([p["warp"][name][j] for p in ordered])
                         for j in range(2)) for name in warp}
    for name in needed:
        if is_resampling(name):
            t_obs, t_star = stats[single_step_name(name)]
            rejects[name] = warp_rejects(name, t_obs, t_star, alpha)
            methods[name] = "warp-speed (one resample per replicate)"
    routes = None
    if pipeline:
        poor = np.concatenate([p["facts"][0] for p in ordered])
        unequal = np.concatenate([p["facts"][1] for p in ordered])
        routes = np.array([table[(bool(a), bool(b))] for a, b in zip(poor, unequal)],
                          dtype=object)
        auto = np.zeros((replicates, family.m), dtype=bool)
        for proc in set(table.values()):
            rows = routes == proc
            auto[rows] = rejects[proc][rows]
        rejects["auto"] = auto
        methods["auto"] = "checks and routing re-run on every replicate"
    return Simulation(int(replicates), {k: v for k, v in rejects.items()
                                        if k in procedures or k == "auto"},
                      routes, methods)

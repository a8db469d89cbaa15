"""The simulation engine at a blocked or covariate design.

The model-design counterpart of :mod:`famwise.diagnostics.simulate`: many
data sets of one fixed design (groups, blocks, covariates, missing plots)
are drawn as the rows of one array, and the checks, the route and every
procedure that reads the model are evaluated on all of them at once
(:mod:`famwise.diagnostics.stacked_model`).

* Routing.  With the design and the family fixed, the model route
  (:func:`famwise.diagnostics.model_route.choose_model`) reads a replicate
  only through two facts, "shape poor" and "spread unequal", so
  :func:`model_route_table` asks the route once for
  each of the four combinations and each row looks its procedure up
  (``tests/test_stacked_model.py`` checks this against
  ``choose(run_checks(...))`` replicate by replicate).
* Closed forms.  A single-step procedure whose intervals are dual to its
  decisions rejects comparison j exactly when ``|t_j| > c_j``, and its
  critical values depend on the design only, so they are read once from
  the procedure run on one data set of the design: Tukey–Kramer, Dunnett,
  Bonferroni, Šidák, Scheffé, multivariate-t.  Holm and Benjamini–Hochberg
  adjust each row's p-values; Fisher's LSD gates each row's unadjusted
  tests by its group F.
* Resampling procedures by the warp-speed method (one within-block
  permutation or one wild-bootstrap draw per replicate,
  :func:`famwise.diagnostics.stacked_procedures.warp_rejects` for the
  single-step and step-down decisions).

Chunk ``i`` draws from the ``i``-th child of the root ``SeedSequence``, so
results are identical for any ``n_jobs`` and backend.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from ..core.families import Family
from ..core.layout import Layout
from ..procedures import adjust
from ..procedures.catalogue import CATALOGUE, run_procedure
from .policy import Policy
from .simulate import CHUNK, Simulation, finish_simulation
from .stacked_model import WARP_MODEL, ModelAlgebra, model_checks_stacked
from .stacked_procedures import single_step_name, warp_rejects

__all__ = ["ModelScenario", "simulate_model", "model_simulated", "model_route_table",
           "DUAL"]

#: Single-step procedures whose decisions are |t_j| > c_j with c_j fixed by the design.
DUAL = ("tukey-kramer", "dunnett", "bonferroni", "sidak", "scheffe", "multivariate-t")
_STEPWISE = ("holm", "bh", "lsd")


def model_route_table(family: Family, layout: Layout, policy: Policy | None = None,
                      alpha: float = 0.05) -> dict:
    """``{(shape_poor, spread_unequal): procedure}`` of the model route at ``layout``'s
    design: :func:`famwise.diagnostics.route.choose` on findings with exactly that
    pair of facts (the censored and robust branches of the one-way route are not
    taken with blocks or covariates)."""
    from .route import choose
    from .simulate import _synthetic_findings
    policy = policy or Policy()
    return {(p, u): choose(_synthetic_findings(layout, p, u, policy), family, layout, policy,
                           "auto", alpha).procedure
            for p in (False, True) for u in (False, True)}


def model_simulated(name: str) -> bool:
    """Whether the model simulation estimates procedure ``name``."""
    return name in DUAL or name in _STEPWISE or name in WARP_MODEL


@dataclass(frozen=True)
class ModelScenario:
    """Data sets of one model design: ``layout`` fixes the design (its values
    are not used), ``mean`` and ``sd`` the groups' true means and error SDs;
    ``errors`` ``None`` (normal) or a pool of unit-variance residuals."""

    layout: Layout
    mean: tuple
    sd: tuple
    errors: np.ndarray | None = field(default=None, repr=False)

    def draw(self, replicates: int, rng) -> np.ndarray:
        codes = self.layout.codes
        size = (int(replicates), self.layout.n_total)
        if self.errors is None:
            e = rng.standard_normal(size)
        else:
            e = rng.choice(self.errors, size=size, replace=True)
        mean = np.asarray(self.mean, dtype=float)[codes]
        return mean + e * np.asarray(self.sd, dtype=float)[codes]


def critical_values(names, layout: Layout, family: Family, alpha: float) -> dict:
    """Each dual procedure's ``c_j`` (half-width over standard error), read from
    the procedure run on ``layout`` (any data set of the design)."""
    out = {}
    for name in names:
        table = run_procedure(name, layout, family, alpha=alpha)
        out[name] = ((table["ci_upper"] - table["difference"])
                     / table["std_error"]).to_numpy(dtype=float)
    return out


def _closed(name, t, p_t, p_f, crit, alpha):
    if name in crit:
        return np.abs(t) > crit[name][None, :]
    if name == "holm":
        return adjust.holm(p_t, axis=1) <= alpha
    if name == "bh":
        return adjust.bh(p_t, axis=1) <= alpha
    if name == "lsd":
        return (p_t <= alpha) & (p_f <= alpha)[:, None]
    raise KeyError(name)


@dataclass(frozen=True)
class _Task:
    scenario: ModelScenario
    algebra: ModelAlgebra
    closed: tuple
    warp: tuple
    crit: dict
    alpha: float
    policy: Policy | None


def _chunk(task: _Task, size: int, seed) -> dict:
    from scipy import stats
    rng = np.random.default_rng(seed)
    alg = task.algebra
    y = task.scenario.draw(size, rng)
    e = alg.residuals(y)
    t, mse = alg.pooled_t(y, e)
    out = {"closed": {}, "warp": {}}
    if task.closed:
        p_t = 2.0 * stats.t.sf(np.abs(t), alg.df)
        p_f = alg.group_f(y, mse) if "lsd" in task.closed else None
        for name in task.closed:
            out["closed"][name] = _closed(name, t, p_t, p_f, task.crit, task.alpha)
    for name in task.warp:
        out["warp"][name] = alg.warp_statistics(name, y, rng, e, t)
    if task.policy is not None:
        found = model_checks_stacked(alg, y, task.policy, e=e, mse=mse)
        out["facts"] = (found.shape_poor, found.spread_unequal)
    return out


def simulate_model(scenario: ModelScenario, family: Family, procedures, *, replicates: int,
                   seed: np.random.SeedSequence, alpha: float = 0.05,
                   policy: Policy | None = None, table: dict | None = None,
                   algebra: ModelAlgebra | None = None, crit: dict | None = None,
                   n_jobs=1, backend: str = "threads", scheduler=None,
                   on_chunk=None) -> Simulation:
    """Simulate ``replicates`` data sets of ``scenario`` and record the decisions.

    ``procedures`` may include ``"auto"`` (the pipeline: checks and route on
    every replicate).  ``table`` is the route table
    (:func:`model_route_table` on the scenario's layout), ``algebra`` and
    ``crit`` the design's fixed parts; each is built when omitted.
    Procedures the model simulation does not cover are refused here
    (:func:`model_simulated`); the caller reports them.
    """
    from ..resample.engine import run_chunks
    policy = policy or Policy()
    layout, alpha = scenario.layout, float(alpha)
    names = [p for p in procedures if p != "auto"]
    pipeline = "auto" in procedures
    if pipeline and table is None:
        table = model_route_table(family, layout, policy, alpha)
    needed = list(dict.fromkeys(names + (list(table.values()) if pipeline else [])))
    missing = [p for p in needed if not model_simulated(p)]
    if missing:
        raise ValueError(f"not simulated at a model design: {missing}")
    alg = algebra if algebra is not None else ModelAlgebra(layout, family)
    closed = tuple(p for p in needed if CATALOGUE[p].route != "resample")
    warp = tuple(dict.fromkeys(single_step_name(p) for p in needed
                               if CATALOGUE[p].route == "resample"))
    crit = dict(crit or {})
    todo = [p for p in closed if p in DUAL and p not in crit]
    crit.update(critical_values(todo, layout, family, alpha))
    quiet = policy.replace(calibrate_candidates=False) if pipeline else None
    task = _Task(scenario, alg, closed, warp, crit, alpha, quiet)
    ordered = run_chunks(_chunk, task, replicates, CHUNK, seed, n_jobs, backend, scheduler,
                         on_chunk)
    rejects, methods = {}, {}
    for name in closed:
        rejects[name] = np.concatenate([p["closed"][name] for p in ordered])
        methods[name] = ("critical values of the design, t statistics per replicate"
                         if name in DUAL else "closed form per replicate")
    pooled = {name: tuple(np.concatenate([p["warp"][name][j] for p in ordered])
                          for j in range(2)) for name in warp}
    for name in needed:
        if CATALOGUE[name].route == "resample":
            t_obs, t_star = pooled[single_step_name(name)]
            rejects[name] = warp_rejects(name, t_obs, t_star, alpha)
            how = ("one within-block permutation" if name.startswith("permutation")
                   else "one wild-bootstrap draw")
            methods[name] = f"warp-speed ({how} per replicate)"
    routes = None
    if pipeline:
        poor = np.concatenate([p["facts"][0] for p in ordered])
        unequal = np.concatenate([p["facts"][1] for p in ordered])
        key = poor.astype(int) * 2 + unequal.astype(int)
        lookup = np.array([table[(bool(a), bool(b))] for a in (False, True)
                           for b in (False, True)], dtype=object)
        routes = lookup[key]
    return finish_simulation(rejects, methods, routes, procedures, replicates, family.m)

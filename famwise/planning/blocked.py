"""Planning a randomised complete block design from a blocked pilot (``plan(block=...)``).

The planned trial has ``b`` blocks, each holding one plot of every group
(so ``n_per_group`` is the number of blocks), analysed as ``compare(...,
block=...)`` analyses it: the additive model group + block, residual df
``(k - 1)(b - 1)``, the model's checks and route, and the procedures on the
model (:mod:`famwise.diagnostics.model_simulate`, every data set simulated
through the same checks, route and procedures, resampling by the warp-speed
method).

What the pilot gives, and how an incomplete or replicated pilot is used.
The pilot is fitted with the same additive model, on all its plots: missing
plots (incomplete blocks) and several plots of a group in one block are
both fine for the fit, which uses every plot.  Each group's error SD is its
residual SD under that model, ``sqrt(sum e^2 / sum (1 - h))`` over its plots
(:func:`famwise.diagnostics.model_checks.group_residual_sd`, as the blocked
calibration uses), and with ``shape="observed"`` the errors are resampled
from the model's residuals scaled to unit variance.  Under the additive
model (no group-by-block interaction) the spread between plots of a cell is
the same plot-to-plot error the residuals measure, so a pilot with several
plots per cell estimates the error of the planned single plots; where the
groups interact with the blocks, the plan is optimistic (the pilot's Tukey
non-additivity check is in its ``compare`` report).  The pilot's block
effects are not simulated: every statistic of the route is unchanged by
them.  One blocking factor only; covariates are not planned here.
"""

from __future__ import annotations

import numpy as np

from ..core.errors import FamwiseInputError
from ..core.families import Family
from ..core.layout import Design, Layout

__all__ = ["rcbd_layout", "rcbd_pilot", "rcbd_procedures", "RcbdEvaluator", "DESIGN_WORDS"]

DESIGN_WORDS = "randomised complete blocks, one plot of every group in each block"

#: The model route's candidates, per family, in the order the table lists them.
_CANDIDATES = {"all-pairs": ("tukey-kramer", "multivariate-t", "permutation-maxt",
                             "wild-bootstrap-maxt"),
               "vs-reference": ("dunnett", "multivariate-t", "permutation-maxt",
                                "wild-bootstrap-maxt")}
_FILLER_SEED = 20261204


def rcbd_layout(labels, blocks: int, block_name: str = "block") -> Layout:
    """A layout of ``blocks`` complete blocks of one plot per group (values are a
    fixed filler: only the design is read)."""
    k, b = len(labels), int(blocks)
    codes = np.tile(np.arange(k, dtype=np.int64), b)
    block_codes = np.repeat(np.arange(b, dtype=np.int64), k)
    values = np.random.default_rng(_FILLER_SEED).standard_normal(k * b)
    design = Design((str(block_name),), (block_codes,),
                    (tuple(f"block {j + 1}" for j in range(b)),))
    return Layout(values=values, codes=codes, labels=tuple(labels), design=design)


def rcbd_pilot(layout: Layout, block: str) -> dict:
    """The error SD of each group and the residual shape of a blocked pilot."""
    from ..diagnostics.model_checks import group_residual_sd, model_scaled_residuals
    from ..model import fit_model
    design = layout.design
    if design is None or not design.block_names:
        raise FamwiseInputError(f"block={block!r} gave the pilot no blocks; name its block "
                                f"column")
    if len(design.block_names) > 1:
        raise FamwiseInputError(
            f"plan simulates randomised complete block designs with one blocking factor; got "
            f"{len(design.block_names)} ({', '.join(design.block_names)}): give one block "
            f"column")
    if design.covariate_names:
        raise FamwiseInputError(
            f"plan with block= does not simulate covariates "
            f"({', '.join(design.covariate_names)}); drop covariates= to plan the blocks, or "
            f"drop block= to plan at the covariate model's residual spread")
    name, levels = design.block_names[0], design.block_labels[0]
    if len(levels) < 2:
        raise FamwiseInputError(
            f"block column {name!r} of the pilot holds one block ({levels[0]!r}); a blocked "
            f"plan needs a pilot with at least two blocks (or drop block= to plan a one-way "
            f"design)")
    fit = fit_model(layout)
    if fit.df < 1:
        raise FamwiseInputError(
            f"the pilot leaves no residual degrees of freedom under group + {name} "
            f"({layout.n_total} plots, {layout.k} groups, {len(levels)} blocks), so its error "
            f"SD is unknown; give sd=[...] with the pilot, or a pilot with more plots")
    sd = group_residual_sd(fit)
    bad = [layout.labels[i] for i in range(layout.k) if not (np.isfinite(sd[i]) and sd[i] > 0)]
    if bad:
        raise FamwiseInputError(
            f"group {bad[0]!r} of the pilot has no residual spread left by the block model "
            f"(too few plots, or all fitted exactly); give sd=[...] instead")
    cells = np.zeros((layout.k, len(levels)), dtype=np.int64)
    np.add.at(cells, (layout.codes, design.block_codes[0]), 1)
    missing, several = int(np.sum(cells == 0)), int(np.sum(cells > 1))
    how = []
    if missing:
        how.append(f"{missing} missing plot{'s' if missing > 1 else ''}")
    if several:
        how.append(f"{several} group-by-block cell{'s' if several > 1 else ''} with several "
                   f"plots")
    pilot_words = ("a complete block pilot" if not how else
                   f"a pilot with {' and '.join(how)} (the additive model uses every plot)")
    note = (f"Blocks: the plan is for {DESIGN_WORDS} ('{name}'), so n per group is the number "
            f"of blocks and the error df is (k - 1)(b - 1). The error SD of each group is its "
            f"residual SD under group + {name} from {pilot_words}: mean square "
            f"{fit.mse:.4g} on {fit.df} df; block effects are not simulated (no procedure "
            f"depends on them). Where groups interact with blocks the plan is optimistic.")
    return {"sd": [float(v) for v in sd], "errors": model_scaled_residuals(fit),
            "model": {"terms": [t.name for t in fit.terms[1:]], "residual_df": int(fit.df),
                      "mse": float(fit.mse), "blocks": int(len(levels)),
                      "missing_plots": missing, "cells_with_several_plots": several},
            "block": str(name), "note": note}


def rcbd_procedures(procedures, kind: str) -> list[str]:
    """The procedures to evaluate at a blocked design (default: the model route's
    candidates and ``"auto"``), each checked to read the model and be simulated."""
    from ..diagnostics.model_simulate import model_simulated
    from ..procedures.catalogue import CATALOGUE, check_procedure
    if procedures is None:
        return list(_CANDIDATES[kind]) + ["auto"]
    if isinstance(procedures, str):
        procedures = [procedures]
    fits = [n for n, i in CATALOGUE.items() if kind in i.families and model_simulated(n)]
    out = []
    for p in procedures:
        if p != "auto":
            info = check_procedure(p)
            if kind not in info.families or not model_simulated(p):
                raise FamwiseInputError(
                    f"plan with block= simulates the procedures that read the block model "
                    f"for family {kind!r}; {p!r} is not one of them: choose from "
                    f"{', '.join(fits)}")
        if p not in out:
            out.append(p)
    return out


class RcbdEvaluator:
    """The alternative's and the null's decisions at ``b`` complete blocks."""

    def __init__(self, labels, block: str, family: Family, procedures, alpha, policy):
        self.labels, self.block, self.family = tuple(labels), block, family
        self.procedures, self.alpha, self.policy = list(procedures), float(alpha), policy

    def __call__(self, b: int, mu, sd, errors, *, replicates, key, n_jobs, backend,
                 scheduler, on_chunk):
        from ..diagnostics.model_simulate import (DUAL, ModelScenario, critical_values,
                                                  model_route_table, simulate_model)
        from ..diagnostics.stacked_model import ModelAlgebra
        from ..resample.engine import chunk_seed
        lay = rcbd_layout(self.labels, b, self.block)
        table = model_route_table(self.family, lay, self.policy, self.alpha)
        needed = set(self.procedures) | set(table.values())
        crit = critical_values([p for p in DUAL if p in needed], lay, self.family, self.alpha)
        common = dict(replicates=replicates, alpha=self.alpha, policy=self.policy,
                      table=table, algebra=ModelAlgebra(lay, self.family), crit=crit,
                      n_jobs=n_jobs, backend=backend, scheduler=scheduler,
                      on_chunk=on_chunk)
        k = len(self.labels)
        alt = simulate_model(ModelScenario(lay, tuple(mu), tuple(sd), errors), self.family,
                             self.procedures, seed=chunk_seed(key, 0), **common)
        null = simulate_model(ModelScenario(lay, (0.0,) * k, tuple(sd), errors), self.family,
                              self.procedures, seed=chunk_seed(key, 1), **common)
        return alt, null

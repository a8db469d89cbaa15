"""The pooled-variance procedure for a family: one choice for one-way and model layouts.

Both routes (:mod:`famwise.diagnostics.route` for one-way data,
:mod:`famwise.diagnostics.model_route` for blocks and covariates) call
:func:`pooled_procedure` once they have settled on the classical route.
"""

from __future__ import annotations

import numpy as np
from scipy import stats

from ..core.families import Family
from ..core.layout import Layout

__all__ = ["pooled_procedure", "contrast_classical"]


def pooled_procedure(layout: Layout, family: Family,
                     alpha: float) -> tuple[str, list[str], list[tuple[str, str]]]:
    """Return (procedure, reasons, alternatives as (procedure, why)) for the family:
    Tukey-Kramer for all pairs, Dunnett against a reference, the shorter of
    Šidák and Scheffé for contrasts."""
    if family.kind == "all-pairs":
        return "tukey-kramer", [], [("scheffe", "wider intervals for pairwise families"),
                                    ("bonferroni", "more conservative than Tukey-Kramer")]
    if family.kind == "vs-reference":
        return "dunnett", [], [("bonferroni", "more conservative than Dunnett")]
    proc, why = contrast_classical(layout, family, alpha)
    return proc, [why], [("scheffe" if proc == "sidak" else "sidak",
                          "longer intervals for this family")]


def contrast_classical(layout: Layout, family: Family, alpha: float) -> tuple[str, str]:
    """Šidák or Scheffé for a contrast family, whichever gives shorter intervals."""
    m, k = family.m, layout.k
    if layout.design is not None:
        from ..model import fit_model
        df = fit_model(layout).df
    else:
        df = layout.stats.df_error
    sidak = stats.t.ppf(1 - (1 - (1 - alpha) ** (1 / m)) / 2, df)
    scheffe = np.sqrt((k - 1) * stats.f.ppf(1 - alpha, k - 1, df))
    if sidak <= scheffe:
        return "sidak", (f"For {m} contrast{'s' if m > 1 else ''} fixed in advance, Šidák's "
                         f"multiplier ({sidak:.3f}) is smaller than Scheffé's ({scheffe:.3f}); "
                         f"use Scheffé if the contrasts were chosen after seeing the data.")
    return "scheffe", (f"Scheffé's multiplier ({scheffe:.3f}) is smaller than Šidák's "
                       f"({sidak:.3f}) for {m} contrasts, and it also covers contrasts "
                       f"chosen after seeing the data.")

"""The omnibus test that goes with each route.

Before (or beside) the family of comparisons, the question "do the groups
differ at all?" has one test per route:

* classical (pooled variance) and ``bh``: the one-way ANOVA F test;
* unequal-variance and resampling on means: Welch's (1951) ANOVA;
* ranks, and the robust route (gross values): the Kruskal-Wallis (1952)
  test, tie-corrected;
* censored (non-detects): the smallest adjusted p-value of the route's
  permutation max-T, a test of the complete null at the same level (a
  k-sample test would need the censored scores of all groups at once).
* a layout with blocks or covariates, whatever the route: the F test for
  groups under the additive model, adjusted for the blocks and covariates
  (:meth:`famwise.model.ModelFit.group_test`).

:func:`omnibus_test` returns it as an :class:`Omnibus` (test, statistic, df,
p), which :func:`famwise.compare` exposes as ``result.omnibus`` and records
in the decision record, and which :func:`famwise.batch` screens across
responses.  A test that is undefined for the data (Welch's ANOVA with a
group without spread) comes back with NaN figures and the reason.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

from ..core.errors import FamwiseInputError

__all__ = ["OMNIBUS", "ROUTE_OMNIBUS", "Omnibus", "omnibus_test"]

#: Omnibus test identifier -> what it is and which routes use it.
OMNIBUS = {
    "anova-f": "one-way ANOVA F test (pooled variance), for the classical route",
    "welch-anova": "Welch's (1951) ANOVA (unequal variances), for the unequal-variance "
                   "and resampling routes",
    "kruskal-wallis": "Kruskal-Wallis (1952) rank test, tie-corrected, for the rank and "
                      "robust routes",
    "min-adjusted-p": "the smallest familywise-adjusted p-value of the censored route's "
                      "permutation max-T (its statistic: the largest |T|), a test of the "
                      "complete null at the same level",
    "model-f": "F test for groups under the additive model (adjusted for the blocks and "
               "covariates), whatever the route",
}
#: Route -> omnibus test identifier (any other route: Welch's ANOVA).
ROUTE_OMNIBUS = {"classical": "anova-f", "fdr": "anova-f", "ranks": "kruskal-wallis",
                 "robust": "kruskal-wallis", "censored": "min-adjusted-p"}

_SYMBOL = {"anova-f": "F", "welch-anova": "F", "kruskal-wallis": "H", "model-f": "F",
           "min-adjusted-p": "max |T|"}


def _finite(x):
    return None if x is None or (isinstance(x, float) and not math.isfinite(x)) else x


@dataclass(frozen=True)
class Omnibus:
    """One omnibus test: ``test`` (identifier), ``statistic``, ``df`` (one
    number, or numerator and denominator), ``p``; ``note`` says why the
    figures are NaN when the test is undefined for the data."""

    test: str
    statistic: float
    df: tuple
    p: float
    note: str | None = None

    @property
    def description(self) -> str:
        return OMNIBUS[self.test]

    def sentence(self) -> str:
        """One plain sentence, e.g. ``Kruskal-Wallis H = 54.69 (df 5), p = 1.5e-10.``"""
        name = {"anova-f": "One-way ANOVA", "welch-anova": "Welch's ANOVA",
                "kruskal-wallis": "Kruskal-Wallis",
                "model-f": "The model's test for groups:",
                "min-adjusted-p": "Permutation max-T of censored scores"}[self.test]
        if not math.isfinite(self.p):
            return f"{name}: not defined for these data ({self.note})."
        if self.test == "min-adjusted-p":
            return f"{name}: max |T| = {self.statistic:.4g}, smallest adjusted p = {self.p:.2g}."
        df = ", ".join(f"{d:.4g}" for d in self.df)
        return (f"{name} {_SYMBOL[self.test]} = {self.statistic:.4g} (df {df}), "
                f"p = {self.p:.2g}.")

    def to_dict(self) -> dict:
        return {"test": self.test, "statistic": _finite(float(self.statistic)),
                "df": [_finite(float(d)) for d in self.df], "p": _finite(float(self.p)),
                "note": self.note}


def omnibus_test(route: str, layout, table=None) -> Omnibus:
    """Return the omnibus test of ``route`` on ``layout`` (module notes).

    The censored route's test reads the comparisons ``table`` of its procedure.
    """
    test = ROUTE_OMNIBUS.get(route, "welch-anova")
    if getattr(layout, "design", None) is not None:
        test = "model-f"
    nan = float("nan")
    if test == "min-adjusted-p":
        if table is None or not len(table):
            return Omnibus(test, nan, (), nan, "no comparisons table")
        import numpy as np
        return Omnibus(test, float(np.max(np.abs(table["statistic"].to_numpy(float)))), (),
                       float(np.min(table["p_adjusted"].to_numpy(float))))
    try:
        if test == "model-f":
            from ..model import fit_model
            f, df1, df2, p = fit_model(layout).group_test()
            return Omnibus(test, f, (float(df1), float(df2)), p)
        if test == "anova-f":
            from .classical import anova_table
            a = anova_table(layout)
            return Omnibus(test, float(a.f), (float(a.df_between), float(a.df_within)),
                           float(a.p))
        if test == "kruskal-wallis":
            from .ranks import kruskal_wallis
            kw = kruskal_wallis(layout)
            return Omnibus(test, kw.statistic, (kw.df,), kw.p)
        from .unequal import welch_anova
        w = welch_anova(layout)
        return Omnibus(test, float(w.f), (float(w.df_num), float(w.df_den)), float(w.p))
    except (FamwiseInputError, ZeroDivisionError, FloatingPointError) as exc:
        return Omnibus(test, nan, (nan,), nan, str(exc))

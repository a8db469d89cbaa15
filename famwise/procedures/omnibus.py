"""The omnibus test that goes with each route.

Before (or beside) the family of comparisons, the question "do the groups
differ at all?" has one test per route:

* classical (pooled variance) and ``bh``: the one-way ANOVA F test;
* unequal-variance and resampling on means: Welch's (1951) ANOVA;
* ranks: the Kruskal-Wallis (1952) test, tie-corrected;
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
    "kruskal-wallis": "Kruskal-Wallis (1952) rank test, tie-corrected, for the rank route",
    "model-f": "F test for groups under the additive model (adjusted for the blocks and "
               "covariates), whatever the route",
}
#: Route -> omnibus test identifier (any other route: Welch's ANOVA).
ROUTE_OMNIBUS = {"classical": "anova-f", "fdr": "anova-f", "ranks": "kruskal-wallis"}

_SYMBOL = {"anova-f": "F", "welch-anova": "F", "kruskal-wallis": "H", "model-f": "F"}


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
                "model-f": "The model's test for groups:"}[self.test]
        if not math.isfinite(self.p):
            return f"{name}: not defined for these data ({self.note})."
        df = ", ".join(f"{d:.4g}" for d in self.df)
        return (f"{name} {_SYMBOL[self.test]} = {self.statistic:.4g} (df {df}), "
                f"p = {self.p:.2g}.")

    def to_dict(self) -> dict:
        return {"test": self.test, "statistic": _finite(float(self.statistic)),
                "df": [_finite(float(d)) for d in self.df], "p": _finite(float(self.p)),
                "note": self.note}


def omnibus_test(route: str, layout) -> Omnibus:
    """Return the omnibus test of ``route`` on ``layout`` (module notes)."""
    test = ROUTE_OMNIBUS.get(route, "welch-anova")
    if getattr(layout, "design", None) is not None:
        test = "model-f"
    nan = float("nan")
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

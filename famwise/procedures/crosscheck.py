"""The cross-check: the same family by an independent second route.

The second procedure comes from :func:`famwise.diagnostics.route.crosscheck_procedure`
(classical against permutation; unequal-variance against bootstrap;
resampling against its closed-form counterpart).  Agreement is judged per
comparison on the decision at alpha; every comparison whose decisions differ
is listed with both adjusted p-values and, for a resampling side, its Monte
Carlo standard error, so a reader can see whether the difference is one of
substance or of simulation noise.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np
import pandas as pd

from .catalogue import CATALOGUE, run_procedure

__all__ = ["CrossCheck", "crosscheck", "compare_tables"]


@dataclass(frozen=True)
class CrossCheck:
    """Agreement between the primary and the second procedure."""

    primary: str
    second: str
    table: pd.DataFrame = field(repr=False)
    agree: int
    total: int
    note: str = ""
    resampling: dict | None = None

    @property
    def disagreements(self) -> pd.DataFrame:
        return self.table[~self.table["agree"]]

    def sentence(self) -> str:
        if self.total == 0:
            return self.note or "No cross-check was run."
        base = (f"The cross-check by {self.second} agrees with {self.primary} on "
                f"{self.agree} of {self.total} comparison{'s' if self.total > 1 else ''}")
        if self.agree == self.total:
            return base + "."
        listed = "; ".join(
            f"{r.comparison}: p = {r.p_primary:.3g} vs {r.p_second:.3g}"
            + (f" (Monte Carlo SE {r.mc_error:.2g})" if np.isfinite(r.mc_error) else "")
            for r in self.disagreements.itertuples())
        return base + f"; they differ on {listed}."

    def to_dict(self) -> dict:
        return {"primary": self.primary, "second": self.second, "agree": self.agree,
                "total": self.total, "sentence": self.sentence(), "note": self.note,
                "resampling": self.resampling,
                "disagreements": [
                    {"comparison": r.comparison, "p_primary": float(r.p_primary),
                     "p_second": float(r.p_second), "reject_primary": bool(r.reject_primary),
                     "reject_second": bool(r.reject_second),
                     "mc_error": None if not np.isfinite(r.mc_error) else float(r.mc_error)}
                    for r in self.disagreements.itertuples()]}


def compare_tables(primary: pd.DataFrame, second: pd.DataFrame, alpha: float) -> pd.DataFrame:
    """Return the per-comparison agreement of two comparisons tables."""
    mc = np.full(len(primary), np.nan)
    for t in (primary, second):
        if "mc_error" in t:
            mc = np.fmax(mc, t["mc_error"].to_numpy(dtype=float))
    rp = primary["p_adjusted"].to_numpy() <= alpha
    rs = second["p_adjusted"].to_numpy() <= alpha
    return pd.DataFrame({
        "comparison": primary["comparison"].to_numpy(),
        "p_primary": primary["p_adjusted"].to_numpy(),
        "p_second": second["p_adjusted"].to_numpy(),
        "reject_primary": rp, "reject_second": rs, "agree": rp == rs, "mc_error": mc,
    })


def crosscheck(primary: pd.DataFrame, second_procedure: str, layout, family, *,
               alpha: float, alternative: str = "two-sided",
               resampling: dict | None = None, statistic: str | None = None) -> CrossCheck:
    """Run ``second_procedure`` on the same data and compare decisions with ``primary``."""
    primary_name = str(primary["procedure"].iloc[0]) if len(primary) else "?"
    info = CATALOGUE[second_procedure]
    if family.kind not in info.families and not (
            family.kind == "contrasts" and family.is_pairwise and "all-pairs" in info.families):
        return CrossCheck(primary_name, second_procedure, compare_tables(primary.iloc[:0],
                          primary.iloc[:0], alpha), 0, 0,
                          note=f"{second_procedure} does not handle this family; no cross-check.")
    options = {}
    if info.route in ("resample", "ranks"):
        options = dict(resampling or {})
        if statistic and info.route == "resample":
            options["statistic"] = statistic
    if alternative != "two-sided":
        options["alternative"] = alternative
    second = run_procedure(second_procedure, layout, family, alpha=alpha, **options)
    table = compare_tables(primary, second, alpha)
    return CrossCheck(primary_name, second_procedure, table, int(table["agree"].sum()),
                      len(table), resampling=second.attrs.get("resampling"))

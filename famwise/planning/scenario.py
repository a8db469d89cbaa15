"""What a plan assumes: the true means of each placement, the group sizes, the
spreads of a blocked pilot, and the first size of the search.

All on the simulated scale: the response's unit, or its natural log with
``transform="log"`` (where the margin's size is log r for a ratio r).
"""

from __future__ import annotations

import math

import numpy as np

from ..core.errors import FamwiseInputError

__all__ = ["PLACEMENTS", "true_means", "group_sizes", "blocked_pilot", "first_size"]

PLACEMENTS = ("one-pair", "one-vs-rest", "observed")


def true_means(placement: str, k: int, shift: float, pilot_means, reference=None):
    """The true means of a placement (``shift``: the margin on the simulated scale,
    signed; ``reference``: the reference's index for family "vs-reference").

    All pairs: "one-pair" puts the first two groups ``shift`` apart, the others
    at their midpoint; "one-vs-rest" shifts the first group by ``shift`` from
    the rest.  Against a reference: "one-pair" shifts the first group other
    than the reference by ``shift``, the others stay at the reference's mean
    (one true difference); "one-vs-rest" shifts every other group by
    ``shift`` from the reference (every comparison a true difference).
    "observed": the pilot's means, centred.
    """
    mu = np.zeros(k)
    if placement == "observed":
        return np.asarray(pilot_means, dtype=float) - float(np.mean(pilot_means))
    if reference is None:
        if placement == "one-pair":
            mu[0], mu[1] = shift / 2, -shift / 2
        else:
            mu[0] = shift
        return mu
    others = [i for i in range(k) if i != reference]
    if placement == "one-pair":
        mu[others[0]] = shift
    else:
        mu[others] = shift
    return mu


def group_sizes(n: int, weights) -> tuple:
    """Group sizes for ``n`` per group: equal, or the pilot's proportions with
    the smallest group at ``n``."""
    return tuple(max(2, int(round(n * w))) for w in weights)


def blocked_pilot(layout) -> dict | None:
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


def first_size(shift: float, sd, alpha: float, m: int) -> int:
    """A first size: the normal-theory n for a two-sided t at the Bonferroni level
    over the family's m comparisons (common practice, no source), halved and at
    least 3."""
    from scipy import stats
    z = stats.norm.ppf(1 - alpha / (2 * m)) + stats.norm.ppf(0.8)
    n = 2 * (z * float(np.max(sd)) / abs(shift)) ** 2
    return int(max(3, min(64, math.floor(n / 2))))

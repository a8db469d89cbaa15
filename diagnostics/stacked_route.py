"""The route on stacked replicates: the branch of the real route each replicate takes.

:func:`famwise.diagnostics.route.choose` tries, in order, the censored route
(the data hold non-detects), the robust route (a gross value that stands
apart, :mod:`famwise.diagnostics.robust_route`) and then the rules on the
shape and spread checks.  With the sizes, the family and the policy fixed,
what each branch picks depends on a replicate only through a few facts:

* censored: whether the detection limits of the non-detects differ (between
  the groups holding them, or within one group);
* robust: whether every group holding a gross value is large enough to trim
  (``policy.trimmed_min_n``);
* the rules: "shape poor" and "spread unequal".

So each replicate gets a *key* (:func:`route_keys`): ``("censored", differ)``,
``("gross", trimmable)`` or ``(shape_poor, spread_unequal)``, and the route
table (:func:`famwise.diagnostics.simulate.route_table`) holds the real
route's answer for each key: :func:`robust_entries` asks
:func:`famwise.diagnostics.robust_route.gross_route` and
:func:`~famwise.diagnostics.robust_route.censored_route` themselves, once per
key, so no routing rule is written twice.

The facts are computed on every row at once: the gross values are the
modified z-scores (Iglewicz & Hoaglin 1993) above ``policy.gross_outlier_z``
within groups of three or more and on the pooled scale, as the outlier check
finds them; "stands
apart" is :func:`~famwise.diagnostics.robust_route.isolated`'s test (the
normality, skewness and kurtosis checks of the rest pass), the rest's
residuals standardised within groups for all rows at once.
"""

from __future__ import annotations

import numpy as np

from ..core.families import Family
from ..core.layout import Layout
from .policy import Policy
from .stacked import VIOLATED, Blocks, modified_z_rows, moments, normality

__all__ = ["gross_mask", "isolated_rows", "robust_entries", "route_keys", "limits_differ"]


def gross_mask(x: np.ndarray, blocks: Blocks, policy: Policy) -> np.ndarray:
    """(R, N): the gross values (:func:`famwise.diagnostics.shape.is_gross`: modified
    z beyond ``policy.gross_outlier_z`` within the group, of three or more, and
    on the pooled scale), as the outlier check finds them."""
    from .shape import is_gross
    return is_gross(*modified_z_rows(x, blocks), policy)


def isolated_rows(x: np.ndarray, blocks: Blocks, mask: np.ndarray,
                  policy: Policy) -> np.ndarray:
    """(R,): whether each row's gross values stand apart (the rest of the row
    passes the normality, skewness and kurtosis checks, or leaves a group
    with fewer than two values); False for rows without gross values.

    The rest's residuals are standardised within each group (the rest's own
    group means and SDs, two passes) for all rows at once; the rows are then
    grouped by how many values they lose in all, so that each bucket's
    pooled residuals form one stack for the normality test and the moments.
    """
    r = x.shape[0]
    out = np.zeros(r, dtype=bool)
    lost = mask.sum(axis=1)
    rows = np.flatnonzero(lost > 0)
    if rows.size == 0:
        return out
    xs, keep, starts, codes = x[rows], ~mask[rows], blocks.bounds[:-1], blocks.codes
    cnt = np.add.reduceat(keep.astype(np.float64), starts, axis=1)
    small = np.any(cnt < 2, axis=1)
    out[rows[small]] = True
    with np.errstate(invalid="ignore", divide="ignore"):
        mean = np.add.reduceat(np.where(keep, xs, 0.0), starts, axis=1) / cnt
        dev = np.where(keep, xs - mean[:, codes], 0.0)
        corr = np.add.reduceat(dev, starts, axis=1) / cnt
        dev = np.where(keep, dev - corr[:, codes], 0.0)
        var = np.add.reduceat(dev * dev, starts, axis=1) / (cnt - 1)
        sd = np.sqrt(var)
        sd = np.where(sd > 0, sd, 1.0)
        z = dev / (sd * np.sqrt((cnt - 1) / cnt))[:, codes]
    for c in np.unique(lost[rows][~small]):
        sel = np.flatnonzero(~small & (lost[rows] == c))
        zc = z[sel][keep[sel]].reshape(sel.size, x.shape[1] - int(c))
        skew, kurt = moments(zc, policy)
        bad = (normality(zc, policy).verdict == VIOLATED) | (skew.verdict == VIOLATED) \
            | (kurt.verdict == VIOLATED)
        out[rows[sel]] = ~bad
    return out


def limits_differ(censored: np.ndarray, limit_index: np.ndarray, blocks: Blocks) -> np.ndarray:
    """(R,): whether the non-detects' limits differ, between the groups holding
    non-detects or within one group (as :func:`censored_route` decides)."""
    bits = np.where(censored, np.left_shift(np.int64(1), limit_index.astype(np.int64)), 0)
    held = np.bitwise_or.reduceat(bits, blocks.bounds[:-1], axis=1)        # (R, k)
    several = np.any(held & (held - 1), axis=1)
    top = held.max(axis=1)
    low = np.where(held > 0, held, np.iinfo(np.int64).max).min(axis=1)
    return several | ((top > 0) & (top != low))


def robust_entries(family: Family, layout: Layout, policy: Policy,
                   limits=(1.0, 2.0)) -> dict:
    """The real route's choice for the robust and censored keys at ``layout``'s sizes.

    ``("gross", trimmable)``: :func:`gross_route` with one gross value in a
    group of the right size (absent when no such group, or when the route
    does not apply: the policy switch, a family that is not pairwise).
    ``("censored", differ)``: :func:`censored_route` on the layout with one
    non-detect at one limit, or at two ``limits`` in two groups (absent when
    the censored route refuses the family).
    """
    from ..core.errors import FamwiseInputError
    from .robust_route import censored_route, gross_route
    out = {}
    n = layout.stats.n
    if policy.gross_outlier_route:
        for trimmable in (True, False):
            fits = np.flatnonzero((n >= policy.trimmed_min_n) if trimmable
                                  else (n >= 3) & (n < policy.trimmed_min_n))
            if fits.size == 0:
                continue
            g = int(fits[0])
            gross = [{"row": int(layout.rows[layout.codes == g][0]), "group": layout.labels[g],
                      "value": 0.0, "modified_z": policy.gross_outlier_z + 1.0}]
            picked = gross_route(gross, layout, family, policy, [])
            if picked is not None:
                out[("gross", trimmable)] = picked[0]
    for differ in (False, True):
        flags = np.zeros(layout.n_total, dtype=bool)
        values = layout.values.copy()
        first = [int(np.flatnonzero(layout.codes == g)[0]) for g in range(min(2, layout.k))]
        flags[first[0]] = True
        values[first[0]] = limits[0]
        if differ and len(first) > 1:
            flags[first[1]] = True
            values[first[1]] = limits[1]
        cens = Layout(values=values, codes=layout.codes, labels=layout.labels,
                      rows=layout.rows, response=layout.response, group=layout.group,
                      source=layout.source, censored=flags)
        try:
            out[("censored", differ)] = censored_route(cens, family, policy)[0]
        except FamwiseInputError:
            pass
    return out


def route_keys(stack, found, policy: Policy, table: dict) -> np.ndarray:
    """Each row's key into the route table (module notes), in the real route's
    order: censored, then robust, then the rules."""
    r = stack.replicates
    poor, unequal = found.shape_poor, found.spread_unequal
    keys = np.empty(r, dtype=object)
    for i in range(r):
        keys[i] = (bool(poor[i]), bool(unequal[i]))
    censored = getattr(stack, "censored", None)
    done = np.zeros(r, dtype=bool)
    if censored is not None:
        done = censored.any(axis=1)
        differ = limits_differ(censored, stack.limit_index, stack.blocks)
        for i in np.flatnonzero(done):
            keys[i] = ("censored", bool(differ[i]))
    if ("gross", True) in table or ("gross", False) in table:
        mask = gross_mask(stack.x, stack.blocks, policy)
        mask[done] = False
        iso = isolated_rows(stack.x, stack.blocks, mask, policy)
        held = np.add.reduceat(mask.astype(np.int64), stack.bounds[:-1], axis=1) > 0
        trimmable = ~np.any(held & (stack.n < policy.trimmed_min_n), axis=1)
        for i in np.flatnonzero(iso):
            keys[i] = ("gross", bool(trimmable[i]))
    return keys

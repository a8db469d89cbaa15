"""Rank and score procedures in a simulation: how each is computed on a stack.

:func:`famwise.diagnostics.simulate.simulate` hands the procedures it does
not compute itself (the rank procedures, the censored-data procedures and
the substitution comparator) to this module, which says how each one runs
(:func:`kind_of`), computes a chunk's part (:func:`chunk_part`) and turns the
chunks' parts into decisions (:func:`finish`):

* ``"closed"``: decisions per row in closed form (asymptotic Dunn,
  Steel-Dwass, Steel: :mod:`famwise.diagnostics.stacked_ranks`; the
  substitution comparator: :mod:`famwise.diagnostics.stacked_censored`);
* ``"warp"``: observed and once-permuted statistics per row, pooled over all
  chunks by the warp-speed method (Giacomini, Politis & White 2013):
  permutation rank procedures, ``brunner-munzel-maxt``, ``gehan-maxt`` and
  ``peto-maxt``.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from .stacked_ranks import (RANK_PROCEDURES, rank_method, rank_rejects, rank_warp_rejects,
                            rank_warp_statistics)

__all__ = ["SCORE_PROCEDURES", "Skipped", "kind_of", "chunk_part", "finish", "method_text"]


def _censored_names():
    from .stacked_censored import CENSORED_SIMULATED
    return CENSORED_SIMULATED


SCORE_PROCEDURES = RANK_PROCEDURES


def kind_of(name: str, n, policy, options: dict | None = None) -> str | None:
    """``"closed"``, ``"warp"`` or None (a procedure simulate computes itself)."""
    if name in RANK_PROCEDURES:
        # "exact" enumerates the permutation distribution that warp speed samples
        return "closed" if rank_method(name, n, policy, options) == "asymptotic" else "warp"
    if name in _censored_names():
        from .stacked_censored import censored_kind
        return censored_kind(name)
    return None


def chunk_part(name: str, kind: str, family, stack, rng, alpha: float):
    """A chunk's part: decisions (R, m) for ``"closed"``, ``(|T|, |T*|)`` for ``"warp"``."""
    if name in RANK_PROCEDURES:
        if kind == "closed":
            return rank_rejects(name, family, stack, alpha)
        return rank_warp_statistics(name, family, stack, rng)
    from .stacked_censored import censored_part
    return censored_part(name, kind, family, stack, rng, alpha)


@dataclass(frozen=True)
class Skipped:
    """A chunk in which no row needed the procedure (one only the route uses)."""

    rows: int
    m: int


def finish(name: str, kind: str, parts: list, alpha: float) -> np.ndarray:
    """The decisions (R, m) of every replicate from the chunks' parts in order.

    A part may be :class:`Skipped` (a procedure only the route needs, in a
    chunk whose rows the route sends elsewhere): its rows decide nothing, and
    a warp-speed procedure's pooled permutations come from the chunks computed.
    """
    done = [p for p in parts if not isinstance(p, Skipped)]
    if kind == "closed" or not done:
        got = iter(done)
    else:
        t_obs = np.concatenate([p[0] for p in done])
        t_star = np.concatenate([p[1] for p in done])
        if name in RANK_PROCEDURES:
            rejects = rank_warp_rejects(name, t_obs, t_star, alpha)
        else:
            from .stacked_procedures import warp_rejects
            rejects = warp_rejects(name, t_obs, t_star, alpha)
        edges = np.cumsum([p[0].shape[0] for p in done])[:-1]
        got = iter(np.split(rejects, edges))
    return np.concatenate([np.zeros((p.rows, p.m), dtype=bool) if isinstance(p, Skipped)
                           else next(got) for p in parts])


def method_text(name: str, kind: str) -> str:
    if kind == "closed":
        return "closed form per replicate (asymptotic reference distribution)"
    return "warp-speed (one permutation of all labels per replicate)"

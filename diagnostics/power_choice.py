"""Choosing by power at the user's design: the most powerful candidate that holds its level.

The checks-and-rules route (:func:`famwise.diagnostics.route.choose`) picks
a procedure that is valid for the situation the checks describe; a rule that
sends, say, every small unbalanced design to Dunnett's T3 buys that validity
with power it often need not pay.  :func:`power_calibration` settles the
choice at the user's own design instead:

1. the candidates for the family (:data:`CANDIDATES`: the single-step
   procedures with simultaneous intervals that the route can choose; step-down
   procedures and trimmed means are left out because the route sets them
   aside for other reasons, duality with intervals and a different estimand;
   Welch–Dunnett is too slow to simulate on every ``compare`` and, when the
   rules choose it, the step leaves the choice to them);
2. ``policy.power_replicates`` data sets under the complete null at the
   observed group sizes and SDs, with errors resampled from the observed
   standardised within-group residuals (the calibration of
   :mod:`famwise.diagnostics.calibrate` with ``shape="observed"``): each
   candidate's familywise error rate (FWER) and its binomial Monte Carlo SE;
   a candidate *holds* when FWER <= alpha + ``policy.power_fwer_se`` SE
   (2 SE, the rule the quick calibration and the calibration table use);
3. the same errors with one comparison shifted (the alternative below):
   each candidate's power, the probability of declaring the shifted
   comparison different, averaged over the family's comparisons (replicate
   ``r`` shifts comparison ``r mod m``, up and down in turn, so one
   simulation covers them all and
   each candidate sees the same data sets: common random numbers make the
   power differences far more precise than each power);
   When the rules chose resampling because the residuals are far from
   normal, only the resampling candidates compete (unless
   ``policy.power_closed_when_skewed``): a pool of a few dozen residuals
   under-represents the tail of skewed errors, on which the closed forms'
   error and power depend (on the error-rate matrix's skewed designs the
   calibration ranked Tukey–Kramer above the permutation max-T while at the
   true lognormal design the permutation is 0.07 more powerful, and the
   Welch procedures hold at the residual pool while erring in a quarter of
   the true null data sets), whereas the resampling procedures carry the
   data's own shape;
   Games–Howell competes only when every group has at least
   ``policy.games_howell_min_n`` values: with smaller groups it is mildly
   liberal (about 0.065; DESIGN.md), and a calibration at the observed SDs
   would admit it exactly when the small groups' SDs happen to come out
   small, which is when its error is largest (on the matrix's design with
   small groups carrying large SDs the pipeline erred in 0.090 of 300
   calibrated replicates with it, above alpha + 3 SE);
4. the most powerful candidate that holds.  The rules' own choice is kept
   when it holds and no candidate that holds beats it by at least
   ``policy.power_gain_min`` (0.02): a choice the rules can explain is not
   given up for a gain within Monte Carlo noise.  When no candidate holds the
   rules' choice is kept and the route says so.

The alternative.  With a margin (the smallest difference that matters, given
by the user) the shifted comparison's true value is the margin: power is
then the chance of finding a difference that matters.  Without one, the
shift is the policy's standardised effect: in units of the comparison's own
standard error at the observed SDs, sqrt(sum_i w_i^2 sd_i^2 / n_i), the
shift at which a Bonferroni-adjusted z test (SDs known) has power
``policy.power_at`` (0.5), i.e. z(1 - alpha / (2m)) + z(power_at).  Why
there: for a location shift, two procedures with critical values c1 < c2
differ in power by about phi(delta - c)(c2 - c1), largest when the shift
delta sits at the critical value, that is at power one half; far above or
below, every candidate has power near 1 or 0 and the comparison says
nothing.  Scaling by each comparison's standard error gives every
comparison the same footing, so that a procedure is not preferred for
spending its power on the pairs of large, quiet groups alone.  The shift is
placed as +delta/2 and -delta/2 on the two groups (for a contrast with
weights w, the means lambda w with lambda = delta / (w . w)), as the plan's
"one-pair" placement does.

Methods and costs.  Everything runs on stacked replicates
(:mod:`famwise.diagnostics.stacked_procedures`): closed forms from each
replicate's group means and variances; resampling procedures by the
warp-speed method (Giacomini, Politis & White 2013, *Econometric Theory*
29:567–589).  About 0.1 to 0.3 s at N = 50, k = 6 with 1,000 replicates on
one core (``tests/bench/bench_power_route.py``).  The streams come from
``SeedSequence([seed, 15])``, so a ``compare`` with a given seed always
makes the same choice.  The result of the last few designs is cached
(:func:`famwise.diagnostics.simulate.route_table` asks the route four
times about the same design).

Limits.  The observed SDs and residuals of small groups are noisy
estimates of the true ones; the choice is a calibration at the estimates,
and the error-rate matrix (``tests/test_error_matrix.py``, power rows)
measures what that costs in familywise error over whole simulated studies.
"""

from __future__ import annotations

from collections import OrderedDict

import numpy as np
from scipy import stats

from ..core.families import Family
from ..core.layout import Layout
from ..procedures.catalogue import CATALOGUE
from .policy import Policy

__all__ = ["CANDIDATES", "candidates", "alternative_means", "standardised_shift", "shifted",
           "decisions",
           "power_calibration", "choose_by_power"]

#: Candidates per family kind (the contrast family adds its classical choice).
CANDIDATES = {
    "all-pairs": ("tukey-kramer", "games-howell", "dunnett-t3", "permutation-maxt",
                  "bootstrap-hall"),
    "vs-reference": ("dunnett", "permutation-maxt", "bootstrap-hall"),
    "contrasts": ("dunnett-t3", "permutation-maxt", "bootstrap-hall"),
}

#: Procedures too slow to simulate on every compare: Welch–Dunnett's
#: multivariate t at each data set's own correlations costs seconds per
#: thousand data sets, so when the rules choose it the step leaves it be.
SLOW = frozenset({"welch-dunnett"})

_TAG = 15          # the seed's second word: streams apart from every other use of the seed
_CACHE: "OrderedDict[tuple, dict]" = OrderedDict()
_CACHE_SIZE = 16


def candidates(family: Family, rule_choice: str, resampling_only: bool = False) -> list[str]:
    """The candidates for ``family``: :data:`CANDIDATES` and the rules' choice
    (only the resampling ones with ``resampling_only``)."""
    base = list(CANDIDATES.get(family.kind, CANDIDATES["contrasts"]))
    if resampling_only:
        base = [p for p in base if CATALOGUE[p].route == "resample"]
    if family.kind == "contrasts" and rule_choice in ("sidak", "scheffe"):
        base.insert(0, rule_choice)
    if rule_choice not in base and rule_choice in CATALOGUE:
        base.insert(0, rule_choice)
    return base


def standardised_shift(m: int, alpha: float, power_at: float) -> float:
    """The shift, in standard errors, at which a Bonferroni z test over ``m``
    comparisons has power ``power_at``: z(1 - alpha/(2m)) + z(power_at)."""
    return float(stats.norm.isf(alpha / (2 * m)) + stats.norm.ppf(power_at))


def alternative_means(family: Family, n, sd, shift) -> np.ndarray:
    """True group means (m, k): row c shifts comparison c by ``shift[c]``.

    For weights w the means are lambda w with lambda = shift / (w . w), so the
    comparison's true value is the shift (a pair: +shift/2 and -shift/2).
    """
    w = np.asarray(family.weights, dtype=float)
    lam = np.asarray(shift, dtype=float) / np.sum(w * w, axis=1)
    return lam[:, None] * w


def shifted(replicates: int, m: int) -> tuple[np.ndarray, np.ndarray]:
    """Which comparison each replicate shifts (``r mod m``) and in which
    direction (+1, -1 alternately for each pass over the family), so that a
    procedure whose statistic is not symmetric (Hall's skewness correction)
    gains nothing from the direction of the shift."""
    r = np.arange(int(replicates))
    return r % m, np.where((r // m) % 2 == 0, 1.0, -1.0)


def _comparison_se(family: Family, n, sd) -> np.ndarray:
    w = np.asarray(family.weights, dtype=float)
    return np.sqrt((w * w) @ (np.asarray(sd, float) ** 2 / np.asarray(n, float)))


def decisions(names, family: Family, null, alt, alpha: float, rng_null, rng_alt):
    """Each procedure's rejections (R, m) on the null and the shifted stacks.

    Closed forms per data set.  Resampling by the warp-speed method with one
    critical value for both stacks, so that a lucky draw of the pooled
    resamples moves a candidate's FWER and power together: the quantile of
    the null data sets' resampled maxima (for the bootstrap, whose resamples
    are centred and do not see the shift, of both stacks' resamples).
    """
    from .stacked_procedures import (closed_form_rejects, is_resampling, single_step_name,
                                     warp_rejects, warp_statistics)
    out_null, out_alt, warp = {}, {}, {}
    for name in names:
        if not is_resampling(name):
            out_null[name] = np.asarray(closed_form_rejects(name, family, null, alpha), bool)
            out_alt[name] = np.asarray(closed_form_rejects(name, family, alt, alpha), bool)
            continue
        key = single_step_name(name)
        if key not in warp:
            obs0, star0 = warp_statistics(key, family, null, rng_null)
            obs1, star1 = warp_statistics(key, family, alt, rng_alt)
            pool = star0 if key.startswith("permutation") else np.concatenate([star0, star1])
            warp[key] = (obs0, obs1, pool)
        obs0, obs1, pool = warp[key]
        if name.endswith("stepdown"):        # step-down needs its own rows' resamples
            pool0, pool1 = pool[:obs0.shape[0]], pool[-obs1.shape[0]:]
        else:
            pool0 = pool1 = pool
        out_null[name] = warp_rejects(name, obs0, pool0, alpha)
        out_alt[name] = warp_rejects(name, obs1, pool1, alpha)
    return out_null, out_alt


def power_calibration(layout: Layout, family: Family, policy: Policy | None = None, *,
                      alpha: float = 0.05, seed=0, margin: float | None = None,
                      procedures=None, replicates: int | None = None,
                      shape: str = "observed", pool_spreads: bool = False) -> dict:
    """Each candidate's FWER under the complete null and its power, at ``layout``'s design.

    Parameters
    ----------
    layout : Layout
        The observed data: group sizes, SDs and standardised residuals.
    family : Family
    policy : Policy, optional
        ``power_replicates``, ``power_at``, ``power_fwer_se``.
    alpha : float, default=0.05
    seed : int, default=0
        Streams from ``SeedSequence([seed, 15])``.
    margin : float, optional
        The shift of the alternative in the response's unit; without it, the
        policy's standardised effect (module notes).
    procedures : list of str, optional
        Candidates (default: :func:`candidates` for the family).
    replicates : int, optional
        Overrides ``policy.power_replicates``.
    shape : {"observed", "normal"}, default="observed"
        Errors resampled from the observed standardised residuals (what the
        route uses), or normal (for checks against closed forms).
    pool_spreads : bool, default=False
        Simulate every group at the pooled SD instead of its own (what the
        route does when the spread checks pass; :func:`choose_by_power`).

    Returns
    -------
    dict
        ``method``, ``replicates``, ``seed``, ``alternative`` (what was
        shifted, by how much), ``limit_rule``, and ``candidates``: one dict
        per candidate with ``procedure``, ``fwer``, ``fwer_se``, ``holds``,
        ``power``, ``power_se``.
    """
    from ..core.errors import FamwiseInputError
    from .shape import standardised_residuals
    from .stacked import Blocks
    from .stacked_procedures import Stack
    policy = policy or Policy()
    reps = int(replicates or policy.power_replicates)
    names = list(procedures) if procedures is not None else candidates(family, "")
    st = layout.stats
    n = np.asarray(st.n, dtype=np.int64)
    sd = np.asarray(st.sd, dtype=float)
    if pool_spreads:
        sd = np.full(sd.shape, float(np.sqrt(np.sum((n - 1) * sd ** 2) / np.sum(n - 1))))
    if shape not in ("observed", "normal"):
        raise FamwiseInputError(f"shape must be 'observed' or 'normal'; got {shape!r}")
    errors = standardised_residuals(layout) if shape == "observed" else None
    m = family.m
    if margin is None:
        delta = standardised_shift(m, alpha, policy.power_at)
        shift = delta * _comparison_se(family, n, sd)
        alt_text = {"kind": "standardised", "shift_se": delta, "power_at": policy.power_at,
                    "sentence": (f"a shift of {delta:.2f} standard errors on one comparison "
                                 f"(where a Bonferroni z test has power {policy.power_at:g})")}
    else:
        shift = np.full(m, float(margin))
        alt_text = {"kind": "margin", "margin": float(margin),
                    "sentence": f"a difference of {float(margin):g} (the margin) on one "
                                f"comparison"}
    pool = None if errors is None else hash(np.round(errors, 12).tobytes())
    key = (tuple(n.tolist()), tuple(np.round(sd, 12).tolist()), pool, family.kind,
           tuple(family.names), np.asarray(family.weights).tobytes(), tuple(names),
           float(alpha), seed, None if margin is None else float(margin), reps, policy.power_at,
           policy.power_fwer_se)
    if key in _CACHE:
        _CACHE.move_to_end(key)
        return _CACHE[key]
    root = np.random.SeedSequence([0 if seed is None else int(seed), _TAG])
    s_draw, s_null, s_alt = (np.random.default_rng(s) for s in root.spawn(3))
    blocks = Blocks.of(n)
    size = (reps, blocks.total)
    e = (s_draw.standard_normal(size) if errors is None
         else s_draw.choice(errors, size=size, replace=True))
    x = e * sd[blocks.codes]
    target, sign = shifted(reps, m)
    mu = alternative_means(family, n, sd, shift)
    stacks = (Stack(x, blocks), Stack(x + sign[:, None] * mu[target][:, blocks.codes], blocks))
    for stack in stacks:
        # A small group resampled from a few residuals can draw one value n
        # times; its variance is floored (a huge, finite statistic) as the
        # resampling kernels floor a degenerate resample's standard error.
        stack.vars = np.maximum(stack.vars, (1e-8 * float(sd.max())) ** 2)
    null, alt = decisions(names, family, *stacks, alpha, s_null, s_alt)
    rows = []
    for name in names:
        fwer = float(null[name].any(axis=1).mean())
        se = float(np.sqrt(fwer * (1 - fwer) / reps))
        hit = alt[name][np.arange(reps), target]
        power = float(hit.mean())
        rows.append({"procedure": name, "fwer": fwer, "fwer_se": se,
                     "holds": bool(fwer <= alpha + policy.power_fwer_se * se),
                     "power": power, "power_se": float(np.sqrt(power * (1 - power) / reps))})
    errors_text = ("errors resampled from the observed standardised residuals"
                   if errors is not None else "normal errors")
    sds_text = "the pooled SD in every group" if pool_spreads else "the observed SDs"
    out = {"method": (f"complete null and one shifted comparison at the observed sizes and "
                      f"{sds_text}, {errors_text}; closed forms per data set, resampling by "
                      f"the warp-speed method"),
           "spreads": "pooled" if pool_spreads else "observed",
           "replicates": reps, "seed": None if seed is None else int(seed),
           "alternative": alt_text,
           "limit_rule": f"fwer <= alpha + {policy.power_fwer_se:g} SE",
           "candidates": rows}
    _CACHE[key] = out
    while len(_CACHE) > _CACHE_SIZE:
        _CACHE.popitem(last=False)
    return out


def choose_by_power(rule_choice: str, layout: Layout, family: Family, policy: Policy, *,
                    alpha: float = 0.05, seed=0, margin: float | None = None,
                    spreads_agree: bool = False) -> dict | None:
    """Return the power choice (among the resampling candidates only when the
    rules chose resampling because the shape is poor, unless
    ``policy.power_closed_when_skewed``): ``procedure``, ``sentence``, ``record`` and
    ``set_aside`` (the rules' choice and why, when it is replaced), or None
    when the design cannot be simulated (a group without spread) or the rules'
    choice is too slow to simulate (:data:`SLOW`).

    ``spreads_agree``: the spread checks passed; with
    ``policy.power_pool_spreads`` the calibration then simulates every group
    at the pooled SD, the estimate the checks support, instead of the
    observed SDs, whose noise in small groups makes an exact pooled
    procedure look liberal exactly when a small group's SD comes out large.

    A candidate replaces the rules' choice only when it is more powerful: a
    rules' choice that does not hold at the calibration is kept when every
    candidate that holds is less powerful (its familywise error then
    reflects the noise of the observed picture as much as the design, and
    the rules chose it for validity at designs like this one)."""
    st = layout.stats
    if rule_choice in SLOW or rule_choice not in CATALOGUE:
        return None
    if np.any(st.n < 2) or not np.all(np.isfinite(st.sd)) or np.any(st.sd <= 0):
        return None
    skewed = CATALOGUE[rule_choice].route == "resample"
    names = candidates(family, rule_choice, skewed and not policy.power_closed_when_skewed)
    if int(st.n.min()) < policy.games_howell_min_n and rule_choice != "games-howell":
        names = [p for p in names if p != "games-howell"]
    pooled = bool(spreads_agree and policy.power_pool_spreads)
    rec = power_calibration(layout, family, policy, alpha=alpha, seed=seed, margin=margin,
                            procedures=names, pool_spreads=pooled)
    rows = {r["procedure"]: r for r in rec["candidates"]}
    holding = [r for r in rec["candidates"] if r["holds"]]
    rule = rows[rule_choice]
    spreads = ("the pooled SD (the spread checks pass)" if pooled else "the observed spreads")
    head = (f"A calibration at the observed sizes, {spreads} and residual shape "
            f"({rec['replicates']} simulated data sets) estimated each candidate's familywise "
            f"error under the complete null and its power against "
            f"{rec['alternative']['sentence']}.")
    if not holding:
        chosen = rule_choice
        text = (f"{head} No candidate held alpha = {alpha:g} there (the rules' choice, "
                f"{rule_choice}, {rule['fwer']:.3f}); {rule_choice} is kept, and its "
                f"familywise error at this design may exceed alpha.")
    else:
        best = max(holding, key=lambda r: (r["power"], -r["fwer"]))
        if not rule["holds"] and best["power"] < rule["power"]:
            chosen = rule_choice
            text = (f"{head} The rules' choice, {rule_choice}, came out at familywise error "
                    f"{rule['fwer']:.3f} (SE {rule['fwer_se']:.3f}) there, above the limit, "
                    f"but every candidate that holds is less powerful (the most powerful, "
                    f"{best['procedure']}, {best['power']:.3f} against {rule['power']:.3f}); "
                    f"a calibration at the observed picture of a small study is too noisy "
                    f"to give up the rules' choice for less power, so it is kept.")
        elif rule["holds"] and best["power"] - rule["power"] < policy.power_gain_min:
            chosen = rule_choice
            text = (f"{head} {rule_choice} holds alpha there (familywise error "
                    f"{rule['fwer']:.3f}, SE {rule['fwer_se']:.3f}) with power "
                    f"{rule['power']:.3f}, within {policy.power_gain_min:g} of the most "
                    f"powerful candidate that holds ({best['procedure']}, "
                    f"{best['power']:.3f}), so it is kept.")
        else:
            chosen = best["procedure"]
            why = (f"with power {rule['power']:.3f}" if rule["holds"] else
                   f"whose familywise error there is {rule['fwer']:.3f} (SE "
                   f"{rule['fwer_se']:.3f}), above the limit")
            text = (f"{head} {chosen} holds alpha there (familywise error {best['fwer']:.3f}, "
                    f"SE {best['fwer_se']:.3f}) with power {best['power']:.3f}, the most of "
                    f"the candidates that hold, so it replaces the rules' choice, "
                    f"{rule_choice}, {why}.")
    rec = dict(rec, chosen=chosen, rule_choice=rule_choice)
    set_aside = None
    if chosen != rule_choice:
        set_aside = ("the rules' choice; at this design "
                     + (f"less powerful ({rule['power']:.3f} against {rows[chosen]['power']:.3f})"
                        if rule["holds"] else
                        f"its estimated familywise error is {rule['fwer']:.3f}, above the "
                        f"limit"))
    return {"procedure": chosen, "sentence": text, "record": rec, "set_aside": set_aside}

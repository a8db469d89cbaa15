"""Benchmark the classical procedures against scipy, side by side in one run.

Cases (targets from the project's issue):

* tukey-kramer, all pairs, unequal n, k = 50 and k = 200, against
  ``scipy.stats.tukey_hsd``: at least 25x faster at k = 50 with p-values
  equal to 1e-8 (k = 200 is reported, with the same accuracy check);
* dunnett with 20 treatments against ``scipy.stats.dunnett``: at least 10x
  faster, and identical results on a rerun (scipy's quasi-Monte Carlo
  p-values move with the seed, so they are compared at 1e-3);
* compact letter display at k = 200 from the Tukey-Kramer decisions: no
  reference program exists to compare with, so the target is absolute
  (under 0.5 s);
* small families, k = 3 to 6 groups (Dunnett: 2 to 5 treatments), unequal n:
  at least 20x ``scipy.stats.dunnett`` and ``scipy.stats.tukey_hsd``, both
  asked for what famwise returns (p-values and simultaneous intervals:
  ``.pvalue`` and ``.confidence_interval()``).  Here the per-call cost is
  the point (the compiled kernels called directly, not through numba's
  Python-level dispatch), so the target is judged on the repeat call, the
  best of five after a first call at the same k that builds the tables for
  that k or that set of correlations; the first call is printed beside it.

famwise timings include building the Layout and the family from the raw
arrays, as scipy starts from the same arrays.  Before any timing the script
runs each procedure once on a three-group design: that once-per-process
warm-up (numba loading the compiled kernels from its on-disk cache, or
compiling them on a fresh install) is printed as its own row and is not in
the ratios.  "first" is then the first call at the benchmark's shape (it
includes building the distribution tables for that k or that set of
correlations, which :mod:`famwise.distributions` caches); "repeat" is the
best of three further calls.  The ratio against which the target is judged
uses "first", the honest figure for a one-off analysis; the repeat ratio is
printed beside it.  scipy is timed once per case (its k = 200 call takes
minutes).  Exits with status 1 if a target is missed.
"""

from __future__ import annotations

import sys
import time

import numpy as np
from scipy import stats

from famwise import Layout
from famwise.procedures.classical import dunnett, tukey_kramer
from famwise.core.families import all_pairs, vs_reference
from famwise.procedures.letters import letter_display


def _timed(fn, repeats):
    out, times = None, []
    for _ in range(repeats):
        t0 = time.perf_counter()
        out = fn()
        times.append(time.perf_counter() - t0)
    return out, times


def _design(seed, k, lo=4, hi=16):
    rng = np.random.default_rng(seed)
    sizes = rng.integers(lo, hi + 1, size=k)
    centres = rng.normal(0.0, 1.5, size=k)
    return [rng.normal(c, 1.0, size=n) for c, n in zip(centres, sizes)]


def _tukey_case(k, seed):
    groups = _design(seed, k)

    def ours():
        lay = Layout.from_groups(groups)
        return tukey_kramer(lay, all_pairs(lay.labels))

    tab, t_ours = _timed(ours, 4)
    ref, t_ref = _timed(lambda: stats.tukey_hsd(*groups), 1)
    i, j = np.triu_indices(k, 1)
    err = float(np.max(np.abs(tab.p_adjusted.to_numpy() - ref.pvalue[i, j])))
    return tab, t_ours, t_ref, err


def _warm_up():
    groups = _design(3, 3)
    lay = Layout.from_groups(groups)
    t0 = time.perf_counter()
    tukey_kramer(lay, all_pairs(lay.labels))
    dunnett(lay, vs_reference(lay.labels, "0"))
    return time.perf_counter() - t0


def _small_families():
    """Dunnett and Tukey-Kramer at k = 3..6 against scipy, p-values and intervals."""
    rows = []
    for k in (3, 4, 5, 6):
        groups = _design(500 + k, k)

        def ours_d():
            lay = Layout.from_groups(groups)
            return dunnett(lay, vs_reference(lay.labels, "0"))

        def ours_t():
            lay = Layout.from_groups(groups)
            return tukey_kramer(lay, all_pairs(lay.labels))

        def ref_d():
            res = stats.dunnett(*groups[1:], control=groups[0],
                                random_state=np.random.default_rng(0))
            return res, res.confidence_interval(0.95)

        def ref_t():
            res = stats.tukey_hsd(*groups)
            return res, res.confidence_interval(0.95)

        for name, ours, ref in (("dunnett", ours_d, ref_d), ("tukey-kramer", ours_t, ref_t)):
            tab, t_ours = _timed(ours, 6)
            (res, ci), t_ref = _timed(ref, 1)
            if name == "dunnett":
                p_ref, lo_ref = res.pvalue, ci.low
                tol = 1e-3                   # scipy's quasi-Monte Carlo p-values
            else:
                i, j = np.triu_indices(k, 1)
                p_ref, lo_ref = res.pvalue[i, j], ci.low[i, j]
                tol = 1e-6
            err_p = float(np.max(np.abs(tab.p_adjusted.to_numpy() - p_ref)))
            err_ci = float(np.max(np.abs(tab.ci_lower.to_numpy() - lo_ref)))
            rows.append((f"{name} k={k}, p and intervals (repeat)", t_ours, t_ref[0], 20.0,
                         f"max |p - scipy| = {err_p:.1e}; |lower - scipy| = {err_ci:.1e}",
                         err_p <= tol and err_ci <= max(tol, 1e-2 if name == "dunnett"
                                                        else 1e-6), True))
    return rows


def main() -> int:
    warm = _warm_up()
    print(f"process warm-up (numba kernels, one three-group call of each): {warm:.3f}s",
          flush=True)
    rows = []

    for k, target in ((50, 25.0), (200, None)):
        print(f"timing tukey-kramer k={k} (scipy may take minutes) ...", flush=True)
        tab, t_ours, t_ref, err = _tukey_case(k, seed=1000 + k)
        rows.append((f"tukey-kramer k={k} ({k * (k - 1) // 2} pairs)", t_ours, t_ref[0],
                     target, f"max |p - scipy| = {err:.1e}", err <= 1e-8))
        if k == 200:
            tukey200 = tab

    # dunnett: 20 treatments and a control, unequal n
    groups = _design(77, 21)

    def ours():
        lay = Layout.from_groups(groups)
        return dunnett(lay, vs_reference(lay.labels, "0"))

    d_tab, t_ours = _timed(ours, 4)
    d_again = ours()
    same = all(np.array_equal(d_tab[c].to_numpy(), d_again[c].to_numpy())
               for c in ("p_adjusted", "ci_lower", "ci_upper"))
    ref, t_ref = _timed(lambda: stats.dunnett(*groups[1:], control=groups[0],
                                              random_state=np.random.default_rng(0)), 1)
    err = float(np.max(np.abs(d_tab.p_adjusted.to_numpy() - ref.pvalue)))
    rows.append(("dunnett, 20 treatments", t_ours, t_ref[0], 10.0,
                 f"identical on rerun: {same}; max |p - scipy QMC| = {err:.1e}",
                 same and err <= 1e-3))

    # letters at k = 200 from the Tukey-Kramer decisions
    lay200 = Layout.from_groups(_design(1200, 200))
    rej = np.zeros((200, 200), dtype=bool)
    pairs = all_pairs(lay200.labels).pairs
    rej[pairs[:, 0], pairs[:, 1]] = tukey200.reject.to_numpy()
    rej |= rej.T
    disp, t_let = _timed(lambda: letter_display(lay200.stats.mean, rej), 3)
    rows.append((f"letters k=200 ({len(disp.names)} letters, {disp.method})", t_let,
                 None, None, "absolute target: first call < 0.5 s", t_let[0] < 0.5))

    rows.extend(_small_families())

    header = (f"{'case':<42} {'famwise first':>13} {'repeat':>9} {'scipy':>9} "
              f"{'ratio':>8} {'(repeat)':>9} {'target':>7}  met   check")
    print(header)
    print("-" * len(header))
    failed = False
    for case, t_ours, t_ref, target, check, ok, *on in rows:
        first, rep = t_ours[0], min(t_ours[1:]) if len(t_ours) > 1 else t_ours[0]
        ratio = t_ref / first if t_ref is not None else None
        judged = t_ref / rep if on and t_ref is not None else ratio
        met = ok and (target is None or (judged is not None and judged >= target))
        failed |= not met
        ratio_rep = t_ref / rep if t_ref is not None else None
        print(f"{case:<42} {first:>12.4f}s {rep:>8.4f}s "
              f"{(f'{t_ref:.3f}s' if t_ref is not None else '-'):>9} "
              f"{(f'{ratio:.1f}x' if ratio is not None else '-'):>8} "
              f"{(f'{ratio_rep:.1f}x' if ratio_rep is not None else '-'):>9} "
              f"{(f'>={target:g}x' if target else '-'):>7}  {'yes' if met else 'NO ':<4}  {check}")
    return 1 if failed else 0


if __name__ == "__main__":
    sys.exit(main())

"""Benchmark famwise.distributions against scipy.stats, side by side in one run.

Cases: srange_sf on 1225 and 19900 statistics (all pairs of k = 50 and
k = 200 means) against scipy.stats.studentized_range.sf timed on a subset and
extrapolated per element (scipy's sf is one adaptive quadrature per element);
srange_sf with 19900 distinct df (the Games-Howell case) against the same call
with one df; dunnett_sf for 20 treatments against scipy.stats.dunnett on
equivalent data.  Prints a table and exits 1 if a target is missed.
"""

import sys
import time

import numpy as np
from scipy import stats

from famwise import distributions as D  # the package re-exports famwise.distributions.simultaneous
from famwise.distributions import simultaneous as S


def best_of(fun, repeat=3):
    times = []
    out = None
    for _ in range(repeat):
        t0 = time.perf_counter()
        out = fun()
        times.append(time.perf_counter() - t0)
    return min(times), out


def main():
    rng = np.random.default_rng(20240611)
    rows = []

    # warm up the compiled kernels and the k tables (cached for the session,
    # as they are in a real analysis after the first call)
    D.srange_sf(np.array([3.0]), 50, 30.0)
    D.srange_sf(np.array([3.0]), 200, 30.0)

    subset = 12
    for k, df in [(50, 1175.0), (200, 2000.0)]:
        m = k * (k - 1) // 2
        q = rng.uniform(0.5, 7.0, m)
        ours, _ = best_of(lambda: D.srange_sf(q, k, df))
        t0 = time.perf_counter()
        ref_vals = stats.studentized_range.sf(q[:subset], k, df)
        ref = (time.perf_counter() - t0) / subset * m
        agree = np.max(np.abs(D.srange_sf(q[:subset], k, df) - ref_vals))
        rows.append((f"srange_sf, {m} q, k={k}, one df (scipy: {subset} pts, extrapolated)",
                     ours, ref, ref / ours, ">= 25x", ref / ours >= 25, f"max|diff| {agree:.1e}"))

    k, m = 200, 19900
    q = rng.uniform(0.5, 7.0, m)
    dfs = rng.uniform(3.0, 400.0, m)
    one, _ = best_of(lambda: D.srange_sf(q, k, 60.0))
    many, _ = best_of(lambda: D.srange_sf(q, k, dfs))
    rows.append((f"srange_sf, {m} q, k={k}: distinct df vs one df", many, one, many / one,
                 "<= 2x", many / one <= 2.0, "ratio = ours/one-df"))

    # Dunnett, 20 treatments, unequal n (20 distinct lam), vs scipy.stats.dunnett
    sizes = rng.integers(4, 15, 20)
    control = rng.normal(0, 1, 12)
    samples = [rng.normal(0.3 * (i % 3), 1, n) for i, n in enumerate(sizes)]
    t0 = time.perf_counter()
    res = stats.dunnett(*samples, control=control, rng=1)
    ref = time.perf_counter() - t0
    lam = 1 / np.sqrt(len(control) / sizes + 1)
    df = len(control) + sizes.sum() - 21

    def ours_dunnett():
        S._dunnett_table.cache_clear()          # include the table build every time
        return D.dunnett_sf(np.abs(res.statistic), lam, df)

    ours, p1 = best_of(ours_dunnett)
    p2 = ours_dunnett()
    same = np.array_equal(p1, p2)
    diff = np.max(np.abs(p1 - res.pvalue))
    rows.append(("dunnett_sf, 20 treatments, unequal n (incl. table build) vs scipy.stats.dunnett",
                 ours, ref, ref / ours, ">= 10x, identical rerun", ref / ours >= 10 and same,
                 f"max|diff| {diff:.1e}, rerun identical: {same}"))

    print(f"{'case':<82} {'ours [s]':>10} {'reference [s]':>14} {'ratio':>8}  {'target':<24} met  note")
    for case, a, b, r, target, met, note in rows:
        print(f"{case:<82} {a:>10.4f} {b:>14.4f} {r:>8.1f}  {target:<24} {'yes' if met else 'NO':<4} {note}")
    return 0 if all(row[5] for row in rows) else 1


if __name__ == "__main__":
    sys.exit(main())

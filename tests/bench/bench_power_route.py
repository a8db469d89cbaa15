"""Benchmark: the route's power step (famwise.diagnostics.power_choice) on every compare.

Target (issue 15, item 6): the step runs on every ``compare``, so at N = 50,
k = 6 with the policy's 1,000 replicates it must take well under a second:
target 0.5 s (best of five, first call excluded: numba compilation and
critical-value tables).  Shown side by side in the same run: the step with
2,000 replicates, and ``compare`` with the step on and off (their ratio is
what a user pays).  Exits 1 if the target is missed.
"""

from __future__ import annotations

import sys
import time
import warnings

import numpy as np

import famwise
from famwise.core.families import all_pairs
from famwise.core.layout import Layout
from famwise.diagnostics import Policy
from famwise.diagnostics import power_choice
from famwise.diagnostics.power_choice import power_calibration

SIZES = (8, 8, 8, 8, 9, 9)          # N = 50, k = 6
SDS = (1.0, 1.0, 1.5, 2.0, 2.5, 3.0)
TARGET = 0.5


def best_of(fn, times=5):
    out = np.inf
    for _ in range(times):
        power_choice._CACHE.clear()
        t0 = time.perf_counter()
        fn()
        out = min(out, time.perf_counter() - t0)
    return out


def main() -> int:
    rng = np.random.default_rng(3)
    lay = Layout.from_groups([rng.normal(10, s, n) for n, s in zip(SIZES, SDS)],
                             [f"g{i}" for i in range(len(SIZES))])
    fam = all_pairs(lay.labels)
    names = power_choice.candidates(fam, "dunnett-t3")
    power_calibration(lay, fam, procedures=names)                     # warm up
    step = {r: best_of(lambda r=r: power_calibration(lay, fam, procedures=names,
                                                     replicates=r)) for r in (1000, 2000)}
    warnings.simplefilter("ignore")
    on = best_of(lambda: famwise.compare(lay, crosscheck=False, resamples=199, seed=1,
                                         policy=Policy(power_route=True)), 3)
    off = best_of(lambda: famwise.compare(lay, crosscheck=False, resamples=199, seed=1,
                                          policy=Policy(power_route=False)), 3)
    met = step[1000] <= TARGET
    print(f"{'case':<58} {'time (s)':>9} {'target':>8} {'met':>4}")
    print(f"{'power step, 1,000 replicates, N = 50, k = 6, 5 candidates':<58} "
          f"{step[1000]:>9.3f} {'<= 0.5':>8} {'yes' if met else 'NO':>4}")
    print(f"{'power step, 2,000 replicates':<58} {step[2000]:>9.3f} {'-':>8} {'-':>4}")
    print(f"{'compare, step on / step off (crosscheck off, B = 199)':<58} "
          f"{on:>5.3f} / {off:.3f} = {on / off:.1f}x")
    return 0 if met else 1


if __name__ == "__main__":
    sys.exit(main())

"""Benchmark: a power curve, and the demo with its plan, against the issue's budgets.

Targets (issue 16), on two cores:
* a power curve of 6 sizes x 4 procedures x 2,000 replicates, one of them a
  resampling procedure (bootstrap-hall, by the warp-speed method), plus the
  automatic pipeline: under 60 s;
* ``famwise demo`` (two comparisons with their calibrations, and the plan of
  the next season): under 10 s, as a fresh process (imports included).

Each is timed once after a warm-up run (numba compilation and tables are
excluded from the first and included in neither).  Wall time is the target;
CPU time (user + system, the process and its children) is printed beside it,
because on a shared machine the wall time also counts the waits for a core.
Exits 1 if a target is missed.
"""

from __future__ import annotations

import os
import resource
import subprocess
import sys
import tempfile
import time

import famwise

SIZES = [6, 8, 10, 12, 16, 20]
PROCEDURES = ["tukey-kramer", "games-howell", "dunnett-t3", "bootstrap-hall", "auto"]


def curve():
    return famwise.plan(sd=[1.0, 1.0, 1.5, 2.0, 1.0, 1.2], margin=1.5, n=SIZES,
                        procedures=PROCEDURES, replicates=2000, seed=7, n_jobs=2)


def demo(folder):
    exe = os.path.join(os.path.dirname(sys.executable), "famwise")
    subprocess.run([exe, "demo", "--out", folder, "--force", "--quiet"], check=True,
                   stderr=subprocess.DEVNULL)


def _timed(fn, *args):
    c0 = resource.getrusage(resource.RUSAGE_SELF)
    k0 = resource.getrusage(resource.RUSAGE_CHILDREN)
    t0 = time.perf_counter()
    fn(*args)
    wall = time.perf_counter() - t0
    c1 = resource.getrusage(resource.RUSAGE_SELF)
    k1 = resource.getrusage(resource.RUSAGE_CHILDREN)
    cpu = sum(getattr(b, f) - getattr(a, f) for a, b in ((c0, c1), (k0, k1))
              for f in ("ru_utime", "ru_stime"))
    return wall, cpu


def main() -> int:
    famwise.plan(sd=[1, 1, 2], margin=1, n=[4], replicates=500, seed=1,
                 procedures=PROCEDURES)                          # warm up
    rows = []
    with tempfile.TemporaryDirectory() as tmp:
        demo(os.path.join(tmp, "warm"))
        rows.append(("power curve: 6 sizes x 4 procedures (+ auto) x 2,000",
                     *_timed(curve), 60.0))
        rows.append(("famwise demo with the next season's plan",
                     *_timed(demo, os.path.join(tmp, "d")), 10.0))
    print(f"{'case':<58} {'wall (s)':>9} {'cpu (s)':>8} {'target':>8} {'met':>4}")
    missed = False
    for case, wall, cpu, target in rows:
        met = wall < target
        missed |= not met
        print(f"{case:<58} {wall:>9.2f} {cpu:>8.2f} {'< ' + format(target, 'g'):>8} "
              f"{'yes' if met else 'NO':>4}")
    return 1 if missed else 0


if __name__ == "__main__":
    sys.exit(main())

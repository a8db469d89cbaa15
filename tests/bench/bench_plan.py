"""Benchmark: a power curve, and the demo with its plan, against the issue's budgets.

Targets (issue 16), on two cores:
* a power curve of 6 sizes x 4 procedures x 2,000 replicates, one of them a
  resampling procedure (bootstrap-hall, by the warp-speed method), plus the
  automatic pipeline: under 60 s;
* ``famwise demo`` (two comparisons with their calibrations, and the plan of
  the next season): under 10 s, as a fresh process (imports included);
* the same curve for each group against a reference (dunnett, welch-dunnett,
  permutation-maxt, bootstrap-hall and the pipeline): under 60 s;
* Welch-Dunnett on 2,000 stacked replicates: the per-element tail
  (famwise.distributions.dunnett_rows) at least 10x faster than the previous
  method, a tabulated dunnett_sf per replicate, side by side on the same
  replicates, with identical decisions.

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
REFERENCE = ["dunnett", "welch-dunnett", "permutation-maxt", "bootstrap-hall", "auto"]


def curve():
    return famwise.plan(sd=[1.0, 1.0, 1.5, 2.0, 1.0, 1.2], margin=1.5, n=SIZES,
                        procedures=PROCEDURES, replicates=2000, seed=7, n_jobs=2)


def reference_curve():
    return famwise.plan(sd=[1.0, 1.0, 1.5, 2.0, 1.0, 1.2], margin=1.5, n=SIZES,
                        procedures=REFERENCE, replicates=2000, seed=7, n_jobs=2,
                        family="vs-reference", reference="g1")


def _welch_dunnett_stack():
    import numpy as np
    from famwise.core.families import vs_reference
    from famwise.diagnostics.simulate import Scenario, draw
    fam = vs_reference([f"g{i}" for i in range(6)], "g0")
    stack = draw(Scenario((10,) * 6, (0.0, 1.5, 0.0, 0.0, 0.0, 0.0),
                          (1.0, 1.0, 1.5, 2.0, 1.0, 1.2)), 2000, np.random.default_rng(3))
    return fam, stack


def welch_dunnett_rows(fam, stack, out):
    from famwise.diagnostics.stacked_procedures import closed_form_rejects
    out["rows"] = closed_form_rejects("welch-dunnett", fam, stack, 0.05)


def welch_dunnett_tables(fam, stack, out):
    """The previous method: Bonferroni band, then a tabulated dunnett_sf per cell."""
    import numpy as np
    from scipy import stats
    from famwise.diagnostics.stacked_procedures import welch_t
    from famwise.distributions import simultaneous as dist
    t, df = welch_t(fam.weights, stack.means, stack.vars, stack.n)
    p = 2 * stats.t.sf(np.abs(t), df)
    res = fam.m * p <= 0.05
    v = stack.vars / stack.n
    ref, others = fam.reference, fam.pairs[:, 0]
    for r in np.flatnonzero(np.any((p <= 0.05) & ~res, axis=1)):
        lam = np.sqrt(v[r, ref] / (v[r, ref] + v[r, others]))
        for i in np.flatnonzero((p[r] <= 0.05) & ~res[r]):
            res[r, i] = float(dist.dunnett_sf(abs(t[r, i]), lam, float(df[r, i]))) <= 0.05
    out["tables"] = res


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
    famwise.plan(sd=[1, 1, 2], margin=1, n=[4], replicates=500, seed=1,
                 procedures=REFERENCE, family="vs-reference", reference="g1")
    rows = []
    with tempfile.TemporaryDirectory() as tmp:
        demo(os.path.join(tmp, "warm"))
        rows.append(("power curve: 6 sizes x 4 procedures (+ auto) x 2,000",
                     *_timed(curve), 60.0))
        rows.append(("famwise demo with the next season's plan",
                     *_timed(demo, os.path.join(tmp, "d")), 10.0))
        rows.append(("power curve against a reference: 6 sizes x 4 (+ auto) x 2,000",
                     *_timed(reference_curve), 60.0))
    print(f"{'case':<64} {'wall (s)':>9} {'cpu (s)':>8} {'target':>8} {'met':>4}")
    missed = False
    for case, wall, cpu, target in rows:
        met = wall < target
        missed |= not met
        print(f"{case:<64} {wall:>9.2f} {cpu:>8.2f} {'< ' + format(target, 'g'):>8} "
              f"{'yes' if met else 'NO':>4}")
    fam, stack = _welch_dunnett_stack()
    out: dict = {}
    welch_dunnett_rows(fam, stack, out)                          # warm up
    ours = _timed(welch_dunnett_rows, fam, stack, out)[0]
    theirs = _timed(welch_dunnett_tables, fam, stack, out)[0]
    same = bool((out["rows"] == out["tables"]).all())
    ratio = theirs / ours
    met = ratio >= 10 and same
    missed |= not met
    print(f"\n{'case':<64} {'ours (s)':>9} {'tables':>8} {'ratio':>7} {'target':>7} "
          f"{'met':>4}")
    print(f"{'Welch-Dunnett, 2,000 stacked replicates, 5 vs reference':<64} {ours:>9.2f} "
          f"{theirs:>8.2f} {ratio:>7.1f} {'>= 10':>7} {'yes' if met else 'NO':>4}"
          f"{'' if same else ' (decisions differ)'}")
    return 1 if missed else 0


if __name__ == "__main__":
    sys.exit(main())

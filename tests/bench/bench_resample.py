"""Benchmark the resampling engine; exit non-zero if a target is missed.

Everything is measured side by side in this one run and printed as a table:

1. permutation max-T, all pairs, k = 6, n = 1,000 each, B = 9,999, one core,
   against scipy.stats.permutation_test(permutation_type="independent",
   vectorized=True) computing the same max |Welch t|, both at B = 9,999
   (scipy with its default batch: every resample at once);
   nanoseconds per element-resample (N * B);
2. step-down against single-step;
3. n_jobs = 2 against n_jobs = 1 at B = 99,999 (threads);
4. bootstrap max-t against permutation max-T at the size of 1;
5. N = 1,000,000, k = 10, B = 9,999: peak resident memory of a fresh
   process, and time at four sizes (linear in N * B);
6. rank and score max-T by permutation of all N labels against the Welch
   permutation max-T at the same N and B (k = 3, n = 2,000 and k = 6,
   n = 1,000; B = 9,999): the resampling time of each run
   (``attrs["resampling"]["seconds"]``, side by side), target 1.3x (issue
   15): Dunn's z (linear scores, the Welch loop without sums of squares),
   Steel-Dwass on untied and on tied values and Brunner-Munzel (pairwise
   U-statistics, O(N k) per permutation).  The whole call (with the
   Hodges-Lehmann shifts) is shown for information.
7. permutation within blocks (the block model's pooled t, error mean square
   recomputed per permutation) against the one-way engine at the same N and
   B: a field trial (6 groups x 4 blocks, one plot each, B = 99,999) and
   10 blocks of 100 plots per group (k = 6, N = 6,000, B = 9,999), target
   <= 1.3 each; for information 1,000 blocks of one plot per group, the
   Welch statistic, a missing plot, a covariate (Freedman-Lane), and the
   wild bootstrap.
"""

from __future__ import annotations

import json
import os
import subprocess
import sys
import textwrap
import time
import warnings

import numpy as np
from scipy import stats

from famwise.core.families import all_pairs
from famwise.core.layout import Layout
from famwise.resample import (UnsettledWarning, bootstrap_hall, bootstrap_maxt,
                              permutation_maxt, permutation_stepdown, wild_bootstrap_maxt)

warnings.simplefilter("ignore", UnsettledWarning)

ROWS = []
FAILED = []


def row(name, value, target, ok, note=""):
    ROWS.append((name, value, target, "ok" if ok else "MISSED", note))
    if not ok:
        FAILED.append(name)


def timed(fn, *args, repeats=3, **kw):
    """Best wall time of ``repeats`` calls (the machine is shared, so the
    minimum is the least disturbed measurement), and the last result."""
    best = np.inf
    for _ in range(repeats):
        t0 = time.perf_counter()
        out = fn(*args, **kw)
        best = min(best, time.perf_counter() - t0)
    return best, out


def welch_max(*samples, axis=-1):
    k = len(samples)
    mx = None
    for a in range(k):
        for b in range(a + 1, k):
            xa, xb = samples[a], samples[b]
            t = (xa.mean(axis=axis) - xb.mean(axis=axis)) / np.sqrt(
                xa.var(axis=axis, ddof=1) / xa.shape[axis]
                + xb.var(axis=axis, ddof=1) / xb.shape[axis])
            mx = np.abs(t) if mx is None else np.maximum(mx, np.abs(t))
    return mx


BIG = textwrap.dedent("""
    import json, resource, sys, time, warnings
    import numpy as np
    from famwise.core.layout import Layout
    from famwise.core.families import all_pairs
    from famwise.resample import permutation_maxt, UnsettledWarning
    warnings.simplefilter("ignore", UnsettledWarning)
    rng = np.random.default_rng(3)
    out = []
    tiny = Layout.from_groups([rng.normal(size=20000) for _ in range(10)])
    permutation_maxt(tiny, all_pairs(tiny.labels), resamples=3, seed=1)  # load kernels
    for n_total, b, repeats in [(250_000, 1999, 3), (500_000, 1999, 3),
                                (1_000_000, 1999, 2), (1_000_000, 9999, 1)]:
        lay = Layout.from_groups([rng.normal(size=n_total // 10) for _ in range(10)])
        fam = all_pairs(lay.labels)
        best = float("inf")
        for _ in range(repeats):
            t0 = time.perf_counter()
            permutation_maxt(lay, fam, resamples=b, seed=1)
            best = min(best, time.perf_counter() - t0)
        out.append([n_total, b, best])
        del lay
    # VmHWM is this process's own high-water mark; ru_maxrss would also count
    # the parent's resident size at the fork before exec (a Linux quirk).
    try:
        with open("/proc/self/status") as fh:
            peak = next(int(line.split()[1]) for line in fh if line.startswith("VmHWM")) * 1024
    except (OSError, StopIteration):
        peak = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss * 1024
    print(json.dumps({"sizes": out, "peak": peak}))
""")


def interleaved(calls, rounds=5):
    """Best CPU time of each call over ``rounds`` interleaved rounds.

    The calls run with n_jobs=1, in this thread, so the thread's CPU time is
    their cost; unlike wall time it does not count the time other jobs on
    the shared machine take the core away."""
    best = [np.inf] * len(calls)
    for _ in range(rounds):
        for i, call in enumerate(calls):
            t0 = time.thread_time()
            call()
            best[i] = min(best[i], time.thread_time() - t0)
    return best


def blocked_rows(layout, fam, b):
    """Section 7: within-block permutation against the one-way engine."""
    k, big_n = layout.k, layout.n_total
    n = big_n // k
    few = np.tile(np.repeat(np.arange(10), n // 10), k)        # 10 blocks, 100 per cell
    many = np.tile(np.arange(n), k)                              # n blocks, 1 per cell
    cov = np.random.default_rng(5).normal(size=big_n)
    keep = np.ones(big_n, dtype=bool)
    keep[0] = False                                              # one missing plot
    holed = Layout(values=layout.values[keep], codes=layout.codes[keep], labels=layout.labels)
    # A field trial's size: 6 groups x 4 blocks, one plot each, B = 99,999.
    rng = np.random.default_rng(9)
    trial = Layout.from_groups([rng.normal(size=4) for _ in range(6)])
    trial_fam = all_pairs(trial.labels)
    trial_blocks = np.tile(np.arange(4), 6)
    cases = [
        # (name, options, layout, family, B, one-way layout, target)
        ("6 groups x 4 blocks, one plot each", dict(blocks=trial_blocks), trial, trial_fam,
         99_999, trial, True),
        ("10 blocks of 100 plots per group", dict(blocks=few), layout, fam, b, layout, True),
        ("1,000 blocks of one plot per group (information)", dict(blocks=many), layout, fam,
         b, layout, False),
        ("10 blocks, Welch statistic (information)", dict(blocks=few, statistic="welch"),
         layout, fam, b, layout, False),
        ("1,000 blocks, one missing plot (information)", dict(blocks=many[keep]), holed, fam,
         b, layout, False),
        ("1,000 blocks + a covariate (information)", dict(blocks=many, covariates=cov),
         layout, fam, b, layout, False),
    ]
    for _, kw, lay, fm, _, _, _ in cases:
        permutation_maxt(lay, fm, resamples=50, seed=1, **kw)   # compile or load
    for name, kw, lay, fm, bb, one_way, target in cases:
        t_one, t_blk = interleaved([
            lambda: permutation_maxt(one_way, fm, resamples=bb, seed=1),
            lambda: permutation_maxt(lay, fm, resamples=bb, seed=1, **kw)])
        ratio = t_blk / t_one
        row(f"within-block / one-way time, {name}", f"{ratio:.2f}",
            "<= 1.3" if target else "-", (not target) or ratio <= 1.3,
            f"{t_blk:.3f} s vs {t_one:.3f} s, N={lay.n_total:,}, B={bb:,}")
    wild_bootstrap_maxt(trial, trial_fam, blocks=trial_blocks, resamples=50, seed=1)
    t_one, t_wild = interleaved([
        lambda: permutation_maxt(trial, trial_fam, resamples=99_999, seed=1),
        lambda: wild_bootstrap_maxt(trial, trial_fam, blocks=trial_blocks, resamples=99_999,
                                    seed=1)], rounds=3)
    row("  wild-bootstrap-maxt / one-way permutation time, 6 x 4 trial (information)",
        f"{t_wild / t_one:.2f}", "-", True,
        f"{t_wild:.3f} s vs {t_one:.3f} s at B=99,999; HC3 refit per resample")


def main():
    rng = np.random.default_rng(20240601)
    k, n, b = 6, 1000, 9999
    groups = [rng.normal(size=n) for _ in range(k)]
    layout = Layout.from_groups(groups)
    fam = all_pairs(layout.labels)
    big_n = k * n
    for fn in (permutation_maxt, permutation_stepdown, bootstrap_maxt, bootstrap_hall):
        fn(layout, fam, resamples=50, seed=1)             # compile or load the kernels

    # 1. against scipy at the same B, side by side
    t_perm, _ = timed(permutation_maxt, layout, fam, resamples=b, seed=1)
    t_scipy, _ = timed(stats.permutation_test, groups, welch_max,
                       permutation_type="independent", vectorized=True,
                       n_resamples=b, alternative="greater",
                       rng=np.random.default_rng(1), repeats=1)
    speedup = t_scipy / t_perm
    row("permutation max-T vs scipy permutation_test", f"{speedup:.1f}x", ">= 30x",
        speedup >= 30,
        f"ours {t_perm:.3f} s; scipy {t_scipy:.2f} s, both at B={b}")
    t_batched, _ = timed(stats.permutation_test, groups, welch_max,
                         permutation_type="independent", vectorized=True,
                         n_resamples=b, batch=1000, alternative="greater",
                         rng=np.random.default_rng(1), repeats=1)
    row("  same, scipy in batches of 1,000 (information)", f"{t_batched / t_perm:.1f}x",
        "-", True, f"scipy {t_batched:.2f} s; its memory-bound default is the target's call")
    ns = t_perm / (big_n * b) * 1e9
    row("ns per element-resample (k=6, n=1000, B=9999)", f"{ns:.2f} ns", "<= 3 ns",
        ns <= 3.0, "includes table building and seeding")

    # 2. step-down against single-step
    t_step, _ = timed(permutation_stepdown, layout, fam, resamples=b, seed=1)
    t_single, _ = timed(permutation_maxt, layout, fam, resamples=b, seed=1)
    ratio = t_step / t_single
    row("step-down / single-step time", f"{ratio:.3f}", "<= 1.15", ratio <= 1.15,
        f"{t_step:.3f} s vs {t_single:.3f} s")

    # 3. two workers against one, B = 99,999
    b_par = 99_999
    t1 = t2 = np.inf
    for _ in range(3):       # interleaved, so both see the same disturbance
        s1, r1 = timed(permutation_maxt, layout, fam, resamples=b_par, seed=2, n_jobs=1,
                       repeats=1)
        s2, r2 = timed(permutation_maxt, layout, fam, resamples=b_par, seed=2, n_jobs=2,
                       repeats=1)
        t1, t2 = min(t1, s1), min(t2, s2)
    same = r1.drop(columns="procedure").equals(r2.drop(columns="procedure"))
    par = t1 / t2
    row("n_jobs=2 speed-up (threads, B=99,999)", f"{par:.2f}x", ">= 1.8x", par >= 1.8,
        f"{t1:.2f} s vs {t2:.2f} s; identical results: {same}")
    if not same:
        FAILED.append("identical results for n_jobs 1 and 2")

    # 4. bootstrap against permutation
    t_boot, _ = timed(bootstrap_maxt, layout, fam, resamples=b, seed=1)
    t_perm2, _ = timed(permutation_maxt, layout, fam, resamples=b, seed=1)
    ratio = t_boot / t_perm2
    row("bootstrap / permutation time", f"{ratio:.2f}", "<= 1.5", ratio <= 1.5,
        f"{t_boot:.3f} s vs {t_perm2:.3f} s")
    t_hall, _ = timed(bootstrap_hall, layout, fam, resamples=b, seed=1)
    t_boot2, _ = timed(bootstrap_maxt, layout, fam, resamples=b, seed=1)
    row("  bootstrap-hall / bootstrap-maxt time (information)", f"{t_hall / t_boot2:.2f}",
        "-", True, f"{t_hall:.3f} s vs {t_boot2:.3f} s; third moments and the transformation")

    # 7. within-block permutation against the one-way engine, same N and B
    blocked_rows(layout, fam, b)

    # 5. large data in a fresh process: memory and linearity in N * B
    # Run as a script from a scratch folder, so the child imports the installed
    # package (with its compiled-kernel cache) as a user's program would,
    # rather than the source tree through the current directory.
    import tempfile
    with tempfile.TemporaryDirectory() as scratch:
        script = os.path.join(scratch, "big_run.py")
        with open(script, "w") as fh:
            fh.write(BIG)
        proc = subprocess.run([sys.executable, script], capture_output=True, text=True,
                              env=dict(os.environ), cwd=scratch)
    if proc.returncode != 0:
        print(proc.stderr)
        FAILED.append("large-data run")
    else:
        big = json.loads(proc.stdout.strip().splitlines()[-1])
        peak_gb = big["peak"] / 1e9
        row("peak memory, N=1e6, k=10, B=9,999", f"{peak_gb:.3f} GB", "<= 1 GB",
            peak_gb <= 1.0, "peak resident size (VmHWM) of a fresh process, interpreter included")
        per = []
        for n_total, bb, sec in big["sizes"]:
            nspe = sec / (n_total * bb) * 1e9
            per.append(nspe)
            ROWS.append((f"  N={n_total:,}, B={bb:,}", f"{sec:.2f} s",
                         "", "", f"{nspe:.2f} ns per element-resample"))
        spread = max(per) / min(per)
        row("linearity in N*B (max/min ns per element-resample)", f"{spread:.2f}",
            "<= 1.5", spread <= 1.5, "four sizes above")

    # 6. rank and score kernels against the Welch permutation engine
    from famwise.procedures.brunner_munzel import brunner_munzel_maxt
    from famwise.procedures.ranks import dunn_holm, steel_dwass
    for k6, n6 in ((3, 2000), (6, 1000)):
        rng6 = np.random.default_rng(k6)
        lay6 = Layout.from_groups([rng6.normal(size=n6) for _ in range(k6)])
        tied6 = Layout.from_groups([np.round(rng6.normal(size=n6), 1) for _ in range(k6)])
        fam6 = all_pairs(lay6.labels)
        runs = {"Welch permutation-maxt": (permutation_maxt, lay6, {}),
                "Dunn z (score sums)": (dunn_holm, lay6, {"method": "permutation"}),
                "Steel-Dwass, untied": (steel_dwass, lay6, {"method": "permutation"}),
                "Steel-Dwass, tied": (steel_dwass, tied6, {"method": "permutation"}),
                "Brunner-Munzel": (brunner_munzel_maxt, lay6, {})}
        seconds, whole = {}, {}
        for label, (fn, lay_, kw) in runs.items():
            fn(lay_, fam6, resamples=50, seed=1, **kw)          # load the kernels
            best, best_whole = np.inf, np.inf
            for _ in range(3):
                t0 = time.perf_counter()
                tab = fn(lay_, fam6, resamples=b, seed=1, **kw)
                best_whole = min(best_whole, time.perf_counter() - t0)
                best = min(best, tab.attrs["resampling"]["seconds"])
            seconds[label], whole[label] = best, best_whole
        base = seconds["Welch permutation-maxt"]
        for label in list(runs)[1:]:
            ratio = seconds[label] / base
            row(f"{label} / Welch, k={k6}, n={n6}, B={b}", f"{ratio:.2f}x", "<= 1.3x",
                ratio <= 1.3, f"{seconds[label]:.3f} s vs {base:.3f} s resampling; whole "
                f"call {whole[label]:.2f} s vs {whole['Welch permutation-maxt']:.2f} s")

    print("times are the best of 1-3 runs each; the machine is shared with other jobs")
    widths = [max(len(str(r[i])) for r in ROWS + [("measure", "value", "target",
                                                   "status", "note")]) for i in range(5)]
    header = ("measure", "value", "target", "status", "note")
    for r in [header] + ROWS:
        print("  ".join(str(c).ljust(w) for c, w in zip(r, widths)))
    if FAILED:
        print("missed: " + "; ".join(FAILED))
        sys.exit(1)


if __name__ == "__main__":
    main()

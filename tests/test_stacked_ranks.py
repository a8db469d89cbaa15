"""Rank and censored-score procedures and the robust route on stacked replicates.

References, named per check:
* scipy.stats.mannwhitneyu (method="asymptotic", use_continuity=False): each
  pair's U and its tie-corrected normal p-value, the pair statistic of
  Steel-Dwass and Steel, and of Gehan's statistic without non-detects;
* scipy.stats.brunnermunzel: the Brunner-Munzel statistic of each pair;
* scipy.stats.rankdata: the mid-ranks of every row;
* consistency checks (labelled so): famwise's one-data-set procedures
  (run_procedure: dunn-holm, dunn-bonferroni, steel-dwass, steel,
  brunner_munzel_pairs, the Gehan and Peto statistics of famwise.resample.censored;
  each checked against scipy, lifelines and published tables in test_ranks.py
  and test_censored.py) give the same p-values and decisions as the stacked
  forms on every one of a few hundred random replicates;
* the warp-speed method (Giacomini, Politis & White 2013) against the full
  nested computation: every replicate with its own B = 499 permutations
  through famwise's procedures; the rejection rates agree within 3 combined
  binomial SEs (+ 0.01 for the finite B);
* the real route (route.choose on run_checks, the one-data-set path tested
  in test_route.py): the stacked route picks the same procedure on every
  replicate, with gross values, skew and unequal spreads.
"""

import warnings

import numpy as np
import pytest
from scipy import stats

from famwise.core.families import all_pairs, vs_reference
from famwise.core.layout import Layout
from famwise.diagnostics import Policy, run_checks
from famwise.diagnostics.route import choose
from famwise.diagnostics.simulate import Scenario, draw, route_table, simulate
from famwise.diagnostics.stacked import Blocks, stacked_checks
from famwise.diagnostics.stacked_censored import _scores_t
from famwise.diagnostics.stacked_procedures import Stack
from famwise.diagnostics.stacked_ranks import (brunner_munzel_w, pair_wilcoxon_z, rank_pvalues,
                                               rank_rejects, row_ranks)
from famwise.diagnostics.stacked_route import route_keys
from famwise.procedures.brunner_munzel import brunner_munzel_pairs
from famwise.procedures.catalogue import run_procedure
from conftest import assert_warp_agrees


def _stack(n, r, seed, ties=False):
    rng = np.random.default_rng(seed)
    b = Blocks.of(n)
    scale = rng.uniform(0.5, 2.0, b.k)[b.codes]
    x = rng.standard_normal((r, b.total)) * scale + rng.normal(0, 0.6, b.k)[b.codes]
    x[: r // 3] = np.exp(x[: r // 3])                       # a third skewed
    if ties:
        x[r // 2:] = np.round(x[r // 2:] * 2) / 2           # half of them heavily tied
    return Stack(x, b)


def _layout(stack, r, labels):
    return Layout.from_groups([stack.x[r, s] for s in stack.blocks.slices()], labels)


def test_row_ranks_equal_scipy_rankdata():
    st = _stack([5, 7, 6], 200, 1, ties=True)
    ranks, ties = row_ranks(st.x)
    np.testing.assert_array_equal(ranks, stats.rankdata(st.x, axis=1))
    for row, t in zip(st.x, ties):
        _, counts = np.unique(row, return_counts=True)
        assert t == np.sum(counts ** 3 - counts)


def test_pair_statistics_equal_scipy():
    """Pair z against scipy.stats.mannwhitneyu's tie-corrected normal p, and
    Brunner-Munzel's W against scipy.stats.brunnermunzel, row by row."""
    st = _stack([6, 9, 7], 200, 2, ties=True)
    fam = all_pairs(["0", "1", "2"])
    z = pair_wilcoxon_z(fam, st)
    w = brunner_munzel_w(fam, st)
    sl = st.blocks.slices()
    for r in range(st.replicates):
        for j, (a, b) in enumerate(fam.pairs):
            xa, xb = st.x[r, sl[a]], st.x[r, sl[b]]
            mw = stats.mannwhitneyu(xa, xb, method="asymptotic", use_continuity=False)
            assert abs(2 * stats.norm.sf(abs(z[r, j])) - mw.pvalue) < 1e-12
            assert np.sign(z[r, j]) == np.sign(mw.statistic - xa.size * xb.size / 2)
            if np.ptp(np.r_[xa, xb]) > 0 and not (xa.max() < xb.min() or xb.max() < xa.min()):
                bm = stats.brunnermunzel(xb, xa)
                assert abs(w[r, j] - bm.statistic) < 1e-10


@pytest.mark.parametrize("kind", ["all-pairs", "vs-reference"])
def test_asymptotic_rank_procedures_equal_run_procedure(kind):
    """Consistency check: stacked p-values and decisions of the asymptotic rank
    procedures equal famwise's one-data-set procedures on 300 replicates."""
    labels = ["0", "1", "2", "3"]
    fam = all_pairs(labels) if kind == "all-pairs" else vs_reference(labels, "0")
    st = _stack([10, 12, 11, 14], 300, 3, ties=True)
    names = ["dunn-holm", "dunn-bonferroni", "steel-dwass" if kind == "all-pairs" else "steel"]
    for name in names:
        p = rank_pvalues(name, fam, st)
        rej = rank_rejects(name, fam, st, 0.05)
        for r in range(st.replicates):
            table = run_procedure(name, _layout(st, r, labels), fam, alpha=0.05,
                                  method="asymptotic")
            np.testing.assert_allclose(p[r], table["p_adjusted"].to_numpy(), atol=1e-12)
            assert np.array_equal(rej[r], table["p_adjusted"].to_numpy() <= 0.05), (name, r)
    w = brunner_munzel_w(fam, st)
    for r in range(st.replicates):
        np.testing.assert_allclose(w[r], brunner_munzel_pairs(_layout(st, r, labels),
                                                              fam).statistic, atol=1e-10)


def test_censored_scores_equal_the_one_data_set_statistics():
    """Consistency check: the stacked Gehan and Peto-Prentice pair statistics
    equal famwise.resample.censored's (both kernels) with three limits; without
    non-detects Gehan's is the Wilcoxon z (scipy.stats.mannwhitneyu)."""
    from famwise.diagnostics.stacked_censored import CensoredScenario
    from famwise.resample.censored import _gehan_problem, _observed
    labels = ["0", "1", "2"]
    fam = all_pairs(labels)
    sc = CensoredScenario((8, 10, 9), (0.0, 0.3, -0.2), (1.0, 0.7, 1.3), (0.5, 1.0, 1.5),
                          ((.5, .3, .2), (.2, .5, .3), (1 / 3, 1 / 3, 1 / 3)))
    st = sc.draw(200, np.random.default_rng(4))
    assert 0.2 < st.censored.mean() < 0.6
    sl = st.blocks.slices()
    for name, weight in (("gehan-maxt", 0), ("peto-maxt", 1)):
        t = _scores_t(name, fam, st.x, st.censored, st.blocks)
        for r in range(st.replicates):
            lay = Layout.from_groups([st.x[r, s] for s in sl], labels,
                                     censored=[st.censored[r, s] for s in sl])
            np.testing.assert_allclose(t[r], _observed(lay, fam, weight)[1], atol=1e-12)
            if weight == 0:
                np.testing.assert_allclose(t[r], _gehan_problem(lay, fam, "two-sided")[0],
                                           atol=1e-12)
    plain = _stack([6, 8, 7], 100, 5)
    g = _scores_t("gehan-maxt", fam, plain.x, np.zeros(plain.x.shape, bool), plain.blocks)
    np.testing.assert_allclose(g, pair_wilcoxon_z(fam, plain), atol=1e-12)


@pytest.mark.filterwarnings("ignore::famwise.core.errors.FamwiseWarning")
def test_warp_speed_rank_procedures_agree_with_the_full_nested_computation():
    """Rejection rates of the permutation rank procedures (groups of 7: the
    policy's permutation sizes) for the shifted pair and for any pair: warp
    speed (4,000 replicates, one permutation each) against the nested
    computation (150 replicates, each with its own 499 permutations)."""
    labels = ["0", "1", "2"]
    fam = all_pairs(labels)
    design = Scenario((7, 7, 7), (0.0, 1.3, 0.0), (1.0, 1.0, 1.8))
    names = ["steel-dwass", "dunn-holm", "brunner-munzel-maxt"]
    warp = simulate(design, fam, names, replicates=4000, seed=np.random.SeedSequence(20))
    assert all(warp.methods[n].startswith("warp-speed") for n in names)
    stack = draw(design, 150, np.random.default_rng(21))
    nested = {n: [] for n in names}
    for r in range(stack.replicates):
        lay = _layout(stack, r, labels)
        for name in names:
            extra = {} if name == "brunner-munzel-maxt" else {"method": "permutation"}
            t = run_procedure(name, lay, fam, alpha=0.05, resamples=499, seed=3000 + r,
                              **extra)
            nested[name].append(t["p_adjusted"].to_numpy() <= 0.05)
    assert_warp_agrees(warp.rejects, nested)


@pytest.mark.filterwarnings("ignore::famwise.core.errors.FamwiseWarning")
def test_warp_speed_censored_procedures_agree_with_the_full_nested_computation():
    """Rejection rates of gehan-maxt and peto-maxt (lognormal groups, two
    detection limits, one group shifted on the log scale) for the shifted pair
    and for any pair: warp speed (4,000 replicates, one permutation each)
    against the nested computation (150 replicates, each with its own 499
    permutations)."""
    from famwise.diagnostics.stacked_censored import CensoredScenario
    labels = ["0", "1", "2"]
    fam = all_pairs(labels)
    sc = CensoredScenario((9, 9, 9), (0.0, 1.1, 0.0), (1.0, 1.0, 1.0), (0.6, 1.2),
                          ((0.5, 0.5),) * 3)
    names = ["gehan-maxt", "peto-maxt"]
    warp = simulate(sc, fam, names, replicates=4000, seed=np.random.SeedSequence(22))
    assert all(warp.methods[n].startswith("warp-speed") for n in names), warp.methods
    st = sc.draw(150, np.random.default_rng(23))
    assert 0.2 < st.censored.mean() < 0.5
    sl = st.blocks.slices()
    nested = {n: [] for n in names}
    for r in range(st.replicates):
        lay = Layout.from_groups([st.x[r, s] for s in sl], labels,
                                 censored=[st.censored[r, s] for s in sl])
        for name in names:
            t = run_procedure(name, lay, fam, alpha=0.05, resamples=499, seed=4000 + r)
            nested[name].append(t["p_adjusted"].to_numpy() <= 0.05)
    assert_warp_agrees(warp.rejects, nested)


def _route_replicates(n, r, seed, kind):
    rng = np.random.default_rng(seed)
    b = Blocks.of(n)
    e = rng.standard_normal((r, b.total))
    if kind == "skew":
        e = np.exp(e * rng.uniform(0.3, 1.2, (r, 1)))
    sd = (np.array([1.0, 1.0, 3.0, 1.0, 2.5])[: b.k] if kind == "unequal"
          else np.ones(b.k))
    x = e * sd[b.codes]
    if kind == "gross":
        # a decimal slip in a random value of two rows in three: ten times its size
        rows = np.flatnonzero(rng.random(r) < 2 / 3)
        cols = rng.integers(0, b.total, rows.size)
        x[rows, cols] = 30.0 + 10 * np.abs(x[rows, cols])
    return b, x


@pytest.mark.parametrize("n", [(4, 6, 8, 5), (12, 12, 12, 12, 12)])
def test_stacked_route_equals_the_real_route(n):
    """Every replicate's procedure from the stacked route (route keys and
    route_table) equals route.choose on that data set's own checks, on
    replicates with gross values, with skew and with unequal spreads.  The
    power step is off here: route_table evaluates it once at the design,
    where the real route evaluates it on each data set's own sizes and SDs."""
    policy = Policy(power_route=False)
    labels = [str(i) for i in range(len(n))]
    fam = all_pairs(labels)
    b = Blocks.of(n)
    reached = set()
    for kind, seed in (("gross", 30), ("skew", 31), ("unequal", 32)):
        _, x = _route_replicates(n, 150, seed, kind)
        st = Stack(x, b)
        found = stacked_checks(st.x, b, policy, summaries=(st.means, st.vars))
        table = route_table(fam, _layout(st, 0, labels), policy)
        keys = route_keys(st, found, policy, table)
        for r in range(st.replicates):
            lay = _layout(st, r, labels)
            want = choose(run_checks(lay, policy), fam, lay, policy)
            assert table[keys[r]] == want.procedure, (kind, r, keys[r], want.route)
            reached.add(want.route)
    assert {"robust", "resample"} <= reached, reached
    if min(n) < 10:
        assert "unequal" in reached


def test_pipeline_uses_the_robust_route_in_a_simulation():
    """Simulated decisions of the pipeline: data sets with a gross value in a
    group of 4 go to steel-dwass (by permutation: groups under 10), the others
    to the rules; the pipeline's decisions are those of the routed procedure."""
    design = Scenario((4, 6, 6), (0.0, 0.0, 0.0), (1.0, 1.0, 1.0),
                      errors=np.r_[np.random.default_rng(7).standard_normal(200), 40.0])
    fam = all_pairs(["0", "1", "2"])
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        sim = simulate(design, fam, ["auto", "steel-dwass"], replicates=1000,
                       seed=np.random.SeedSequence(8))
    counts = sim.route_counts()
    assert counts.get("steel-dwass", 0) > 0 and counts.get("yuen-holm", 0) > 0, counts
    rows = sim.routes == "steel-dwass"
    assert np.array_equal(sim.rejects["auto"][rows], sim.rejects["steel-dwass"][rows])

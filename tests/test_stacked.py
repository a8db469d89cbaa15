"""The simulation engine on stacked replicates against one-data-set references.

References, named per check:
* scipy.stats.levene(center="median") (Brown–Forsythe), scipy.stats.bartlett,
  scipy.stats.fligner(center="median"): statistic and p-value of each of
  1,000 random replicates, to 1e-10;
* scipy.stats.shapiro: W and p of each replicate.  Our coefficients use the
  exact normal quantile (scipy.special.ndtri) where AS R94 uses a
  seven-digit approximation, so the agreement is about 1e-8: we require
  |W - W_scipy| < 1e-8, |p - p_scipy| < 1e-7 and a relative 1e-6 (measured
  on 1,000 replicates per n, n = 3..200: |W - W_scipy| <= 2e-9 and
  |p - p_scipy| <= 3e-8; exact to 1e-13 at n = 3);
* scipy.stats.skew / kurtosis (bias=False): to 1e-12;
* famwise's own one-data-set path (run_checks and route.choose, each of them
  checked against scipy and the papers in test_diagnostics.py and
  test_route.py): the verdicts and the chosen procedure of every replicate;
* famwise's procedures (run_procedure, checked in test_classical.py,
  test_unequal.py): the stacked decisions of every replicate;
* the warp-speed method (Giacomini, Politis & White 2013) against the full
  nested computation: every replicate with its own B = 499 resamples through
  famwise.resample; the two rejection rates agree within 3 combined binomial SEs.
"""

import numpy as np
import pytest
from scipy import stats

from famwise.core.families import all_pairs, vs_reference
from famwise.core.layout import Layout
from famwise.diagnostics import Policy, run_checks
from famwise.diagnostics.robust_route import gross_values
from famwise.diagnostics.route import choose
from famwise.diagnostics.shape import anderson_darling as ad_one
from famwise.diagnostics.simulate import Scenario, draw, route_table, simulate
from famwise.diagnostics.stacked import (Blocks, anderson_darling, bartlett, brown_forsythe,
                                         fligner, moments, shapiro_wilk, stacked_checks)
from famwise.diagnostics.stacked_procedures import Stack, closed_form_rejects
from famwise.diagnostics.stacked_route import route_keys
from famwise.procedures.catalogue import CATALOGUE, run_procedure
from conftest import assert_warp_agrees

VERDICT = {"ok": 0, "concern": 1, "violated": 2}


def _replicates(n, sd, r, seed, skew=False):
    rng = np.random.default_rng(seed)
    b = Blocks.of(n)
    e = rng.standard_normal((r, b.total))
    if skew:
        e = np.exp(e * rng.uniform(0, 1.2, (r, 1)))
    return b, e * np.asarray(sd, float)[b.codes] + rng.normal(0, 3, b.k)[b.codes]


def test_spread_tests_equal_scipy_on_1000_replicates():
    b, x = _replicates([5, 8, 10, 6, 12, 9], [1, 2, 1, 3, 1, 1.5], 1000, 1)
    _, var = b.summaries(x)
    got = {"bf": brown_forsythe(x, b), "fk": fligner(x, b), "ba": bartlett(var, b)}
    ref = {"bf": lambda g: stats.levene(*g, center="median"),
           "fk": lambda g: stats.fligner(*g, center="median"),
           "ba": lambda g: stats.bartlett(*g)}
    for key, fn in ref.items():
        want = np.array([fn([row[s] for s in b.slices()]) for row in x])
        np.testing.assert_allclose(got[key][0], want[:, 0], rtol=1e-10, atol=1e-10)
        np.testing.assert_allclose(got[key][1], want[:, 1], rtol=0, atol=1e-10)


def test_fligner_with_ties_equals_scipy():
    # Odd groups put an exact zero (the median) in every group, and rounding
    # makes more ties: the average ranks must match scipy's.
    b, x = _replicates([5, 7, 9], [1, 1, 1], 300, 2)
    x = np.round(x, 1)
    stat, p = fligner(x, b)
    want = np.array([stats.fligner(*[row[s] for s in b.slices()]) for row in x])
    np.testing.assert_allclose(p, want[:, 1], atol=1e-10)


@pytest.mark.parametrize("n", [3, 4, 5, 7, 11, 12, 20, 50, 200])
def test_shapiro_wilk_agrees_with_scipy(n):
    rng = np.random.default_rng(n)
    z = rng.standard_normal((1000 if n <= 50 else 200, n))
    z[: len(z) // 2] = np.exp(z[: len(z) // 2])          # half of them skewed
    w, p = shapiro_wilk(z)
    want = np.array([stats.shapiro(row) for row in z])
    assert np.max(np.abs(w - want[:, 0])) < 1e-8
    assert np.max(np.abs(p - want[:, 1])) < 1e-7
    np.testing.assert_allclose(p, want[:, 1], rtol=1e-6)


def test_moments_and_anderson_darling():
    rng = np.random.default_rng(4)
    z = rng.standard_normal((1000, 30)) ** 3
    (skew, kurt) = moments(z, Policy())
    np.testing.assert_allclose(skew.statistic, stats.skew(z, axis=1, bias=False), atol=1e-12)
    np.testing.assert_allclose(kurt.statistic, stats.kurtosis(z, axis=1, bias=False),
                               atol=1e-12)
    a, p = anderson_darling(z[:50])
    want = np.array([ad_one(row) for row in z[:50]])
    np.testing.assert_allclose(a, want[:, 0], rtol=1e-12)
    np.testing.assert_allclose(p, want[:, 1], atol=1e-12)


CHECKS = ("normality", "skewness", "kurtosis", "outliers", "brown-forsythe", "sd-ratio",
          "size-spread-pairing", "fligner-killeen", "bartlett")


@pytest.mark.parametrize("n, sd, skew", [
    ([5, 8, 10, 6, 12, 9], [1, 2, 1, 3, 1, 1.5], False),
    ([10] * 4, [1, 1, 1, 1], True),
    ([4, 6, 8, 10, 20, 30], [4, 3, 2, 1.5, 1, 1], True),
    ([12, 12, 12], [1, 1.2, 0.8], False)])
def test_verdicts_and_route_equal_the_one_data_set_path(n, sd, skew):
    b, x = _replicates(n, sd, 300, 5, skew=skew)
    # The route table reproduces the rules.  The power step that may follow
    # them reads each data set's own SDs and residuals; like the quick
    # calibration it is evaluated once at the design, not per replicate
    # (diagnostics/simulate.py), so it is off here (tests/test_power_route.py).
    policy = Policy(power_route=False)
    found = stacked_checks(x, b, policy)
    fam = all_pairs([str(i) for i in range(b.k)])
    layout0 = Layout.from_groups([x[0, s] for s in b.slices()])
    table = route_table(fam, layout0, policy)
    keys = route_keys(Stack(x, b), found, policy, table)
    robust = 0
    for r in range(len(x)):
        lay = Layout.from_groups([x[r, s] for s in b.slices()])
        one = run_checks(lay, policy)
        for name in CHECKS:
            c = one.get(name)
            assert found.get(name).verdict[r] == VERDICT[c.verdict], (r, name, c)
        route = choose(one, fam, lay, policy)
        if route.route == "robust":
            # a gross value standing apart from well-shaped data: the robust route
            # (trimmed means or ranks), which the stacked route takes too
            # (diagnostics/stacked_route.py; tests/test_stacked_ranks.py)
            assert gross_values(one, policy), r
            robust += 1
        assert table[keys[r]] == route.procedure, (r, keys[r], route.route)
    # the designs reach more than one route between them
    assert found.shape_poor.any() or found.spread_unequal.any() or not skew
    assert robust < len(x)


@pytest.mark.parametrize("family_kind", ["all-pairs", "vs-reference"])
def test_stacked_procedures_equal_run_procedure(family_kind):
    n, sd = [6, 8, 7, 9], [1, 1.8, 0.7, 1.2]
    labels = [str(i) for i in range(4)]
    fam = all_pairs(labels) if family_kind == "all-pairs" else vs_reference(labels, "0")
    design = Scenario(tuple(n), (0.0, 1.2, -0.4, 0.9), tuple(sd))
    stack = draw(design, 40, np.random.default_rng(6))
    names = ["lsd", "bonferroni", "sidak", "holm", "bh", "scheffe", "welch", "welch-holm",
             "dunnett-t3", "yuen-holm"]
    names += (["tukey-kramer", "games-howell"] if family_kind == "all-pairs"
              else ["dunnett", "welch-dunnett"])
    for name in [x for x in names if fam.kind in CATALOGUE[x].families]:
        got = closed_form_rejects(name, fam, stack, 0.05)
        for r in range(stack.replicates):
            lay = Layout.from_groups([stack.x[r, s] for s in stack.blocks.slices()], labels)
            table = run_procedure(name, lay, fam, alpha=0.05)
            want = table["p_adjusted"].to_numpy() <= 0.05
            if name == "lsd":
                want = table["reject"].to_numpy()
            assert np.array_equal(got[r], want), (name, r, table)


def test_simulation_is_reproducible_across_jobs_and_backends():
    fam = all_pairs([str(i) for i in range(4)])
    design = Scenario((5, 6, 7, 8), (0.0, 1.0, 0.0, 0.0), (1.0, 1.0, 2.0, 1.0))
    procs = ["tukey-kramer", "games-howell", "bootstrap-maxt", "auto"]
    runs = [simulate(design, fam, procs, replicates=1200, seed=np.random.SeedSequence(9),
                     n_jobs=j, backend=b)
            for j, b in ((1, "threads"), (2, "threads"), (2, "processes"))]
    for other in runs[1:]:
        for p in procs:
            assert np.array_equal(runs[0].rejects[p], other.rejects[p])
        assert list(runs[0].routes) == list(other.routes)


@pytest.mark.filterwarnings("ignore::famwise.core.errors.FamwiseWarning")
def test_warp_speed_agrees_with_the_full_nested_computation():
    """Rejection rate of bootstrap-maxt for the shifted pair and for any pair:
    warp speed (4,000 replicates, one resample each) against the nested
    computation (150 replicates, each with its own 499 resamples)."""
    labels = ["0", "1", "2"]
    fam = all_pairs(labels)
    design = Scenario((8, 8, 8), (0.0, 1.1, 0.0), (1.0, 1.0, 1.5))
    warp = simulate(design, fam, ["bootstrap-maxt", "permutation-stepdown"], replicates=4000,
                    seed=np.random.SeedSequence(10))
    rng = np.random.default_rng(11)
    stack = draw(design, 150, rng)
    nested = {"bootstrap-maxt": [], "permutation-stepdown": []}
    for r in range(stack.replicates):
        lay = Layout.from_groups([stack.x[r, s] for s in stack.blocks.slices()], labels)
        for name in nested:
            t = run_procedure(name, lay, fam, alpha=0.05, resamples=499, seed=1000 + r)
            nested[name].append(t["p_adjusted"].to_numpy() <= 0.05)
    assert_warp_agrees(warp.rejects, nested)

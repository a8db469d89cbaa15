"""Familywise error rates of the resampling procedures under the complete null.

Seeded Monte Carlo: R data sets under the complete null (all group means
equal), each analysed with B resamples at alpha = 0.05 through the public
procedures; the familywise error rate is the share of data sets with at
least one rejection.  Tolerances come from the binomial SE of that share at
the nominal rate, SE = sqrt(0.05 * 0.95 / R) (0.0049 at R = 2,000).

Reference figures (an independent simulation quoted in the issue that
commissioned this engine, 2,000 runs, B = 499; not a published source):

* six normal equal-variance groups of 10: permutation max-T (Welch
  statistic) 0.045 ± 0.005, bootstrap max-t 0.028 ± 0.004;
* small groups carrying large spreads (n = 4, 6, 8, 10, 20, 30;
  SD = 4, 3, 2, 1.5, 1, 1): bootstrap max-t 0.023 ± 0.003, permutation
  with Welch statistics 0.092 ± 0.007 (liberal).

Facts of the trade behind the assertions: a permutation test with
p = (1 + hits)/(1 + B) is exact when the groups are exchangeable
(Phipson & Smyth 2010), so with equal spreads its rate is 0.05 up to Monte
Carlo error; the studentized permutation test is only asymptotically valid
under unequal spreads (Janssen 1997), which does not reach groups of four.
Skewed errors: the hostile design with standardised lognormal errors
(sigma = 1) separates the plain bootstrap max-t (liberal) from the one with
Hall's (1992) skewness correction; famwise's own figures, not a source.
The methods are not tuned to move these figures.
"""

import warnings

import numpy as np
import pytest

from famwise.core.families import all_pairs
from famwise.core.layout import Layout
from famwise.resample import UnsettledWarning, bootstrap_hall, bootstrap_maxt, permutation_maxt

ALPHA = 0.05
RUNS = 2000
B = 499
SE = np.sqrt(ALPHA * (1 - ALPHA) / RUNS)

EQUAL = dict(n=(10,) * 6, sd=(1.0,) * 6)
HOSTILE = dict(n=(4, 6, 8, 10, 20, 30), sd=(4.0, 3.0, 2.0, 1.5, 1.0, 1.0))
SKEWED = dict(HOSTILE, shape="lognormal")
_LOGNORMAL_MEAN, _LOGNORMAL_SD = np.exp(0.5), np.sqrt((np.e - 1) * np.e)


def errors(rng, n, shape):
    """Mean-0, SD-1 errors: normal, or lognormal with sigma = 1 standardised
    (mean e^{1/2}, variance (e - 1) e; skewness 6.2; standard formulas,
    common practice, no source)."""
    z = rng.standard_normal(n)
    return z if shape == "normal" else (np.exp(z) - _LOGNORMAL_MEAN) / _LOGNORMAL_SD


def familywise_error(fn, design, data_seed, runs=RUNS, resamples=B):
    """Share of complete-null data sets in which ``fn`` rejects anything."""
    rng = np.random.default_rng(data_seed)
    labels = [f"g{i}" for i in range(len(design["n"]))]
    family = all_pairs(labels)
    hits = 0
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", UnsettledWarning)
        for r in range(runs):
            shape = design.get("shape", "normal")
            groups = [s * errors(rng, n, shape) for n, s in zip(design["n"], design["sd"])]
            table = fn(Layout.from_groups(groups, labels), family, alpha=ALPHA,
                       resamples=resamples, seed=r)
            hits += bool(table["reject"].any())
    return hits / runs


def test_permutation_maxt_equal_spreads_holds_level():
    rate = familywise_error(permutation_maxt, EQUAL, data_seed=1001)
    print(f"\npermutation max-T, equal spreads: FWER {rate:.4f} ± {SE:.4f}")
    assert abs(rate - ALPHA) <= 3 * SE, rate


@pytest.mark.slow   # make test-slow; the routed resampling checks stay in make test
def test_bootstrap_maxt_equal_spreads_at_or_below_level():
    rate = familywise_error(bootstrap_maxt, EQUAL, data_seed=1002)
    print(f"\nbootstrap max-t, equal spreads: FWER {rate:.4f} ± {SE:.4f}")
    assert rate <= ALPHA + 3 * SE, rate


@pytest.mark.slow   # make test-slow; the routed resampling checks stay in make test
def test_bootstrap_maxt_small_groups_large_spreads_at_or_below_level():
    rate = familywise_error(bootstrap_maxt, HOSTILE, data_seed=1003)
    print(f"\nbootstrap max-t, small groups with large spreads: FWER {rate:.4f} ± {SE:.4f}")
    assert rate <= ALPHA + 3 * SE, rate


def test_bootstrap_hall_skewed_small_groups_large_spreads_at_or_below_level():
    """Lognormal errors (skewness 6.2) in the hostile design: the skewness-
    corrected bootstrap holds the level (the plain bootstrap max-t does not:
    about 0.065; see the slow test below)."""
    rate = familywise_error(bootstrap_hall, SKEWED, data_seed=1005)
    print(f"\nbootstrap-hall, skewed, small groups with large spreads: FWER {rate:.4f} ± {SE:.4f}")
    assert rate <= ALPHA + 3 * SE, rate


@pytest.mark.slow   # make test-slow; the routed resampling checks stay in make test
def test_permutation_welch_is_liberal_when_small_groups_carry_large_spreads():
    """Documents a limitation, not a target: with groups of 4-10 carrying the
    large spreads the Welch-studentized permutation max-T exceeds alpha
    (independent figure 0.092 ± 0.007).  The router must not send unequal
    spreads with small groups to permutation; this test fails if the excess
    disappears, which would mean the method (or the check) changed."""
    rate = familywise_error(permutation_maxt, HOSTILE, data_seed=1004)
    print(f"\npermutation max-T (Welch), small groups with large spreads: "
          f"FWER {rate:.4f} ± {SE:.4f}")
    assert rate > ALPHA + 3 * SE, rate


@pytest.mark.slow
@pytest.mark.parametrize("fn", [permutation_maxt, bootstrap_maxt])
@pytest.mark.parametrize("design", ["equal", "hostile"])
def test_error_rates_at_ten_thousand_runs(fn, design):
    """The same designs at R = 10,000 (SE 0.0022), B = 199 (make test-slow)."""
    runs = 10000
    se = np.sqrt(ALPHA * (1 - ALPHA) / runs)
    spec = EQUAL if design == "equal" else HOSTILE
    rate = familywise_error(fn, spec, data_seed=2000 + len(design), runs=runs, resamples=199)
    print(f"\n{fn.__name__} {design}: FWER {rate:.4f} ± {se:.4f}")
    if fn is bootstrap_maxt:
        assert rate <= ALPHA + 3 * se
    elif design == "equal":
        assert abs(rate - ALPHA) <= 3 * se
    else:
        assert rate > ALPHA + 3 * se


@pytest.mark.slow
def test_skewed_hostile_design_at_ten_thousand_runs():
    """Lognormal errors in the hostile design, R = 10,000, B = 199: the
    bootstrap with Hall's correction holds the level; the plain bootstrap
    max-t exceeds it, which is why the router uses the corrected one.  This
    fails if the plain bootstrap's excess disappears (the method changed)."""
    runs = 10000
    se = np.sqrt(ALPHA * (1 - ALPHA) / runs)
    hall = familywise_error(bootstrap_hall, SKEWED, data_seed=2100, runs=runs, resamples=199)
    plain = familywise_error(bootstrap_maxt, SKEWED, data_seed=2100, runs=runs, resamples=199)
    print(f"\nskewed hostile: bootstrap-hall {hall:.4f}, bootstrap-maxt {plain:.4f} ± {se:.4f}")
    assert hall <= ALPHA + 3 * se
    assert plain > ALPHA + 3 * se

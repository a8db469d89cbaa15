"""Tests of famwise.distributions against published tables, scipy and identities.

Sources are named beside each value; "H60" = Harter (1960) Ann. Math. Statist.
31:1122-1147 Table 3 as transcribed in scipy's test suite; "D55" = Dunnett
(1955) JASA 50:1096-1121; values marked "memory - verify" come from
/work/shared/CHECK-VALUES.md rows recalled from printed tables.
"""

import warnings

import numpy as np
import pytest
from scipy import integrate, special, stats

from famwise.distributions import (contrast_se_pooled, contrast_se_welch, dunnett_ppf,
                                   dunnett_sf, smm_ppf, smm_sf, srange_cdf, srange_ppf,
                                   srange_sf, welch_df)
from famwise.core.errors import FamwiseInputError

HALF = np.sqrt(0.5)          # lam for equal group sizes: rho = lam_i lam_j = 1/2


# ---------------------------------------------------------------------------
# Studentized range: accuracy grid against scipy.stats.studentized_range.sf
# ---------------------------------------------------------------------------

GRID_K = [2, 3, 5, 10, 20, 50, 100]
GRID_DF = [2, 5, 10, 30, 120, 1000, np.inf]
GRID_P = [0.5, 0.05, 1e-3, 1e-6, 1e-10]


@pytest.fixture(scope="module")
def srange_grid():
    k, df, p = (a.ravel() for a in np.meshgrid(GRID_K, GRID_DF, GRID_P, indexing="ij"))
    # q chosen by our own quantile; the check is the sf at q against scipy's sf
    q = srange_ppf(1.0 - p, k, df)
    ref = np.array([stats.studentized_range.sf(qi, ki, di) for qi, ki, di in zip(q, k, df)])
    return q, k, df, p, ref


def test_srange_sf_grid_absolute(srange_grid):
    # target: 1e-8 absolute against scipy.stats.studentized_range.sf
    # (k 2..100, df 2..1000 and inf, p 1e-10..0.5; 245 points)
    q, k, df, p, ref = srange_grid
    ours = srange_sf(q, k, df)
    assert np.max(np.abs(ours - ref)) < 1e-8


def test_srange_sf_grid_relative(srange_grid):
    # beyond the target: relative agreement with scipy down to its own accuracy
    # (scipy integrates to an absolute tolerance near 1e-12 and returns 0 at
    # k=2, df=2, p=1e-10; there the exact value is 2 t.sf(q/sqrt 2, 2))
    q, k, df, p, ref = srange_grid
    ours = srange_sf(q, k, df)
    # scipy breaks down at p = 1e-10 with df <= 5 (returns ~0); those points are
    # checked against an independent outer integral below
    ok = ~((p < 1e-9) & (df <= 5))
    assert np.all(np.abs(ours - ref)[ok] <= 1e-6 * ref[ok] + 1e-12)
    k2 = k == 2
    np.testing.assert_allclose(ours[k2], 2 * stats.t.sf(q[k2] / np.sqrt(2), df[k2]), rtol=1e-9)


@pytest.mark.parametrize("k", [3, 10, 100])
def test_srange_far_tail_small_df_by_quad(k):
    # p = 1e-10 at df = 2, where scipy returns 0: the outer integral over s done
    # independently by scipy.integrate.quad on the chi density, with the df = inf
    # range probability (itself checked against scipy above) as integrand
    q = float(srange_ppf(1 - 1e-10, k, 2))
    dens = stats.chi(2, scale=1 / np.sqrt(2)).pdf
    # on log s; the mass sits where q s is a few units
    t0 = np.log(5.0 / q)
    ref, _ = integrate.quad(lambda t: dens(np.exp(t)) * np.exp(t) * float(srange_sf(q * np.exp(t), k, np.inf)),
                            t0 - 40, t0 + 15, points=[t0 - 2, t0, t0 + 1], epsabs=0, epsrel=1e-10, limit=400)
    assert abs(srange_sf(q, k, 2) / ref - 1) < 1e-6


def test_srange_ppf_inverts_cdf(srange_grid):
    q, k, df, p, ref = srange_grid
    # the quantile was asked for at the lower-tail probability 1 - p, whose
    # complement in floating point is 1 - (1 - p)
    np.testing.assert_allclose(srange_sf(q, k, df), 1.0 - (1.0 - p), rtol=1e-9)


def test_srange_cdf_against_scipy_lower_tail():
    # scipy.stats.studentized_range.cdf at small q (lower tail integrated directly)
    q = np.array([0.5, 1.0, 2.0, 0.2, 1.5, 3.0])
    k = np.array([2, 3, 10, 2, 5, 20])
    df = np.array([10, 30, 5, np.inf, 120, 1000])
    ref = np.array([stats.studentized_range.cdf(*a) for a in zip(q, k, df)])
    np.testing.assert_allclose(srange_cdf(q, k, df), ref, rtol=1e-7, atol=1e-12)


# Harter (1960) Table 3 via scipy test (4 significant figures, tolerance 1.5e-3)
HARTER = [  # (alpha, k, df, q)
    (.05, 2, 10, 3.151), (.05, 8, 10, 5.305), (.05, 20, 10, 6.467), (.05, 2, 20, 2.950),
    (.05, 20, 20, 5.714), (.05, 2, 120, 2.800), (.05, 8, 120, 4.363), (.05, 20, 120, 5.126),
    (.05, 2, np.inf, 2.772), (.05, 8, np.inf, 4.286), (.05, 20, np.inf, 5.012),
    (.01, 2, 10, 4.482), (.01, 8, 10, 6.875), (.01, 20, 10, 8.226), (.01, 20, 20, 6.823),
    (.01, 2, 120, 3.702), (.01, 8, 120, 5.118), (.01, 8, np.inf, 4.987), (.01, 20, np.inf, 5.645),
]
# 2-decimal textbook q tables, memory - verify (CHECK-VALUES section 1, "M"; tol 6e-3)
MEMORY_Q = [
    (.05, 3, 5, 4.60), (.05, 10, 5, 6.99), (.05, 3, 10, 3.88), (.05, 5, 30, 4.10),
    (.05, 10, 30, 4.82), (.05, 10, np.inf, 4.47), (.01, 3, 5, 6.98), (.01, 10, 5, 10.24),
    (.01, 10, 30, 5.76), (.01, 10, 60, 5.45), (.01, 3, np.inf, 4.12),
    (.05, 4, 16, 4.05),   # NIST e-Handbook 7.4.7.1 example, memory - verify
    (.05, 4, 20, 3.96),   # Montgomery & Runger Table S13-2 Tukey critical value
]


@pytest.mark.parametrize("alpha,k,df,q", HARTER)
def test_srange_ppf_harter_1960(alpha, k, df, q):
    assert abs(srange_ppf(1 - alpha, k, df) - q) < 1.5e-3


@pytest.mark.parametrize("alpha,k,df,q", MEMORY_Q)
def test_srange_ppf_two_decimal_tables(alpha, k, df, q):
    assert abs(srange_ppf(1 - alpha, k, df) - q) < 6e-3


def test_srange_ppf_against_scipy_ppf():
    # scipy.stats.studentized_range.ppf, a few points (it is slow)
    cases = [(0.95, 3, 12), (0.99, 50, 30), (0.9, 100, np.inf), (0.999, 5, 2)]
    for p, k, df in cases:
        np.testing.assert_allclose(srange_ppf(p, k, df),
                                   stats.studentized_range.ppf(p, k, df), rtol=1e-7)


@pytest.mark.parametrize("df", [1, 2, 10, 47.5, 1000, np.inf])
@pytest.mark.parametrize("alpha", [0.05, 0.01, 1e-6])
def test_srange_k2_is_sqrt2_t(df, alpha):
    # identity q(alpha; 2, nu) = sqrt(2) t(1 - alpha/2; nu) (CHECK-VALUES section 1, math)
    expected = np.sqrt(2) * stats.t.isf(alpha / 2, df)
    np.testing.assert_allclose(srange_ppf(1 - alpha, 2, df), expected, rtol=1e-9)
    q = np.array([0.3, 1.0, 3.0, 6.0])
    np.testing.assert_allclose(srange_sf(q, 2, df), 2 * stats.t.sf(q / np.sqrt(2), df), rtol=1e-9)


def test_srange_df_inf_is_range_of_normals():
    # df = inf: P(W >= w) for the range of k normals; k = 2 closed form erfc(w/2)
    w = np.linspace(0.1, 14, 50)
    np.testing.assert_allclose(srange_sf(w, 2, np.inf), special.erfc(w / 2), rtol=1e-11)
    # large finite df approaches the df = inf value
    np.testing.assert_allclose(srange_sf(4.0, 10, 1e9), srange_sf(4.0, 10, np.inf), rtol=1e-7)


def test_srange_monotone_and_complementary():
    q = np.linspace(0.01, 12, 400)
    for k, df in [(3, 4), (30, 60), (100, np.inf)]:
        sf = srange_sf(q, k, df)
        cdf = srange_cdf(q, k, df)
        assert np.all(np.diff(sf) <= 0) and np.all(np.diff(cdf) >= 0)
        np.testing.assert_allclose(sf + cdf, 1.0, atol=1e-13)
    # sf decreases in k, increases as df falls (heavier tails)
    assert srange_sf(4.0, 5, 10) < srange_sf(4.0, 6, 10)
    assert srange_sf(4.0, 5, 10) > srange_sf(4.0, 5, 20)


def test_srange_vectorised_shapes():
    q = np.linspace(1, 6, 12).reshape(3, 4)
    out = srange_sf(q, 5, 20)
    assert out.shape == (3, 4)
    # broadcasting q (n,1) against df (m,) gives (n, m); each element as if alone
    df = np.array([3.0, 17.0, np.inf])
    grid = srange_sf(q.ravel()[:, None], 5, df)
    assert grid.shape == (12, 3)
    np.testing.assert_allclose(grid[4, 1], srange_sf(q.ravel()[4], 5, 17.0), rtol=1e-14)
    # a different df for every element (Games-Howell) equals element-by-element calls
    rng = np.random.default_rng(20240611)
    dfs = rng.uniform(2, 200, 40)
    qs = rng.uniform(1, 7, 40)
    together = srange_sf(qs, 8, dfs)
    alone = np.array([srange_sf(a, 8, b) for a, b in zip(qs, dfs)])
    np.testing.assert_array_equal(together, alone)
    assert np.ndim(srange_sf(3.0, 4, 10)) == 0
    # mixed k in one call
    np.testing.assert_allclose(srange_sf([3.0, 3.0], [3, 7], 12),
                               [srange_sf(3.0, 3, 12), srange_sf(3.0, 7, 12)], rtol=1e-14)


def test_srange_deterministic():
    q = np.linspace(1, 8, 30)
    np.testing.assert_array_equal(srange_sf(q, 12, 25), srange_sf(q, 12, 25))


def test_srange_nonpositive_q():
    np.testing.assert_array_equal(srange_sf([0.0, -1.0], 4, 10), [1.0, 1.0])
    np.testing.assert_array_equal(srange_cdf([0.0, -1.0], 4, 10), [0.0, 0.0])


@pytest.mark.parametrize("call,match", [
    (lambda: srange_sf(3.0, 1, 10), "`k` must be an integer >= 2"),
    (lambda: srange_sf(3.0, 2.5, 10), "`k` must be an integer >= 2"),
    (lambda: srange_sf(3.0, 4, 0.5), "`df` must be >= 1"),
    (lambda: srange_cdf(3.0, 4, np.nan), "`df` must not contain NaN"),
    (lambda: srange_ppf(1.0, 4, 10), "`p` must lie strictly between 0 and 1"),
    (lambda: srange_ppf(0.0, 4, 10), "`p` must lie strictly between 0 and 1"),
    (lambda: srange_ppf(-0.2, 4, 10), "`p` must lie strictly between 0 and 1"),
    (lambda: srange_sf("a", 4, 10), "`q` must be numeric"),
    (lambda: dunnett_sf(2.0, [0.5, 1.0], 10), r"`lam` values must lie in \[0, 1\)"),
    (lambda: dunnett_sf(2.0, [[0.5]], 10), "`lam` must be a non-empty 1-D array"),
    (lambda: dunnett_sf(2.0, [0.5], 10, alternative="less"), "`alternative` must be one of"),
    (lambda: dunnett_ppf(1.5, [0.5], 10), "`conf` must lie strictly between 0 and 1"),
    (lambda: dunnett_sf(2.0, [0.5], [10, 12]), "`df` must be a scalar"),
    (lambda: smm_sf(2.0, 0, 10), "`m` must be an integer >= 1"),
    (lambda: smm_ppf(0.95, 3, 0), "`df` must be >= 1"),
    (lambda: welch_df([[1, -1]], [1.0, 2.0], [1, 5]), "`n` must be >= 2"),
    (lambda: welch_df([[1, -1]], [1.0, 2.0], [4, 5, 6]), "`n` must have shape"),
])
def test_bad_arguments_one_line(call, match):
    with pytest.raises(FamwiseInputError, match=match) as err:
        call()
    assert "\n" not in str(err.value)


# ---------------------------------------------------------------------------
# Dunnett
# ---------------------------------------------------------------------------

# exact two-sided/one-sided critical values at alpha = .05 (equal n, rho = 1/2),
# CHECK-VALUES section 2 "scipy exact" column (4 decimals, tolerance 1e-4)
EXACT_CRIT = [  # (conf, p, df, alternative, c)
    (.95, 3, 10, "two-sided", 2.7590), (.95, 3, 20, "two-sided", 2.5403),
    (.95, 4, 60, "two-sided", 2.5084), (.99, 4, 12, "two-sided", 3.7095),
    (.99, 7, 12, "two-sided", 3.9605), (.99, 4, 60, "two-sided", 3.1214),
    (.95, 2, 30, "two-sided", 2.3208), (.99, 2, 60, "two-sided", 2.8980),
    (.95, 5, 10, "two-sided", 2.9903), (.95, 9, 20, "two-sided", 2.9463),
    (.95, 5, np.inf, "two-sided", 2.5115), (.99, 2, 10, "two-sided", 3.5313),
    (.99, 3, 20, "two-sided", 3.2854), (.99, 5, 20, "two-sided", 3.4792),
    (.99, 3, np.inf, "two-sided", 2.9150),
    (.95, 3, 10, "greater", 2.3376), (.95, 2, 30, "greater", 1.9890),
    (.95, 5, 30, "greater", 2.3352), (.95, 4, 60, "greater", 2.2066),
    (.99, 4, 12, "greater", 3.3219), (.99, 7, 12, "greater", 3.5644),
    (.99, 2, 60, "greater", 2.6381), (.99, 4, 60, "greater", 2.8691),
    (.95, 5, 10, "greater", 2.5623), (.95, 9, 20, "greater", 2.6007),
    (.95, 5, np.inf, "greater", 2.2338), (.99, 5, 20, "greater", 3.1657),
    (.99, 3, np.inf, "greater", 2.6849),
]
# printed two-decimal values: D55 Tables 1a/1b (one-sided) and 2a/2b for p <= 2;
# "D64" = Dunnett (1964) Biometrics 20:482-491, memory - verify
PRINTED_CRIT = [
    (.95, 1, 10, "greater", 1.81, "D55 T1a"), (.95, 3, 10, "greater", 2.34, "D55 T1a"),
    (.95, 2, 30, "greater", 1.99, "D55 T1a"), (.95, 4, 60, "greater", 2.21, "D55 T1a"),
    (.99, 4, 12, "greater", 3.32, "D55 T1b"), (.99, 7, 12, "greater", 3.56, "D55 T1b"),
    (.99, 2, 60, "greater", 2.64, "D55 T1b"), (.99, 4, 60, "greater", 2.87, "D55 T1b"),
    (.95, 1, 10, "two-sided", 2.23, "D55 T2a"), (.95, 2, 30, "two-sided", 2.32, "D55 T2a"),
    (.99, 2, 60, "two-sided", 2.90, "D55 T2b"),
    (.95, 2, 10, "two-sided", 2.57, "D64, memory - verify"),
    (.95, 3, 10, "two-sided", 2.76, "D64, memory - verify"),
    (.95, 2, 20, "two-sided", 2.38, "D64, memory - verify"),
    (.95, 3, 20, "two-sided", 2.54, "D64, memory - verify"),
    (.95, 4, 20, "two-sided", 2.65, "D64, memory - verify"),
    (.95, 5, 30, "two-sided", 2.66, "D64, memory - verify"),
    (.95, 2, np.inf, "two-sided", 2.21, "D64, memory - verify"),
    (.95, 3, np.inf, "two-sided", 2.35, "D64, memory - verify"),
    (.95, 2, 10, "greater", 2.15, "D55 T1a, memory - verify"),
    (.95, 4, 20, "greater", 2.30, "D55 T1a, memory - verify"),
    (.95, 2, np.inf, "greater", 1.92, "D55 T1a, memory - verify"),
    (.95, 3, np.inf, "greater", 2.06, "D55 T1a, memory - verify"),
]
# (D55 T1a one-sided .05, p=5, df=30 prints 2.33; the exact value 2.3352 is in
# EXACT_CRIT: the printed table is off by one unit in its last digit.)


@pytest.mark.parametrize("conf,p,df,alt,c", EXACT_CRIT)
def test_dunnett_ppf_exact_values(conf, p, df, alt, c):
    assert abs(dunnett_ppf(conf, np.full(p, HALF), df, alt) - c) < 1e-4


@pytest.mark.parametrize("conf,p,df,alt,c,source", PRINTED_CRIT)
def test_dunnett_ppf_printed_tables(conf, p, df, alt, c, source):
    assert abs(dunnett_ppf(conf, np.full(p, HALF), df, alt) - c) <= 0.005 + 1e-9


def test_dunnett_1955_two_sided_table_is_conservative():
    # D55 Table 2a, p = 3, df = 10 prints 2.81; the exact FWER there is 0.0460
    # (CHECK-VALUES section 2 note): the 1955 two-sided values for p >= 3 are conservative
    assert abs(dunnett_sf(2.81, np.full(3, HALF), 10) - 0.0460) < 1e-4
    assert abs(dunnett_sf(2.57, np.full(3, HALF), 20) - 0.0470) < 1e-4


def test_dunnett_thomson_short_1969():
    # scipy.stats.dunnett docstring data (Thomson & Short 1969 Table 1), nu = 11;
    # exact p-values from CHECK-VALUES section 3.4 (6 decimals)
    lam = 1 / np.sqrt(np.array([5 / 4, 5 / 5]) + 1)
    stat = np.array([0.90874545, -0.05007117])
    np.testing.assert_allclose(dunnett_sf(np.abs(stat), lam, 11), [0.583172, 0.998193], atol=1e-6)
    np.testing.assert_allclose(dunnett_sf(stat, lam, 11, "greater"), [0.302248, 0.691153], atol=1e-6)
    np.testing.assert_allclose(dunnett_sf(-stat, lam, 11, "greater"), [0.919285, 0.652116], atol=1e-6)
    # scipy's randomized-QMC docstring values within 5e-4
    np.testing.assert_allclose(dunnett_sf(np.abs(stat), lam, 11), [0.58325114, 0.99819341], atol=5e-4)
    # exact two-sided 95% critical value 2.53676 (section 3.4)
    assert abs(dunnett_ppf(0.95, lam, 11) - 2.53676) < 1e-5


def test_dunnett_blood_counts_1955():
    # Dunnett (1955) worked example via scipy test_multicomp case_2 (section 3.5):
    # control n=6, drug A n=4, drug B n=5, s^2 on 12 df
    n0, n = 6, np.array([4, 5])
    lam = 1 / np.sqrt(n0 / n + 1)
    stat = np.array([0.85703, 3.69375])
    np.testing.assert_allclose(dunnett_sf(stat, lam, 12), [0.6201020, 0.0058254], atol=2e-6)
    np.testing.assert_allclose(dunnett_sf(stat, lam, 12, "greater"), [0.3249776, 0.0029139], atol=2e-6)
    np.testing.assert_allclose(dunnett_sf(-stat, lam, 12, "greater"), [0.91676, 0.99984], atol=1e-5)
    assert abs(dunnett_ppf(0.95, lam, 12) - 2.51348) < 1e-5


def test_dunnett_equal_n_case3():
    # scipy case_3 data (equal n = 3, nu = 8); exact p from CHECK-VALUES 3.5
    lam = np.full(3, HALF)
    control = np.array([55, 47, 48.])
    samples = [np.array(s, float) for s in ([55, 64, 64], [55, 49, 52], [50, 44, 41])]
    mse = np.mean([np.var(g, ddof=1) for g in samples + [control]])
    stat = np.array([(g.mean() - control.mean()) / np.sqrt(mse * 2 / 3) for g in samples])
    np.testing.assert_allclose(dunnett_sf(np.abs(stat), lam, 8), [0.036622, 0.896475, 0.409160],
                               atol=1e-5)


def test_dunnett_against_scipy_dunnett():
    # scipy.stats.dunnett (randomized QMC): agreement within 5e-4
    rng = np.random.default_rng(7)
    control = rng.normal(10, 2, 9)
    samples = [rng.normal(10 + d, 2, n) for d, n in zip([0, 1, 2, 3], [5, 7, 8, 6])]
    res = stats.dunnett(*samples, control=control, rng=1)
    n = np.array([len(s) for s in samples])
    lam = 1 / np.sqrt(len(control) / n + 1)
    df = len(control) + n.sum() - 5
    np.testing.assert_allclose(dunnett_sf(np.abs(res.statistic), lam, df), res.pvalue, atol=5e-4)


@pytest.mark.parametrize("df", [3, 12, np.inf])
def test_dunnett_reduces_to_t(df):
    # p = 1, or lam = 0 (independent), is Student's t (scipy.stats.t)
    t = np.array([0.5, 1.5, 2.5, 4.0])
    np.testing.assert_allclose(dunnett_sf(t, [0.6], df), 2 * stats.t.sf(t, df), rtol=1e-9)
    np.testing.assert_allclose(dunnett_sf(t, [0.0], df), 2 * stats.t.sf(t, df), rtol=1e-9)
    np.testing.assert_allclose(dunnett_sf(t, [0.3], df, "greater"), stats.t.sf(t, df), rtol=1e-9)
    np.testing.assert_allclose(dunnett_sf(-t, [0.3], df, "greater"), stats.t.cdf(t, df), rtol=1e-9)
    # lam = 0 for all p: independent numerators, SMM (two-sided)
    np.testing.assert_allclose(dunnett_sf(t, [0.0, 0.0, 0.0], df), smm_sf(t, 3, df), rtol=1e-9)


def test_dunnett_against_multivariate_normal():
    # df = inf, one-sided, unequal lam: scipy.stats.multivariate_normal.cdf (Genz)
    lam = np.array([0.3, 0.5, 0.7])
    cov = np.outer(lam, lam)
    np.fill_diagonal(cov, 1.0)
    c = 2.1
    ref = 1 - stats.multivariate_normal(np.zeros(3), cov).cdf(np.full(3, c), rng=1)
    assert abs(dunnett_sf(c, lam, np.inf, "greater") - ref) < 1e-5


def test_dunnett_monotone_and_shape():
    lam = np.array([0.4, 0.6, 0.65, 0.7])
    t = np.linspace(0.05, 6, 60)
    sf = dunnett_sf(t, lam, 20)
    assert sf.shape == t.shape and np.all(np.diff(sf) < 0)
    assert dunnett_sf(t.reshape(6, 10), lam, 20).shape == (6, 10)
    np.testing.assert_array_equal(dunnett_sf(t, lam, 20), sf)   # deterministic
    c = dunnett_ppf([0.9, 0.95, 0.99], lam, 20)
    np.testing.assert_allclose(dunnett_sf(c, lam, 20), [0.1, 0.05, 0.01], rtol=1e-9)


@pytest.mark.parametrize("lam", [0.999, 0.9999])
@pytest.mark.parametrize("t", [1.0, 2.5])
def test_dunnett_near_perfect_correlation_multivariate_t(lam, t):
    # lam -> 1 (a reference far noisier than the treatments): scipy.stats.multivariate_t
    # (Genz-Bretz randomised QMC, 2x2 shape with rho = lam^2) at df = 10; QMC error ~1e-5
    corr = np.array([[1.0, lam * lam], [lam * lam, 1.0]])
    mvt = stats.multivariate_t(shape=corr, df=10, seed=3)
    two = 1 - mvt.cdf(np.full(2, t), lower_limit=np.full(2, -t), maxpts=200_000)
    one = 1 - mvt.cdf(np.full(2, t), maxpts=200_000)
    assert dunnett_sf(t, [lam, lam], 10) == pytest.approx(two, abs=5e-5)
    assert dunnett_sf(t, [lam, lam], 10, "greater") == pytest.approx(one, abs=5e-5)


@pytest.mark.parametrize("df", [10, np.inf])
def test_dunnett_perfect_correlation_limit(df):
    # common practice, no source: perfectly correlated comparisons are one test, so as
    # lam_i = lam -> 1 the max-|T| tail tends to 2 t.sf(t, df) (scipy.stats.t) from above
    # (more correlation, smaller maximum: Sidak 1968), at a rate linear in
    # sig = sqrt(1 - lam^2), the spread of the non-shared parts (math)
    t = np.array([1.0, 2.5, 5.0])
    lim2, lim1 = 2 * stats.t.sf(t, df), stats.t.sf(t, df)
    lams = [0.999, 0.9999, 1 - 1e-9]
    rel = []
    for lam in lams:
        p2 = dunnett_sf(t, [lam, lam, lam], df)
        p1 = dunnett_sf(t, [lam, lam, lam], df, "greater")
        assert np.all(np.isfinite(p2)) and np.all(p2 >= lim2) and np.all(p1 >= lim1)
        rel.append(p2 / lim2 - 1)
    assert np.all(rel[0] > rel[1]) and np.all(rel[1] > rel[2])
    sig = np.sqrt(1 - np.square(lams))
    assert np.all(rel[2] <= 3 * sig[2] * t)                      # ~1e-4 at lam = 1 - 1e-9
    # first order in sig: rel / sig agrees between lam = 0.9999 and 1 - 1e-9
    np.testing.assert_allclose(rel[1] / sig[1], rel[2] / sig[2], rtol=0.02)
    p1 = dunnett_sf(t, [1 - 1e-9] * 3, df, "greater")
    np.testing.assert_allclose(p1, lim1, rtol=3 * sig[2] * t.max())
    # quantiles: the two-sided critical value tends to t(1 - alpha/2; df)
    c = dunnett_ppf([0.95, 0.99], [1 - 1e-9] * 3, df)
    np.testing.assert_allclose(c, stats.t.isf([0.025, 0.005], df), rtol=1e-3)
    np.testing.assert_allclose(dunnett_sf(c, [1 - 1e-9] * 3, df), [0.05, 0.01], rtol=1e-9)


def test_dunnett_mixed_near_one_and_moderate_lam():
    # one lam near 1 among moderate ones: the inverse pair with its own quantile, and
    # the one-sided df = inf value against scipy.stats.multivariate_normal (Genz)
    lam = np.array([0.3, 0.7, 0.99999])
    c = dunnett_ppf([0.9, 0.95, 0.99], lam, 15)
    np.testing.assert_allclose(dunnett_sf(c, lam, 15), [0.1, 0.05, 0.01], rtol=1e-9)
    cov = np.outer(lam, lam)
    np.fill_diagonal(cov, 1.0)
    ref = 1 - stats.multivariate_normal(np.zeros(3), cov).cdf(np.full(3, 2.1), rng=1)
    assert abs(dunnett_sf(2.1, lam, np.inf, "greater") - ref) < 1e-5


def test_broadcast_views_reach_no_compiled_code():
    # views from np.broadcast_arrays are copied before the compiled loops (numba would
    # otherwise emit numpy's FutureWarning about writeable broadcast arrays)
    t, df = np.broadcast_arrays(np.array([2.0, 2.5]), 12.0)
    lam, _ = np.broadcast_arrays(np.array(0.6), np.ones(3))
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        dunnett_sf(t, lam, 12)
        dunnett_ppf(np.broadcast_arrays(0.95, np.ones(2))[0], lam, 12)
        srange_sf(t, 4, df)
        smm_ppf(np.broadcast_arrays(0.95, np.ones(2))[0], 3, df)


# ---------------------------------------------------------------------------
# Studentized maximum modulus
# ---------------------------------------------------------------------------

@pytest.mark.parametrize("df", [1, 4, 30, np.inf])
def test_smm_m1_is_two_sided_t(df):
    # m = 1: P(|T| >= t), scipy.stats.t
    t = np.array([0.2, 1.0, 2.2, 5.0, 12.0])
    # (df = 1, the Cauchy case with the heaviest tail in s, is the least accurate)
    np.testing.assert_allclose(smm_sf(t, 1, df), 2 * stats.t.sf(t, df), rtol=1e-9)
    np.testing.assert_allclose(smm_ppf(0.95, 1, df), stats.t.isf(0.025, df), rtol=1e-9)


def test_smm_df_inf_closed_form():
    # df = inf: 1 - (2 Phi(t) - 1)^m (math), written without cancellation as
    # -expm1(m log1p(-erfc(t / sqrt 2)))
    t = np.linspace(0.1, 7, 40)
    for m in (2, 7, 45):
        exact = -np.expm1(m * np.log1p(-special.erfc(t / np.sqrt(2))))
        np.testing.assert_allclose(smm_sf(t, m, np.inf), exact, rtol=1e-10)
        np.testing.assert_allclose(smm_sf(t[:10], m, np.inf), 1 - (2 * stats.norm.cdf(t[:10]) - 1) ** m,
                                   rtol=1e-12)


@pytest.mark.parametrize("t,m,df", [(2.5, 3, 10), (3.2, 10, 5), (1.5, 6, 40), (4.0, 2, 2)])
def test_smm_direct_quad(t, m, df):
    # direct scipy.integrate.quad of E_S[1 - (2 Phi(tS) - 1)^m] over the chi density
    dens = stats.chi(df, scale=1 / np.sqrt(df)).pdf
    ref, _ = integrate.quad(lambda s: dens(s) * (1 - (2 * stats.norm.cdf(t * s) - 1) ** m),
                            0, np.inf, epsabs=1e-13, epsrel=1e-11, limit=200)
    assert abs(smm_sf(t, m, df) - ref) < 1e-10


@pytest.mark.parametrize("m,df", [(3, 10), (10, 20), (45, 60), (6, np.inf)])
def test_smm_sidak_and_bonferroni_bounds(m, df):
    # Sidak (1967) inequality: with a common S, P(max |T_i| <= c) >= prod P(|T_i| <= c),
    # so the SMM critical value is at most the Sidak t multiplier, which is at most
    # the Bonferroni one; equality with Sidak at df = inf (independent normals).
    # Lower bound: the df = inf value (common practice, no source).
    alpha = 0.05
    c = smm_ppf(1 - alpha, m, df)
    sidak = stats.t.isf((1 - (1 - alpha) ** (1 / m)) / 2, df)
    bonf = stats.t.isf(alpha / (2 * m), df)
    z_sidak = stats.norm.isf((1 - (1 - alpha) ** (1 / m)) / 2)
    assert z_sidak - 1e-12 <= c <= sidak + 1e-12 and sidak < bonf
    if np.isinf(df):
        assert c == pytest.approx(sidak, rel=1e-10)
    else:
        assert c < sidak


def test_smm_vectorised_df():
    # Dunnett's T3: one df per comparison in one call
    rng = np.random.default_rng(11)
    df = rng.uniform(3, 80, 25)
    t = rng.uniform(0.5, 5, 25)
    np.testing.assert_array_equal(smm_sf(t, 6, df), [smm_sf(a, 6, b) for a, b in zip(t, df)])
    np.testing.assert_allclose(smm_sf(smm_ppf(0.95, 6, df), 6, df), 0.05, rtol=1e-9)


# ---------------------------------------------------------------------------
# Welch-Satterthwaite df and standard errors
# ---------------------------------------------------------------------------

def test_welch_df_matches_scipy_welch_t():
    # Satterthwaite (1946) df for the two-sample contrast; scipy.stats.ttest_ind
    # (equal_var=False) reports the same df
    rng = np.random.default_rng(3)
    a, b = rng.normal(0, 1, 7), rng.normal(0, 3, 12)
    v = np.array([a.var(ddof=1), b.var(ddof=1)])
    n = np.array([7, 12])
    res = stats.ttest_ind(a, b, equal_var=False)
    np.testing.assert_allclose(welch_df([[1, -1]], v, n), [res.df], rtol=1e-12)
    se = contrast_se_welch([[1, -1]], v, n)
    np.testing.assert_allclose((a.mean() - b.mean()) / se, [res.statistic], rtol=1e-12)


def test_welch_df_games_howell_set_b():
    # Games-Howell df (CHECK-VALUES 3.6 definition) for several contrasts at once
    groups = [[30, 23, 51], [-81, 71, -27, 63], [42, 11, 29, 19, 50], [23, 22, 20, 18, 9]]
    v = np.array([np.var(g, ddof=1) for g in groups])
    n = np.array([len(g) for g in groups], float)
    w = np.array([[1, -1, 0, 0], [0, 0, 1, -1], [1, 0, 0, -1]])
    d = welch_df(w, v, n)
    for row, (i, j) in zip(d, [(0, 1), (2, 3), (0, 3)]):
        a, b = v[i] / n[i], v[j] / n[j]
        assert row == pytest.approx((a + b) ** 2 / (a ** 2 / (n[i] - 1) + b ** 2 / (n[j] - 1)), rel=1e-13)


def test_contrast_se_pooled():
    # NIST 7.4.7.1 (via scipy test): MSE 1.33075, n = 5; HSD half-width 2.0874 (CHECK-VALUES 3.2)
    se = contrast_se_pooled([[1, -1, 0, 0]], 1.33075, [5, 5, 5, 5])
    half = srange_ppf(0.95, 4, 16) / np.sqrt(2) * se
    assert abs(half[0] - 2.0874) < 1e-4

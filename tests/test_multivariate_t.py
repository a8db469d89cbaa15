"""The multivariate-t maximum and the multivariate-t procedure against outside references.

Each check names its source.  "Within the stated bound" means within the
quasi-Monte Carlo error bound the function reports (four standard errors) (plus the reference's own
precision where it has one); the integration runs from a fixed seed, so every
check sees the same numbers on every run.
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy import special, stats

from famwise.core.errors import FamwiseInputError
from famwise.core.families import all_pairs, vs_reference
from famwise.distributions import dunnett_sf, srange_sf
from famwise.distributions.multivariate_t import (max_t_ppf, max_t_sf,
                                                  staircase)


def pair_corr(k, n=None):
    """Correlation of all pairwise differences of k independent means (variances 1/n)."""
    n = np.ones(k) if n is None else np.asarray(n, float)
    w = all_pairs([f"g{i}" for i in range(k)]).weights
    cov = w @ np.diag(1.0 / n) @ w.T
    se = np.sqrt(np.diag(cov))
    return cov / np.outer(se, se)


def equi(m, rho):
    return np.full((m, m), rho) + (1.0 - rho) * np.eye(m)


# --- the compiled normal quantile ----------------------------------------------------------

def test_ndtri_kernel_matches_scipy():
    """Wichura's AS 241 in the kernel against scipy.special.ndtri (reference library)."""
    from famwise.distributions._lattice import ndtri_scalar

    p = np.concatenate([np.logspace(-300, -1, 400), np.linspace(0.01, 0.99, 300),
                        1.0 - np.logspace(-15, -2, 50)])
    ours = np.array([ndtri_scalar(x) for x in p])
    np.testing.assert_allclose(ours, special.ndtri(p), rtol=2e-14, atol=1e-300)


# --- identities -------------------------------------------------------------------------------

@pytest.mark.parametrize("df", [np.inf, 7.0])
@pytest.mark.parametrize("alternative", ["two-sided", "greater"])
def test_equicorrelated_equals_one_factor_integral(df, alternative):
    """Identity: with corr rho_ij = lam^2 the maximum is Dunnett's one-factor integral
    (Dunnett 1955, section 2), computed independently by famwise.distributions.dunnett_sf."""
    m, rho = 6, 0.3
    c = np.array([1.0, 2.0, 2.6, 3.2, 4.0])
    res = max_t_sf(c, equi(m, rho), df, alternative)
    ref = dunnett_sf(c, np.full(m, math.sqrt(rho)), df, alternative=alternative)
    assert np.all(np.abs(res.sf - ref) <= res.error + 1e-12), (res.sf - ref, res.error)
    assert np.all(res.error <= 1e-3)


def test_product_correlation_equals_one_factor_integral():
    """Identity: unequal product correlation rho_ij = lam_i lam_j (Dunnett 1955, eq. 2.2)."""
    lam = np.array([0.2, 0.5, 0.7, 0.8, 0.9])
    r = np.outer(lam, lam)
    np.fill_diagonal(r, 1.0)
    c = np.array([1.5, 2.2, 2.8, 3.5])
    res = max_t_sf(c, r, 12)
    ref = dunnett_sf(c, lam, 12, alternative="two-sided")
    assert np.all(np.abs(res.sf - ref) <= res.error + 1e-12)


def test_rank_one_is_student_t():
    """Identity: every row +-the same variable gives Student's t (scipy.stats.t)."""
    r = np.array([[1.0, 1.0, -1.0], [1.0, 1.0, -1.0], [-1.0, -1.0, 1.0]])
    c = np.array([0.5, 2.0, 4.0])
    res = max_t_sf(c, r, 9)
    assert res.rank == 1
    np.testing.assert_allclose(res.sf, 2 * stats.t.sf(c, 9), rtol=1e-12)
    q = max_t_ppf(0.95, r, 9)
    np.testing.assert_allclose(q.value, stats.t.ppf(0.975, 9), rtol=1e-12)


def test_duplicated_rows_change_nothing():
    """Identity: a comparison listed twice adds no constraint (common practice, no
    source); the singular matrix must give the probability of the reduced one."""
    base = equi(3, 0.5)
    dup = np.ones((4, 4)) * 0.5
    dup[:3, :3] = base
    dup[3, :3] = base[0]
    dup[:3, 3] = base[0]
    dup[3, 3] = 1.0
    c = np.array([2.0, 2.7])
    a = max_t_sf(c, base, 10)
    b = max_t_sf(c, dup, 10)
    assert staircase(dup).rank == 3
    assert np.all(np.abs(a.sf - b.sf) <= a.error + b.error)


def test_pairs_equal_studentized_range_singular():
    """Identity: all pairs of k equal-variance means (rank k - 1) is the
    studentized range, P(Q >= sqrt(2) c) (Tukey 1953); famwise's srange_sf is
    the independent one-dimensional quadrature (checked against Harter 1960)."""
    for k, df in ((4, np.inf), (6, 15.0)):
        r = pair_corr(k)
        assert staircase(r).rank == k - 1
        c = np.array([1.5, 2.5, 3.0, 3.6])
        res = max_t_sf(c, r, df)
        ref = srange_sf(math.sqrt(2) * c, k, df)
        assert np.all(np.abs(res.sf - ref) <= res.error + 1e-12), (k, res.sf - ref, res.error)


def test_linear_combinations_are_handled():
    """Identity: vs-reference rows plus all their differences is the all-pairs family
    in another order, so it has the same distribution of the maximum (common practice)."""
    k = 5
    labels = [f"g{i}" for i in range(k)]
    star = vs_reference(labels, "g0").weights
    diffs = [star[j] - star[i] for i in range(k - 1) for j in range(i + 1, k - 1)]
    w = np.vstack([star, diffs])
    cov = w @ w.T
    se = np.sqrt(np.diag(cov))
    r = cov / np.outer(se, se)
    c = np.array([2.0, 2.8])
    res = max_t_sf(c, r, 20)
    ref = srange_sf(math.sqrt(2) * c, k, 20)
    assert np.all(np.abs(res.sf - ref) <= res.error + 1e-12)


# --- scipy's multivariate normal and t as references ----------------------------------------

def _random_corr(m, seed):
    rng = np.random.default_rng(seed)
    a = rng.standard_normal((m, m + 2))
    cov = a @ a.T
    d = np.sqrt(np.diag(cov))
    return cov / np.outer(d, d)


def test_box_probability_matches_scipy_multivariate_normal():
    """Reference: scipy.stats.multivariate_normal.cdf of the box [-c, c]^5 (Genz's
    algorithm in scipy, abseps 1e-7), a general full-rank correlation."""
    r = _random_corr(5, 4)
    for c in (1.5, 2.5):
        ref = stats.multivariate_normal(np.zeros(5), r, abseps=1e-7, releps=1e-7,
                                        maxpts=2_000_000).cdf(
            np.full(5, c), lower_limit=np.full(5, -c), rng=np.random.default_rng(1))
        res = max_t_sf(c, r, np.inf)
        assert abs(float(res.cdf) - ref) <= float(res.error) + 2e-6, (c, res.cdf, ref)


def test_orthant_probability_matches_scipy_multivariate_t():
    """Reference: scipy.stats.multivariate_t.cdf (scipy's randomized QMC for the t,
    maxpts 1e6; its own error is about 1e-5) of the one-sided region T_i <= c."""
    r = _random_corr(4, 9)
    for c in (1.0, 2.2):
        ref = stats.multivariate_t(np.zeros(4), r, df=6).cdf(
            np.full(4, c), maxpts=1_000_000, random_state=np.random.default_rng(2))
        res = max_t_sf(c, r, 6, "greater")
        assert abs(float(res.cdf) - ref) <= float(res.error) + 5e-5, (c, res.cdf, ref)


# --- published tables --------------------------------------------------------------------------

# Dunnett critical values, equal n (rho = 1/2), as listed in CHECK-VALUES.md section 2:
# (alternative, p, df, published, source)
DUNNETT_TABLE = [
    ("greater", 3, 10, 2.34, "Dunnett 1955 Table 1a"),
    ("greater", 2, 30, 1.99, "Dunnett 1955 Table 1a"),
    ("greater", 4, 60, 2.21, "Dunnett 1955 Table 1a"),
    ("two-sided", 2, 30, 2.32, "Dunnett 1955 Table 2a"),
    ("two-sided", 3, 10, 2.76, "Dunnett 1964, from memory"),
    ("two-sided", 4, 20, 2.65, "Dunnett 1964, from memory"),
    ("two-sided", 3, np.inf, 2.35, "Dunnett 1964, from memory"),
]


@pytest.mark.parametrize("alternative,p,df,published,source", DUNNETT_TABLE)
def test_dunnett_table_critical_values(alternative, p, df, published, source):
    """Published two-decimal critical values (source in each row); tolerance half a
    unit in the last printed digit plus our stated error on the scale of c."""
    q = max_t_ppf(0.95, equi(p, 0.5), df, alternative)
    assert abs(float(q.value) - published) <= 0.005 + float(q.value_error), (source, q)


# Harter (1960) Table 3 via CHECK-VALUES.md section 1: q(.05; k, df), 4 significant figures.
HARTER = [(8, 10, 5.305), (8, 120, 4.363), (2, 20, 2.950), (4, 16, 4.05)]


@pytest.mark.parametrize("k,df,published", HARTER)
def test_studentized_range_table_from_singular_pairs(k, df, published):
    """Harter (1960) Table 3 (the k = 4, df = 16 row is NIST's 4.05, from memory):
    sqrt(2) times the all-pairs critical value is the studentized range quantile."""
    q = max_t_ppf(0.95, pair_corr(k), df)
    tol = 0.0015 if published > 4.1 else 0.006
    assert abs(math.sqrt(2) * float(q.value) - published) <= tol + math.sqrt(2) * float(
        q.value_error), q


# --- determinism, properties, input errors ------------------------------------------------

def test_deterministic_and_independent_of_threads():
    """Project contract: the same numbers twice and for any n_jobs (bit for bit)."""
    r = pair_corr(6, [3, 5, 8, 4, 6, 7])
    c = np.linspace(0.5, 4.0, 9)
    a = max_t_sf(c, r, 14)
    b = max_t_sf(c, r, 14)
    d = max_t_sf(c, r, 14, n_jobs=2)
    for x in (b, d):
        assert np.array_equal(a.sf, x.sf) and np.array_equal(a.error, x.error)
    q1 = max_t_ppf(0.95, r, 14)
    q2 = max_t_ppf(0.95, r, 14, n_jobs=2)
    assert np.array_equal(q1.value, q2.value)


def test_many_values_interpolated_within_bound():
    """Many distinct values go through the interpolated curve; against the exact
    studentized range (famwise.srange_sf) they stay within the stated bound."""
    k = 5
    c = np.linspace(0.05, 5.0, 120)
    res = max_t_sf(c, pair_corr(k), 30)
    ref = srange_sf(math.sqrt(2) * c, k, 30)
    assert np.all(np.abs(res.sf - ref) <= res.error + 1e-12)
    assert np.all(np.diff(res.sf) <= 1e-12)            # non-increasing in c


@pytest.mark.parametrize("bad,match", [
    (np.array([[1.0, 0.5], [0.4, 1.0]]), "not symmetric"),
    (np.array([[2.0, 0.5], [0.5, 1.0]]), "unit diagonal"),
    (np.array([[1.0, 0.9, -0.9], [0.9, 1.0, 0.9], [-0.9, 0.9, 1.0]]), "semidefinite"),
    (np.array([[1.0, np.nan], [np.nan, 1.0]]), "non-finite"),
])
def test_bad_correlation_is_one_line(bad, match):
    with pytest.raises(FamwiseInputError, match=match) as exc:
        max_t_sf(2.0, bad, 10)
    assert "\n" not in str(exc.value)


def test_bad_arguments_are_one_line():
    r = equi(3, 0.5)
    with pytest.raises(FamwiseInputError, match="df must be"):
        max_t_sf(2.0, r, 0)
    with pytest.raises(FamwiseInputError, match="alternative"):
        max_t_sf(2.0, r, 10, "twosided")
    with pytest.raises(FamwiseInputError, match="conf"):
        max_t_ppf(1.2, r, 10)

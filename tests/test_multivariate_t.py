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
from famwise.core.families import all_pairs, contrasts, vs_reference
from famwise.core.layout import Layout
from famwise.distributions import dunnett_sf, srange_ppf, srange_sf
from famwise.distributions.multivariate_t import (max_t_ppf, max_t_sf,
                                                  staircase)
from famwise.procedures import run_procedure
from famwise.procedures.multivariate import multivariate_t, multivariate_t_table


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


# --- the procedure against scipy's Tukey and Dunnett ----------------------------------------

HEADACHE = [[24.5, 23.5, 26.4, 27.1, 29.9], [28.4, 34.2, 29.5, 32.2, 30.1],
            [26.1, 28.3, 24.3, 26.2, 27.8]]
NIST = [[6.9, 5.4, 5.8, 4.6, 4.0], [8.3, 6.8, 7.8, 9.2, 6.5], [8.0, 10.5, 8.1, 6.9, 9.3],
        [5.8, 3.8, 6.1, 5.6, 6.2]]


@pytest.mark.parametrize("groups", [HEADACHE, NIST], ids=["scipy-docstring", "nist"])
def test_balanced_all_pairs_equal_scipy_tukey_hsd(groups):
    """Reference: scipy.stats.tukey_hsd (balanced, so exact Tukey) on the data of its
    docstring (CHECK-VALUES 3.1) and of the NIST handbook example (CHECK-VALUES 3.2)."""
    lay = Layout.from_groups(groups)
    fam = all_pairs(lay.labels)
    tab = multivariate_t(lay, fam)
    ref = stats.tukey_hsd(*groups)
    ci = ref.confidence_interval(0.95)
    a, b = fam.pairs[:, 0], fam.pairs[:, 1]
    bound = 4.0 * tab["mc_error"].to_numpy()
    assert np.all(np.abs(tab["p_adjusted"].to_numpy() - ref.pvalue[a, b]) <= bound + 1e-10)
    # interval ends: the critical value's stated error times the standard error
    ce = tab.attrs["critical_value_error"]
    se = tab["std_error"].to_numpy()
    assert np.all(np.abs(tab["ci_lower"].to_numpy() - ci.low[a, b]) <= ce * se + 1e-9)
    assert np.all(np.abs(tab["ci_upper"].to_numpy() - ci.high[a, b]) <= ce * se + 1e-9)
    assert list(tab["reject"]) == list(ref.pvalue[a, b] <= 0.05)


def test_critical_value_equals_studentized_range_quantile():
    """Reference: scipy.stats.studentized_range.ppf(0.95, k, df) / sqrt(2)."""
    lay = Layout.from_groups(NIST)
    tab = multivariate_t(lay, all_pairs(lay.labels))
    ref = stats.studentized_range.ppf(0.95, 4, 16) / math.sqrt(2)
    assert abs(tab.attrs["critical_value"] - ref) <= tab.attrs["critical_value_error"]
    assert abs(tab.attrs["critical_value"] - float(srange_ppf(0.95, 4, 16)) / math.sqrt(2)) \
        <= tab.attrs["critical_value_error"]


CASE3 = ([55, 47, 48], [[55, 64, 64], [55, 49, 52], [50, 44, 41]])


@pytest.mark.parametrize("alternative", ["two-sided", "greater", "less"])
def test_balanced_vs_reference_equals_scipy_dunnett(alternative):
    """Reference: scipy.stats.dunnett on scipy's equal-n test case (CHECK-VALUES 3.5,
    'case_3'); scipy integrates by randomized QMC too, so the comparison allows our
    bound plus 2e-4 for scipy's own error, and the exact one-factor integral
    (famwise.dunnett_sf; two-sided exact values [0.036622, 0.896475, 0.409160] in
    CHECK-VALUES) is held to our bound alone."""
    control, samples = CASE3
    lay = Layout.from_groups([control] + samples, ["control", "a", "b", "c"])
    tab = multivariate_t(lay, vs_reference(lay.labels, "control"), alternative=alternative)
    ref = stats.dunnett(*samples, control=control, alternative=alternative,
                        rng=np.random.default_rng(0))
    bound = 4.0 * tab["mc_error"].to_numpy()
    p = tab["p_adjusted"].to_numpy()
    assert np.all(np.abs(p - ref.pvalue) <= bound + 2e-4), (p, ref.pvalue)
    t = tab["statistic"].to_numpy()
    lam = np.full(3, math.sqrt(0.5))
    if alternative == "two-sided":
        exact = dunnett_sf(np.abs(t), lam, 8, alternative="two-sided")
        np.testing.assert_allclose(exact, [0.036622, 0.896475, 0.409160], atol=2e-6)
    else:
        exact = dunnett_sf(t if alternative == "greater" else -t, lam, 8, alternative="greater")
    assert np.all(np.abs(p - exact) <= bound + 1e-10), (p, exact, bound)


def test_unequal_n_vs_reference_equals_dunnett_exact():
    """Reference: Dunnett's (1955) blood-count example (CHECK-VALUES 3.5), unequal n:
    exact two-sided p [0.620102, 0.005825] and critical value 2.51348."""
    lay = Layout.from_groups([[7.40, 8.50, 7.20, 8.24, 9.84, 8.32], [9.76, 8.80, 7.68, 9.36],
                              [12.80, 9.68, 12.16, 9.20, 10.55]], ["control", "A", "B"])
    tab = multivariate_t(lay, vs_reference(lay.labels, "control"))
    bound = 4.0 * tab["mc_error"].to_numpy()
    assert np.all(np.abs(tab["p_adjusted"].to_numpy() - [0.620102, 0.005825])
                  <= bound + 1e-6)
    assert abs(tab.attrs["critical_value"] - 2.51348) <= tab.attrs["critical_value_error"] + 1e-5


def test_unequal_n_all_pairs_below_tukey_kramer():
    """Fact of the trade (Hayter 1984): Tukey-Kramer is conservative for unequal n, so
    the exact adjustment's p-values are no larger (beyond the stated bound) and its
    critical value is smaller; data: scipy's unequal-n Tukey case (CHECK-VALUES 3.1)."""
    groups = [[24.5, 23.5, 26.28, 26.4, 27.1, 29.9, 30.1, 30.1]] + HEADACHE[1:]
    lay = Layout.from_groups(groups)
    fam = all_pairs(lay.labels)
    mvt = multivariate_t(lay, fam)
    tk = run_procedure("tukey-kramer", lay, fam)
    bound = 4.0 * mvt["mc_error"].to_numpy()
    assert np.all(mvt["p_adjusted"].to_numpy() <= tk["p_adjusted"].to_numpy() + bound)
    assert mvt.attrs["critical_value"] < float(srange_ppf(0.95, 3, lay.n_total - 3)) / 2 ** .5


def test_general_contrasts_between_t_and_bonferroni():
    """Facts of the trade: a contrast family's exact adjustment lies between the
    unadjusted t and Bonferroni; its intervals are narrower than Scheffe's."""
    lay = Layout.from_groups(NIST, ["t1", "t2", "t3", "t4"])
    fam = contrasts(lay.labels, ["(t1 + t4)/2 - (t2 + t3)/2", "t2 - t3", "t1 - t4",
                                 "t3 - (t1 + t2 + t4)/3"])
    tab = multivariate_t(lay, fam)
    bonf = run_procedure("bonferroni", lay, fam)
    sch = run_procedure("scheffe", lay, fam)
    p = tab["p_adjusted"].to_numpy()
    assert np.all(tab["p_unadjusted"].to_numpy() <= p)
    assert np.all(p <= bonf["p_adjusted"].to_numpy() + 1e-12)
    width = (tab["ci_upper"] - tab["ci_lower"]).to_numpy()
    assert np.all(width < (sch["ci_upper"] - sch["ci_lower"]).to_numpy())
    assert np.all(width <= (bonf["ci_upper"] - bonf["ci_lower"]).to_numpy())


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


def test_probability_properties():
    """Common practice, no source: p_unadjusted <= p_adjusted <= Bonferroni, and the
    decisions are dual to the intervals."""
    rng = np.random.default_rng(5)
    groups = [rng.normal(mu, 1.0, n) for mu, n in zip([0, 0.2, 1.5, 1.6, 3.0], [4, 9, 6, 12, 5])]
    lay = Layout.from_groups(groups)
    for fam in (all_pairs(lay.labels), vs_reference(lay.labels, lay.labels[0])):
        tab = multivariate_t(lay, fam)
        pu, pa = tab["p_unadjusted"].to_numpy(), tab["p_adjusted"].to_numpy()
        assert np.all(pu <= pa) and np.all(pa <= np.minimum(1, fam.m * pu) + 1e-15)
        excludes = (tab["ci_lower"] > 0) | (tab["ci_upper"] < 0)
        assert list(excludes) == list(tab["reject"])
        assert tab["reject"].any() and not tab["reject"].all()


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
    fam = all_pairs(["a", "b", "c"])
    with pytest.raises(FamwiseInputError, match="positive variance"):
        multivariate_t_table(fam, np.zeros(3), np.zeros((3, 3)), 10)
    with pytest.raises(FamwiseInputError, match="covariance must be 3 x 3"):
        multivariate_t_table(fam, np.zeros(3), np.eye(2), 10)


def test_table_reports_the_error_bound():
    """The table carries the QMC standard error per row and the bounds in attrs."""
    lay = Layout.from_groups(NIST)
    tab = multivariate_t(lay, all_pairs(lay.labels))
    assert "mc_error" in tab and "unsettled" in tab
    assert np.all(tab["mc_error"] > 0)
    assert "critical value" in tab.attrs["interval_note"]
    assert tab.attrs["qmc"]["rank"] == 3
    assert tab.attrs["procedure"] if "procedure" in tab.attrs else True
    assert set(tab["procedure"]) == {"multivariate-t"}


# --- from the model stage: blocks and covariates -------------------------------------------

def _hardness_layout():
    # Montgomery (2001), Design and Analysis of Experiments, 5th ed., Example 4-1,
    # Table 4-3 (four tips on four coupons), from memory, as in tests/test_model.py.
    y = {"1": [9.3, 9.4, 9.6, 10.0], "2": [9.4, 9.3, 9.8, 9.9],
         "3": [9.2, 9.4, 9.5, 9.7], "4": [9.7, 9.6, 10.0, 10.2]}
    lay = Layout(values=np.concatenate([y[t] for t in y]), codes=np.repeat(np.arange(4), 4),
                 labels=tuple(y), response="hardness", group="tip")
    return lay.with_design(blocks={"coupon": np.tile(["c1", "c2", "c3", "c4"], 4)})


def test_complete_blocks_equal_tukey_with_block_error():
    """Fact of the trade (balanced complete blocks, no covariate): the adjustment is
    Tukey's with the block model's error mean square on (k-1)(b-1) = 9 df; data of
    Montgomery (2001) Example 4-1, whose MS error is 0.0089 (Table 4-4, from memory)."""
    lay = _hardness_layout()
    tab = multivariate_t(lay, all_pairs(lay.labels))
    assert tab["df"].iloc[0] == 9
    assert tab.attrs["mse"] == pytest.approx(0.0089, abs=5e-5)
    ref = srange_sf(math.sqrt(2) * np.abs(tab["statistic"].to_numpy()), 4, 9)
    bound = 4.0 * tab["mc_error"].to_numpy()
    assert np.all(np.abs(tab["p_adjusted"].to_numpy() - ref) <= bound + 1e-10)
    tk = run_procedure("tukey-kramer", lay, all_pairs(lay.labels))
    np.testing.assert_allclose(tab["std_error"], tk["std_error"], rtol=1e-12)


def test_covariate_model_matches_scipy_multivariate_t():
    """Reference: scipy.stats.multivariate_t.cdf with the correlation of the adjusted
    means from statsmodels OLS (general least squares, test-only), on Montgomery's
    (2001) fibre-strength analysis of covariance (Example 15-4, from memory), where the
    covariate makes the comparisons with machine 1 correlated unequally."""
    smf = pytest.importorskip("statsmodels.formula.api")
    import pandas as pd

    y = [36, 41, 39, 42, 49, 40, 48, 39, 45, 44, 35, 37, 42, 34, 32]
    x = [20, 25, 24, 25, 32, 22, 28, 22, 30, 28, 21, 23, 26, 21, 15]
    lay = Layout(values=np.array(y, float), codes=np.repeat(np.arange(3), 5),
                 labels=("1", "2", "3"), response="strength", group="machine")
    lay = lay.with_design(covariates={"diameter": np.array(x, float)})
    fam = vs_reference(lay.labels, "1")
    tab = multivariate_t(lay, fam)
    data = pd.DataFrame({"y": y, "x": x, "g": np.repeat(["1", "2", "3"], 5)})
    ols = smf.ols("y ~ C(g) + x", data=data).fit()
    cov = ols.cov_params().to_numpy()[1:3, 1:3]         # machine 2 - 1, machine 3 - 1
    est = ols.params.to_numpy()[1:3]
    se = np.sqrt(np.diag(cov))
    np.testing.assert_allclose(tab["difference"], est, rtol=1e-8)
    np.testing.assert_allclose(tab["std_error"], se, rtol=1e-8)
    r = cov / np.outer(se, se)
    assert abs(r[0, 1] - 0.5) > 0.01                    # not Dunnett's equal-n 1/2
    mvt = stats.multivariate_t(np.zeros(2), r, df=ols.df_resid)
    t = np.abs(est / se)
    ref = [1.0 - mvt.cdf(np.full(2, v), lower_limit=np.full(2, -v), maxpts=1_000_000,
                         random_state=np.random.default_rng(3)) for v in t]
    bound = 4.0 * tab["mc_error"].to_numpy()
    assert np.all(np.abs(tab["p_adjusted"].to_numpy() - ref) <= bound + 5e-5), (tab, ref)

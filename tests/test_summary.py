"""Group summary: agreement with numpy/scipy, and numerical stability.

References: numpy (mean, std with ddof=1, median), scipy.stats.trim_mean and
scipy.stats.sem.  Stability: adding 1e12 to every value or rescaling by 1e-6
or 1e6 must not change the summary beyond 1e-9 relative (DESIGN.md, Numerics;
the one-pass formula sum(x^2) - n*mean^2 fails this by many orders).
"""

import numpy as np
import pytest
from scipy import stats

from famwise.core.layout import Layout, group_stats
from famwise.intake.summary import group_summary


def groups(seed):
    rng = np.random.default_rng(seed)
    # Values on a grid of 1/1024 stay exactly representable after adding 1e12
    # (the spacing of doubles near 1e12 is 2**-12), so any change is the
    # algorithm's, not the input's.
    return [np.round(rng.normal(mu, sd, n) * 1024) / 1024
            for mu, sd, n in [(10, 2, 5), (12, 0.5, 8), (9, 4, 13), (30, 1e-3, 3)]]


@pytest.mark.parametrize("seed", [0, 1, 2])
def test_summary_matches_numpy_and_scipy(seed):
    data = groups(seed)
    table = group_summary(Layout.from_groups(data, ["a", "b", "c", "d"]))
    for row, x in zip(table.itertuples(), data):
        assert row.n == x.size
        assert row.mean == pytest.approx(np.mean(x), rel=1e-14)
        assert row.sd == pytest.approx(np.std(x, ddof=1), rel=1e-12)
        assert row.se == pytest.approx(stats.sem(x), rel=1e-12)
        assert row.median == pytest.approx(np.median(x), rel=1e-14)
        assert row.trimmed_mean == pytest.approx(stats.trim_mean(x, 0.2), rel=1e-14)
        assert (row.min, row.max) == (x.min(), x.max())


@pytest.mark.parametrize("seed", [0, 1, 2])
def test_summary_unchanged_by_a_shift_of_1e12(seed):
    data = groups(seed)
    base = group_summary(Layout.from_groups(data))
    shifted = group_summary(Layout.from_groups([x + 1e12 for x in data]))
    for col in ("sd", "se"):
        np.testing.assert_allclose(shifted[col], base[col], rtol=1e-9)
    for col in ("mean", "median", "trimmed_mean", "min", "max"):
        np.testing.assert_allclose(shifted[col], base[col] + 1e12, rtol=1e-9)
        # and the location is right to the spacing of doubles near 1e12
        np.testing.assert_allclose(shifted[col] - 1e12, base[col], atol=2 ** -11)


@pytest.mark.parametrize("scale", [1e-6, 1e6])
def test_summary_scales_with_the_unit(scale):
    data = groups(3)
    base = group_summary(Layout.from_groups(data))
    scaled = group_summary(Layout.from_groups([x * scale for x in data]))
    for col in ("mean", "sd", "se", "median", "trimmed_mean", "min", "max"):
        np.testing.assert_allclose(scaled[col], base[col] * scale, rtol=1e-9)


def test_naive_formula_would_fail_the_shift_test():
    # Guard that the shift test can fail: the textbook one-pass variance does.
    x = groups(0)[0] + 1e12
    naive = (np.sum(x * x) - x.size * np.mean(x) ** 2) / (x.size - 1)
    true = np.var(x - 1e12, ddof=1)
    assert abs(naive - true) > 1e-3 * true
    st = group_stats(x, np.zeros(x.size, dtype=np.int64), 1)
    assert st.var[0] == pytest.approx(true, rel=1e-12)


def test_pooled_mse_and_error_df():
    data = groups(4)
    st = Layout.from_groups(data).stats
    # One-way ANOVA error mean square, by definition (common practice, no source).
    ss = sum(((x - x.mean()) ** 2).sum() for x in data)
    assert st.df_error == sum(x.size for x in data) - len(data)
    assert st.mse == pytest.approx(ss / st.df_error, rel=1e-12)

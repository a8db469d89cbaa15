"""The route's power step (famwise.diagnostics.power_choice) against outside references.

* Power of closed-form procedures under normal errors: with two groups
  Tukey–Kramer is Student's two-sample t test, whose power at a shift of
  delta standard errors is the noncentral t tail (``scipy.stats.nct``);
  Scheffé's test of one contrast rejects when t^2 / (k - 1) exceeds the F
  quantile, and t^2 is noncentral F with (1, N - k) df and noncentrality
  delta^2 (``scipy.stats.ncf``).
* With two groups Games–Howell is Welch's test; its power under unequal
  SDs is checked against an independent simulation through
  ``scipy.stats.ttest_ind(equal_var=False)``.
* Under the complete null with equal SDs, normal errors, Tukey–Kramer's
  familywise error rate is alpha for balanced groups (Tukey 1953; a
  definition of the procedure) and at most alpha for unbalanced ones
  (Hayter 1984, *Annals of Statistics* 12:61–75).
* The route: constructed layouts (not reference values) exercise the
  branches: a replacement, a kept choice, a switch-off, a user's choice,
  the margin, reproducibility from the seed, and the decision record.

Monte Carlo tolerances are 4 binomial SEs, sqrt(p (1 - p) / R), stated at
each check.
"""

from __future__ import annotations

import json
import warnings

import numpy as np
import pytest
from scipy import stats

import famwise
from famwise.core.errors import FamwiseInputError
from famwise.core.families import all_pairs, contrasts
from famwise.core.layout import Layout
from famwise.diagnostics import Policy, load_policy, run_checks
from famwise.diagnostics.power_choice import (alternative_means, candidates,
                                              choose_by_power, power_calibration,
                                              standardised_shift)
from famwise.diagnostics.route import choose

ALPHA = 0.05
ON = Policy(power_route=True)          # the step is off by default (policy notes)


def exact_layout(sizes, sds, seed=0, shape="normal"):
    """Groups with exactly the given sizes and SDs (means 10)."""
    rng = np.random.default_rng(seed)
    groups = []
    for n, s in zip(sizes, sds):
        e = rng.standard_normal(n) if shape == "normal" else rng.lognormal(0, 1, n)
        groups.append(10.0 + s * (e - e.mean()) / e.std(ddof=1))
    return Layout.from_groups(groups, [f"g{i}" for i in range(len(sizes))])


def mc_tol(p, r):
    return 4 * np.sqrt(max(p * (1 - p), 1e-4) / r)


# --- the alternative -----------------------------------------------------------------

def test_standardised_shift_is_the_bonferroni_z_at_power_one_half():
    # z(1 - alpha/(2m)) + z(0.5): the normal quantile of scipy.stats.norm.
    assert standardised_shift(1, 0.05, 0.5) == pytest.approx(stats.norm.isf(0.025), abs=1e-12)
    assert standardised_shift(15, 0.05, 0.8) == pytest.approx(
        stats.norm.isf(0.05 / 30) + stats.norm.ppf(0.8), abs=1e-12)


def test_alternative_means_shift_each_comparison_by_its_value():
    fam = all_pairs(["a", "b", "c"])
    shift = np.array([1.0, 2.0, 3.0])
    mu = alternative_means(fam, [5, 5, 5], [1, 1, 1], shift)
    np.testing.assert_allclose(np.einsum("ck,ck->c", fam.weights, mu), shift, atol=1e-14)
    np.testing.assert_allclose(mu[0], [0.5, -0.5, 0.0], atol=1e-14)     # +-half on the pair
    con = contrasts(["a", "b", "c"], "(a + b)/2 - c")
    mu = alternative_means(con, [5, 5, 5], [1, 1, 1], [1.5])
    assert float(con.weights[0] @ mu[0]) == pytest.approx(1.5, abs=1e-14)


# --- power against closed forms ------------------------------------------------------

def test_two_group_tukey_kramer_power_is_noncentral_t():
    # Student's t with df = 2n - 2, noncentrality delta (the shift in SEs at the
    # true SDs): power = P(|T'| > t_{1 - alpha/2}); scipy.stats.nct.
    lay = exact_layout([12, 12], [1.0, 1.0])
    fam = all_pairs(lay.labels)
    r = 20000
    rec = power_calibration(lay, fam, alpha=ALPHA, seed=11, procedures=["tukey-kramer"],
                            replicates=r, shape="normal")
    row = rec["candidates"][0]
    delta, df = rec["alternative"]["shift_se"], 22
    c = stats.t.isf(ALPHA / 2, df)
    expected = stats.nct.sf(c, df, delta) + stats.nct.cdf(-c, df, delta)
    assert abs(row["power"] - expected) < mc_tol(expected, r)
    assert abs(row["fwer"] - ALPHA) < mc_tol(ALPHA, r)       # exact t test under the null


def test_scheffe_power_for_one_contrast_is_noncentral_f():
    # t^2 ~ F'(1, N - k, delta^2); Scheffé rejects when t^2 >= (k - 1) F(1 - alpha;
    # k - 1, N - k) (Scheffé 1953); scipy.stats.ncf and scipy.stats.f.
    lay = exact_layout([8, 8, 8, 8], [1.0] * 4)
    fam = contrasts(lay.labels, "(g0 + g1)/2 - (g2 + g3)/2")
    r = 20000
    rec = power_calibration(lay, fam, alpha=ALPHA, seed=12, procedures=["scheffe"],
                            replicates=r, shape="normal", margin=1.0)
    row = rec["candidates"][0]
    se = np.sqrt(np.sum(fam.weights[0] ** 2 / 8.0))            # SD 1
    k, df = 4, 28
    crit = (k - 1) * stats.f.ppf(1 - ALPHA, k - 1, df)
    expected = stats.ncf.sf(crit, 1, df, (1.0 / se) ** 2)
    assert abs(row["power"] - expected) < mc_tol(expected, r)
    assert rec["alternative"]["kind"] == "margin"


def test_two_group_games_howell_power_matches_welch_simulation():
    # Independent simulation: scipy.stats.ttest_ind(equal_var=False) on normal
    # samples with the same sizes, SDs and shift (in units of the Welch SE).
    sizes, sds = (6, 15), (3.0, 1.0)
    lay = exact_layout(sizes, sds)
    fam = all_pairs(lay.labels)
    r = 20000
    rec = power_calibration(lay, fam, alpha=ALPHA, seed=13, procedures=["games-howell"],
                            replicates=r, shape="normal")
    delta = rec["alternative"]["shift_se"]
    se = np.sqrt(sds[0] ** 2 / sizes[0] + sds[1] ** 2 / sizes[1])
    rng = np.random.default_rng(14)
    a = rng.normal(delta * se, sds[0], (r, sizes[0]))
    b = rng.normal(0.0, sds[1], (r, sizes[1]))
    ref = float((stats.ttest_ind(a, b, axis=1, equal_var=False).pvalue <= ALPHA).mean())
    got = rec["candidates"][0]["power"]
    assert abs(got - ref) < mc_tol(ref, r) * np.sqrt(2)          # two independent estimates


def test_tukey_kramer_null_rate_balanced_and_unbalanced():
    # Balanced: exactly alpha (Tukey 1953); unbalanced: at most alpha (Hayter 1984).
    r = 10000
    for sizes, exact in (((8,) * 5, True), ((4, 6, 8, 12, 20), False)):
        lay = exact_layout(sizes, [1.0] * 5)
        rec = power_calibration(lay, all_pairs(lay.labels), alpha=ALPHA, seed=15,
                                procedures=["tukey-kramer"], replicates=r, shape="normal")
        f = rec["candidates"][0]["fwer"]
        if exact:
            assert abs(f - ALPHA) < mc_tol(ALPHA, r)
        else:
            assert f < ALPHA + mc_tol(ALPHA, r)


# --- the route -----------------------------------------------------------------------

def route_of(lay, policy=None, **kw):
    policy = policy or ON
    return choose(run_checks(lay, policy), all_pairs(lay.labels), lay, policy, **kw)


def test_power_step_replaces_a_conservative_rule_when_a_stronger_candidate_holds():
    # Unbalanced equal-SD normal data: the rules take Dunnett's T3 (small
    # unbalanced design); Tukey-Kramer holds there (Hayter 1984) and is far more
    # powerful, so the step replaces it.
    lay = exact_layout((4, 6, 8, 12, 20, 30), (1.0,) * 6, seed=1)
    rules = route_of(lay, Policy(power_route=False))
    assert rules.procedure == "dunnett-t3"
    r = route_of(lay, seed=7)
    assert r.procedure != "dunnett-t3"
    rows = {c["procedure"]: c for c in r.calibration["candidates"]}
    assert rows[r.procedure]["holds"]
    assert rows[r.procedure]["power"] >= rows["dunnett-t3"]["power"] + Policy().power_gain_min
    assert r.calibration["rule_choice"] == "dunnett-t3"
    assert "replaces the rules' choice, dunnett-t3" in r.reasons[-1]
    assert any(a.procedure == "dunnett-t3" and "rules' choice" in a.why
               for a in r.alternatives)
    assert r.procedure not in {a.procedure for a in r.alternatives}
    assert r.crosscheck is not None and r.route in ("classical", "unequal", "resample")


def test_power_step_keeps_the_rules_choice_when_it_is_as_good():
    # Balanced equal-SD normal data: the rules take Tukey-Kramer, exact and the
    # most powerful there (Tukey 1953).
    lay = exact_layout((10,) * 5, (1.0,) * 5, seed=4)
    r = route_of(lay)
    assert r.procedure == "tukey-kramer" and r.calibration["chosen"] == "tukey-kramer"
    assert "so it is kept" in r.reasons[-1]


def test_every_candidate_has_both_figures_in_the_decision_record():
    lay = exact_layout((5, 7, 9, 11), (2.0, 1.5, 1.0, 1.0), seed=5)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        res = famwise.compare(lay, crosscheck=False, resamples=199, seed=21, policy=ON)
    cal = json.loads(json.dumps(res.decision.to_dict()))["route"]["calibration"]
    names = [c["procedure"] for c in cal["candidates"]]
    # groups under policy.games_howell_min_n: Games-Howell does not compete
    expected = set(candidates(all_pairs(lay.labels), res.decision.route["calibration"]
                              ["rule_choice"])) - {"games-howell"}
    assert set(names) == expected
    for c in cal["candidates"]:
        assert 0 <= c["fwer"] <= 1 and 0 <= c["power"] <= 1
        assert c["holds"] == (c["fwer"] <= ALPHA + 2 * c["fwer_se"])
    assert cal["chosen"] == res.decision.route["procedure"]
    assert cal["replicates"] == Policy().power_replicates and cal["seed"] == 21


def test_seeded_from_the_compare_seed():
    lay = exact_layout((4, 6, 8, 12), (1.0, 1.0, 2.0, 2.0), seed=6, shape="skewed")
    a = route_of(lay, seed=1).calibration
    b = route_of(lay, seed=1).calibration
    c = route_of(lay, seed=2).calibration
    assert a == b
    assert a["candidates"] != c["candidates"]


def test_margin_sets_the_alternative():
    lay = exact_layout((6, 6, 6), (1.0,) * 3, seed=8)
    r = route_of(lay, margin=2.5)
    assert r.calibration["alternative"] == {
        "kind": "margin", "margin": 2.5,
        "sentence": "a difference of 2.5 (the margin) on one comparison"}
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        res = famwise.compare(lay, crosscheck=False, margin=2.5, seed=3, policy=ON)
    assert res.decision.route["calibration"]["alternative"]["margin"] == 2.5


def test_switched_off_and_user_choice_skip_the_step(tmp_path):
    lay = exact_layout((4, 6, 8, 12, 20, 30), (1.0,) * 6, seed=1)
    assert Policy().power_route is True                           # the default
    assert route_of(lay, Policy(power_route=False)).calibration is None
    path = tmp_path / "policy.toml"
    path.write_text("[policy]\npower_route = false\n")
    assert route_of(lay, load_policy(path)).calibration is None
    path.write_text("[policy]\npower_route = true\npower_replicates = 400\n")
    pol = load_policy(path)
    assert (pol.power_route, pol.power_replicates) == (True, 400)
    assert route_of(lay, pol).calibration["replicates"] == 400
    user = route_of(lay, procedure="games-howell")
    assert user.chosen_by == "user" and user.calibration is None
    with pytest.raises(FamwiseInputError, match="power_at"):
        Policy().replace(power_at=1.5)


def test_quick_calibration_is_kept_beside_the_power_record():
    lay = exact_layout((6, 6, 7, 8), (1.0, 1.0, 3.0, 5.0), seed=9)
    r = route_of(lay, Policy(calibrate_candidates=True, power_route=True))
    if r.calibration.get("quick") is not None:                  # the unequal-spread branch
        assert set(r.calibration["quick"]["estimates"]) == {"games-howell", "dunnett-t3"}
    assert "candidates" in r.calibration


def _fake(rows):
    def fake(layout, family, policy=None, **kw):
        return {"method": "fake", "replicates": 1000, "seed": 0, "limit_rule": "-",
                "alternative": {"sentence": "a shift"},
                "candidates": [dict(zip(("procedure", "fwer", "fwer_se", "holds", "power",
                                         "power_se"), r)) for r in rows]}
    return fake


def test_choice_logic_none_holds_gain_too_small_and_rule_liberal(monkeypatch):
    import famwise.diagnostics.power_choice as pc
    lay = exact_layout((5, 5, 5), (1.0,) * 3)
    fam = all_pairs(lay.labels)
    # nobody holds: the rules' choice is kept, and the sentence says so
    monkeypatch.setattr(pc, "power_calibration", _fake([
        ("dunnett-t3", 0.09, 0.01, False, 0.3, 0.01),
        ("tukey-kramer", 0.2, 0.01, False, 0.5, 0.01)]))
    got = pc.choose_by_power("dunnett-t3", lay, fam, ON)
    assert got["procedure"] == "dunnett-t3" and "No candidate held" in got["sentence"]
    assert got["set_aside"] is None
    # a gain below power_gain_min keeps the rules' choice
    monkeypatch.setattr(pc, "power_calibration", _fake([
        ("dunnett-t3", 0.04, 0.01, True, 0.30, 0.01),
        ("tukey-kramer", 0.05, 0.01, True, 0.31, 0.01)]))
    assert pc.choose_by_power("dunnett-t3", lay, fam, ON)["procedure"] == "dunnett-t3"
    # ... and at or above it, the stronger one replaces it
    monkeypatch.setattr(pc, "power_calibration", _fake([
        ("dunnett-t3", 0.04, 0.01, True, 0.30, 0.01),
        ("tukey-kramer", 0.05, 0.01, True, 0.33, 0.01)]))
    got = pc.choose_by_power("dunnett-t3", lay, fam, ON)
    assert got["procedure"] == "tukey-kramer" and "less powerful" in got["set_aside"]
    # a rules' choice above the limit is not given up for a weaker one ...
    monkeypatch.setattr(pc, "power_calibration", _fake([
        ("games-howell", 0.09, 0.008, False, 0.40, 0.01),
        ("dunnett-t3", 0.045, 0.007, True, 0.30, 0.01),
        ("bootstrap-hall", 0.02, 0.004, True, 0.20, 0.01)]))
    got = pc.choose_by_power("games-howell", lay, fam, ON)
    assert got["procedure"] == "games-howell" and got["set_aside"] is None
    assert "less powerful" in got["sentence"] and "kept" in got["sentence"]
    # ... but is replaced by a candidate that holds and is at least as powerful
    monkeypatch.setattr(pc, "power_calibration", _fake([
        ("dunnett-t3", 0.09, 0.008, False, 0.30, 0.01),
        ("tukey-kramer", 0.045, 0.007, True, 0.36, 0.01)]))
    got = pc.choose_by_power("dunnett-t3", lay, fam, ON)
    assert got["procedure"] == "tukey-kramer" and "above the limit" in got["set_aside"]


def test_spread_checks_that_pass_pool_the_sds_of_the_calibration(monkeypatch):
    """With the spread checks passed, the calibration simulates every group at
    the pooled SD sqrt(sum (n_i - 1) s_i^2 / (N - k)) (the estimate of one
    common SD; common practice, no source), and the record says so."""
    import famwise.diagnostics.power_choice as pc
    lay = exact_layout((4, 6, 8), (1.0, 1.0, 1.0), seed=4)
    fam = all_pairs(lay.labels)
    seen = {}
    real = pc.power_calibration

    def spy(*args, **kw):
        seen["pool"] = kw.get("pool_spreads")
        return real(*args, **kw)
    monkeypatch.setattr(pc, "power_calibration", spy)
    pc.choose_by_power("dunnett-t3", lay, fam, ON.replace(power_replicates=200),
                       spreads_agree=True)
    assert seen["pool"] is True
    pc.choose_by_power("dunnett-t3", lay, fam, ON.replace(power_replicates=200),
                       spreads_agree=False)
    assert seen["pool"] is False
    pc.choose_by_power("dunnett-t3", lay, fam,
                       ON.replace(power_replicates=200, power_pool_spreads=False),
                       spreads_agree=True)
    assert seen["pool"] is False
    rec = real(lay, fam, ON, replicates=200, pool_spreads=True, procedures=["tukey-kramer"])
    assert rec["spreads"] == "pooled" and "pooled SD" in rec["method"]
    # the pooled SD: one SD in every group, so Tukey-Kramer is exact there and
    # holds (normal errors; Tukey-Kramer exact at equal SDs with equal n, and
    # conservative with unequal n, Hayter 1984)
    rec = real(lay, fam, ON, replicates=4000, pool_spreads=True, procedures=["tukey-kramer"],
               shape="normal")
    row = rec["candidates"][0]
    assert row["fwer"] <= 0.05 + 3 * np.sqrt(0.05 * 0.95 / 4000)


def test_a_group_without_spread_is_left_to_the_rules():
    lay = Layout.from_groups([[1.0, 1.0, 1.0], [1.0, 2.0, 3.0], [2.0, 3.0, 5.0]],
                             ["a", "b", "c"])
    assert choose_by_power("tukey-kramer", lay, all_pairs(lay.labels), Policy()) is None

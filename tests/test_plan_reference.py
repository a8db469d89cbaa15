"""famwise.plan for each group against a reference (family="vs-reference").

References, named per check:
* Dunnett's many-to-one test with equal n, one shifted treatment (and every
  treatment shifted): power_any, power_each, power_all and the familywise
  error against an independent long simulation written here in plain numpy
  (200,000 data sets of sufficient statistics: group means and the pooled
  variance), whose decisions use the exact two-sided critical value 2.5403
  for p = 3 treatments and 20 error df (shared/CHECK-VALUES.md, section 2:
  scipy quadrature; Dunnett 1964 prints 2.54, from memory); within 3
  combined binomial SEs;
* the per-element Dunnett tail behind the stacked Welch-Dunnett
  (famwise.distributions.dunnett_rows) against famwise's tabulated
  dunnett_sf (itself checked against scipy in tests/test_distributions.py)
  to 1e-8, and at the tabled critical value above to 2e-5 (the table's 4
  digits);
* the stacked Welch-Dunnett decisions equal run_procedure's replicate by
  replicate on a design whose decisions mostly need the exact tail;
* the placements, the family's own comparisons and the bad-input catalogue
  of issue 16 under the new options.
"""

import json

import numpy as np
import pandas as pd
import pytest

import famwise
from famwise import FamwiseInputError
from famwise.cli import main as cli_main

DUNNETT_3_20 = 2.5403      # two-sided .05, p = 3, df = 20 (CHECK-VALUES.md section 2)


def _independent_dunnett(mu, n, reps, seed):
    """Any, mean per-comparison and all power of Dunnett's test (group 0 the
    reference), sigma = 1: plain numpy on sufficient statistics."""
    rng = np.random.default_rng(seed)
    k = len(mu)
    df = k * (n - 1)
    means = np.asarray(mu) + rng.standard_normal((reps, k)) / np.sqrt(n)
    mse = rng.chisquare(df, reps) / df
    t = (means[:, 1:] - means[:, [0]]) / np.sqrt(2 * mse[:, None] / n)
    rej = np.abs(t) >= DUNNETT_3_20
    true = np.asarray(mu[1:]) != mu[0]
    if not true.any():
        return rej.any(1).mean(), None, None
    hit = rej[:, true]
    return hit.any(1).mean(), hit.mean(), hit.all(1).mean()


@pytest.mark.parametrize("placement", ["one-pair", "one-vs-rest"])
def test_dunnett_power_against_an_independent_long_simulation(placement):
    k, n, shift, reps, ref_reps = 4, 6, 1.5, 4000, 200_000
    assert k * (n - 1) == 20
    r = famwise.plan(sd=[1.0] * k, margin=shift, n=n, family="vs-reference", reference="g1",
                     placement=placement, procedures=["dunnett"], replicates=reps, seed=61)
    row = r.table.iloc[0]
    mu = [0.0, shift, 0.0, 0.0] if placement == "one-pair" else [0.0, shift, shift, shift]
    want = _independent_dunnett(mu, n, ref_reps, 62)
    for got, ref in zip((row.power_any, row.power_each, row.power_all), want):
        se = np.sqrt(ref * (1 - ref) / reps + ref * (1 - ref) / ref_reps)
        assert abs(got - ref) < 3 * se, (placement, got, ref)
    null = _independent_dunnett([0.0] * k, n, ref_reps, 63)[0]
    se = np.sqrt(null * (1 - null) / reps + null * (1 - null) / ref_reps)
    assert abs(row.fwer - null) < 3 * se and abs(null - 0.05) < 0.003
    expected = (["g2 - g1"] if placement == "one-pair" else ["g2 - g1", "g3 - g1", "g4 - g1"])
    assert r.settings["true_differences"] == expected
    assert r.settings["comparisons"] == ["g2 - g1", "g3 - g1", "g4 - g1"]
    if placement == "one-pair":
        assert row.power_any == row.power_each == row.power_all     # one true difference


def test_per_element_dunnett_tail_equals_the_tabulated_one():
    from famwise.distributions import simultaneous as dist
    from famwise.distributions.dunnett_rows import dunnett_rows_at_most, dunnett_rows_sf
    rng = np.random.default_rng(64)
    for _ in range(12):
        m = int(rng.integers(1, 6))
        lam = np.sqrt(rng.uniform(0.0, 0.97, m))
        t, df = rng.uniform(1.5, 4.0, 3), rng.uniform(1.5, 80.0, 3)
        got = dunnett_rows_sf(t, df, np.tile(lam, (3, 1)))
        want = np.array([float(dist.dunnett_sf(a, lam, d)) for a, d in zip(t, df)])
        np.testing.assert_allclose(got, want, atol=1e-8, rtol=0)
        np.testing.assert_array_equal(dunnett_rows_at_most(t, df, np.tile(lam, (3, 1)), 0.05),
                                      want <= 0.05)
    # equal n: lambda = sqrt(1/2); the tabled critical value leaves 0.05 in the tail
    p = dunnett_rows_sf([DUNNETT_3_20], [20.0], [[np.sqrt(0.5)] * 3])
    assert abs(p[0] - 0.05) < 2e-5


def test_stacked_welch_dunnett_equals_run_procedure_where_the_tail_decides():
    from scipy import stats
    from famwise.core.families import vs_reference
    from famwise.core.layout import Layout
    from famwise.diagnostics.simulate import Scenario, draw
    from famwise.diagnostics.stacked_procedures import closed_form_rejects, welch_t
    from famwise.procedures.catalogue import run_procedure
    labels = ["0", "1", "2", "3"]
    fam = vs_reference(labels, "0")
    stack = draw(Scenario((6, 9, 5, 8), (0.0, 1.3, 0.9, -1.1), (1.0, 1.6, 0.8, 1.3)), 120,
                 np.random.default_rng(65))
    got = closed_form_rejects("welch-dunnett", fam, stack, 0.05)
    t, df = welch_t(fam.weights, stack.means, stack.vars, stack.n)
    p = 2 * stats.t.sf(np.abs(t), df)
    band = (p <= 0.05) & (-np.expm1(3 * np.log1p(-p)) > 0.05)
    assert band.sum() >= 20                       # the exact tail decides these cells
    for r in range(stack.replicates):
        lay = Layout.from_groups([stack.x[r, s] for s in stack.blocks.slices()], labels)
        want = run_procedure("welch-dunnett", lay, fam, alpha=0.05)["p_adjusted"] <= 0.05
        assert np.array_equal(got[r], want.to_numpy()), r


def test_default_procedures_reference_by_index_and_route():
    r = famwise.plan(sd=[1, 1, 1], margin=1.5, n=[8], family="vs-reference", reference=1,
                     replicates=400, seed=66)
    assert r.settings["reference"] == "g2" and r.settings["m"] == 2
    assert r.settings["procedures"] == ["dunnett", "welch-dunnett", "permutation-maxt",
                                        "bootstrap-hall", "auto"]
    same = famwise.plan(sd=[1, 1, 1], margin=1.5, n=[8], family="vs-reference",
                        reference="g2", replicates=400, seed=66)
    pd.testing.assert_frame_equal(r.table, same.table, check_exact=True)
    # "one-pair": the first group other than the reference is shifted
    assert r.settings["true_means"] == [1.5, 0.0, 0.0]
    assert r.settings["true_differences"] == ["g1 - g2"]
    assert r.route_at(8)[0] == "dunnett"         # normal errors, equal SDs: the classical route
    assert "against the reference g2" in r.summary()


def test_steel_against_a_reference_holds_its_level_and_has_power():
    """Steel's many-to-one rank test, simulated on stacked replicates: its familywise
    error at the complete null within 3 binomial SEs of at most alpha (it is exact or
    conservative under continuous errors: common practice, no source), and less
    power than Dunnett's under normal errors (Dunnett's is the most powerful here:
    common practice, no source)."""
    r = famwise.plan(sd=[1, 1, 1], margin=1.5, n=[10], family="vs-reference", reference="g1",
                     procedures=["steel", "dunnett"], replicates=2000, seed=69)
    t = r.table.set_index("procedure")
    assert t.loc["steel", "fwer"] <= 0.05 + 3 * np.sqrt(0.05 * 0.95 / 2000)
    assert 0.2 < t.loc["steel", "power_any"] < t.loc["dunnett", "power_any"] + 0.02


def test_pilot_observed_placement_against_its_control(plants):
    r = famwise.plan(plants, margin=0.5, n=[10], family="vs-reference", reference="ctrl",
                     placement="observed", replicates=300, seed=67,
                     procedures=["dunnett", "auto"])
    assert r.settings["comparisons"] == ["trt1 - ctrl", "trt2 - ctrl"]
    assert set(r.settings["true_differences"]) <= {"trt1 - ctrl", "trt2 - ctrl"}
    page = r.to_html()
    assert "each group against the reference ctrl" in page


@pytest.mark.parametrize("kwargs, message", [
    (dict(family="vs-reference"), "needs a reference group"),
    (dict(family="vs-reference", reference=5), "reference index 5 is out of range"),
    (dict(family="vs-reference", reference="g9"), "'g9' is not a group label"),
    (dict(family="vs-reference", reference="G1"), "did you mean"),
    (dict(reference="g1"), "used only with family='vs-reference'"),
    (dict(family="contrasts"), "plan simulates the families all-pairs and vs-reference"),
    (dict(family="vs-reference", reference="g1", procedures=["tukey-kramer"]),
     "does not compare each group with a reference"),
    (dict(family="vs-reference", reference="g1", procedures=["wild-bootstrap-maxt"]),
     "plan does not simulate procedure 'wild-bootstrap-maxt' yet"),
    (dict(procedures=["gehan-maxt"]), "plan does not simulate procedure 'gehan-maxt' yet"),
    (dict(family="vs-reference", reference="g1", margin=0), "margin must be positive"),
    (dict(family="vs-reference", reference="g1", target_power=0), "strictly between 0 and 1"),
    (dict(family="vs-reference", reference="g1", n=[1]), "at least 2 per group"),
])
def test_bad_reference_input(kwargs, message):
    kw = dict(sd=[1, 1, 1], margin=1.0, replicates=200, seed=1)
    kw.update(kwargs)
    with pytest.raises(FamwiseInputError, match=message) as err:
        famwise.plan(**kw)
    assert "\n" not in str(err.value)


def test_impossible_target_against_a_reference():
    with pytest.raises(FamwiseInputError) as err:
        famwise.plan(sd=[1, 1, 1], margin=0.05, family="vs-reference", reference="g1",
                     max_n=10, replicates=200, seed=68, procedures=["dunnett"])
    assert "not reached by 10 per group" in str(err.value)


def test_cli_vs_reference(tmp_path, capsys):
    out = tmp_path / "o"
    code = cli_main(["plan", "--sd", "1,1,2", "--margin", "1.5", "--n", "6,8",
                     "--family", "vs-reference", "--reference", "g1",
                     "--placement", "one-vs-rest", "-p", "welch-dunnett", "-p", "auto",
                     "--replicates", "300", "--seed", "5", "--out", str(out)])
    assert code == 0
    text = capsys.readouterr().out
    assert "every group differs from the reference g1 by the margin" in text
    rec = json.loads((out / "power.json").read_text())
    assert rec["settings"]["family"] == "vs-reference" and rec["settings"]["reference"] == "g1"
    assert "--family vs-reference --reference g1" in (out / "power.html").read_text()
    assert cli_main(["plan", "--sd", "1,1", "--margin", "1", "--family", "vs-reference"]) == 2
    assert "needs a reference group" in capsys.readouterr().err

"""famwise.plan and famwise plan against outside references.

References, named per check:
* two groups, normal errors, equal SDs: the power of the two-sided pooled t
  test is P(|T'| > t_{1-alpha/2, 2n-2}) with T' noncentral t, df 2n - 2,
  noncentrality delta / sqrt(2/n) (scipy.stats.nct); simulated power within
  3 binomial Monte Carlo SEs;
* one-way ANOVA F: the power is the upper tail of the noncentral F
  (scipy.stats.ncf) beyond F_{1-alpha}(k-1, N-k) with noncentrality
  lambda = f^2 N (Cohen 1988, ch. 8); the engine's stacked F within 3 SE;
  and the published figure, from memory: Cohen (1988), *Statistical Power
  Analysis for the Behavioral Sciences*, 2nd ed., chapter 8 tables for
  u = 3, alpha = .05: f = .25 (a "medium" effect) needs n = 45 per group for
  power .80 (table number not recalled; quoted to two digits, so +-0.02);
* Tukey–Kramer with equal n, one shifted pair: the any-pair and mean
  per-pair power against an independent long simulation (200,000 data sets of
  sufficient statistics in plain numpy, decisions against
  scipy.stats.studentized_range.ppf), within 3 combined SEs;
* the bad-input catalogue of the issue (margin, target, n, impossible target).
"""

import json
import re

import numpy as np
import pandas as pd
import pytest
from scipy import stats

import famwise
from famwise import FamwiseInputError
from famwise.cli import main as cli_main
from famwise.diagnostics.simulate import Scenario, draw
from famwise.diagnostics.stacked_procedures import anova_f


def test_pooled_t_power_equals_the_noncentral_t():
    r = famwise.plan(sd=[2.0, 2.0], margin=2.5, n=[8, 14], procedures=["bonferroni"],
                     replicates=4000, seed=31)
    for row in r.table.itertuples():
        n, df = row.n_per_group, 2 * row.n_per_group - 2
        nc = 2.5 / (2.0 * np.sqrt(2 / n))
        crit = stats.t.ppf(0.975, df)
        want = stats.nct.sf(crit, df, nc) + stats.nct.cdf(-crit, df, nc)
        se = np.sqrt(want * (1 - want) / 4000)
        assert abs(row.power_any - want) < 3 * se, (n, row.power_any, want)
        assert row.power_each == row.power_any == row.power_all      # one comparison
        assert abs(row.fwer - 0.05) < 3 * np.sqrt(0.05 * 0.95 / 4000)


def test_anova_f_power_equals_the_noncentral_f_and_cohens_table():
    k, n, f = 4, 45, 0.25
    big_n = k * n
    crit = stats.f.ppf(0.95, k - 1, big_n - k)
    exact = stats.ncf.sf(crit, k - 1, big_n - k, f * f * big_n)
    assert abs(exact - 0.80) < 0.02           # Cohen (1988) ch. 8, from memory
    c = f / np.sqrt(1.25)                      # means c * (-1.5, -0.5, 0.5, 1.5): sigma_m = f
    sc = Scenario((n,) * k, tuple(c * np.array([-1.5, -0.5, 0.5, 1.5])), (1.0,) * k)
    stack = draw(sc, 4000, np.random.default_rng(32))
    sim = np.mean(anova_f(stack.means, stack.vars, stack.n) > crit)
    assert abs(sim - exact) < 3 * np.sqrt(exact * (1 - exact) / 4000)


def _independent_tukey(k, n, shift, reps, seed):
    """Any-pair and mean per-pair power of Tukey's test, one pair shifted and the
    others at its midpoint: plain numpy on sufficient statistics."""
    rng = np.random.default_rng(seed)
    mu = np.zeros(k)
    mu[0], mu[1] = shift / 2, -shift / 2
    df = k * (n - 1)
    q = stats.studentized_range.ppf(0.95, k, df)
    means = mu + rng.standard_normal((reps, k)) / np.sqrt(n)
    mse = rng.chisquare(df, reps) / df
    i, j = np.triu_indices(k, 1)
    rej = np.abs(means[:, i] - means[:, j]) / np.sqrt(mse[:, None] / n) >= q
    true = mu[i] != mu[j]
    return rej[:, true].any(1).mean(), rej[:, true].mean()


def test_tukey_power_for_one_shifted_pair_against_an_independent_long_simulation():
    k, n, shift = 4, 10, 1.3
    r = famwise.plan(sd=[1.0] * k, margin=shift, n=n, procedures=["tukey-kramer"],
                     replicates=4000, seed=33)
    row = r.table.iloc[0]
    any_ref, each_ref = _independent_tukey(k, n, shift, 200_000, 34)
    for got, ref in ((row.power_any, any_ref), (row.power_each, each_ref)):
        se = np.sqrt(ref * (1 - ref) / 4000 + ref * (1 - ref) / 200_000)
        assert abs(got - ref) < 3 * se, (got, ref)
    # "one-pair": g1 and g2 differ by the margin, g3 and g4 sit at the midpoint
    assert r.settings["true_differences"] == ["g1 - g2", "g1 - g3", "g1 - g4", "g2 - g3",
                                              "g2 - g4"]


def test_search_finds_the_smallest_size_and_matches_a_list():
    r = famwise.plan(sd=[1, 1, 1], margin=1.5, replicates=1000, seed=35,
                     procedures=["tukey-kramer", "auto"])
    best = r.recommended["tukey-kramer"]
    t = r.table[r.table["procedure"] == "tukey-kramer"].set_index("n_per_group")
    assert t.loc[best, "power_any"] >= 0.8
    assert best - 1 in t.index and t.loc[best - 1, "power_any"] < 0.8
    # the same size gives the same row in a list (seeds are keyed by the size)
    again = famwise.plan(sd=[1, 1, 1], margin=1.5, n=[best], replicates=1000, seed=35,
                         procedures=["tukey-kramer", "auto"])
    pd.testing.assert_frame_equal(
        again.table.reset_index(drop=True),
        r.table[r.table["n_per_group"] == best].reset_index(drop=True))
    assert r.route_at(r.recommended["auto"])[0] in ("tukey-kramer", "dunnett-t3",
                                                     "games-howell", "permutation-maxt",
                                                     "bootstrap-hall")


def test_reproducible_across_jobs_and_backends():
    kw = dict(sd=[1, 2, 1.5], margin=2.0, n=[6, 9], replicates=1200, seed=36,
              procedures=["games-howell", "permutation-maxt", "auto"])
    ref = famwise.plan(**kw).table
    for n_jobs, backend in ((2, "threads"), (2, "processes")):
        got = famwise.plan(**kw, n_jobs=n_jobs, backend=backend).table
        pd.testing.assert_frame_equal(got, ref, check_exact=True)


def test_pilot_shapes_placements_and_default_procedures(plants):
    r = famwise.plan(plants, margin=0.5, n=[10, 20], replicates=500, seed=37,
                     placement="observed", allocation="equal")
    assert r.settings["shape"] == "observed" and r.settings["labels"] == ["ctrl", "trt1", "trt2"]
    assert "auto" in r.settings["procedures"] and len(r.settings["procedures"]) >= 2
    assert set(r.table["n_per_group"]) == {10, 20}
    power = r.table.set_index(["procedure", "n_per_group"])["power_any"]
    assert power[("auto", 20)] >= power[("auto", 10)] - 0.05
    vs = famwise.plan(sd=[1, 1, 1, 1], margin=1.0, n=[8], placement="one-vs-rest",
                      replicates=400, seed=38, procedures=["tukey-kramer"])
    assert vs.settings["true_differences"] == ["g1 - g2", "g1 - g3", "g1 - g4"]


def test_outputs_are_honest_escaped_and_deterministic(tmp_path):
    labels = ["<b>A</b>", "B & C", "D"]
    df = pd.DataFrame({"g": np.repeat(labels, 6),
                       "y": np.random.default_rng(39).normal(10, 1, 18)})
    r = famwise.plan(df, "y", "g", margin=1.0, n=[6, 8], replicates=300, seed=40,
                     procedures=["tukey-kramer", "auto"])
    page = r.to_html()
    assert page == r.to_html()
    assert "<b>A</b>" not in page and "&lt;b&gt;A&lt;/b&gt;" in page
    assert "Content-Security-Policy" in page and not re.search(r"(src|href)=\"https?:", page)
    assert 'data-figure="power-curves"' in page and "<script" not in page
    for sid in ("assumed", "curves", "sizes", "table", "reproduce", "cautions"):
        assert f'id="{sid}"' in page
    assert "qualified statistician" in page and "assumed spreads" in page
    assert "Monte Carlo" in page
    rec = json.loads(r.to_json())
    assert rec["schema"] == "famwise.plan/1" and rec["settings"]["seed"] == 40
    assert list(r.table.columns) == ["n_per_group", "procedure", "power_each", "power_any",
                                     "power_all", "fwer", "mc_se"]
    r.save(tmp_path / "p")
    assert sorted(p.name for p in (tmp_path / "p").iterdir()) == [
        "power.csv", "power.html", "power.json", "power.svg", "power.txt"]
    # power.svg is an image file of its own: well-formed XML in the SVG namespace
    # (W3C SVG 1.1), one curve per procedure and the target line.
    import xml.etree.ElementTree as ET
    root = ET.parse(tmp_path / "p" / "power.svg").getroot()
    assert root.tag == "{http://www.w3.org/2000/svg}svg"
    ids = {e.get("id") for e in root.iter() if e.get("id")}
    assert sum(i.startswith("power-curve-") for i in ids) == len(r.settings["procedures"])
    assert "power-target-line" in ids
    with pytest.raises(FamwiseInputError, match="force"):
        r.save(tmp_path / "p")
    assert "qualified statistician" in r.summary()


@pytest.mark.parametrize("kwargs, message", [
    (dict(sd=[1, 1], margin=0), "margin must be positive"),
    (dict(sd=[1, 1], margin=-2), "margin must be positive"),
    (dict(sd=[1, 1], margin=1, target_power=1.0), "strictly between 0 and 1"),
    (dict(sd=[1, 1], margin=1, target_power=0), "strictly between 0 and 1"),
    (dict(sd=[1, 1], margin=1, n=1), "at least 2 per group"),
    (dict(sd=[1, 1], margin=1, n=[4, 1]), "at least 2 per group"),
    (dict(sd=[1], margin=1), "at least 2 groups"),
    (dict(sd=[1, -1], margin=1), "positive number"),
    (dict(margin=1), "pilot"),
    (dict(sd=[1, 1], margin=1, placement="observed"), "pilot's means"),
    (dict(sd=[1, 1], margin=1, placement="middle"), "placement must be one of"),
    (dict(sd=[1, 1], margin=1, procedures=["tukey"]), "tukey"),
    (dict(sd=[1, 1], margin=1, procedures=["dunnett"]), "does not compare all pairs"),
    (dict(sd=[1, 1], margin=1, replicates=10), "at least 200"),
])
def test_bad_input(kwargs, message):
    with pytest.raises(FamwiseInputError, match=message):
        famwise.plan(**kwargs)


def test_impossible_target_names_the_largest_size_and_power():
    with pytest.raises(FamwiseInputError) as err:
        famwise.plan(sd=[1, 1, 1], margin=0.05, max_n=16, replicates=200, seed=41,
                     procedures=["tukey-kramer"])
    text = str(err.value)
    assert "not reached by 16 per group" in text and "largest power_any" in text
    assert "\n" not in text


def test_pilot_sd_count_must_match(plants):
    with pytest.raises(FamwiseInputError, match="3 groups"):
        famwise.plan(plants, sd=[1, 1], margin=0.5, n=5, replicates=200)


def test_cli_plan(tmp_path, capsys):
    out = tmp_path / "o"
    code = cli_main(["plan", "--sd", "1,1,2", "--margin", "1.5", "--n", "6,8",
                     "--procedure", "tukey-kramer", "--procedure", "auto",
                     "--replicates", "300", "--seed", "5", "--out", str(out)])
    assert code == 0
    text = capsys.readouterr().out
    assert "tukey-kramer" in text and "wrote the power report" in text
    assert (out / "power.html").exists()
    assert cli_main(["plan", "--sd", "1,1", "--margin", "0"]) == 2
    assert "margin must be positive" in capsys.readouterr().err
    assert cli_main(["plan", "--sd", "1,x", "--margin", "1"]) == 2
    assert "--sd must be a comma-separated list" in capsys.readouterr().err
    assert cli_main(["plan", "--margin", "1"]) == 2
    assert "pilot FILE" in capsys.readouterr().err


def test_pilot_rows_are_accounted_for_and_non_detects_need_a_choice(capsys):
    """Every pilot row is accounted for in the plan's record and notes; a pilot
    with non-detects stops with the fix named (exit 2), nothing dropped silently."""
    demo = "demos/covercrop_nitrate.csv"
    args = ["plan", demo, "-r", "nitrate_mg_kg", "-g", "mix", "--merge-spellings",
            "--exclude-rows", "19,37", "--margin", "5", "--n", "8", "--replicates", "200"]
    assert cli_main(args) == 2
    err = capsys.readouterr().err
    assert "non-detect" in err and "--nondetects drop" in err and err.count("\n") == 1
    r = famwise.plan(demo, "nitrate_mg_kg", "mix", margin=5, n=8, replicates=200, seed=1,
                     merge_spellings=True, exclude_rows=[19, 37], nondetects="drop",
                     procedures=["tukey-kramer"])
    led = r.settings["pilot_ledger"]
    assert led["read"] == led["used"] + led["dropped"]
    assert led["dropped_by_reason"]["excluded"] == 2 and led["dropped_by_reason"]["not-detected"] >= 1
    note = next(n for n in r.notes if n.startswith("The pilot ("))
    assert f"{led['read']} rows read, {led['used']} used" in note
    assert "excluded by the user (rows 19, 37)" in note
    assert f"The pilot ({demo}): {led['read']} rows read" in r.summary()


def test_blocked_pilot_plans_at_the_residual_spread():
    """A pilot with strong block effects: the plan's SDs come from the additive
    model's residuals (fit_model), not from the block-inflated group SDs, and
    pool to the model's residual mean square."""
    from famwise.core.layout import Design, Layout
    from famwise.model.fit import fit_model
    rng = np.random.default_rng(42)
    k, b = 4, 6
    block = np.tile(np.arange(b), k)
    group = np.repeat(np.arange(k), b)
    y = 20 + 5.0 * rng.standard_normal(b)[block] + rng.standard_normal(k * b)
    design = Design.from_arrays({"field": [f"F{i}" for i in block]})
    blocked = Layout(y, group, ("A", "B", "C", "D"), design=design)
    plain = Layout(y, group, ("A", "B", "C", "D"))
    r = famwise.plan(blocked, margin=2.0, n=[6], replicates=300, seed=43,
                     procedures=["tukey-kramer"])
    flat = famwise.plan(plain, margin=2.0, n=[6], replicates=300, seed=43,
                        procedures=["tukey-kramer"])
    sd = np.array(r.settings["sd"])
    assert np.all(sd < np.array(flat.settings["sd"]))
    fit = fit_model(blocked)
    assert np.sum(6 * sd ** 2) / 24 == pytest.approx(fit.mse, rel=1e-12)
    assert r.settings["pilot_model"]["terms"] == ["field"]
    assert any("additive model" in note for note in r.notes)
    assert r.table["power_any"].iloc[0] > flat.table["power_any"].iloc[0]


def test_identical_on_a_dask_cluster():
    distributed = pytest.importorskip("dask.distributed")
    import logging
    cluster = distributed.LocalCluster(n_workers=2, threads_per_worker=1, processes=True,
                                       host="127.0.0.1", dashboard_address=None,
                                       silence_logs=logging.ERROR)
    client = distributed.Client(cluster, set_as_default=False)
    try:
        kw = dict(sd=[1, 2, 1.5], margin=2.0, n=[6], replicates=1200, seed=44,
                  procedures=["dunnett-t3", "bootstrap-maxt", "auto"])
        ref = famwise.plan(**kw).table
        got = famwise.plan(**kw, n_jobs=2, backend="dask", scheduler=client).table
        pd.testing.assert_frame_equal(got, ref, check_exact=True)
    finally:
        client.close()
        cluster.close()

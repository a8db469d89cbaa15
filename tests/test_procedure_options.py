"""Procedure options through the front door: compare, batch, calibrate and the CLI.

References: scipy.stats.ttest_ind(trim=...) (Yuen's trimmed t, a reference
library) for a trimming proportion reaching the procedure; the procedures'
own functions called directly for the other keys (the option must change
exactly what the keyword does); the record's command line run again for
reproduction.  The allowed keys are the project's own (famwise.procedures.catalogue).
"""

import json
import shlex
import subprocess
import sys

import numpy as np
import pandas as pd
import pytest
from scipy import stats

from famwise import batch, calibrate, compare
from famwise.core.errors import FamwiseInputError
from famwise.core.families import all_pairs
from famwise.core.results import DecisionRecord
from famwise.procedures.catalogue import CATALOGUE, ProcedureOption, check_options


def _frame(seed=3, sizes=(12, 15, 10)):
    rng = np.random.default_rng(seed)
    groups = [rng.standard_t(3, size=n) + shift for n, shift in zip(sizes, (0.0, 0.8, 1.6))]
    return pd.DataFrame({"mix": np.repeat([f"M{i}" for i in range(len(sizes))], sizes),
                         "y": np.concatenate(groups)}), groups


def test_trim_reaches_yuen_as_scipy_computes_it():
    frame, groups = _frame(sizes=(14, 17))
    res = compare(frame, "y", "mix", procedure="yuen-holm", options={"trim": "0.1"},
                  crosscheck=False)
    # Two groups: Holm leaves the p-value alone; scipy's ttest_ind(trim=...) is Yuen's test.
    ref = stats.ttest_ind(groups[0], groups[1], equal_var=False, trim=0.1)
    np.testing.assert_allclose(res.comparisons.p_adjusted.iloc[0], ref.pvalue, rtol=1e-10)
    default = compare(frame, "y", "mix", procedure="yuen-holm", crosscheck=False)
    assert default.comparisons.p_adjusted.iloc[0] != res.comparisons.p_adjusted.iloc[0]
    assert res.decision.options == {"trim": 0.1}                 # parsed to a number
    assert "--option trim=0.1" in res.decision.command
    assert "with trim = 0.1" in res.decision.paragraph()
    assert default.decision.options == {}


def test_statistic_reaches_the_permutation_procedure():
    from famwise.core.layout import Layout
    from famwise.resample import permutation_maxt
    frame, groups = _frame()
    res = compare(frame, "y", "mix", procedure="permutation-maxt", resamples=499, seed=5,
                  options={"statistic": "pooled"}, crosscheck=False)
    lay = Layout.from_groups(groups, ["M0", "M1", "M2"], response="y", group="mix")
    direct = permutation_maxt(lay, all_pairs(lay.labels), resamples=499, seed=5,
                              statistic="pooled")
    np.testing.assert_array_equal(res.comparisons.p_adjusted, direct.p_adjusted)
    welch = permutation_maxt(lay, all_pairs(lay.labels), resamples=499, seed=5)
    assert not np.array_equal(welch.statistic, direct.statistic)
    record = json.loads(res.decision.to_json())
    assert record["options"] == {"statistic": "pooled"}


def test_the_recorded_command_reproduces_the_run(tmp_path):
    frame, _ = _frame()
    path = tmp_path / "plots.csv"
    frame.to_csv(path, index=False)
    res = compare(path, "y", "mix", procedure="bootstrap-maxt", resamples=299, seed=11,
                  options={"statistic": "yuen", "trim": 0.15}, crosscheck=False)
    argv = shlex.split(res.decision.command)
    assert argv[:2] == ["famwise", "compare"]
    assert argv.count("--option") == 2
    proc = subprocess.run([sys.executable, "-m", "famwise", *argv[1:], "--no-crosscheck",
                           "--format", "json"], capture_output=True, text=True, timeout=300)
    assert proc.returncode == 0, proc.stderr
    again = json.loads(proc.stdout)
    assert again["options"] == {"statistic": "yuen", "trim": 0.15}
    csv = subprocess.run([sys.executable, "-m", "famwise", *argv[1:], "--no-crosscheck",
                          "--format", "csv"], capture_output=True, text=True, timeout=300)
    table = pd.read_csv(pd.io.common.StringIO(csv.stdout))
    np.testing.assert_allclose(table.p_adjusted, res.comparisons.p_adjusted, rtol=1e-12)


@pytest.mark.parametrize("procedure, options, expected", [
    ("yuen-holm", {"trimm": 0.1}, ["no option 'trimm'", "did you mean 'trim'?",
                                   "its options: trim"]),
    ("permutation-maxt", {"trim": 0.1}, ["no option 'trim'", "its options: statistic"]),
    ("tukey-kramer", {"trim": 0.1}, ["'tukey-kramer' takes no options", "'trim'"]),
    ("yuen-holm", {"trim": "abc"}, ["option 'trim' of 'yuen-holm' must be a number",
                                    "'abc'"]),
    ("yuen-holm", {"trim": 0.5}, ["at least 0 and below 0.5", "got 0.5"]),
    ("yuen-holm", {"trim": True}, ["must be a number"]),
    ("permutation-maxt", {"statistic": "Pooled"},
     ["must be one of 'welch', 'pooled'", "did you mean 'pooled'?"]),
    ("auto", {"trim": 0.1}, ["belong to a procedure", "rather than 'auto'"]),
])
def test_bad_options_are_refused_in_one_line(procedure, options, expected):
    frame, _ = _frame()
    with pytest.raises(FamwiseInputError) as info:
        compare(frame, "y", "mix", procedure=procedure, options=options)
    message = str(info.value)
    assert "\n" not in message
    for part in expected:
        assert part in message, (part, message)


def test_option_values_parse_to_the_declared_types():
    flag = ProcedureOption("exact", "bool", False, "a switch")
    assert flag.parse("yes", "p") is True and flag.parse("False", "p") is False
    count = ProcedureOption("steps", "int", 3, "a count", low=1)
    assert count.parse("4", "p") == 4 and isinstance(count.parse(4.0, "p"), int)
    with pytest.raises(FamwiseInputError, match="must be a whole number"):
        count.parse("2.5", "p")
    with pytest.raises(FamwiseInputError, match="must be true or false"):
        flag.parse("maybe", "p")
    assert check_options("bootstrap-maxt", {"statistic": " yuen ", "trim": "0"}) == {
        "statistic": "yuen", "trim": 0.0}
    assert check_options("tukey-kramer", {}) == {} and check_options("holm", None) == {}
    for info in CATALOGUE.values():           # every declared default passes its own check
        for opt in info.options:
            assert opt.parse(opt.default, info.name) == opt.default


def test_old_records_read_back_without_options():
    frame, _ = _frame()
    doc = json.loads(compare(frame, "y", "mix", procedure="holm").decision.to_json())
    del doc["options"]
    assert DecisionRecord.from_json(json.dumps(doc)).options == {}


def test_batch_applies_and_records_options(tmp_path):
    frame, _ = _frame()
    frame["z"] = frame["y"] * 2.0 + 1.0
    path = tmp_path / "two.csv"
    frame.to_csv(path, index=False)
    res = batch(path, ["y", "z"], "mix", procedure="yuen-holm", options={"trim": 0.1},
                seed=2, n_jobs=1, backend="threads")
    assert res.record["settings"]["options"] == {"trim": 0.1}
    assert "--option trim=0.1" in res.record["command"]
    direct = compare(frame, "y", "mix", procedure="yuen-holm", options={"trim": 0.1},
                     crosscheck=False)
    first = res.results[("y", None)].comparisons
    np.testing.assert_allclose(first.p_adjusted, direct.comparisons.p_adjusted, rtol=1e-12)
    assert "--option trim=0.1" in res.results[("y", None)].decision.command
    with pytest.raises(FamwiseInputError, match="rather than 'auto'"):
        batch(path, ["y"], "mix", options={"trim": 0.1})


def test_calibrate_takes_the_options_it_can_simulate():
    frame, _ = _frame(sizes=(8, 9, 10))
    cal = calibrate(frame, "y", "mix", procedures=["yuen-holm"], options={"trim": 0.1},
                    replicates=200, seed=1, pipeline=False)
    assert "options trim = 0.1" in cal.table.method.iloc[0]
    assert cal.design["options"] == {"trim": 0.1}
    with pytest.raises(FamwiseInputError, match="does not cover the resampling"):
        calibrate(frame, "y", "mix", procedures=["bootstrap-maxt"],
                  options={"statistic": "yuen"}, replicates=200, seed=1)
    with pytest.raises(FamwiseInputError, match="belong to a procedure"):
        calibrate(frame, "y", "mix", options={"trim": 0.1}, replicates=200, seed=1)


def test_cli_option_flag(tmp_path):
    frame, _ = _frame()
    path = tmp_path / "plots.csv"
    frame.to_csv(path, index=False)
    base = [sys.executable, "-m", "famwise", "compare", str(path), "-r", "y", "-g", "mix",
            "--procedure", "yuen-holm", "--no-crosscheck"]
    ok = subprocess.run(base + ["--option", "trim=0.1", "--format", "json"],
                        capture_output=True, text=True, timeout=300)
    assert ok.returncode == 0, ok.stderr
    assert json.loads(ok.stdout)["options"] == {"trim": 0.1}
    for bad, part in ((["--option", "trim"], "--option needs KEY=VALUE"),
                      (["--option", "trim=0.1", "--option", "trim=0.2"], "given twice"),
                      (["--option", "cut=0.1"], "no option 'cut'")):
        proc = subprocess.run(base + bad, capture_output=True, text=True, timeout=300)
        assert proc.returncode == 2
        lines = [ln for ln in proc.stderr.splitlines() if ln.strip()]
        assert len(lines) == 1 and part in lines[0], proc.stderr

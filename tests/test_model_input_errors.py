"""Bad input to the blocked and covariate model: one clear line, nothing lost.

The cases of issue 14 (a block with one plot, a design that is not
connected, a constant covariate or one collinear with the groups, blocks
with missing labels, more model terms than rows, a block column that looks
like measurements, a covariate column holding text) and the option misuses
around them.  Each error is checked from the Python API and, for a sample,
from the command line (exit 2, one line, no traceback).  The expected
behaviour is the project's own contract (common practice, no source).
"""

import subprocess
import sys
import warnings

import numpy as np
import pandas as pd
import pytest

import famwise
from famwise.core.errors import FamwiseInputError, ModelWarning
from famwise.core.layout import Layout


def trial(rows):
    return pd.DataFrame(rows, columns=["plot", "mix", "rep", "nitrate", "baseline"])


NOISE = [0.3, -0.2, 0.5, 0.1, -0.4, 0.2, -0.1, 0.6, -0.3, 0.0, 0.4, -0.5]


def rcbd(missing=()):
    """Three mixes in four complete blocks (invented layout, not a reference)."""
    rows, plot = [], 1
    for rep in "1234":
        for j, mix in enumerate(["Rye", "Vetch", "Fallow"]):
            if (mix, rep) not in missing:
                rows.append([plot, mix, rep, 10.0 + 3 * j + int(rep) + NOISE[plot - 1],
                             5.0 + 0.37 * plot ** 1.3])
            plot += 1
    return trial(rows)


def write(tmp_path, frame, name="trial.csv"):
    path = tmp_path / name
    frame.to_csv(path, index=False)
    return str(path)


def one_plot_block():
    df = rcbd()
    return pd.concat([df, trial([[99, "Rye", "5", 14.0, 7.0]])], ignore_index=True)


def not_connected():
    df = rcbd()
    extra = trial([[90, "Clover", "6", 12.0, 6.0], [91, "Clover", "6", 12.5, 6.1],
                   [92, "Clover", "7", 13.0, 6.2], [93, "Clover", "7", 12.1, 6.4]])
    return pd.concat([df, extra], ignore_index=True)


def collinear():
    df = rcbd()
    df["baseline"] = df["mix"].map({"Rye": 1.0, "Vetch": 2.0, "Fallow": 4.0})
    return df


def tiny():
    return rcbd().iloc[:6].assign(extra=[1.0, 2.5, 2.0, 4.0, 3.5, 0.5])


# (id, frame builder, options, expected substrings of the message)
CASES = [
    ("block-with-one-plot", one_plot_block, {"block": "rep"},
     ["block '5' of 'rep'", "has only one plot (row 14)", "merge it"]),
    ("not-connected", not_connected, {"block": "rep"},
     ["not connected", "group 'Clover' appear only in blocks '6', '7' of 'rep'",
      "hold no other group"]),
    ("constant-covariate", lambda: rcbd().assign(baseline=3.2), {"covariates": "baseline"},
     ["covariate 'baseline'", "is constant", "every value 3.2"]),
    ("covariate-collinear-with-groups", collinear, {"covariates": "baseline"},
     ["covariate 'baseline' is collinear with the groups"]),
    ("covariate-collinear-with-groups-and-blocks", collinear,
     {"block": "rep", "covariates": "baseline"},
     ["covariate 'baseline' is collinear with the groups and blocks"]),
    ("more-terms-than-rows", tiny, {"block": "rep", "covariates": ["baseline", "extra"]},
     ["the model has 6 parameters", "only 6 rows", "no degrees of freedom remain"]),
    ("covariate-holding-text", lambda: rcbd().assign(baseline="high"),
     {"covariates": "baseline"},
     ["covariate column 'baseline'", "holds no numbers", "'high'"]),
    ("block-single-level", lambda: rcbd().assign(rep="1"), {"block": "rep"},
     ["block column 'rep'", "single level"]),
    ("block-is-group", rcbd, {"block": "mix"},
     ["block column 'mix' is already the group column"]),
    ("covariate-is-block", rcbd, {"block": "rep", "covariates": "rep"},
     ["covariate column 'rep' is already the block column"]),
    ("unknown-block-column", rcbd, {"block": "reps"},
     ["no block column 'reps'", "did you mean 'rep'?"]),
    ("three-block-columns", rcbd, {"block": ["rep", "plot", "baseline"]},
     ["block takes one column, or two"]),
]


@pytest.mark.parametrize("case, build, options, expected", CASES, ids=[c[0] for c in CASES])
def test_model_errors_name_the_problem(tmp_path, case, build, options, expected):
    path = write(tmp_path, build())
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        with pytest.raises(FamwiseInputError) as info:
            famwise.inspect(path, "nitrate", "mix", **options)
    message = str(info.value)
    assert "\n" not in message
    for part in expected:
        assert part in message, (part, message)


CLI_CASES = ["block-with-one-plot", "not-connected", "constant-covariate",
             "covariate-holding-text"]


@pytest.mark.parametrize("case", CLI_CASES)
def test_cli_prints_one_line_and_exits_2(tmp_path, case):
    build, options, expected = next((b, o, e) for c, b, o, e in CASES if c == case)
    path = write(tmp_path, build())
    cmd = [sys.executable, "-m", "famwise", "compare", path, "-r", "nitrate", "-g", "mix",
           "--seed", "1"]
    if "block" in options:
        cmd += ["--block", options["block"]]
    if "covariates" in options:
        cmd += ["--covariate", options["covariates"]]
    proc = subprocess.run(cmd, capture_output=True, text=True, timeout=300)
    assert proc.returncode == 2, proc.stderr
    assert "Traceback" not in proc.stderr
    lines = [ln for ln in proc.stderr.splitlines() if ln.strip()]
    assert len(lines) == 1 and lines[0].startswith("famwise: error: "), lines
    for part in expected:
        assert part in lines[0]


def test_missing_block_labels_are_set_aside_in_the_ledger(tmp_path):
    df = rcbd()
    df.loc[4, "rep"] = ""
    df.loc[7, "rep"] = "NA"
    ins = famwise.inspect(write(tmp_path, df), "nitrate", "mix", block="rep")
    led = ins.ledger
    assert led.read == 12 and led.used == 10
    dropped = [(d.row, d.column, d.reason) for d in led.dropped]
    assert dropped == [(6, "rep", "missing-block"), (9, "rep", "missing-block")]
    assert ins.layout.design.block_names == ("rep",)
    assert ins.layout.n_total == 10


def test_missing_and_text_covariate_values_are_set_aside(tmp_path):
    df = rcbd().astype({"baseline": object})
    df.loc[2, "baseline"] = ""
    df.loc[5, "baseline"] = "see notes"
    ins = famwise.inspect(write(tmp_path, df), "nitrate", "mix", block="rep",
                          covariates="baseline")
    reasons = {d.row: d.reason for d in ins.ledger.dropped}
    assert reasons == {4: "missing-covariate", 7: "covariate-text"}
    assert ins.ledger.used + len(ins.ledger.dropped) == ins.ledger.read
    assert "adjusted_mean" in ins.groups


def test_block_column_of_measurements_warns(tmp_path):
    df = rcbd().assign(rep=lambda d: d["rep"].astype(float) + 0.25)
    with pytest.warns(ModelWarning, match=r"block column 'rep' .* non-integer numbers "
                                          r"\('1.25', '2.25', '3.25'\).*covariates='rep'"):
        famwise.inspect(write(tmp_path, df), "nitrate", "mix", block="rep")


def test_integer_block_codes_are_labels_without_warning(tmp_path):
    df = rcbd().assign(rep=lambda d: d["rep"].astype(int))
    with warnings.catch_warnings():
        warnings.simplefilter("error", ModelWarning)
        ins = famwise.inspect(write(tmp_path, df), "nitrate", "mix", block="rep")
    assert ins.layout.design.block_labels == (("1", "2", "3", "4"),)


def test_group_confined_to_one_block_warns_but_runs(tmp_path):
    df = pd.concat([rcbd(), trial([[50, "Clover", "2", 13.0, 6.0],
                                   [51, "Clover", "2", 13.4, 6.1]])], ignore_index=True)
    with pytest.warns(ModelWarning, match="group 'Clover' appears only in block '2' of 'rep'"):
        res = famwise.compare(write(tmp_path, df), "nitrate", "mix", block="rep", seed=1,
                              crosscheck=False)
    assert np.all(np.isfinite(res.groups["adjusted_se"]))


def test_wide_layout_with_blocks_is_refused(tmp_path):
    path = tmp_path / "w.csv"
    path.write_text("A,B\n1,2\n3,4\n")
    with pytest.raises(FamwiseInputError, match="blocks and covariates need the long layout"):
        famwise.inspect(str(path), wide=True, block="A")


def test_layout_with_block_option_is_refused():
    lay = Layout.from_groups([[1.0, 2.0], [3.0, 4.5]])
    with pytest.raises(FamwiseInputError, match="a Layout carries its own blocks"):
        famwise.compare(lay, block="rep")


def test_one_way_procedure_on_a_blocked_layout_is_refused(tmp_path):
    with pytest.raises(FamwiseInputError, match=r"procedure 'games-howell' compares the groups "
                                                r"as a one-way layout and would ignore the "
                                                r"blocks 'rep'"):
        famwise.compare(write(tmp_path, rcbd()), "nitrate", "mix", block="rep",
                        procedure="games-howell")


def test_non_detects_with_blocks_need_to_be_set_aside(tmp_path):
    df = rcbd().astype({"nitrate": object})
    df.loc[3, "nitrate"] = "<0.5"
    path = write(tmp_path, df)
    with pytest.raises(FamwiseInputError, match=r"1 value\(s\) of 'nitrate' .* are "
                                                r"non-detects .* nondetects='drop'"):
        famwise.compare(path, "nitrate", "mix", block="rep", seed=1)
    res = famwise.compare(path, "nitrate", "mix", block="rep", seed=1, nondetects="drop",
                          crosscheck=False)
    assert [d.reason for d in res.ledger.dropped] == ["below-limit"]

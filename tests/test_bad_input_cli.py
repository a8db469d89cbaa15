"""Bad input through the command line: one line, exit code 2, never a traceback.

Each case writes a malformed file (formats, encodings, delimiters, headers,
types, sizes, sheets) or passes a bad option value, runs ``python -m famwise
inspect|compare|calibrate`` as a user would, and checks the exit code, that
standard error holds exactly one ``famwise: error:`` line containing the
expected text (or, for inputs that are only warned about, the
``famwise: warning:`` line and exit code 0), and that no ``Traceback``
reaches the user.  The cases complement ``tests/test_input_errors.py`` (the
API catalogue) and do not repeat its inputs.

The expected behaviour is the project's own contract (DESIGN.md: "Exit 0 on
success, 2 on bad input or usage (one clear line, no traceback), 1 on an
internal error"; common practice, no source).  Every case runs through the
command's entry point in this process; a sample of them (and, with
``-m slow``, all of them) also as real subprocesses.
"""

from __future__ import annotations

import gzip
import os
import subprocess
import sys

import pandas as pd
import pytest

GOOD = ("plot,mix,nitrate\n1,Rye,10.5\n2,Rye,11.0\n3,Rye,12.5\n"
        "4,Fallow,20.1\n5,Fallow,22.3\n6,Fallow,21.0\n")


def _w(folder, name, data):
    path = os.path.join(folder, name)
    with open(path, "wb") as fh:
        fh.write(data.encode("utf-8") if isinstance(data, str) else data)
    return path


def _workbook(folder, name, sheets):
    openpyxl = pytest.importorskip("openpyxl")
    book = openpyxl.Workbook()
    book.remove(book.active)
    for title, rows in sheets.items():
        sheet = book.create_sheet(title)
        for row in rows:
            sheet.append(row)
    path = os.path.join(folder, name)
    book.save(path)
    return path


def _parquet(folder, name, frame):
    pytest.importorskip("pyarrow")
    path = os.path.join(folder, name)
    frame.to_parquet(path)
    return path


def _xlsx_bytes(folder):
    path = _workbook(folder, "_real.xlsx", {"S": [["mix", "nitrate"], ["A", 1], ["A", 2],
                                                   ["B", 3], ["B", 4]]})
    with open(path, "rb") as fh:
        return fh.read()


def _parquet_bytes(folder):
    path = _parquet(folder, "_real.parquet",
                    pd.DataFrame({"mix": ["A", "A", "B", "B"], "nitrate": [1.0, 2, 3, 4]}))
    with open(path, "rb") as fh:
        return fh.read()


RG = ["--response", "nitrate", "--group", "mix"]
# two mixes in two complete blocks, a covariate (invented layout, not a reference)
BLOCKED = ("plot,mix,rep,nitrate,base\n1,Rye,1,10.5,4.1\n2,Fallow,1,20.1,4.6\n"
           "3,Rye,1,11.2,4.3\n4,Fallow,1,21.7,4.2\n5,Rye,2,12.5,4.9\n6,Fallow,2,22.3,4.4\n"
           "7,Rye,2,12.0,4.0\n8,Fallow,2,23.9,4.8\n")

# (id, builder(folder) -> argv after "python -m famwise", exit code, expected
#  substrings of the one stderr line, kind "error" | "warning")
CASES = [
    # --- formats and encodings ------------------------------------------------
    ("binary-garbage",
     lambda d: ["inspect", _w(d, "bin.csv", bytes(range(256)) * 16), *RG], 2,
     ["bin.csv", "holds a NUL byte", "binary file"], "error"),
    ("gzip-named-csv",
     lambda d: ["inspect", _w(d, "gz.csv", gzip.compress(GOOD.encode())), *RG], 2,
     ["gz.csv", "is gzip-compressed", "decompress it"], "error"),
    ("workbook-named-csv",
     lambda d: ["inspect", _w(d, "book.csv", _xlsx_bytes(d)), *RG], 2,
     ["book.csv", "is a zip archive", ".xlsx suffix"], "error"),
    ("parquet-named-csv",
     lambda d: ["inspect", _w(d, "pq.csv", _parquet_bytes(d)), *RG], 2,
     ["pq.csv", "is a Parquet file", ".parquet suffix"], "error"),
    ("utf16-without-bom",
     lambda d: ["inspect", _w(d, "u16.csv", GOOD.encode("utf-16-le")), *RG], 2,
     ["u16.csv", "UTF-16 text without a byte-order mark", "--encoding utf-16-le"], "error"),
    ("nul-bytes-in-text",
     lambda d: ["inspect", _w(d, "nul.csv", GOOD.replace("11.0", "11\x00.0")), *RG], 2,
     ["nul.csv", "holds a NUL byte (line 3"], "error"),
    ("wrong-encoding-named",
     lambda d: ["inspect", _w(d, "e.csv", GOOD.replace("Rye", "Seigle d'hiver é")),
                *RG, "--encoding", "ascii"], 2,
     ["e.csv", "is not valid ascii", "byte 0xc3"], "error"),
    ("xlsx-that-is-csv",
     lambda d: ["inspect", _w(d, "fake.xlsx", GOOD), *RG], 2,
     ["fake.xlsx", "cannot be opened as an Excel workbook",
      "looks like delimited text: give it the .csv suffix"], "error"),
    ("parquet-that-is-csv",
     lambda d: ["inspect", _w(d, "fake.parquet", GOOD), *RG], 2,
     ["fake.parquet", "cannot be read as Parquet", "looks like delimited text"], "error"),
    ("wrong-extension",
     lambda d: ["inspect", _w(d, "trial.csv.bak", GOOD), *RG], 2,
     ["unsupported file type '.bak'", "expected one of .csv"], "error"),
    # --- delimiters, quotes, headers ------------------------------------------
    ("mixed-delimiters",
     lambda d: ["inspect", _w(d, "mixed.csv", "mix;nitrate\nRye,10.5\nRye;11\nFallow,20\n"
                                              "Fallow;21\n"), *RG], 2,
     ["mixed.csv", "mixes delimiters", "header uses ';'", "uses ','"], "error"),
    ("unbalanced-quote",
     lambda d: ["inspect", _w(d, "q.csv", 'mix,nitrate\nRye,10.5\n"Rye,11\nFallow,20\n'), *RG],
     2, ["q.csv", "line 3 opens a quote", "never closed"], "error"),
    ("quote-swallows-rows",
     lambda d: ["inspect", _w(d, "sw.csv", 'mix,nitrate\n"Rye,10.5\n' + "Rye,11\n" * 80
                                           + 'Fallow",20\nFallow,21\nFallow,22\n'), *RG], 2,
     ["sw.csv", "the group label in row 2", "characters long", "unbalanced quote"], "error"),
    ("leading-blank-lines-read-fine",
     lambda d: ["inspect", _w(d, "blank.csv", "\n   \n" + GOOD + ",,\n"), *RG], 0,
     [], "ok"),
    ("header-then-blank-rows",
     lambda d: ["inspect", _w(d, "hb.csv", "mix,nitrate\n,\n\n,\n"), *RG], 2,
     ["response column 'nitrate'", "no numeric values", "only empty cells"], "error"),
    ("label-spelling-variants-warn",
     lambda d: ["inspect", _w(d, "sp.csv", GOOD + "7,rye,12.0\n8,rye,12.5\n"), *RG], 0,
     ["'Rye' (3 rows), 'rye' (2 rows)", "differ only by case or spacing",
      "--merge-spellings"], "warning"),
    # --- types and values -----------------------------------------------------
    ("thousands-separators",
     lambda d: ["inspect", _w(d, "th.csv", 'mix,nitrate\nRye,"1,050.5"\nRye,"1,100.0"\n'
                                           'Fallow,"2,010.2"\nFallow,"2,230.9"\n'), *RG], 2,
     ["no numeric values", "thousands separators"], "error"),
    ("decimal-comma-without-option",
     lambda d: ["inspect", _w(d, "dc.csv", "mix;nitrate\nRye;10,5\nRye;11,2\nFallow;20,1\n"
                                           "Fallow;22,3\n"), *RG], 2,
     ["no numeric values", "decimal comma", "--decimal-comma"], "error"),
    ("all-nan-column",
     lambda d: ["inspect", _w(d, "nan.csv", "mix,nitrate\nRye,NA\nRye,\nFallow,nan\n"
                                            "Fallow,NaN\n"), *RG], 2,
     ["response column 'nitrate'", "no numeric values", "'NA'"], "error"),
    ("boolean-response",
     lambda d: ["inspect", _w(d, "b.csv", "mix,nitrate\nA,TRUE\nA,FALSE\nB,TRUE\nB,TRUE\n"),
                *RG], 2, ["no numeric values", "'TRUE', 'FALSE'"], "error"),
    ("every-group-constant",
     lambda d: ["compare", _w(d, "c.csv", "mix,nitrate\nA,1\nA,1\nB,2\nB,2\nB,2\n"), *RG], 2,
     ["every group of 'nitrate'", "is constant", "'A' = 1, 'B' = 2"], "error"),
    ("values-too-large-to-square",
     lambda d: ["compare", _w(d, "big.csv", "mix,nitrate\nA,1e308\nA,-1e308\nB,1e308\n"
                                            "B,1e307\n"), *RG], 2,
     ["span more than 1.8e308", "rescale the unit"], "error"),
    ("overlong-label",
     lambda d: ["inspect", _w(d, "hl.csv", "mix,nitrate\n" + "X" * 5000 + ",1\n" + "X" * 5000
                                           + ",2\nB,3\nB,4\n"), *RG], 2,
     ["row 2", "is 5000 characters long"], "error"),
    ("parquet-dates-as-response",
     lambda d: ["inspect", _parquet(d, "dt.parquet", pd.DataFrame(
         {"mix": ["A", "A", "B", "B"], "nitrate": pd.to_datetime(["2024-05-01"] * 4)})), *RG],
     2, ["no numeric values", "2024-05-01"], "error"),
    # --- sizes ----------------------------------------------------------------
    ("one-data-row",
     lambda d: ["inspect", _w(d, "r1.csv", "mix,nitrate\nRye,1\n"), *RG], 2,
     ["fewer than two groups", "only 'Rye'"], "error"),
    ("wide-group-of-one",
     lambda d: ["inspect", _w(d, "w.csv", "A,B\n1,2\n3,\n5,\n"), "--wide"], 2,
     ["group 'B'", "only 1 usable value", "2 cells set aside"], "error"),
    ("parquet-zero-rows",
     lambda d: ["inspect", _parquet(d, "zero.parquet", pd.DataFrame(
         {"mix": pd.Series([], dtype=str), "nitrate": pd.Series([], dtype=float)})), *RG], 2,
     ["zero.parquet", "has no records"], "error"),
    # --- sheets ---------------------------------------------------------------
    ("excel-empty-sheet",
     lambda d: ["inspect", _workbook(d, "b1.xlsx", {"Plots": [["mix", "nitrate"], ["A", 1],
                                                              ["A", 2], ["B", 3], ["B", 4]],
                                                    "Empty": []}), *RG, "--sheet", "Empty"], 2,
     ["sheet 'Empty' of", "b1.xlsx", "is empty"], "error"),
    ("excel-header-only-sheet",
     lambda d: ["inspect", _workbook(d, "b2.xlsx", {"Plots": [["mix", "nitrate"]]}), *RG], 2,
     ["b2.xlsx", "has a header row but no data rows"], "error"),
    ("excel-sheet-number-as-name",
     lambda d: ["inspect", _workbook(d, "b3.xlsx", {"Plots": [["mix", "nitrate"], ["A", 1]],
                                                    "Notes": [["x"]]}), *RG, "--sheet", "7"], 2,
     ["has no sheet '7'", "sheets: 'Plots', 'Notes'"], "error"),
    # --- option values ----------------------------------------------------------
    ("alpha-above-one",
     lambda d: ["compare", _w(d, "g.csv", GOOD), *RG, "--alpha", "2"], 2,
     ["alpha must be a number strictly between 0 and 1", "got 2.0"], "error"),
    ("alpha-not-a-number",
     lambda d: ["compare", _w(d, "g.csv", GOOD), *RG, "--alpha", "five%"], 2,
     ["argument --alpha: invalid float value: 'five%'"], "error"),
    ("unknown-procedure",
     lambda d: ["compare", _w(d, "g.csv", GOOD), *RG, "--procedure", "foo"], 2,
     ["unknown procedure 'foo'", "or 'auto'"], "error"),
    ("unknown-family",
     lambda d: ["compare", _w(d, "g.csv", GOOD), *RG, "--family", "x"], 2,
     ["argument --family: invalid choice: 'x'"], "error"),
    ("reference-not-a-group",
     lambda d: ["compare", _w(d, "g.csv", GOOD), *RG, "--family", "vs-reference",
                "--reference", "Fallw"], 2,
     ["reference 'Fallw' is not a group label", "did you mean 'Fallow'?"], "error"),
    ("contrast-syntax",
     lambda d: ["compare", _w(d, "g.csv", GOOD), *RG, "--family", "contrasts",
                "--contrasts", "(Rye - "], 2, ["contrast '(Rye - ': ends too early"], "error"),
    ("negative-margin",
     lambda d: ["compare", _w(d, "g.csv", GOOD), *RG, "--margin", "-1"], 2,
     ["margin must be a positive number; got -1.0"], "error"),
    ("zero-resamples",
     lambda d: ["compare", _w(d, "g.csv", GOOD), *RG, "--resamples", "0"], 2,
     ["--resamples must be at least 1; got 0"], "error"),
    ("negative-seed",
     lambda d: ["compare", _w(d, "g.csv", GOOD), *RG, "--seed", "-3"], 2,
     ["seed must be a non-negative integer", "got -3"], "error"),
    ("zero-jobs",
     lambda d: ["compare", _w(d, "g.csv", GOOD), *RG, "-p", "permutation-maxt",
                "--resamples", "99", "--jobs", "0"], 2,
     ["n_jobs (--jobs) must be a non-zero whole number", "got 0"], "error"),
    ("out-is-a-file",
     lambda d: ["compare", _w(d, "g.csv", GOOD), *RG, "--out", _w(d, "taken", "x")], 2,
     ["output path", "taken", "exists and is not a folder"], "error"),
    ("one-sided-all-pairs",
     lambda d: ["compare", _w(d, "g.csv", GOOD), *RG, "--alternative", "less"], 2,
     ["alternative='less' is offered for family 'vs-reference' only"], "error"),
    ("procedure-wrong-family",
     lambda d: ["compare", _w(d, "g.csv", GOOD), *RG, "-p", "tukey-kramer",
                "--family", "vs-reference", "--reference", "Rye"], 2,
     ["procedure 'tukey-kramer' does not handle the 'vs-reference' family"], "error"),
    ("exclude-row-outside",
     lambda d: ["inspect", _w(d, "g.csv", GOOD), *RG, "--exclude-rows", "99"], 2,
     ["row 99 to exclude is not a data row", "data rows 2 to 7"], "error"),
    ("order-lists-twice",
     lambda d: ["inspect", _w(d, "g.csv", GOOD), *RG, "--order", "Rye,Fallow,Rye"], 2,
     ["order lists a group twice"], "error"),
    ("calibrate-too-few-replicates",
     lambda d: ["calibrate", _w(d, "g.csv", GOOD), *RG, "--replicates", "0"], 2,
     ["replicates must be at least 100; got 0"], "error"),
    ("block-column-unknown",
     lambda d: ["compare", _w(d, "b.csv", BLOCKED), *RG, "--block", "reps"], 2,
     ["no block column 'reps'", "did you mean 'rep'?"], "error"),
    ("block-with-one-plot",
     lambda d: ["inspect", _w(d, "b.csv", BLOCKED + "9,Rye,3,11.9,4.0\n"), *RG,
                "--block", "rep"], 2,
     ["block '3' of 'rep'", "has only one plot (row 10)"], "error"),
    ("three-block-columns",
     lambda d: ["inspect", _w(d, "b.csv", BLOCKED), *RG, "--block", "rep,plot,base"], 2,
     ["block takes one column, or two"], "error"),
    ("covariate-text",
     lambda d: ["calibrate", _w(d, "b.csv", BLOCKED.replace(",4.", ",x")), *RG,
                "--covariate", "base"], 2,
     ["covariate column 'base'", "holds no numbers"], "error"),
    ("batch-block-is-group",
     lambda d: ["batch", _w(d, "b.csv", BLOCKED), "--responses", "nitrate", "--group",
                "mix", "--block", "mix"], 2,
     ["block column 'mix' is the group column"], "error"),
    ("block-of-measurements",
     lambda d: ["inspect", _w(d, "b.csv", BLOCKED.replace(",1,", ",1.5,")
                              .replace(",2,", ",2.5,")), *RG, "--block", "rep"], 0,
     ["block column 'rep'", "holds non-integer numbers"], "warning"),
    ("plan-margin-zero",
     lambda d: ["plan", _w(d, "g.csv", GOOD), *RG, "--margin", "0"], 2,
     ["margin must be positive"], "error"),
    ("plan-margin-negative",
     lambda d: ["plan", "--sd", "1,2", "--margin", "-1"], 2,
     ["margin must be positive", "got -1.0"], "error"),
    ("plan-target-outside",
     lambda d: ["plan", "--sd", "1,2", "--margin", "1", "--target-power", "1.5"], 2,
     ["target_power must lie strictly between 0 and 1"], "error"),
    ("plan-n-below-two",
     lambda d: ["plan", "--sd", "1,2", "--margin", "1", "--n", "1,4"], 2,
     ["n must be at least 2 per group", "got 1"], "error"),
    ("plan-n-not-numbers",
     lambda d: ["plan", "--sd", "1,2", "--margin", "1", "--n", "4,six"], 2,
     ["--n must be a comma-separated list of whole numbers", "'six'"], "error"),
    ("plan-impossible-target",
     lambda d: ["plan", "--sd", "1,1,1", "--margin", "0.05", "--max-n", "8",
                "--replicates", "200", "-p", "tukey-kramer", "--seed", "1"], 2,
     ["not reached by 8 per group", "largest power_any there is"], "error"),
    ("plan-sd-count-vs-pilot",
     lambda d: ["plan", _w(d, "g.csv", GOOD), *RG, "--margin", "1", "--sd", "1,2,3"], 2,
     ["sd gives 3 SDs but the pilot has 2 groups"], "error"),
    ("plan-ratio-of-one",
     lambda d: ["plan", "--sd", "0.3,0.3", "--transform", "log", "--margin", "1"], 2,
     ["a ratio of 1 means no difference at all", "got 1.0"], "error"),
    ("plan-ratio-negative",
     lambda d: ["plan", "--sd", "0.3,0.3", "--transform", "log", "--margin", "-2"], 2,
     ["ratio of geometric means", "must be positive; got -2.0"], "error"),
    ("plan-log-zero-row",
     lambda d: ["plan", _w(d, "z.csv", GOOD.replace("11.0", "0")), *RG, "--transform",
                "log", "--margin", "1.5"], 2,
     ["are zero or negative", "row 3 (0)", "--log-offset"], "error"),
    ("plan-log-offset-without-pilot",
     lambda d: ["plan", "--sd", "0.3,0.3", "--transform", "log", "--log-offset", "1",
                "--margin", "1.5"], 2,
     ["no values to shift"], "error"),
    ("plan-vs-reference-without-reference",
     lambda d: ["plan", "--sd", "1,1,1", "--margin", "1", "--family", "vs-reference"], 2,
     ["needs a reference group", "g1, g2, g3"], "error"),
    ("plan-reference-misspelt",
     lambda d: ["plan", _w(d, "g.csv", GOOD), *RG, "--margin", "1", "--family",
                "vs-reference", "--reference", "rye"], 2,
     ["reference 'rye' is not a group label", "did you mean 'Rye'"], "error"),
    ("plan-procedure-not-for-reference",
     lambda d: ["plan", "--sd", "1,1,1", "--margin", "1", "--family", "vs-reference",
                "--reference", "g1", "-p", "games-howell"], 2,
     ["does not compare each group with a reference", "dunnett"], "error"),
]


def _subprocess(argv, folder):
    env = dict(os.environ, CI="1")
    env.pop("FAMWISE_DEBUG", None)
    proc = subprocess.run([sys.executable, "-m", "famwise", *argv], capture_output=True,
                          text=True, timeout=300, cwd=folder, env=env)
    return proc.returncode, proc.stdout, proc.stderr


def _in_process(argv, folder, capsys):
    """Run ``famwise.cli.main`` in this process; an escaping exception fails the test."""
    from famwise.cli import main
    capsys.readouterr()
    here = os.getcwd()
    os.chdir(folder)
    try:
        try:
            code = main(argv)
        except SystemExit as exc:          # argparse usage errors
            code = exc.code
    finally:
        os.chdir(here)
    out = capsys.readouterr()
    return code, out.out, out.err


def _check(case, code, out, err, expected_code, expected, kind):
    assert "Traceback" not in err, err
    assert "internal error" not in err, err
    assert "np.float64(" not in err and "numpy." not in err, err   # no Python internals
    assert code == expected_code, (code, err)
    lines = [ln for ln in err.splitlines() if ln.strip()]
    if kind == "error":
        errors = [ln for ln in lines if ln.startswith("famwise: error: ")]
        assert len(errors) == 1, lines
        assert not out.strip()
        target = errors[0]
    elif kind == "warning":
        warns = [ln for ln in lines if ln.startswith("famwise: warning: ")]
        assert len(warns) == 1 and len(lines) == 1, lines
        target = warns[0]
    else:
        assert lines == [], lines
        target = ""
    for part in expected:
        assert part in target, (part, target)


def test_catalogue_is_large_and_distinct():
    ids = [c[0] for c in CASES]
    assert len(ids) == len(set(ids))
    assert len(ids) >= 30


@pytest.mark.parametrize("case, build, code, expected, kind", CASES, ids=[c[0] for c in CASES])
def test_bad_input_gets_one_clear_line(tmp_path, capsys, case, build, code, expected, kind):
    """The command's own entry point, in this process (fast; every case)."""
    argv = build(str(tmp_path))
    _check(case, *_in_process(argv, str(tmp_path), capsys), code, expected, kind)


# A real process per case costs about a second (imports); by default a sample
# covering each kind of input runs as a subprocess, ``-m slow`` runs them all.
SAMPLE = ["binary-garbage", "mixed-delimiters", "label-spelling-variants-warn",
          "thousands-separators", "one-data-row", "excel-empty-sheet", "alpha-not-a-number",
          "zero-jobs", "leading-blank-lines-read-fine"]


def _subprocess_case(tmp_path, case, build, code, expected, kind):
    argv = build(str(tmp_path))
    _check(case, *_subprocess(argv, str(tmp_path)), code, expected, kind)


@pytest.mark.parametrize("case, build, code, expected, kind",
                         [c for c in CASES if c[0] in SAMPLE], ids=SAMPLE)
def test_bad_input_as_a_process(tmp_path, case, build, code, expected, kind):
    """``python -m famwise ...`` as a user runs it: exit code, one line, no traceback."""
    _subprocess_case(tmp_path, case, build, code, expected, kind)


@pytest.mark.slow
@pytest.mark.parametrize("case, build, code, expected, kind",
                         [c for c in CASES if c[0] not in SAMPLE],
                         ids=[c[0] for c in CASES if c[0] not in SAMPLE])
def test_bad_input_as_a_process_all(tmp_path, case, build, code, expected, kind):
    _subprocess_case(tmp_path, case, build, code, expected, kind)


def test_leading_blank_lines_keep_file_row_numbers(tmp_path, capsys):
    # "\n   \n" then the header on line 3: data rows are lines 4 to 9 and the
    # trailing ",,," line (line 10) is a blank row in the ledger.
    argv = next(b for c, b, *_ in CASES if c == "leading-blank-lines-read-fine")(str(tmp_path))
    code, out, err = _in_process(argv + ["--format", "json"], str(tmp_path), capsys)
    assert code == 0, err
    import json
    record = json.loads(out)
    assert record["ledger"]["read"] == 7 and record["ledger"]["used"] == 6
    assert [(d["row"], d["reason"]) for d in record["dropped"]] == [(10, "blank-row")]

"""Bad input gets one clear line naming the file, column, row or value.

Each case builds a malformed input, checks the FamwiseInputError message from
the Python API, and (for file inputs) that the command line prints the same
single line with exit code 2 and no traceback.  The expected behaviour is the
project's own contract (DESIGN.md, "Names we own"; common practice, no source).
"""

import subprocess
import sys
import warnings

import numpy as np
import pandas as pd
import pytest

from famwise.core.errors import FamwiseInputError
from famwise.core.families import build_family, contrasts, vs_reference
from famwise.intake import read
from famwise.procedures import check_procedure
from famwise.core.validate import check_alpha

GOOD = "plot,mix,nitrate\n1,Rye,10.5\n2,Rye,11.0\n3,Fallow,20.1\n4,Fallow,22.3\n"


def write(tmp_path, name, text, mode="w"):
    path = tmp_path / name
    if mode == "wb":
        path.write_bytes(text)
    else:
        path.write_text(text, encoding="utf-8")
    return str(path)


def excel(tmp_path):
    openpyxl = pytest.importorskip("openpyxl")
    book = openpyxl.Workbook()
    sheet = book.active
    sheet.title = "Plots 2025"
    for row in [["mix", "nitrate"], ["Rye", 3], ["Rye", 4], ["Oat", 5], ["Oat", 7]]:
        sheet.append(row)
    path = tmp_path / "trial.xlsx"
    book.save(path)
    return str(path)


# (id, builder(tmp_path) -> (source, kwargs), expected substrings of the message)
FILE_CASES = [
    ("file-not-found", lambda t: (str(t / "missing.csv"), {}), ["file not found", "missing.csv"]),
    ("empty-file", lambda t: (write(t, "e.csv", ""), {}), ["e.csv", "is empty"]),
    ("whitespace-only", lambda t: (write(t, "w.csv", "\n \n\t\n"), {}), ["w.csv", "is empty"]),
    ("header-only", lambda t: (write(t, "h.csv", "mix,nitrate\n"), {}),
     ["h.csv", "header row but no data rows"]),
    ("folder-not-file", lambda t: (str(t), {}), ["is a folder"]),
    ("unsupported-suffix", lambda t: (write(t, "d.json", "{}"), {}),
     ["unsupported file type '.json'"]),
    ("old-xls", lambda t: (write(t, "d.xls", "x"), {}), [".xls", "save it as .xlsx"]),
    ("unknown-response-column", lambda t: (write(t, "a.csv", GOOD), {"response": "nitrat"}),
     ["no response column 'nitrat'", "did you mean 'nitrate'?"]),
    ("unknown-group-column", lambda t: (write(t, "a.csv", GOOD), {"group": "mixx"}),
     ["no group column 'mixx'", "did you mean 'mix'?"]),
    ("response-not-named", lambda t: (write(t, "a.csv", GOOD), {"response": None}),
     ["name the response column", "'nitrate'"]),
    ("same-column-twice", lambda t: (write(t, "a.csv", GOOD), {"group": "nitrate"}),
     ["response and group are the same column 'nitrate'"]),
    ("no-numeric-values", lambda t: (write(t, "n.csv", "mix,nitrate\nA,abc\nB,>5\nB,x\n"), {}),
     ["response column 'nitrate'", "no numeric values", "'abc'"]),
    ("nondetect-without-limit", lambda t: (write(
        t, "nd.csv", "mix,nitrate\nA,1\nA,n.d.\nB,3\nB,4\n"), {}),
     ["row 3", "'n.d.'", "without a number", "detection_limit=", "--detection-limit",
      "nondetects='drop'"]),
    ("less-than-without-number", lambda t: (write(
        t, "lt.csv", "mix,nitrate\nA,1\nA,<\nB,3\nB,4\n"), {}),
     ["row 3", "holds '<'", "followed by the limit as a number"]),
    ("negative-limit", lambda t: (write(
        t, "neg.csv", "mix,nitrate\nA,1\nA,<-0.5\nB,3\nB,4\n"), {}),
     ["row 3", "'<-0.5'", "must be a positive number"]),
    ("negative-limit-option", lambda t: (write(
        t, "nego.csv", "mix,nitrate\nA,1\nA,ND\nB,3\nB,4\n"), {"detection_limit": -1}),
     ["detection_limit must be a positive number", "-1"]),
    ("limit-column-empty", lambda t: (write(
        t, "lc.csv", "mix,nitrate,dl\nA,1,0.5\nA,ND,\nB,3,0.5\nB,4,0.5\n"),
        {"detection_limit": "dl"}),
     ["row 3", "'ND'", "detection-limit column 'dl' is empty there"]),
    ("limit-column-unknown", lambda t: (write(t, "lu.csv", "mix,nitrate,dl\nA,1,0.5\nA,ND,\n"),
                                        {"detection_limit": "DLs"}),
     ["no detection-limit column 'DLs'", "did you mean 'dl'?"]),
    ("all-nondetects", lambda t: (write(
        t, "an.csv", "mix,nitrate\nA,<1\nA,<1\nB,<0.5\nB,<0.5\n"), {}),
     ["every usable value of 'nitrate'", "non-detect"]),
    ("bad-nondetects-option", lambda t: (write(t, "a.csv", GOOD), {"nondetects": "omit"}),
     ["nondetects must be one of 'keep', 'drop'", "'omit'"]),
    ("one-group", lambda t: (write(t, "o.csv", "mix,nitrate\nA,1\nA,2\nA,3\n"), {}),
     ["fewer than two groups", "only 'A'"]),
    ("group-with-one-value", lambda t: (write(
        t, "s.csv", "mix,nitrate\nA,1\nA,2\nB,3\nB,abc\nC,4\nC,5\n"), {}),
     ["group 'B'", "only 1 usable value", "1 row set aside"]),
    ("all-identical", lambda t: (write(t, "i.csv", "mix,nitrate\nA,2\nA,2\nB,2\nB,2\n"), {}),
     ["all 4 usable values of 'nitrate'", "equal 2", "no variation"]),
    ("ragged-row", lambda t: (write(t, "r.csv", "mix,nitrate\nA,1\nA,2,9,9\nB,3\nB,4\n"), {}),
     ["r.csv", "line 3 has 4 fields", "earlier lines have 2"]),
    ("not-utf8", lambda t: (write(t, "l.csv", "mix,nitrate\nCaf\xe9,1\nCaf\xe9,2\nB,3\nB,4\n"
                                  .encode("latin-1"), "wb"), {}),
     ["l.csv", "is not valid UTF-8", "byte 0xe9", "encoding='latin-1'"]),
    ("unknown-encoding", lambda t: (write(t, "a.csv", GOOD), {"encoding": "klingon-8"}),
     ["unknown encoding 'klingon-8'"]),
    ("bad-decimal-option", lambda t: (write(t, "a.csv", GOOD), {"decimal": ";"}),
     ["decimal must be '.' or ','", "';'"]),
    ("bad-delimiter-option", lambda t: (write(t, "a.csv", GOOD), {"delimiter": ",,"}),
     ["delimiter must be a single character"]),
    ("order-unknown-label", lambda t: (write(t, "a.csv", GOOD), {"order": ["Rye", "Oats"]}),
     ["order names 'Oats'", "groups: 'Rye', 'Fallow'"]),
    ("order-missing-label", lambda t: (write(t, "a.csv", GOOD), {"order": ["Rye"]}),
     ["order leaves out group 'Fallow'"]),
    ("duplicate-column", lambda t: (write(t, "d.csv", "mix,nitrate,nitrate\nA,1,1\nA,2,2\nB,3,3\n"
                                          "B,4,4\n"), {}),
     ["d.csv", "2 columns named 'nitrate'"]),
    ("excel-sheet-missing", lambda t: (excel(t), {"sheet": "Plots 2052"}),
     ["no sheet 'Plots 2052'", "did you mean 'Plots 2025'?"]),
    ("excel-sheet-index", lambda t: (excel(t), {"sheet": 3}),
     ["has 1 sheet(s)", "index 3 is out of range"]),
    ("wide-no-numbers", lambda t: (write(t, "w.csv", "A,B\nx,y\nq,z\n"), {"wide": True}),
     ["group columns", "hold no numeric values"]),
    ("wide-unnamed-column", lambda t: (write(t, "u.csv", "A,,B\n1,2,3\n4,5,6\n"), {"wide": True}),
     ["column without a header (column 2)"]),
    ("not-a-workbook", lambda t: (write(t, "x.xlsx", "not a zip"), {}),
     ["cannot be opened as an Excel workbook"]),
    ("parquet-garbage", lambda t: (write(t, "p.parquet", "not parquet"), {}),
     ["cannot be read as Parquet"]),
]


@pytest.mark.parametrize("case, build, expected", FILE_CASES, ids=[c[0] for c in FILE_CASES])
def test_read_errors_name_the_problem(tmp_path, case, build, expected):
    source, kwargs = build(tmp_path)
    kwargs.setdefault("response", "nitrate")
    kwargs.setdefault("group", "mix")
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        with pytest.raises(FamwiseInputError) as info:
            read(source, **kwargs)
    message = str(info.value)
    assert "\n" not in message
    for part in expected:
        assert part in message, (part, message)


CLI_CASES = ["file-not-found", "empty-file", "unknown-response-column", "no-numeric-values",
             "group-with-one-value", "ragged-row", "not-utf8", "excel-sheet-missing",
             "nondetect-without-limit"]


@pytest.mark.parametrize("case", CLI_CASES)
def test_cli_prints_one_line_and_exits_2(tmp_path, case):
    build, expected = next((b, e) for c, b, e in FILE_CASES if c == case)
    source, kwargs = build(tmp_path)
    cmd = [sys.executable, "-m", "famwise", "inspect", source,
           "--response", kwargs.get("response") or "nitrate", "--group", kwargs.get("group", "mix")]
    if "sheet" in kwargs:
        cmd += ["--sheet", str(kwargs["sheet"])]
    proc = subprocess.run(cmd, capture_output=True, text=True, timeout=120)
    assert proc.returncode == 2, proc.stderr
    assert "Traceback" not in proc.stderr
    lines = [ln for ln in proc.stderr.splitlines() if ln.strip()]
    assert len(lines) == 1 and lines[0].startswith("famwise: error: ")
    for part in expected:
        assert part in lines[0]


def test_cli_usage_error_exits_2():
    proc = subprocess.run([sys.executable, "-m", "famwise", "inspect"], capture_output=True,
                          text=True, timeout=120)
    assert proc.returncode == 2
    assert "Traceback" not in proc.stderr
    assert "the following arguments are required: file" in proc.stderr


LABELS = ["Bare fallow", "Cereal rye", "Rye + hairy vetch"]

API_CASES = [
    ("reference-absent", lambda: vs_reference(LABELS, "Fallow"),
     ["reference 'Fallow' is not a group label", "did you mean 'Bare fallow'?"]),
    ("reference-missing", lambda: build_family(LABELS, "vs-reference"),
     ["needs a reference group"]),
    ("family-unknown", lambda: build_family(LABELS, "all-pair"),
     ["family must be one of", "got 'all-pair'", "did you mean 'all-pairs'?"]),
    ("contrast-not-zero-sum", lambda: contrasts(LABELS, "`Bare fallow` - `Cereal rye`/2"),
     ["weights must sum to zero", "sum to 0.5"]),
    ("contrast-unknown-label", lambda: contrasts(LABELS, "`Bare fallow` - Rye"),
     ["label 'Rye' is not a group label"]),
    ("contrast-unquoted-symbols", lambda: contrasts(LABELS, "Rye + hairy vetch - Cereal rye"),
     ["is not a group label"]),
    ("contrast-syntax", lambda: contrasts(LABELS, "(`Bare fallow` - `Cereal rye`"),
     ["has an unclosed '('"]),
    ("contrast-product", lambda: contrasts(LABELS, "`Bare fallow` * `Cereal rye`"),
     ["multiplies two group labels"]),
    ("contrast-all-zero", lambda: contrasts(LABELS, {"Bare fallow": 0, "Cereal rye": 0}),
     ["has all weights zero"]),
    ("contrast-bad-char", lambda: contrasts(LABELS, "`Bare fallow` - $x"),
     ["cannot read '$x'", "backticks"]),
    ("alpha-zero", lambda: check_alpha(0), ["alpha must be a number strictly between 0 and 1",
                                            "got 0"]),
    ("alpha-one-point-five", lambda: check_alpha(1.5), ["got 1.5"]),
    ("alpha-text", lambda: check_alpha("0.05"), ["got '0.05'"]),
    ("procedure-unknown", lambda: check_procedure("tukey"),
     ["unknown procedure 'tukey'", "did you mean 'tukey-kramer'?"]),
    ("procedure-typo", lambda: check_procedure("games_howell"),
     ["unknown procedure 'games_howell'", "did you mean 'games-howell'?"]),
    ("empty-dataframe", lambda: read(pd.DataFrame(), "y", "g"), ["the DataFrame is empty"]),
]


@pytest.mark.parametrize("case, call, expected", API_CASES, ids=[c[0] for c in API_CASES])
def test_api_errors_name_the_problem(case, call, expected):
    with pytest.raises(FamwiseInputError) as info:
        call()
    message = str(info.value)
    assert "\n" not in message
    for part in expected:
        assert part in message, (part, message)


def test_error_catalogue_is_large_enough():
    # The foundation issue asks for at least 20 distinct bad-input cases.
    assert len(FILE_CASES) + len(API_CASES) >= 20


def test_input_error_is_a_value_error():
    assert issubclass(FamwiseInputError, ValueError)
    assert np.isfinite(check_alpha(0.05))

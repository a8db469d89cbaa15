"""Intake at scale: vectorised parsing gives what the cell-by-cell rules give.

References: Python's own ``float()`` (the parser the per-cell rules use) for
every text that reads as a number, pandas' reading of the same file for
row counts and positions, and numpy counts of what was planted for the
ledger.  The planted data are test fixtures, not reference values.
"""

import numpy as np
import pandas as pd
import pytest

from famwise.intake import parse_values, read
from famwise.intake.cells import label_codes


def _python_reference(texts, decimal="."):
    """Values and usability by Python's float(), cell by cell."""
    out, ok = [], []
    for s in texts:
        t = s.strip().replace(",", ".") if decimal == "," else s.strip()
        try:
            v = float(t.replace("\u2212", "-"))
        except ValueError:
            out.append(np.nan)
            ok.append(False)
            continue
        out.append(v)
        ok.append(np.isfinite(v))
    return np.array(out), np.array(ok)


NUMBERISH = ["1", "+1.5", "-0", "1.", ".5", "1e5", "1E-5", " 2.5 ", "00012", "1e400", "-1e400",
             "4.9406564584124654e-324", "0.1000000000000000055511151231257827021181583404541015625",
             "9007199254740993", "1_000", "\u221212.5", "\u0661\u0662", "inf", "Infinity",
             "nan", "NaN", "-nan", "0x10", "1,5", "12 5", "", "  ", "n.d.", "<0.5", "abc", "1e", "e5",
             ".", "-", "+", "1.2.3", "\uff11\uff12"]


@pytest.mark.parametrize("storage", ["str", "object"])
def test_text_cells_read_as_python_float_reads_them(storage):
    rng = np.random.default_rng(11)
    random = [repr(float(x)) for x in rng.standard_normal(20_000) * 10.0 ** rng.integers(-30, 30, 20_000)]
    texts = random + NUMBERISH
    cells = pd.Series(texts, dtype=storage)
    values, reasons, shown = parse_values(cells, ".")
    ref, ok = _python_reference(texts)
    usable = reasons == ""
    np.testing.assert_array_equal(usable, ok)
    np.testing.assert_array_equal(values[usable], ref[ok])          # bit for bit
    assert [shown[i] for i in range(len(texts))] == [t.strip() for t in texts]
    expect = {"1e400": "infinite", "inf": "infinite", "Infinity": "infinite",
              "nan": "missing-response", "-nan": "missing-response", "": "missing-response",
              "n.d.": "not-detected", "<0.5": "below-limit", "abc": "text", "1,5": "text"}
    for text, reason in expect.items():
        assert reasons[texts.index(text)] == reason, text


def test_decimal_comma_cells_match_python_float():
    texts = ["12,5", "-0,25", "1e3", "3", "1.5", "abc", "<0,5"]
    values, reasons, _ = parse_values(pd.Series(texts, dtype="str"), ",")
    ref, ok = _python_reference(texts, decimal=",")
    np.testing.assert_array_equal(reasons == "", ok)
    np.testing.assert_array_equal(values[ok], ref[ok])
    assert reasons[-1] == "below-limit"


def test_numeric_dtypes_pass_through():
    frame = pd.DataFrame({
        "g": ["A", "B"] * 4,
        "float": [1.0, np.nan, np.inf, 2.0, 3.0, 4.0, -np.inf, 5.0],
        "nullable": pd.array([1, None, 3, 4, 5, 6, 7, 8], dtype="Int64"),
        "cat": pd.Categorical(["1.5", "n.d.", None, "2", "2", "abc", "3", "1.5"])})
    v, r, t = parse_values(frame["float"], ".")
    assert list(r) == ["", "missing-response", "infinite", "", "", "", "infinite", ""]
    assert t[0] == "1.0" and t[1] == "" and t[2] == "inf"
    v, r, t = parse_values(frame["nullable"], ".")
    assert list(r) == ["", "missing-response"] + [""] * 6 and v[2] == 3.0
    v, r, t = parse_values(frame["cat"], ".")
    assert list(r) == ["", "not-detected", "missing-response", "", "", "text", "", ""]
    np.testing.assert_array_equal(v[r == ""], [1.5, 2, 2, 3, 1.5])
    assert t[5] == "abc" and t[0] == "1.5"


def test_mixed_python_objects_cell_by_cell():
    cells = pd.Series([1, 2.5, "3,5", True, None, pd.NA, " 4 ", float("nan"), "n.d."],
                      dtype=object)
    v, r, t = parse_values(cells, ",")
    assert list(r) == ["", "", "", "text", "missing-response", "missing-response", "",
                       "missing-response", "not-detected"]
    np.testing.assert_array_equal(v[r == ""], [1.0, 2.5, 3.5, 4.0])
    assert t[3] == "True" and t[6] == "4"


def test_labels_are_normalised_once_per_distinct_value():
    cells = pd.Series([" Rye", "Rye", None, "Oat ", 3.0, 3, True, 1, ""], dtype=object)
    codes, labels = label_codes(cells)
    assert labels == ["Rye", "", "Oat", "3", "True", "1"]
    assert [labels[c] for c in codes] == ["Rye", "Rye", "", "Oat", "3", "3", "True", "1", ""]
    codes, labels = label_codes(pd.Series([2.0, 1.0, np.nan, 2.0]))
    assert labels == ["2", "1", ""] and list(codes) == [0, 1, 2, 0]


def test_large_parquet_ledger_is_exact(tmp_path):
    pytest.importorskip("pyarrow")
    rng = np.random.default_rng(5)
    n = 200_000
    sites = np.array([f"Site {c}" for c in "ABCDEFGH"], dtype=object)
    site = sites[rng.integers(0, 8, n)]
    y = rng.gamma(2.0, 3.0, n)
    nan_rows = rng.choice(n, 300, replace=False)
    y[nan_rows] = np.nan
    inf_rows = rng.choice(np.setdiff1d(np.arange(n), nan_rows), 40, replace=False)
    y[inf_rows] = np.inf
    free = np.setdiff1d(np.arange(n), np.concatenate([nan_rows, inf_rows]))
    no_site = rng.choice(free, 25, replace=False)
    site[no_site] = None
    path = tmp_path / "big.parquet"
    pd.DataFrame({"site": site, "nitrate": y}).to_parquet(path)
    intake = read(path, "nitrate", "site", exclude_rows=[int(free[0]) + 1])
    led, lay = intake.ledger, intake.layout
    assert led.read == n and led.used + len(led.dropped) == n
    assert led.counts() == {"missing-response": 300, "infinite": 40, "missing-group": 25,
                            "excluded": 1}
    dropped_rows = np.array([d.row for d in led.dropped])
    assert np.all(np.diff(dropped_rows) > 0)               # in source order
    keep = np.ones(n, dtype=bool)
    keep[np.concatenate([nan_rows, inf_rows, no_site, [free[0]]])] = False
    ref = pd.read_parquet(path)                            # pandas as the reference reader
    np.testing.assert_array_equal(lay.values, ref["nitrate"].to_numpy()[keep])
    np.testing.assert_array_equal(lay.rows, np.flatnonzero(keep) + 1)
    first_seen = list(dict.fromkeys(ref["site"].to_numpy()[keep]))
    assert list(lay.labels) == first_seen
    assert [lay.labels[c] for c in lay.codes[:50]] == list(ref["site"].to_numpy()[keep][:50])


def test_large_text_file_with_blank_rows_and_text(tmp_path):
    rng = np.random.default_rng(9)
    n = 50_000
    lines = ["plot,site,nitrate"]
    planted = {}
    for i in range(n):
        row = i + 2
        u = rng.random()
        if u < 0.002:
            lines.append(",,")
            planted[row] = "blank-row"
        elif u < 0.004:
            lines.append(f"{i},S{i % 5},n.d.")
            planted[row] = "not-detected"
        elif u < 0.006:
            lines.append(f"{i},S{i % 5},<0.5")
            planted[row] = "below-limit"
        elif u < 0.008:
            lines.append(f"{i},,1.5")
            planted[row] = "missing-group"
        else:
            lines.append(f"{i},S{i % 5},{rng.normal(10, 2):.6f}")
    path = tmp_path / "big.csv"
    path.write_text("\n".join(lines) + "\n")
    intake = read(path, "nitrate", "site", nondetects="drop")   # set aside, as planted
    led = intake.ledger
    assert {d.row: d.reason for d in led.dropped} == planted
    assert led.read == n and led.used == n - len(planted)
    ref = pd.read_csv(path, skip_blank_lines=False)        # pandas as the reference reader
    ref_values = pd.to_numeric(ref["nitrate"], errors="coerce")
    ok = ref_values.notna() & ref["site"].notna()
    np.testing.assert_array_equal(intake.layout.values, ref_values[ok].to_numpy())
    np.testing.assert_array_equal(intake.layout.rows, np.flatnonzero(ok.to_numpy()) + 2)

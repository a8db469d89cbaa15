"""Reading files and DataFrames: formats, layouts, row numbers and the ledger.

The expected row numbers follow the convention documented in famwise.intake.ledger
(the row a spreadsheet shows, header = row 1); the parsed values are checked
against pandas reading the same text (a general-purpose library as reference).
"""

import io
import warnings

import numpy as np
import pandas as pd
import pytest

from famwise.core.errors import FamwiseInputError, LabelSpellingWarning
from famwise.intake import read

MESSY = (
    "plot;mix;nitrate\n"
    "1;Rye;12,5\n"
    "2; Rye ;n.d.\n"
    "3;Fallow;<0,5\n"
    "4;Fallow;30\n"
    "5;;4\n"
    "\n"
    "6;Rye;13\n"
    "7;Fallow;inf\n"
    "8;Fallow;29,1\n"
    "9;rye;11\n"
    "10;Fallow;NA\n"
    "11;Rye;abc\n"
)


def test_messy_semicolon_decimal_comma_with_bom(tmp_path):
    path = tmp_path / "messy.csv"
    path.write_bytes(b"\xef\xbb\xbf" + MESSY.encode())
    # Without merging, 'rye' is a group of its own with one value: warned, then refused.
    with pytest.warns(LabelSpellingWarning, match=r"'Rye' \(2 rows\), 'rye' \(1 row\)"):
        with pytest.raises(FamwiseInputError, match="group 'rye' .* only 1 usable value"):
            read(path, "nitrate", "mix", decimal=",", nondetects="drop")
    intake = read(path, "nitrate", "mix", decimal=",", merge_spellings=True,
                  order=["Fallow", "Rye"], nondetects="drop")
    lay, led = intake.layout, intake.ledger
    assert lay.labels == ("Fallow", "Rye")
    np.testing.assert_array_equal(lay.codes, [1, 0, 1, 0, 1])
    np.testing.assert_array_equal(lay.values, [12.5, 30.0, 13.0, 29.1, 11.0])
    np.testing.assert_array_equal(lay.rows, [2, 5, 8, 10, 11])
    assert led.read == 12 and led.used == 5 and len(led.dropped) == 7
    reasons = {d.row: d.reason for d in led.dropped}
    assert reasons == {3: "not-detected", 4: "below-limit", 6: "missing-group", 7: "blank-row",
                       9: "infinite", 12: "missing-response", 13: "text"}
    assert any("semicolon" in n for n in led.notes)


def test_merge_spellings_keeps_the_most_frequent(tmp_path):
    path = tmp_path / "messy.csv"
    path.write_text(MESSY)
    with warnings.catch_warnings():
        warnings.simplefilter("error")     # merging must not warn
        intake = read(path, "nitrate", "mix", decimal=",", merge_spellings=True,
                      nondetects="drop")
    assert intake.layout.labels == ("Rye", "Fallow")
    assert list(intake.layout.stats.n) == [3, 2]
    assert any("merged spellings" in n and "'Rye'" in n for n in intake.ledger.notes)


def test_inner_spacing_variants_are_reported(tmp_path):
    path = tmp_path / "s.csv"
    path.write_text("g,y\nOat radish,1\nOat radish,2\nOat  radish,3\nRye,4\nRye,5\n")
    with pytest.warns(LabelSpellingWarning, match="'Oat radish' .*'Oat  radish'"):
        with pytest.raises(FamwiseInputError, match="Oat  radish"):  # one value
            read(path, "y", "g")
    intake = read(path, "y", "g", merge_spellings=True)
    assert intake.layout.labels == ("Oat radish", "Rye")


@pytest.mark.parametrize("sep", [",", "\t", ";", "|"])
def test_delimiter_is_sniffed(tmp_path, sep):
    text = f"mix{sep}nitrate\nA{sep}1.5\nA{sep}2.5\nB{sep}3.5\nB{sep}4.25\n"
    path = tmp_path / "d.txt"
    path.write_text(text)
    lay = read(path, "nitrate", "mix").layout
    ref = pd.read_csv(io.StringIO(text), sep=sep)   # pandas as the reference reader
    np.testing.assert_array_equal(lay.values, ref["nitrate"].to_numpy())
    assert lay.labels == ("A", "B")


def test_tsv_suffix_and_quoted_fields(tmp_path):
    path = tmp_path / "q.tsv"
    path.write_text('mix\tnitrate\n"Rye, early"\t1\n"Rye, early"\t2\nOat\t3\nOat\t5\n')
    lay = read(path, "nitrate", "mix").layout
    assert lay.labels == ("Rye, early", "Oat")


def test_utf16_with_bom(tmp_path):
    path = tmp_path / "u.csv"
    path.write_bytes("mix,nitrate\nTrèfle,1\nTrèfle,2\nSeigle,3\nSeigle,4\n".encode("utf-16"))
    assert read(path, "nitrate", "mix").layout.labels == ("Trèfle", "Seigle")


def test_latin1_by_option(tmp_path):
    path = tmp_path / "l.csv"
    path.write_bytes("mix,nitrate\nTrèfle,1\nTrèfle,2\nSeigle,3\nSeigle,4\n".encode("latin-1"))
    assert read(path, "nitrate", "mix", encoding="latin-1").layout.labels[0] == "Trèfle"


def test_excel_sheet_by_name_and_row_numbers(tmp_path):
    openpyxl = pytest.importorskip("openpyxl")
    book = openpyxl.Workbook()
    first = book.active
    first.title = "notes"
    first.append(["nothing here"])
    sheet = book.create_sheet("2025")
    sheet.append([])                       # a blank first row: the header is on row 2
    sheet.append(["mix", "nitrate"])
    for row in [["Rye", 3.5], ["Rye", "n.d."], ["Rye", 4], ["Oat", 5], [None, 6], ["Oat", 7.25]]:
        sheet.append(row)
    path = tmp_path / "t.xlsx"
    book.save(path)
    intake = read(path, "nitrate", "mix", sheet="2025", nondetects="drop")
    np.testing.assert_array_equal(intake.layout.values, [3.5, 4.0, 5.0, 7.25])
    np.testing.assert_array_equal(intake.layout.rows, [3, 5, 6, 8])
    assert {d.row: d.reason for d in intake.ledger.dropped} == {4: "not-detected",
                                                                7: "missing-group"}
    assert "sheet: '2025'" in intake.ledger.notes


def test_excel_first_sheet_by_default(tmp_path):
    openpyxl = pytest.importorskip("openpyxl")
    book = openpyxl.Workbook()
    for row in [["g", "y"], [1, 2.0], [1, 3.0], [2, 4.0], [2, 6.0]]:
        book.active.append(row)
    path = tmp_path / "n.xlsx"
    book.save(path)
    assert read(path, "y", "g").layout.labels == ("1", "2")   # 1.0 read as label '1'


def test_parquet(tmp_path):
    pytest.importorskip("pyarrow")
    frame = pd.DataFrame({"mix": ["A", "A", "A", "B", "B", "B"],
                          "y": [1.0, np.nan, 1.5, 2.0, 3.0, np.inf]})
    path = tmp_path / "p.parquet"
    frame.to_parquet(path)
    intake = read(path, "y", "mix")
    np.testing.assert_array_equal(intake.layout.values, [1.0, 1.5, 2.0, 3.0])
    np.testing.assert_array_equal(intake.layout.rows, [1, 3, 4, 5])
    assert intake.ledger.counts() == {"missing-response": 1, "infinite": 1}


def test_dataframe_input_and_ordered_categorical():
    frame = pd.DataFrame({
        "mix": pd.Categorical(["Oat", "Rye", "Oat", "Rye", "Fallow", "Fallow"],
                              categories=["Fallow", "Rye", "Oat"], ordered=True),
        "y": [1.0, 2.0, 1.5, 2.5, 9.0, 9.5]})
    lay = read(frame, "y", "mix").layout
    assert lay.labels == ("Fallow", "Rye", "Oat")
    assert lay.source == "<DataFrame>"
    np.testing.assert_array_equal(lay.rows, np.arange(1, 7))


def test_wide_layout_accounts_for_every_cell(tmp_path):
    path = tmp_path / "w.csv"
    path.write_text("Rye,Fallow,Clover\n1.0,5.0,3.0\n1.5,,3.5\n2.0,6.0,n.d.\n,6.5,4.0\n")
    intake = read(path, wide=True, nondetects="drop")
    lay, led = intake.layout, intake.ledger
    assert lay.labels == ("Rye", "Fallow", "Clover")
    assert list(lay.stats.n) == [3, 3, 3]
    assert led.unit == "cell" and led.read == 12 and led.used == 9
    assert [(d.row, d.column, d.reason) for d in led.dropped] == [
        (3, "Fallow", "empty-cell"), (4, "Clover", "not-detected"), (5, "Rye", "empty-cell")]


def test_wide_layout_selected_columns(tmp_path):
    path = tmp_path / "w.csv"
    path.write_text("plot,Rye,Fallow\n1,1.0,5.0\n2,1.5,5.5\n")
    lay = read(path, wide=True, columns=["Fallow", "Rye"]).layout
    assert lay.labels == ("Fallow", "Rye")


def test_ledger_always_balances_and_renders(tmp_path):
    path = tmp_path / "m.csv"
    path.write_text(MESSY)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        intake = read(path, "nitrate", "mix", decimal=",", merge_spellings=True,
                      nondetects="drop")
    led = intake.ledger
    assert led.read == led.used + len(led.dropped)
    table = led.to_frame()
    assert list(table.columns) == ["row", "column", "group", "value", "reason", "explanation"]
    assert len(table) == len(led.dropped)
    text = "\n".join(led.lines())
    assert "12 rows read, 5 used, 7 set aside" in text
    assert "row 3" in text and "'n.d.'" in text


def test_decimal_comma_file_with_comma_in_text_is_not_split(tmp_path):
    path = tmp_path / "dc.csv"
    path.write_text("mix;nitrate\nA;1,5\nA;2,5\nB;3,5\nB;4,75\n")
    lay = read(path, "nitrate", "mix", decimal=",").layout
    np.testing.assert_array_equal(lay.values, [1.5, 2.5, 3.5, 4.75])

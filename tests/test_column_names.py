"""One rule for every column option: names match a header exactly.

The rule is the project's own (documented in famwise.intake.reader.find_column;
common practice, no source): a name that matches only when letter case or
surrounding space is ignored is refused with a did-you-mean, never used
silently.  Every option that names a column goes through find_column, so
each is checked here.
"""

import subprocess
import sys

import pandas as pd
import pytest

from famwise.core.errors import FamwiseInputError
from famwise.intake import find_column, read

TEXT = "plot,Mix,Nitrate\n1,Rye,10.5\n2,Rye,11.0\n3,Fallow,20.1\n4,Fallow,22.3\n"


@pytest.fixture
def path(tmp_path):
    p = tmp_path / "plots.csv"
    p.write_text(TEXT)
    return p


@pytest.mark.parametrize("kwargs, column, hint", [
    ({"response": "nitrate", "group": "Mix"}, "response column 'nitrate'", "'Nitrate'"),
    ({"response": "NITRATE", "group": "Mix"}, "response column 'NITRATE'", "'Nitrate'"),
    ({"response": "Nitrate ", "group": "Mix"}, "response column 'Nitrate '", "'Nitrate'"),
    ({"response": "Nitrate", "group": "mix"}, "group column 'mix'", "'Mix'"),
])
def test_wrong_case_is_refused_with_the_spelling_to_use(path, kwargs, column, hint):
    with pytest.raises(FamwiseInputError) as info:
        read(path, **kwargs)
    message = str(info.value)
    assert column in message and f"did you mean {hint}?" in message
    assert "must match exactly, letter case and spacing included" in message
    assert "\n" not in message


def test_exact_names_are_used(path):
    lay = read(path, "Nitrate", "Mix").layout
    assert (lay.response, lay.group) == ("Nitrate", "Mix")


def test_a_name_far_from_any_column_gets_no_case_sentence(path):
    with pytest.raises(FamwiseInputError) as info:
        read(path, "nitrat", "Mix")
    assert "did you mean 'Nitrate'?" in str(info.value)
    assert "letter case" not in str(info.value)


def test_columns_differing_only_by_case_are_told_apart():
    frame = pd.DataFrame({"g": ["A", "A", "B", "B"], "Nitrate": [1.0, 2.0, 3.0, 4.0],
                          "nitrate": [10.0, 20.0, 30.0, 45.0]})
    assert list(read(frame, "nitrate", "g").layout.values) == [10.0, 20.0, 30.0, 45.0]
    assert list(read(frame, "Nitrate", "g").layout.values) == [1.0, 2.0, 3.0, 4.0]


def test_wide_columns_follow_the_rule(tmp_path):
    p = tmp_path / "w.csv"
    p.write_text("Rye,Fallow\n1,5\n2,6\n")
    with pytest.raises(FamwiseInputError, match="no group column 'rye'.*did you mean 'Rye'"):
        read(p, wide=True, columns=["rye", "Fallow"])


def test_batch_responses_and_strata_follow_the_rule(path):
    from famwise import batch
    with pytest.raises(FamwiseInputError, match="no response column 'nitrate'.*'Nitrate'"):
        batch(path, ["nitrate"], "Mix", resamples=99, seed=1)
    with pytest.raises(FamwiseInputError, match=r"no stratum \(by\) column 'PLOT'.*'plot'"):
        batch(path, ["Nitrate"], "Mix", by="PLOT", resamples=99, seed=1)


def test_find_column_is_the_one_rule():
    header = ["Site", "Block", "Depth cm"]
    assert find_column(header, "Block", "f.csv", "block") == 1
    with pytest.raises(FamwiseInputError, match="no block column 'block'.*did you mean 'Block'"):
        find_column(header, "block", "f.csv", "block")
    with pytest.raises(FamwiseInputError, match="name the covariate column"):
        find_column(header, None, "f.csv", "covariate")


def test_cli_exits_2_with_the_hint(path):
    proc = subprocess.run([sys.executable, "-m", "famwise", "inspect", str(path),
                           "--response", "nitrate", "--group", "Mix"],
                          capture_output=True, text=True, timeout=120)
    assert proc.returncode == 2
    lines = [ln for ln in proc.stderr.splitlines() if ln.strip()]
    assert len(lines) == 1 and "did you mean 'Nitrate'?" in lines[0]

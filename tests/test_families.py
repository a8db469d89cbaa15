"""Families of comparisons and the contrast parser.

Counts of pairs are a fact of the trade: k(k-1)/2 (common practice, no
source; also CHECK-VALUES.md section 4).
"""

import numpy as np
import pytest
from hypothesis import given, strategies as st

from famwise.core.errors import FamwiseInputError
from famwise.core.families import all_pairs, build_family, contrasts, parse_contrast, vs_reference

LABELS = ["Bare fallow", "Cereal rye", "Rye + hairy vetch", "Oat / radish"]


@pytest.mark.parametrize("k, m", [(2, 1), (3, 3), (4, 6), (5, 10), (6, 15), (10, 45), (20, 190)])
def test_number_of_pairs(k, m):
    fam = all_pairs([f"g{i}" for i in range(k)])
    assert fam.m == m
    assert np.allclose(fam.weights.sum(axis=1), 0)


def test_pair_order_is_stable_and_documented():
    fam = all_pairs(["A", "B", "C"])
    assert fam.names == ("A - B", "A - C", "B - C")
    assert fam.pairs.tolist() == [[0, 1], [0, 2], [1, 2]]
    ref = vs_reference(["A", "B", "C"], "B")
    assert ref.names == ("A - B", "C - B") and ref.reference == 1
    assert ref.weights.tolist() == [[1, -1, 0], [0, -1, 1]]


@pytest.mark.parametrize("text, expected", [
    ("(`Bare fallow` + `Cereal rye`)/2 - `Oat / radish`",
     {"Bare fallow": 0.5, "Cereal rye": 0.5, "Oat / radish": -1.0}),
    ('"Rye + hairy vetch" - 0.5*`Cereal rye` - `Bare fallow`/2',
     {"Rye + hairy vetch": 1.0, "Cereal rye": -0.5, "Bare fallow": -0.5}),
    ("-(`Bare fallow` - 'Cereal rye')", {"Bare fallow": -1.0, "Cereal rye": 1.0}),
    ("2*(`Bare fallow` - `Cereal rye`)/4", {"Bare fallow": 0.5, "Cereal rye": -0.5}),
    ("1e0*`Bare fallow` - `Cereal rye`", {"Bare fallow": 1.0, "Cereal rye": -1.0}),
])
def test_contrast_text(text, expected):
    assert parse_contrast(text, LABELS) == pytest.approx(expected)


def test_bare_labels_and_named_contrasts():
    fam = contrasts(["A", "B", "C1", "d.2"], "first: (A + B)/2 - C1; d.2 - A")
    assert fam.names == ("first", "d.2 - A")
    np.testing.assert_allclose(fam.weights, [[0.5, 0.5, -1, 0], [-1, 0, 0, 1]])
    assert fam.pairs is None


def test_pairwise_contrasts_keep_their_pairs():
    fam = contrasts(["A", "B", "C"], ["A - B", "C - A"])
    assert fam.pairs.tolist() == [[0, 1], [2, 0]]


def test_mapping_forms():
    fam = contrasts(LABELS, {"rye vs fallow": {"Cereal rye": 1, "Bare fallow": -1}})
    assert fam.names == ("rye vs fallow",)
    fam = contrasts(LABELS, {"Cereal rye": 1, "Bare fallow": -1})
    assert fam.m == 1


def test_duplicate_contrast_names_are_refused():
    with pytest.raises(FamwiseInputError, match="used twice"):
        contrasts(["A", "B"], ["x: A - B", "x: B - A"])


@given(st.lists(st.integers(-5, 5), min_size=3, max_size=3))
def test_parser_round_trips_integer_weights(ws):
    labels = ["A", "B", "C"]
    ws = [ws[0], ws[1], -(ws[0] + ws[1])]
    if not any(ws):
        return
    text = " + ".join(f"({w})*{lab}" for w, lab in zip(ws, labels))
    fam = build_family(labels, "contrasts", contrasts_spec=[text])
    np.testing.assert_allclose(fam.weights[0], ws)

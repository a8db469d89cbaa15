"""Practical-margin classification on hand-made intervals.

The reading of an interval against an equivalence margin d is common
practice (no source): beyond the margin -> important; excludes zero but
reaches inside the margin -> real, may be below the margin; inside (-d, d)
-> equivalent; contains zero and reaches beyond -> inconclusive.
"""

import numpy as np
import pytest

from famwise.core.errors import FamwiseInputError
from famwise.procedures.margin import PRACTICAL, check_margin, classify


@pytest.mark.parametrize("lo, hi, expected", [
    (2.5, 6.0, "important"),
    (-9.0, -2.0, "important"),
    (2.0, 6.0, "important"),                    # touching the margin counts as reaching it
    (0.5, 6.0, "real, may be below margin"),
    (-6.0, -0.1, "real, may be below margin"),
    (-1.5, 1.9, "equivalent within margin"),
    (0.2, 1.5, "equivalent within margin"),     # real but smaller than matters
    (-0.5, 3.0, "inconclusive"),
    (-3.0, 3.0, "inconclusive"),
    (-np.inf, 1.0, "inconclusive"),             # one-sided interval reaching -inf
    (-np.inf, -2.5, "important"),
    (0.3, np.inf, "real, may be below margin"),
])
def test_classify(lo, hi, expected):
    assert classify([lo], [hi], 2.0) == [expected]


def test_classes_are_the_documented_four():
    assert set(classify([-3, 0.5, -1, -1], [-2.5, 3, 1, 3], 2.0)) == set(PRACTICAL)


@pytest.mark.parametrize("bad", [0, -1, "x", float("nan"), float("inf")])
def test_margin_must_be_positive(bad):
    with pytest.raises(FamwiseInputError, match="margin must be a positive number"):
        check_margin(bad)

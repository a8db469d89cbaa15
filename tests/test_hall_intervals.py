"""bootstrap-hall's intervals stay sensible on data with gross values.

The invented cover-crop trial as recorded, before the records check (its two
gross values in place, the three "n.d." cells set aside as the first
version of famwise did), printed intervals 30-60 times wider than the
differences (9.69 mg/kg with [-493, 135]).  Hall's (1992) cubic is monotone,
but its slope falls to zero at t = -3/a and grows like t^2 beyond, so the
bootstrap max statistic exploded and its inverse with it.  famwise keeps the
cubic where its slope is at least 1/2 and continues it linearly
(resample/statistics.py), and withholds an interval whose half-width exceeds
WITHHOLD_FACTOR = 2 times the widest difference the data can show.  The
factor: every difference of two observed values lies within one range of
the data; a half-width of twice that claims the means may differ by more
than any two observations do, twice over, which only the correction term can
produce (our rule, no source).  The trial is invented, so it is a regression
case for the rule, not a reference value.
"""

import warnings

import numpy as np
import pytest

import famwise
from famwise.resample.procedures import WITHHOLD_FACTOR
from famwise.resample.statistics import hall_cubic, hall_inverse, hall_transform, HALL_Q
from famwise.scenarios.covercrop import DEMO_GROUP, DEMO_RESPONSE, DEMO_SEED, covercrop_trial


@pytest.fixture(scope="module")
def before_review():
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        return famwise.compare(covercrop_trial(), DEMO_RESPONSE, DEMO_GROUP,
                               merge_spellings=True, nondetects="drop", seed=DEMO_SEED,
                               procedure="bootstrap-hall", crosscheck=False)


def test_no_interval_of_the_trial_before_review_is_absurd(before_review):
    t = before_review.comparisons
    values = before_review.layout.values
    span = values.max() - values.min()
    lo, hi, est = t["ci_lower"], t["ci_upper"], t["difference"]
    shown = lo.notna()
    assert np.all((est - lo)[shown] <= WITHHOLD_FACTOR * span)
    assert np.all((hi - est)[shown] <= WITHHOLD_FACTOR * span)
    assert np.all((lo <= est)[shown]) and np.all((est <= hi)[shown])
    withheld = t.attrs.get("intervals_withheld")
    if (~shown).any():
        assert withheld and len(withheld["comparisons"]) == int((~shown).sum())
        assert "decision (p_adjusted) stands" in withheld["reason"]
        assert "Intervals withheld" in before_review.summary()


def test_the_route_does_not_use_means_there():
    """The same data under the automatic route: with the non-detects kept
    (limit 1.0 mg/kg) the censored rank procedure; with them set aside, the
    gross values send the data to trimmed means or ranks, naming the rows."""
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        kept = famwise.compare(covercrop_trial(), DEMO_RESPONSE, DEMO_GROUP,
                               merge_spellings=True, detection_limit=1.0, seed=DEMO_SEED,
                               resamples=999)
        drop = famwise.compare(covercrop_trial(), DEMO_RESPONSE, DEMO_GROUP,
                               merge_spellings=True, nondetects="drop", seed=DEMO_SEED,
                               resamples=999)
    assert kept.decision.route["route"] == "censored"
    assert drop.decision.route["route"] == "robust"
    assert drop.decision.route["procedure"] in ("yuen-holm", "gehan-maxt", "steel-dwass")
    # DataFrame rows count records (the CSV counts its header): row 37 there, the
    # value typed without its decimal point.
    assert "row 36" in " ".join(drop.decision.route["reasons"])


def test_bounded_map_is_halls_cubic_in_the_middle_and_monotone_everywhere():
    """Identities (no source): inside |t| <= 3q/|a| the map is Hall's cubic;
    its slope is at least 1/2 and at most (1 + q)^2 everywhere; the inverse
    undoes it."""
    for a in (-1.0, -0.3, 0.05, 0.4, 1.0):
        tau = 3 * HALL_Q / abs(a)
        inner = np.linspace(-tau, tau, 501)
        np.testing.assert_allclose(hall_transform(inner, a), hall_cubic(inner, a), rtol=1e-12,
                                   atol=1e-12)
        t = np.linspace(-80, 80, 16001)
        y = hall_transform(t, a)
        slope = np.diff(y) / np.diff(t)
        assert slope.min() >= 0.5 - 1e-9 and slope.max() <= (1 + HALL_Q) ** 2 + 1e-9
        np.testing.assert_allclose(hall_inverse(y, a), t, atol=1e-8)

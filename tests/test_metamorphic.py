"""Metamorphic tests: results that must not change when the data change in known ways.

For every procedure of the catalogue (resampling ones with B = 199 and a
fixed seed) and for the automatic pipeline:

* adding 1e12 to every value changes nothing (values on a grid of 1/64 with
  magnitude below 2**12, so the shifted values are exact: the spacing of
  doubles near 1e12 is 2**-13, as in ``tests/test_summary.py``);
* rescaling the unit by 1e-6 or 1e6 scales differences, standard errors and
  intervals by the same factor and leaves statistics, df and p-values alone;
* shuffling the rows leaves every closed-form result unchanged;
* relabelling (reversing the group order) turns pair (a, b) into (b, a): the
  difference and the interval change sign (the bounds swap), standard error,
  |statistic|, df and p-values stay.

These are facts of the trade (location-scale equivariance of the one-way
model's estimates and the invariance of its tests; the order of observations
and the names of groups carry no information); common practice, no source.
DESIGN.md ("Numerics and safety") makes the first two a requirement.
Tolerances: 1e-9 relative for estimates and 1e-9 absolute for p-values, far
above double rounding and far below anything a reader would see.
"""

from __future__ import annotations

import warnings

import numpy as np
import pandas as pd
import pytest

import famwise
from famwise.core.errors import FamwiseInputError
from famwise.core.families import all_pairs, vs_reference
from famwise.intake import read
from famwise.core.layout import Layout
from famwise.procedures import CATALOGUE, run_procedure

B = 199
SEED = 77
RTOL = 1e-9
PTOL = 1e-9

SCALED = ["difference", "std_error", "ci_lower", "ci_upper"]
INVARIANT = ["statistic", "df", "p_unadjusted", "p_adjusted"]


def _grid(x):
    return np.round(np.asarray(x) * 64.0) / 64.0


def design(name):
    """Two workloads: balanced and equal spread; unbalanced with unequal spread."""
    rng = np.random.default_rng({"balanced": 11, "unbalanced": 12}[name])
    if name == "balanced":
        spec = [(8, 0.0, 1.0), (8, 0.3, 1.0), (8, 1.5, 1.0), (8, 1.7, 1.0)]
    else:
        spec = [(4, 0.0, 6.0), (7, 1.0, 3.0), (12, 2.5, 1.5), (20, 3.0, 1.0), (9, 0.2, 0.5)]
    groups = [_grid(mu + sd * rng.standard_normal(n)) + 100.0 for n, mu, sd in spec]
    return [f"g{i}" for i in range(len(groups))], groups


def _family(labels, kind):
    if kind == "vs-reference":
        return vs_reference(labels, labels[0])
    return all_pairs(labels)


def _kind(name):
    return "vs-reference" if CATALOGUE[name].families == ("vs-reference",) else "all-pairs"


def _run(name, layout, kind=None):
    kind = kind or _kind(name)
    options = dict(resamples=B, seed=SEED) if CATALOGUE[name].route in ("resample",
                                                                        "ranks") else {}
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        return run_procedure(name, layout, _family(layout.labels, kind), **options)


def _same(base, other, scale=1.0, name=""):
    for col in SCALED:
        np.testing.assert_allclose(other[col].to_numpy(), scale * base[col].to_numpy(),
                                   rtol=RTOL, atol=0, err_msg=f"{name}: {col}")
    np.testing.assert_allclose(other["statistic"], base["statistic"], rtol=RTOL,
                               err_msg=f"{name}: statistic")
    np.testing.assert_allclose(other["df"], base["df"], rtol=RTOL, err_msg=f"{name}: df")
    for col in ("p_unadjusted", "p_adjusted"):
        np.testing.assert_allclose(other[col], base[col], rtol=0, atol=PTOL,
                                   err_msg=f"{name}: {col}")
    assert list(other["reject"]) == list(base["reject"]), name
    assert list(other["comparison"]) == list(base["comparison"]), name


PROCEDURES = list(CATALOGUE)
DESIGNS = ["balanced", "unbalanced"]
#: brunner-munzel-maxt is a rank procedure that always resamples
RESAMPLING = [p for p in PROCEDURES
              if CATALOGUE[p].route == "resample" or p == "brunner-munzel-maxt"]
CLOSED_FORM = [p for p in PROCEDURES if p not in RESAMPLING]
#: Quasi-Monte Carlo integration (deterministic, but relabelling reorders its variables).
QMC = [p for p in PROCEDURES if p == "multivariate-t"]


@pytest.fixture(scope="module")
def baselines():
    out = {}
    for d in DESIGNS:
        labels, groups = design(d)
        layout = Layout.from_groups(groups, labels)
        out[d] = (labels, groups, {p: _run(p, layout) for p in PROCEDURES})
    return out


@pytest.mark.parametrize("d", DESIGNS)
def test_shift_by_1e12_changes_nothing(baselines, d):
    labels, groups, base = baselines[d]
    shifted = [g + 1e12 for g in groups]
    # the shift is exact on this grid (the premise of the test)
    assert all(np.array_equal(s - 1e12, g) for s, g in zip(shifted, groups))
    layout = Layout.from_groups(shifted, labels)
    for p in PROCEDURES:
        _same(base[p], _run(p, layout), name=f"{p} +1e12")


@pytest.mark.parametrize("factor", [1e-6, 1e6])
@pytest.mark.parametrize("d", DESIGNS)
def test_change_of_unit_scales_estimates_only(baselines, d, factor):
    labels, groups, base = baselines[d]
    layout = Layout.from_groups([g * factor for g in groups], labels)
    for p in PROCEDURES:
        _same(base[p], _run(p, layout), scale=factor, name=f"{p} x{factor:g}")


def _frame(labels, groups):
    return pd.DataFrame({"site": np.repeat(labels, [len(g) for g in groups]),
                         "y": np.concatenate(groups)})



@pytest.mark.parametrize("d", DESIGNS)
def test_row_shuffle_changes_nothing(baselines, d):
    labels, groups, base = baselines[d]
    frame = _frame(labels, groups)
    rng = np.random.default_rng(5)
    shuffled = frame.iloc[rng.permutation(len(frame))].reset_index(drop=True)
    layout = read(shuffled, "y", "site", order=labels).layout
    assert not np.array_equal(layout.codes, np.sort(layout.codes))   # really shuffled
    for p in CLOSED_FORM:
        _same(base[p], _run(p, layout), name=f"{p} shuffled")


@pytest.mark.parametrize("d", DESIGNS)
def test_row_shuffle_moves_resampling_within_monte_carlo_error(baselines, d):
    """The resampling procedures draw their resamples in the data's row order,
    so a shuffle gives another, equally valid, set of B resamples: the
    estimates are unchanged and the p-values move within Monte Carlo error
    (4 SE of the difference of two independent estimates, plus one step
    1/(B + 1) of the p-value grid)."""
    labels, groups, base = baselines[d]
    frame = _frame(labels, groups)
    shuffled = frame.iloc[np.random.default_rng(6).permutation(len(frame))]
    layout = read(shuffled.reset_index(drop=True), "y", "site", order=labels).layout
    for p in RESAMPLING:
        got, ref = _run(p, layout), base[p]
        for col in ("difference", "std_error", "statistic"):
            np.testing.assert_allclose(got[col], ref[col], rtol=RTOL, err_msg=f"{p} {col}")
        pa, pb = got["p_adjusted"].to_numpy(), ref["p_adjusted"].to_numpy()
        se = np.sqrt(np.maximum(pb * (1 - pb), 1.0 / B) / B)
        assert np.all(np.abs(pa - pb) <= 4 * np.sqrt(2) * se + 1.0 / (B + 1)), (p, pa, pb)


def _relabelled(base, got, kind):
    """Match rows by their pair of groups and compare with the sign flipped."""
    ref = base.set_index(["group_a", "group_b"])
    for _, row in got.iterrows():
        if kind == "all-pairs":
            r = ref.loc[(row["group_b"], row["group_a"])]
            sign = -1.0
            lower, upper = -r["ci_upper"], -r["ci_lower"]
        else:
            r = ref.loc[(row["group_a"], row["group_b"])]
            sign, lower, upper = 1.0, r["ci_lower"], r["ci_upper"]
        name = f"{row['procedure']} {row['comparison']}"
        np.testing.assert_allclose(row["difference"], sign * r["difference"], rtol=RTOL,
                                   err_msg=name)
        np.testing.assert_allclose([row["ci_lower"], row["ci_upper"]], [lower, upper],
                                   rtol=RTOL, err_msg=name)
        np.testing.assert_allclose(row["std_error"], r["std_error"], rtol=RTOL, err_msg=name)
        np.testing.assert_allclose(abs(row["statistic"]), abs(r["statistic"]), rtol=RTOL,
                                   err_msg=name)
        np.testing.assert_allclose(row["df"], r["df"], rtol=RTOL, err_msg=name)
        for col in ("p_unadjusted", "p_adjusted"):
            np.testing.assert_allclose(row[col], r[col], atol=PTOL, rtol=0, err_msg=name)
        assert row["reject"] == r["reject"], name


@pytest.mark.parametrize("d", DESIGNS)
def test_relabelling_swaps_pairs(baselines, d):
    labels, groups, base = baselines[d]
    frame = _frame(labels, groups)
    # reverse the group order but keep the reference (g0) as the reference
    order = labels[::-1]
    layout = read(frame, "y", "site", order=order).layout
    assert layout.labels == tuple(order)
    for p in CLOSED_FORM:
        if p in QMC:
            continue                   # another valid integration rule: see below
        kind = _kind(p)
        if kind == "vs-reference":     # the reference stays g0, now the last group
            got = run_procedure(p, layout, vs_reference(layout.labels, labels[0]))
        else:
            got = _run(p, layout, kind)
        _relabelled(base[p], got, kind)


@pytest.mark.parametrize("d", DESIGNS)
def test_relabelling_moves_multivariate_t_within_its_bound(baselines, d):
    """multivariate-t integrates with its variables in the groups' order, so
    relabelling gives another valid quasi-Monte Carlo rule: estimates, standard
    errors and statistics are exact; p-values move within the two stated bounds
    (4 standard errors each, ``mc_error``) and the critical value within its two."""
    labels, groups, base = baselines[d]
    layout = read(_frame(labels, groups), "y", "site", order=labels[::-1]).layout
    for p in QMC:
        got = _run(p, layout).set_index(["group_b", "group_a"])
        ref = base[p].set_index(["group_a", "group_b"]).loc[got.index]
        np.testing.assert_allclose(got["difference"], -ref["difference"], rtol=RTOL)
        np.testing.assert_allclose(got["std_error"], ref["std_error"], rtol=RTOL)
        bound = 4.0 * (got["mc_error"].to_numpy() + ref["mc_error"].to_numpy())
        assert np.all(np.abs(got["p_adjusted"].to_numpy() - ref["p_adjusted"].to_numpy())
                      <= bound + 1e-12), p
        a, b = got.attrs, base[p].attrs
        assert abs(a["critical_value"] - b["critical_value"]) <= (
            a["critical_value_error"] + b["critical_value_error"]), p


def test_relabelled_vs_reference_keeps_the_reference(baselines):
    labels, groups, base = baselines["unbalanced"]
    layout = read(_frame(labels, groups), "y", "site", order=labels[::-1]).layout
    for p in ("dunnett", "welch-dunnett", "bonferroni", "holm", "welch-holm"):
        got = run_procedure(p, layout, vs_reference(layout.labels, labels[0]))
        ref = run_procedure(p, Layout.from_groups(groups, labels),
                            vs_reference(labels, labels[0]))
        _relabelled(ref, got, "vs-reference")


# --- the automatic pipeline ---------------------------------------------------------

def _compare(layout):
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        return famwise.compare(layout, crosscheck=False, resamples=B, seed=SEED)


@pytest.mark.parametrize("d", DESIGNS)
def test_pipeline_is_unchanged_by_shift_scale_and_shuffle(baselines, d):
    """The checks, the route and the table do not depend on the origin, the
    unit or the row order (the checks use residuals and ratios only)."""
    labels, groups, _ = baselines[d]
    base = _compare(Layout.from_groups(groups, labels))
    procedure = base.decision.route["procedure"]
    for factor, shift in ((1.0, 1e12), (1e-6, 0.0), (1e6, 0.0)):
        got = _compare(Layout.from_groups([g * factor + shift for g in groups], labels))
        assert got.decision.route["procedure"] == procedure, (factor, shift)
        _same(base.comparisons, got.comparisons, scale=factor, name=f"auto x{factor} +{shift}")
        for a, b in zip(base.findings.to_records(), got.findings.to_records()):
            assert a["verdict"] == b["verdict"], (factor, shift, a, b)
    frame = _frame(labels, groups)
    shuffled = frame.iloc[np.random.default_rng(8).permutation(len(frame))]
    got = _compare(read(shuffled.reset_index(drop=True), "y", "site", order=labels).layout)
    assert got.decision.route["procedure"] == procedure
    if CATALOGUE[procedure].route != "resample":
        _same(base.comparisons, got.comparisons, name="auto shuffled")


def test_inputs_are_exact_on_the_grid():
    """Premise of the shift test: 1e12 + x is exact for x on the 1/64 grid."""
    x = _grid(np.linspace(-3000, 3000, 1001))
    assert np.array_equal((x + 1e12) - 1e12, x)
    with pytest.raises(FamwiseInputError):
        Layout.from_groups([[1.0]], ["a", "b"])


@pytest.mark.parametrize("d", DESIGNS)
def test_relabelling_resampling_within_monte_carlo_error(baselines, d):
    """Resampling procedures after relabelling: estimates swap sign exactly;
    p-values are another valid Monte Carlo estimate (same bound as for a
    row shuffle)."""
    labels, groups, base = baselines[d]
    layout = read(_frame(labels, groups), "y", "site", order=labels[::-1]).layout
    for p in RESAMPLING:
        got = _run(p, layout).set_index(["group_b", "group_a"])
        ref = base[p].set_index(["group_a", "group_b"]).loc[got.index]
        np.testing.assert_allclose(got["difference"], -ref["difference"], rtol=RTOL)
        np.testing.assert_allclose(got["std_error"], ref["std_error"], rtol=RTOL)
        pa, pb = got["p_adjusted"].to_numpy(), ref["p_adjusted"].to_numpy()
        se = np.sqrt(np.maximum(pb * (1 - pb), 1.0 / B) / B)
        assert np.all(np.abs(pa - pb) <= 4 * np.sqrt(2) * se + 1.0 / (B + 1)), (p, pa, pb)

"""Property-based tests: every procedure on random designs keeps its invariants.

Designs (hypothesis): k = 2..30 groups of n = 2..200 values, group SDs spread
over six orders of magnitude (10^-3 .. 10^3), continuous values, heavy ties
(values rounded to a coarse grid) or discrete counts.  Every procedure of
``famwise.procedures.CATALOGUE`` (resampling ones with B = 199 and a fixed
seed) and ``famwise.compare(..., crosscheck=False)`` must

* raise nothing but ``FamwiseInputError`` (a constant group, for example,
  leaves Welch's standard error undefined: that is an input error);
* give 0 <= p_unadjusted <= p_adjusted <= 1;
* give step-down adjusted p-values no larger than their single-step
  counterparts (Holm <= Bonferroni, permutation and bootstrap step-down <=
  max-T on the same resamples; Benjamini-Hochberg <= Holm);
* give intervals that contain their estimate;
* where the procedure's decisions are dual to its intervals (single-step
  procedures with simultaneous intervals), reject exactly when the interval
  excludes zero; for Holm-type and step-down procedures, whose intervals are
  the single-step (Bonferroni or max-T) ones by their docstrings, an interval
  that excludes zero implies rejection; for Benjamini-Hochberg, whose
  false-coverage-rate intervals are built so, rejection implies exclusion.

These are facts of the trade (the definitions of the procedures; Holm 1979,
Westfall & Young 1993, Benjamini & Yekutieli 2005) and the project's own
contract (famwise.core.table, each procedure's docstring); common practice, no
source.  Rows at the decision boundary (|p - alpha| or the interval end within
a relative 1e-7) are left out of the duality checks.

Hypothesis runs derandomized with no example database, so CI sees the same
examples every run.
"""

from __future__ import annotations

import os
import warnings

import numpy as np
from hypothesis import HealthCheck, Phase, given, settings
from hypothesis import strategies as st

import famwise
from famwise.core.errors import FamwiseInputError
from famwise.core.families import all_pairs, vs_reference
from famwise.core.layout import Layout
from famwise.procedures import CATALOGUE, run_procedure

ALPHA = 0.05
B = 199
SEED = 20240611

#: Single-step procedures whose simultaneous intervals are dual to their
#: decisions (each docstring: interval est -/+ c se with c the critical value
#: of the adjusted p-value's reference distribution; for bootstrap-hall the
#: inverse of its transformation at c).  lsd only when its F
#: gate is open; welch is unadjusted but its intervals are the matching
#: one-at-a-time ones.
DUAL = {"tukey-kramer", "scheffe", "dunnett", "multivariate-t", "bonferroni", "sidak",
        "games-howell",
        "dunnett-t3", "welch-dunnett", "permutation-maxt", "bootstrap-maxt",
        "bootstrap-hall", "welch", "lsd", "wild-bootstrap-maxt"}
#: multivariate-t integrates a (k-2)-dimensional quasi-Monte Carlo rule (seconds
#: for all pairs of 20 groups, tests/bench/bench_multivariate_t.py): the random
#: designs run it up to this many groups.
MVT_MAX_K = 10
#: Intervals are single-step ones: excluding zero implies rejection.
EXCLUDE_IMPLIES_REJECT = {"holm", "welch-holm", "yuen-holm", "permutation-stepdown",
                          "bootstrap-stepdown", "wild-bootstrap-stepdown",
                          # rank procedures: the Wilcoxon inversion rounds C down and
                          # uses the untied variance (their docstrings)
                          "steel-dwass", "steel"}
#: Brunner-Munzel: the relative-effect interval is dual to the decisions (its
#: docstring); the shift interval assumes a pure shift and promises nothing.
DUAL_RELATIVE_EFFECT = {"brunner-munzel-maxt"}
#: Benjamini-Yekutieli FCR intervals: rejection implies exclusion.
REJECT_IMPLIES_EXCLUDE = {"bh"}
#: Rank tests of censored values: no intervals (NaN), by their docstrings.
NO_INTERVALS = {"gehan-maxt", "peto-maxt"}

# No shrinking: a failure prints its (already small) example at once instead of
# spending minutes rerunning procedures on ever smaller variants.
PROFILE = dict(derandomize=True, database=None, deadline=None,
               phases=(Phase.explicit, Phase.generate),
               suppress_health_check=[HealthCheck.too_slow, HealthCheck.data_too_large])


#: ``FAMWISE_PROPERTY_EXAMPLES=500 pytest tests/test_properties.py`` runs a
#: longer search locally; CI uses the small defaults below.
_MORE = int(os.environ.get("FAMWISE_PROPERTY_EXAMPLES", "0"))


def _examples(default):
    return max(default, _MORE)


@st.composite
def designs(draw, max_k=30, max_n=200, max_total=2400):
    """A random one-way design: (groups of values, the kind of values)."""
    k = draw(st.integers(2, max_k))
    cap = max(2, min(max_n, max_total // k))
    sizes = draw(st.lists(st.integers(2, cap), min_size=k, max_size=k))
    log_sd = draw(st.lists(st.floats(-3.0, 3.0), min_size=k, max_size=k))
    kind = draw(st.sampled_from(["continuous", "ties", "discrete"]))
    effect = draw(st.sampled_from([0.0, 0.5, 3.0]))
    location = draw(st.sampled_from([0.0, -250.0, 1e4]))
    seed = draw(st.integers(0, 2 ** 32 - 1))
    rng = np.random.default_rng(seed)
    groups = []
    for i, (n, ls) in enumerate(zip(sizes, log_sd)):
        sd = 10.0 ** ls
        if kind == "discrete":
            # counts with a small mean: many ties, possibly constant groups
            x = rng.poisson(1.0 + effect * (i % 3), n).astype(float)
        else:
            x = location + effect * sd * (i % 3) + sd * rng.standard_normal(n)
            if kind == "ties":
                step = 10.0 ** np.floor(ls)       # about one SD: a handful of values
                x = np.round(x / step) * step
        groups.append(x)
    return groups, kind


def _family_for(name, layout, kind):
    info = CATALOGUE[name]
    if kind == "vs-reference" or info.families == ("vs-reference",):
        return vs_reference(layout.labels, layout.labels[0])
    return all_pairs(layout.labels)


def _options(name):
    return dict(resamples=B, seed=SEED) if CATALOGUE[name].route in ("resample",
                                                                     "ranks") else {}


def _run_all(layout, family_kind):
    """Run every catalogued procedure; return {name: table} for those that ran."""
    tables = {}
    for name in CATALOGUE:
        family = _family_for(name, layout, family_kind)
        if family.kind not in CATALOGUE[name].families:
            continue
        if name == "multivariate-t" and layout.k > MVT_MAX_K:
            continue
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            try:
                tables[name] = run_procedure(name, layout, family, alpha=ALPHA,
                                             **_options(name))
            except FamwiseInputError as exc:
                message = str(exc)
                assert message and "\n" not in message
    return tables


def _near(table, col):
    """Rows at the decision boundary, excluded from the duality checks."""
    p = table["p_adjusted"].to_numpy()
    lo, hi = table["ci_lower"].to_numpy(), table["ci_upper"].to_numpy()
    scale = np.abs(table["difference"].to_numpy()) + table["std_error"].to_numpy()
    with np.errstate(invalid="ignore"):
        end = np.minimum(np.abs(lo), np.abs(hi))
        return (np.abs(p - ALPHA) <= 1e-7) | (end <= 1e-7 * scale)


def check_table(name, table):
    """The invariants every comparisons table must keep."""
    assert len(table) >= 1
    pu, pa = table["p_unadjusted"].to_numpy(), table["p_adjusted"].to_numpy()
    assert np.all(np.isfinite(pu)) and np.all(np.isfinite(pa)), name
    assert np.all(pu >= 0.0) and np.all(pa <= 1.0), name
    assert np.all(pu <= pa + 1e-9 * np.maximum(pa, 1e-300) + 1e-12), (name, pu, pa)
    est = table["difference"].to_numpy()
    lo, hi = table["ci_lower"].to_numpy(), table["ci_upper"].to_numpy()
    assert np.all(np.isfinite(est)), name
    # Rank tests give no intervals; bootstrap-hall withholds the ones its
    # attrs list (resample/procedures.py, WITHHOLD_FACTOR): NaN there only.
    none = np.full(len(table), name in NO_INTERVALS)
    withheld = table.attrs.get("intervals_withheld")
    if withheld:
        none |= table["comparison"].isin(withheld["comparisons"]).to_numpy()
    assert np.all(np.isnan(lo[none])) and np.all(np.isnan(hi[none])), name
    lo, hi = np.where(none, est, lo), np.where(none, est, hi)
    assert not np.any(np.isnan(lo)) and not np.any(np.isnan(hi)), name
    assert np.all(lo <= est) and np.all(est <= hi), (name, lo, est, hi)
    assert np.array_equal(table["reject"].to_numpy(), pa <= table.attrs["alpha"]), name
    excludes = (lo > 0.0) | (hi < 0.0)
    reject = table["reject"].to_numpy()
    keep = ~_near(table, "p_adjusted") & ~none
    dual = name in DUAL and (name != "lsd" or table.attrs["gate"]["open"])
    if dual:
        bad = keep & (reject != excludes)
        assert not bad.any(), (name, table.loc[bad, ["comparison", "p_adjusted", "ci_lower",
                                                     "ci_upper"]].to_string())
    if name in EXCLUDE_IMPLIES_REJECT:
        assert not (keep & excludes & ~reject).any(), name
    if name in REJECT_IMPLIES_EXCLUDE:
        assert not (keep & reject & ~excludes).any(), name
    if name in DUAL_RELATIVE_EFFECT:
        rel = table["relative_effect"].to_numpy()
        rlo = table["relative_effect_lower"].to_numpy()
        rhi = table["relative_effect_upper"].to_numpy()
        assert np.all((0 <= rlo) & (rlo <= rel) & (rel <= rhi) & (rhi <= 1)), name
        r_excl = (rlo > 0.5) | (rhi < 0.5)
        near = (np.abs(table["p_adjusted"].to_numpy() - ALPHA) <= 1e-7) | (
            np.minimum(np.abs(rlo - 0.5), np.abs(rhi - 0.5)) <= 1e-9)
        assert not (~near & (reject != r_excl)).any(), name


def check_orderings(tables):
    """Step-down <= single-step; Holm-type and FDR orderings across procedures."""
    def p(name):
        return tables[name]["p_adjusted"].to_numpy()

    tol = 1e-12
    pairs = [("holm", "bonferroni"), ("sidak", "bonferroni"), ("bh", "holm"),
             ("permutation-stepdown", "permutation-maxt"),
             ("bootstrap-stepdown", "bootstrap-maxt")]
    for low, high in pairs:
        if low in tables and high in tables:
            assert np.all(p(low) <= p(high) * (1 + 1e-12) + tol), (low, high)
    if "welch-holm" in tables and "welch" in tables:
        m = len(tables["welch"])
        bonf = np.minimum(1.0, m * tables["welch"]["p_unadjusted"].to_numpy())
        assert np.all(p("welch-holm") <= bonf * (1 + 1e-12) + tol)
    # The pooled procedures share one set of estimates and standard errors.
    pooled = [n for n in ("lsd", "bonferroni", "sidak", "holm", "scheffe", "bh",
                          "tukey-kramer", "dunnett")
              if n in tables and tables[n].attrs["family"] == tables["bonferroni"].attrs["family"]]
    for n in pooled[1:]:
        np.testing.assert_allclose(tables[n]["difference"], tables[pooled[0]]["difference"],
                                   rtol=1e-12, atol=0)


@settings(max_examples=_examples(14), **PROFILE)
@given(design=designs(), family_kind=st.sampled_from(["all-pairs", "vs-reference"]))
def test_every_procedure_keeps_its_invariants(design, family_kind):
    groups, kind = design
    layout = Layout.from_groups(groups)
    tables = _run_all(layout, family_kind)
    if kind != "discrete" or layout.stats.mse > 0:
        # Pooled procedures need only some spread somewhere: they always run.
        assert {"bonferroni", "holm", "scheffe", "bh"} <= set(tables), sorted(tables)
    if np.all(layout.stats.var > 0):
        # Without a constant group the Welch-based procedures run too.
        assert "welch" in tables and "bootstrap-maxt" in tables, sorted(tables)
    for name, table in tables.items():
        check_table(name, table)
    check_orderings(tables)


@settings(max_examples=_examples(10), **PROFILE)
@given(design=designs(max_k=12, max_total=600))
def test_small_designs_keep_invariants(design):
    """Small groups (most often 2 to 5 values) are where ties and constant
    groups bite; the same invariants hold."""
    groups, kind = design
    groups = [g[:5] for g in groups]
    layout = Layout.from_groups(groups)
    tables = _run_all(layout, "all-pairs")
    for name, table in tables.items():
        check_table(name, table)
    check_orderings(tables)


@settings(max_examples=_examples(12), **PROFILE)
@given(design=designs(max_total=1500),
       family=st.sampled_from(["all-pairs", "vs-reference"]))
def test_compare_raises_only_input_errors(design, family):
    """The automatic pipeline (checks, routing, procedure) on the same designs."""
    groups, kind = design
    layout = Layout.from_groups(groups)
    reference = layout.labels[0] if family == "vs-reference" else None
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        try:
            result = famwise.compare(layout, family=family, reference=reference,
                                     crosscheck=False, resamples=B, seed=SEED)
        except FamwiseInputError as exc:
            assert str(exc) and "\n" not in str(exc)
            return
    table = result.comparisons
    name = result.decision.route["procedure"]
    check_table(name, table)
    assert len(table) == (layout.k * (layout.k - 1) // 2 if family == "all-pairs"
                          else layout.k - 1)
    # The groups table accounts for every value.
    assert int(result.groups["n"].sum()) == layout.n_total


def test_duality_tables_are_not_vacuous():
    """Guard: on a design with clear differences every dual procedure rejects
    something and leaves something unrejected, so the duality check above
    compares both outcomes (PlantGrowth-like sizes; invented values are not a
    reference here, only a workload)."""
    rng = np.random.default_rng(3)
    groups = [rng.normal(mu, 1.0, 12) for mu in (0.0, 0.1, 3.0, 3.1)]
    layout = Layout.from_groups(groups)
    tables = _run_all(layout, "all-pairs")
    tables.update({n: t for n, t in _run_all(layout, "vs-reference").items()
                   if CATALOGUE[n].families == ("vs-reference",)})
    for name in DUAL:
        table = tables[name]
        check_table(name, table)
        assert table["reject"].any() and not table["reject"].all(), name

"""The routing policy's thresholds, as data (every one configurable and recorded).

Defaults and where they come from:

* ``outlier_z = 3.5``: modified z-score cut-off of Iglewicz & Hoaglin (1993),
  *How to Detect and Handle Outliers*, ASQC, p. 11.
* ``gross_outlier_z = 7.0``: twice that; our policy (no source): such a value
  is far enough out to move a mean on its own.
* ``sd_ratio_limit = 2.0``: largest over smallest SD; a common rule of thumb,
  no source.
* ``skew_limit = 1.0`` and ``kurtosis_limit = 2.0`` (excess): magnitudes that
  decide shape at large N, where every normality test rejects trivially;
  common practice, no source.
* ``pvalue_decides_below = 300``: up to this many residuals the normality
  test's p-value decides the shape verdict; above it the magnitudes do.
* ``shapiro_max = 5000``: Shapiro–Wilk up to this many residuals (scipy's
  p-value is accurate up to 5000), Anderson–Darling above.
* ``small_group = 5``: groups under five observations trigger a warning and
  a preference for exact or resampling procedures (DESIGN.md).
* ``check_alpha = 0.05``: level of the preliminary tests.
* ``games_howell_min_n = 10``: below it Games–Howell is mildly liberal when
  small groups carry large SDs (about 0.065 at n = 4..30 in an independent
  simulation; see the unequal-variance tests), so Dunnett's T3 is preferred.
* ``calibrate_candidates = False``: when True, a quick calibration at the
  observed sizes and SDs may keep Games–Howell for small groups.  Off by
  default: the observed SDs of groups of four are too noisy a basis, and in
  our error-rate matrix (README) the pipeline with it on exceeded alpha on
  unbalanced equal-spread data (0.073 over 2,000 null data sets).
* ``welch_when_small_unbalanced = True`` with ``unbalanced_ratio = 1.5``:
  when the design is unbalanced (largest / smallest n at least 1.5) and the
  smallest group is under ``games_howell_min_n``, the spread checks have
  little power and the SD ratio is noisy, yet pooled procedures are badly
  liberal if the small groups have the larger spreads; such designs go to
  the unequal-variance route even when the spread checks pass, and, when
  the shape is poor too, to the bootstrap rather than the permutation max-T
  (our policy, from the same matrix; no source).
* ``rank_permutation_below = 10``: rank procedures (Dunn, Steel-Dwass,
  Steel) use their asymptotic reference distributions (normal, the
  studentized range or Dunnett's at df = inf) when every group has at least
  this many values, and their permutation versions below.  The normal
  approximation to a rank-sum statistic is commonly taken as adequate from
  about ten per group (Hollander, Wolfe & Chicken, *Nonparametric
  Statistical Methods*, 3rd ed., ch. 4, from memory); the permutation
  version is exact at any size, so the threshold only trades time.
* ``gross_outlier_route = True``: when the outlier check finds a gross
  value (modified z above ``gross_outlier_z``) that stands apart (without
  it the rest passes the shape checks; far values in the tail of skewed
  data are left to the skewed-data route), the route does not use a
  procedure on means, whose estimate and interval one value can dominate:
  pairwise families go to Yuen's trimmed means when every group holding a
  gross value has at least ``trimmed_min_n`` values (so 20% trimming cuts
  at least one from each end), otherwise to ranks.  Our policy (no
  source); the trimming fraction 0.2 is Wilcox's usual choice
  (*Introduction to Robust Estimation and Hypothesis Testing*, from
  memory).
* ``trimmed_min_n = 5``: floor(0.2 n) >= 1 from n = 5.
* ``multivariate_t_max_comparisons = 45``: with correlated adjusted means
  the route prefers the exact ``multivariate-t`` adjustment for families of
  up to this many comparisons (all pairs of 10 groups); its quasi-Monte
  Carlo integral takes seconds there and tens of seconds for all pairs of 20
  (``tests/bench/bench_multivariate_t.py``).  Larger families keep
  Tukey-Kramer's form on each difference's own standard error, which stays
  conservative with correlated means (Hayter 1984), or Dunnett with the
  nearest product correlation (Hsu 1992), and the route says so.  Our
  policy, a trade of time against exactness (no source).
* ``censored_warn_percent = 50.0``: a group with more non-detects than this
  share carries little information on its own; the route warns.  Common
  practice, no source (Helsel 2012 discusses 50% and 80% as points where
  the methods' behaviour changes; from memory).
* ``peto_when_limits_differ = True``: with non-detects at different
  limits in different groups, the route uses the Peto–Prentice scores
  (``peto-maxt``), whose weights depend less on the censoring pattern than
  Gehan's (Prentice & Marek 1979, *Biometrics* 35:861-867; Helsel 2012
  prefers the Peto–Prentice form; both from memory); with one limit,
  Gehan's (``gehan-maxt``), which is then the Wilcoxon statistic with the
  non-detects tied below the limit.
* ``log_slope_tolerance = 0.35`` with ``log_min_groups = 3``: the route
  proposes the log scale when the slope of log SD on log mean over at least
  three groups lies within 0.35 of 1 (Tukey's spread-level plot; Box & Cox
  1964: the power 1 - slope stabilises the spread, 0 being the log).  The
  tolerance is our policy (no source): the slope of a few groups' SDs is
  noisy, and powers between -0.35 and 0.35 differ little from the log in
  practice.
* ``power_route = True``: the route's last step calibrates at the observed
  design (:mod:`famwise.diagnostics.power_choice`): each candidate's
  familywise error under the complete null and its power against one
  shifted comparison, from ``power_replicates = 2000`` simulated data sets
  (errors resampled from the observed standardised residuals), and takes the
  most powerful candidate that holds.  A rules' choice that holds is kept
  unless a holding candidate beats it by ``power_gain_min``; one that does
  not hold is still kept when every holding candidate is less powerful (at
  a small study the calibration's picture is too noisy to give up the
  rules' choice for less power).  On by default, from the error-rate
  matrix's power rows (README; ``tests/test_error_matrix.py``, 400 null and
  400 shifted data sets per design): with the step the familywise error
  stays within alpha + 3 SE on all six designs (at most 0.070 against the
  limit 0.083), the power on unbalanced equal-SD normal data rises from
  0.307 to 0.432 (Tukey–Kramer alone 0.515), and on four designs the route
  is within 0.012 of the best valid candidate.  It stays far below it on
  balanced skewed data (0.328 against the permutation max-T's 0.715): the
  observed SDs of lognormal groups of ten differ by factors of four to nine
  when the true ones are equal, the spread checks fail, and at those SDs the
  permutation max-T is liberal, so the bootstrap is kept (pooling balanced
  designs' SDs whenever Brown–Forsythe passes closed that gap, 0.660, but
  put the familywise error of the twin design with truly unequal SDs at
  0.188).  On that twin the route is 0.005 above the best.  2,000 replicates
  give a binomial SE of 0.005 at alpha = 0.05 and keep the step near 0.1 s
  at N = 50, k = 6 (``tests/bench/bench_power_route.py``).
* ``power_pool_spreads = True``: when the spread checks pass, the step
  simulates every group at the pooled SD, the estimate the checks support;
  at the observed SDs, the noise of small groups' SDs makes an exact pooled
  procedure (Tukey–Kramer) look liberal exactly when a small group's SD
  comes out large, and the step then gave up its power for nothing (our
  policy, from the matrix's unbalanced designs).
* ``power_at = 0.5``: the alternative, without a margin, shifts one
  comparison by the number of standard errors at which a Bonferroni z test
  has this power; procedures' powers differ most at power one half (the
  slope of a location-shift power curve is largest there; normal theory,
  common practice, no source).  With a margin, the shift is the margin.
* ``power_fwer_se = 2.0``: a candidate holds when its estimated FWER is at
  most alpha + 2 Monte Carlo SE, the rule of the quick calibration and the
  calibration table (our policy, no source).
* ``power_gain_min = 0.02``: the rules' choice, when it holds, is replaced
  only by a candidate at least this much more powerful (our policy, no
  source): smaller gains are within the Monte Carlo noise of the power
  differences at 1,000 replicates, and the issue's tolerance is 0.05.
* ``power_closed_when_skewed = False``: when the rules chose resampling
  because the residuals are far from normal, only the resampling candidates
  compete in the power step: the few residuals of a small study
  under-represent a skewed tail, and on the matrix's skewed designs the
  calibration at the residual pool misranked the closed forms (our policy,
  from that evidence; see diagnostics/power_choice.py).
"""

from __future__ import annotations

import dataclasses
import os
from dataclasses import dataclass

from ..core.errors import FamwiseInputError

__all__ = ["Policy", "load_policy"]


@dataclass(frozen=True)
class Policy:
    """Thresholds of the checks and the routing; see the module notes."""

    check_alpha: float = 0.05
    outlier_z: float = 3.5
    gross_outlier_z: float = 7.0
    sd_ratio_limit: float = 2.0
    skew_limit: float = 1.0
    kurtosis_limit: float = 2.0
    pvalue_decides_below: int = 300
    shapiro_max: int = 5000
    small_group: int = 5
    games_howell_min_n: int = 10
    calibrate_candidates: bool = False
    welch_when_small_unbalanced: bool = True
    unbalanced_ratio: float = 1.5
    calibration_replicates: int = 3000
    rank_permutation_below: int = 10
    gross_outlier_route: bool = True
    trimmed_min_n: int = 5
    multivariate_t_max_comparisons: int = 45
    censored_warn_percent: float = 50.0
    peto_when_limits_differ: bool = True
    log_slope_tolerance: float = 0.35
    log_min_groups: int = 3
    power_route: bool = True
    power_replicates: int = 2000
    power_pool_spreads: bool = True
    power_at: float = 0.5
    power_fwer_se: float = 2.0
    power_gain_min: float = 0.02
    power_closed_when_skewed: bool = False

    def replace(self, **changes) -> "Policy":
        """Return a copy with ``changes`` applied (names checked)."""
        known = {f.name: f for f in dataclasses.fields(self)}
        for key, value in changes.items():
            if key not in known:
                from ..core.errors import did_you_mean
                raise FamwiseInputError(
                    f"unknown policy setting {key!r}{did_you_mean(key, known)} "
                    f"(settings: {', '.join(known)})")
            kind = type(getattr(self, key))
            if kind is bool and not isinstance(value, bool):
                raise FamwiseInputError(f"policy setting {key!r} must be true or false; "
                                        f"got {value!r}")
            if kind in (int, float) and (isinstance(value, bool)
                                         or not isinstance(value, (int, float))):
                raise FamwiseInputError(f"policy setting {key!r} must be a number; "
                                        f"got {value!r}")
            if kind in (int, float) and value <= 0:
                raise FamwiseInputError(f"policy setting {key!r} must be positive; "
                                        f"got {value!r}")
        for key in ("power_at",):
            if key in changes and not 0.0 < changes[key] < 1.0:
                raise FamwiseInputError(f"policy setting {key!r} must lie strictly between "
                                        f"0 and 1; got {changes[key]!r}")
        return dataclasses.replace(self, **changes)

    def to_dict(self) -> dict:
        return dataclasses.asdict(self)

    def rank_method(self, group_sizes) -> str:
        """``"permutation"`` when a group has fewer than
        ``rank_permutation_below`` values, else ``"asymptotic"``."""
        small = min(int(x) for x in group_sizes) < self.rank_permutation_below
        return "permutation" if small else "asymptotic"


def load_policy(path: str | os.PathLike | None = None, **overrides) -> Policy:
    """Return the default policy, updated from a TOML file and then ``overrides``.

    The TOML file holds settings at the top level or under a ``[policy]``
    table, e.g. ``sd_ratio_limit = 3.0``.
    """
    policy = Policy()
    if path is not None:
        try:
            import tomllib
        except ImportError:  # Python 3.10
            import tomli as tomllib  # type: ignore[no-redef]
        try:
            with open(path, "rb") as fh:
                doc = tomllib.load(fh)
        except FileNotFoundError:
            raise FamwiseInputError(f"policy file not found: {os.fspath(path)!r}") from None
        except tomllib.TOMLDecodeError as exc:
            raise FamwiseInputError(f"policy file {os.fspath(path)!r} is not valid TOML: "
                                    f"{exc}") from None
        policy = policy.replace(**doc.get("policy", doc))
    return policy.replace(**overrides) if overrides else policy

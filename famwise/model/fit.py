"""The additive linear model ``response = group + block(s) + covariate(s)``.

:func:`fit_model` turns a :class:`~famwise.core.layout.Layout` (and its
:class:`~famwise.core.layout.Design`: blocking factors and covariates) into a
:class:`ModelFit`: the adjusted (least-squares) group means, their covariance
matrix, the residual degrees of freedom and mean square, the residuals and
fitted values, and ``contrast(weights)``.  Every mean-based procedure reads
``(estimates, covariance, df)`` from here and does not care how they were
fitted; the one-way layout is the model with no blocks and no covariates.

Parametrisation
---------------
The design matrix is ``X = [G | B_1 | B_2 | Z]``: ``G`` one indicator column
per group (no intercept; the groups carry it), ``B_f`` the indicators of the
levels ``1 .. b_f - 1`` of blocking factor ``f`` (level 0 is the baseline),
``Z`` the covariates centred at their overall means and scaled by their SD
(for conditioning only; effects are reported per unit).  The response is
shifted by its median before fitting, so adding 1e12 to every value leaves
every result unchanged to the rounding of the shifted values.

The fit is a column-pivoted Householder QR, ``X P = Q R`` (Golub & Van Loan
2013, section 5.4.1), with numerical rank from the diagonal of ``R`` at
tolerance ``max(N, p) * eps * |R_11|``.  The adjusted mean of group ``i`` is
``L_i beta`` with ``L_i`` the unit vector of group ``i``, ``1/b_f`` on every
block-level column of factor ``f`` and 0 on the centred covariates: equal
weights over block levels, covariates at their overall means (the
least-squares means of Searle, Speed & Milliken 1980).  Their covariance is
``sigma^2 L (X'X)^-1 L'`` with ``(X'X)^-1 = P R^-1 R^-T P'``.

For the one-way layout the fit is the closed form (group means by corrected
two-pass sums, ``(X'X)^-1 = diag(1/n)``), which is what QR gives up to
rounding; ``tests/test_model.py`` checks the two agree.

Estimability
------------
Group contrasts are estimable exactly when ``rank(X) - rank([1 | B | Z]) =
k - 1``.  When they are not, the groups, blocks and observations are split
into connected pieces (an edge joins a group to each block level it appears
in) to name the group and the blocks that hold no other group.  A group
confined to one block that also holds other groups is estimable, but its
comparisons rest on that one block: :class:`~famwise.core.errors.ModelWarning`.

References
----------
Searle, S. R., Speed, F. M. and Milliken, G. A. (1980). Population marginal
means in the linear model: an alternative to least squares means. *The
American Statistician* 34(4):216-221. doi:10.1080/00031305.1980.10483031
Golub, G. H. and Van Loan, C. F. (2013). *Matrix Computations*, 4th ed.
Johns Hopkins University Press.
Searle, S. R. (1971). *Linear Models*, ch. 7 (connectedness). Wiley.
"""

from __future__ import annotations

import warnings
from dataclasses import dataclass, field
from functools import cached_property

import numpy as np

from ..core.errors import FamwiseInputError, ModelWarning
from ..core.layout import Design, Layout, group_stats

__all__ = ["ModelFit", "ModelDesign", "ModelTerm", "fit_model"]

_CACHE_KEY = "_famwise_model_fit"


@dataclass(frozen=True)
class ModelTerm:
    """One term of the model: its name, kind and degrees of freedom.

    ``kind`` is ``"group"``, ``"block"`` or ``"covariate"``; ``columns`` is
    the slice of the design matrix it occupies; ``levels`` its level labels
    (groups and blocks) or ``()`` for a covariate.
    """

    name: str
    kind: str
    df: int
    columns: slice = field(repr=False)
    levels: tuple[str, ...] = field(default=(), repr=False)


@dataclass(frozen=True, eq=False)
class ModelDesign:
    """The observations' design as the model used it.

    Attributes
    ----------
    group_codes : ndarray of int64, shape (N,)
    block_names : tuple of str
    block_codes : tuple of ndarray of int64, shape (N,) each
    block_labels : tuple of tuple of str
    covariate_names : tuple of str
    covariates : ndarray, shape (N, p)
        Raw covariate values (as given, not centred).
    covariate_means, covariate_scales : ndarray, shape (p,)
        Centre and scale used for the design columns.
    """

    group_codes: np.ndarray = field(repr=False)
    block_names: tuple[str, ...]
    block_codes: tuple[np.ndarray, ...] = field(repr=False)
    block_labels: tuple[tuple[str, ...], ...] = field(repr=False)
    covariate_names: tuple[str, ...]
    covariates: np.ndarray = field(repr=False)
    covariate_means: np.ndarray = field(repr=False)
    covariate_scales: np.ndarray = field(repr=False)
    k: int = field(repr=False, default=0)

    @property
    def n_blocks(self) -> tuple[int, ...]:
        """Number of levels of each blocking factor."""
        return tuple(len(lv) for lv in self.block_labels)

    @property
    def n_obs(self) -> int:
        return int(self.group_codes.size)

    def matrix(self) -> np.ndarray:
        """Return the design matrix ``[G | B_1 | B_2 | Z]`` (N, p), built on demand."""
        return _design_matrix(self)[0]

    @property
    def n_columns(self) -> int:
        return self.k + sum(b - 1 for b in self.n_blocks) + len(self.covariate_names)

    def lsmean_matrix(self) -> np.ndarray:
        """Return ``L`` (k, p): ``adjusted_mean = L @ coef`` (plus the response shift)."""
        L = np.zeros((self.k, self.n_columns))
        L[:, :self.k] = np.eye(self.k)
        col = self.k
        for b in self.n_blocks:
            L[:, col:col + b - 1] = 1.0 / b
            col += b - 1
        return L


def _design_matrix(d: ModelDesign) -> tuple[np.ndarray, list[slice]]:
    n = d.n_obs
    X = np.zeros((n, d.n_columns))
    rows = np.arange(n)
    X[rows, d.group_codes] = 1.0
    slices = [slice(0, d.k)]
    col = d.k
    for codes, b in zip(d.block_codes, d.n_blocks):
        sel = codes > 0
        X[rows[sel], col + codes[sel] - 1] = 1.0
        slices.append(slice(col, col + b - 1))
        col += b - 1
    for j in range(len(d.covariate_names)):
        X[:, col] = (d.covariates[:, j] - d.covariate_means[j]) / d.covariate_scales[j]
        slices.append(slice(col, col + 1))
        col += 1
    return X, slices


@dataclass(frozen=True, eq=False)
class ModelFit:
    """The fitted additive model and what every mean-based procedure needs.

    Attributes
    ----------
    labels : tuple of str
        Group labels (the order of ``adjusted_mean``).
    adjusted_mean : ndarray, shape (k,)
        Least-squares means: equal weights over block levels, covariates at
        their overall means.  For the one-way layout, the group means.
    mean_cov : ndarray, shape (k, k)
        Covariance matrix of ``adjusted_mean``, ``mse * L (X'X)^-1 L'``; for
        the one-way layout ``mse * diag(1/n)``.
    df : int
        Residual degrees of freedom, ``N - rank(X)`` (``N - k`` one-way).
    mse : float
        Residual mean square (the error variance estimate).
    residuals, fitted : ndarray, shape (N,)
        In the order of the layout's values.
    leverage : ndarray, shape (N,)
        Diagonal of the hat matrix (``1/n_i`` one-way).
    terms : tuple of ModelTerm
        Group first, then the blocking factors, then the covariates.
    design : ModelDesign
    n : ndarray of int64, shape (k,)
        Observations per group.
    coef : ndarray, shape (p,)
        Coefficients in the parametrisation of ``design.matrix()`` (the
        group columns include the response's median shift).
    coef_cov_unscaled : ndarray, shape (p, p)
        ``(X'X)^-1``.
    notes : tuple of str
        Sentences about the design (for example a group confined to one block).

    Methods
    -------
    contrast(weights) -> (estimate (m,), covariance (m, m))
    anova(kind) -> pandas.DataFrame ("adjusted" or "sequential")
    group_test() -> (F, df1, df2, p) for equal adjusted means
    efficiency() -> relative efficiency of the blocking (None without blocks)
    cv -> coefficient of variation, percent
    studentized_residuals() -> externally studentised residuals
    """

    labels: tuple[str, ...]
    adjusted_mean: np.ndarray = field(repr=False)
    mean_cov: np.ndarray = field(repr=False)
    df: int
    mse: float
    residuals: np.ndarray = field(repr=False)
    fitted: np.ndarray = field(repr=False)
    leverage: np.ndarray = field(repr=False)
    terms: tuple[ModelTerm, ...]
    design: ModelDesign = field(repr=False)
    n: np.ndarray = field(repr=False)
    coef: np.ndarray = field(repr=False)
    coef_cov_unscaled: np.ndarray = field(repr=False)
    notes: tuple[str, ...] = ()
    response: str = "response"
    # helper state: means of the median-shifted values, L (X'X)^-1 L', the shift
    mean_shifted: np.ndarray = field(repr=False, default=None)
    mean_cov_unscaled: np.ndarray = field(repr=False, default=None)
    shift: float = field(repr=False, default=0.0)
    y_shifted: np.ndarray = field(repr=False, default=None)

    # --- what users and procedures ask next ---------------------------------

    @property
    def k(self) -> int:
        return len(self.labels)

    @property
    def n_obs(self) -> int:
        return int(self.residuals.size)

    @property
    def is_oneway(self) -> bool:
        """True when the model has no blocks and no covariates."""
        return len(self.terms) == 1

    @property
    def adjusted_se(self) -> np.ndarray:
        """Standard errors of the adjusted means, ``sqrt(diag(mean_cov))``."""
        return np.sqrt(np.diag(self.mean_cov))

    @property
    def means_correlated(self) -> bool:
        """True when the adjusted means are correlated (missing plots, covariates).

        Balanced complete blocks give equicorrelated-free means (zero
        off-diagonal covariance), as does the one-way layout.
        """
        u = self.mean_cov_unscaled
        d = np.sqrt(np.diag(u))
        off = u / np.outer(d, d) - np.eye(self.k)
        return bool(np.max(np.abs(off)) > 1e-9)

    @property
    def ss_residual(self) -> float:
        return float(self.mse * self.df)

    @property
    def cv(self) -> float:
        """Coefficient of variation, ``100 sqrt(mse) / grand mean`` (percent).

        NaN when the grand mean of the response is not positive (the CV of
        field trials assumes a positive response).
        """
        grand = float(np.mean(self.y_shifted)) + self.shift
        return 100.0 * float(np.sqrt(self.mse)) / grand if grand > 0 else float("nan")

    def contrast(self, weights) -> tuple[np.ndarray, np.ndarray]:
        """Return the estimates ``W @ adjusted_mean`` and their covariance.

        Parameters
        ----------
        weights : array_like, shape (k,) or (m, k)

        Returns
        -------
        estimate : ndarray, shape (m,)
        covariance : ndarray, shape (m, m)
            ``mse * W L (X'X)^-1 L' W'``.
        """
        W = np.atleast_2d(np.asarray(weights, dtype=np.float64))
        if W.shape[1] != self.k:
            raise FamwiseInputError(
                f"contrast weights need one column per group ({self.k}); got shape {W.shape}")
        est = W @ self.mean_shifted + self.shift * W.sum(axis=1)
        cov = self.mse * (W @ self.mean_cov_unscaled @ W.T)
        return est, cov

    def contrast_variance_factor(self, weights) -> np.ndarray:
        """Return ``diag(W L (X'X)^-1 L' W')`` (variances in units of sigma^2)."""
        W = np.atleast_2d(np.asarray(weights, dtype=np.float64))
        return np.einsum("ij,jk,ik->i", W, self.mean_cov_unscaled, W)

    def pair_variance_factor(self, a, b) -> np.ndarray:
        """Return the variance factor of ``mean_a - mean_b`` for index arrays a, b."""
        u = self.mean_cov_unscaled
        if self.is_oneway:
            d = np.diag(u)
            return d[a] + d[b]
        return u[a, a] + u[b, b] - 2.0 * u[a, b]

    def studentized_residuals(self) -> np.ndarray:
        """Externally studentised residuals (NaN where the leverage is 1).

        ``r_i = e_i / sqrt(mse (1 - h_i))`` and
        ``t_i = r_i sqrt((df - 1) / (df - r_i^2))``, Student t on ``df - 1``
        under the model (Cook & Weisberg 1982, section 2.2.2).
        """
        with np.errstate(invalid="ignore", divide="ignore"):
            one_minus = 1.0 - self.leverage
            r = np.where(one_minus > 1e-10,
                         self.residuals / np.sqrt(self.mse * np.maximum(one_minus, 1e-300)),
                         np.nan)
            if self.df < 2:
                return np.full_like(r, np.nan)
            t = r * np.sqrt((self.df - 1) / np.maximum(self.df - r * r, 1e-300))
        return t

    @cached_property
    def block_effects(self) -> tuple[np.ndarray, ...]:
        """Estimated effect of every level of every blocking factor, centred to mean 0."""
        out = []
        for term in self.terms:
            if term.kind != "block":
                continue
            eff = np.concatenate([[0.0], self.coef[term.columns]])
            out.append(eff - eff.mean())
        return tuple(out)

    @property
    def covariate_slopes(self) -> np.ndarray:
        """Estimated slope of each covariate, per unit of the covariate."""
        d = self.design
        cols = [t.columns for t in self.terms if t.kind == "covariate"]
        if not cols:
            return np.empty(0)
        return np.array([self.coef[c][0] for c in cols]) / d.covariate_scales

    def anova(self, kind: str = "adjusted"):
        """Return the analysis-of-variance table (see :mod:`famwise.model.anova`)."""
        from .anova import anova_frame
        return anova_frame(self, kind)

    def group_test(self):
        """Return ``(F, df1, df2, p)`` of equal adjusted means (each term adjusted)."""
        from .anova import group_test
        return group_test(self)

    def efficiency(self):
        """Relative efficiency of the blocking against a completely randomised layout."""
        from .anova import blocking_efficiency
        return blocking_efficiency(self)

    def describe(self) -> str:
        """One sentence naming the model: its terms and residual df."""
        parts = [f"{t.name} ({t.kind}, {t.df} df)" for t in self.terms]
        return (f"{self.response} = " + " + ".join(parts) +
                f"; residual df {self.df}, mean square {self.mse:.6g}")


# --- fitting --------------------------------------------------------------------

def fit_model(layout: Layout, blocks=None, covariates=None, *, _force_qr: bool = False
              ) -> ModelFit:
    """Fit ``response = group + block(s) + covariate(s)`` by QR.

    Parameters
    ----------
    layout : Layout
        The response values and group codes.  Its ``design`` supplies the
        blocks and covariates unless ``blocks`` or ``covariates`` is given.
    blocks : mapping name -> labels, or sequence of one or two label arrays, optional
        Blocking factors (one, or two for the rows and columns of a Latin
        square); overrides ``layout.design``'s blocks.
    covariates : mapping name -> values, or (N,) / (N, p) array, optional
        Numeric covariates; overrides ``layout.design``'s covariates.

    Returns
    -------
    ModelFit

    Raises
    ------
    FamwiseInputError
        A group with no observations; a block with one plot; a constant
        covariate or one collinear with the groups and blocks; group effects
        not estimable (the design is not connected: the message names the
        group and its blocks); no residual degrees of freedom; zero residual
        variance.

    Warns
    -----
    ModelWarning
        A group confined to one block that also holds other groups.

    Notes
    -----
    1. Errors independent, normal, one common variance; effects additive
       (no group x block interaction; see Tukey's one-degree-of-freedom test
       in :func:`famwise.model.anova.nonadditivity`).
    2. The result of ``fit_model(layout)`` (no overrides) is cached on the
       layout, so every procedure on one layout shares one fit.

    Examples
    --------
    >>> from famwise import Layout
    >>> lay = Layout.from_groups([[4.0, 5.0, 6.5], [6.0, 7.5, 8.0]], ["A", "B"])
    >>> fit = fit_model(lay.with_design(blocks={"rep": ["1", "2", "3"] * 2}))
    >>> fit.df
    2
    """
    if not isinstance(layout, Layout):
        raise FamwiseInputError(
            f"layout must be a famwise.Layout; got {type(layout).__name__} "
            f"(build one with famwise.Layout.from_groups or famwise.intake)")
    use_own = blocks is None and covariates is None and not _force_qr
    if use_own:
        cached = layout.__dict__.get(_CACHE_KEY)
        if cached is not None:
            return cached
    design = layout.design
    if blocks is not None or covariates is not None:
        own = design or Design()
        base = Design.from_arrays(blocks, covariates)
        design = Design(
            base.block_names if blocks is not None else own.block_names,
            base.block_codes if blocks is not None else own.block_codes,
            base.block_labels if blocks is not None else own.block_labels,
            base.covariate_names if covariates is not None else own.covariate_names,
            base.covariates if covariates is not None
            else (own.covariates if own.covariates is not None and own.covariate_names
                  else np.empty((layout.n_total, 0))))
        if design.is_empty:
            design = None
        elif design.n_obs != layout.n_total:
            raise FamwiseInputError(
                f"blocks and covariates need one value per observation ({layout.n_total}); "
                f"got {design.n_obs}")
    fit = _fit(layout, design, force_qr=_force_qr)
    if use_own:
        layout.__dict__[_CACHE_KEY] = fit
    return fit


def _check_groups(layout: Layout, values: np.ndarray):
    k = layout.k
    if k < 2:
        raise FamwiseInputError(f"comparisons need at least two groups; got {k}")
    if values.size == 0 or not np.all(np.isfinite(values)):
        raise FamwiseInputError("layout values must be finite and not empty")
    n = np.bincount(layout.codes, minlength=k)
    empty = np.flatnonzero(n == 0)
    if empty.size:
        raise FamwiseInputError(
            f"group {layout.labels[empty[0]]!r} has no observations; drop it "
            f"from the labels or supply its values")
    return n.astype(np.int64)


def _fit(layout: Layout, design: Design | None, *, force_qr: bool) -> ModelFit:
    values = layout.values
    n = _check_groups(layout, values)
    # Shift by the median (a data value or the midpoint of two): differences
    # of nearby doubles are exact (Sterbenz), so the means of the shifted
    # values carry full relative precision.
    shift = float(np.median(values))
    y = values - shift
    if design is None:
        design = Design(covariates=np.empty((values.size, 0)))
    md = _model_design(layout, design)
    if not md.block_names and not md.covariate_names and not force_qr:
        return _fit_oneway(layout, md, n, y, shift)
    _check_design(layout, md)
    return _fit_qr(layout, md, n, y, shift)


def _model_design(layout: Layout, design: Design) -> ModelDesign:
    cov = design.covariates if design.covariates is not None else np.empty((layout.n_total, 0))
    p = cov.shape[1]
    means = cov.mean(axis=0) if p else np.empty(0)
    scales = np.empty(p)
    for j in range(p):
        centred = cov[:, j] - means[j]
        # second pass corrects the mean's rounding
        corr = centred.mean()
        means[j] += corr
        scales[j] = np.sqrt(np.mean((cov[:, j] - means[j]) ** 2))
    return ModelDesign(layout.codes, design.block_names, design.block_codes,
                       design.block_labels, design.covariate_names, cov, means, scales, k=layout.k)


def _fit_oneway(layout, md, n, y, shift) -> ModelFit:
    k = layout.k
    st = group_stats(y, layout.codes, k)
    df = int(n.sum() - k)
    if df < 1:
        raise FamwiseInputError(
            f"no error degrees of freedom (N = {int(n.sum())}, k = {k}); "
            f"at least one group needs two or more observations")
    ss = float(np.sum(np.where(st.n > 1, (st.n - 1) * np.nan_to_num(st.var), 0.0)))
    if not ss > 0.0:
        raise FamwiseInputError(
            "the within-group variance is zero (every group is constant); "
            "pooled procedures need some spread within groups")
    mse = ss / df
    inv_n = 1.0 / n
    unscaled = np.diag(inv_n)
    fitted_shifted = st.mean[layout.codes]
    term = ModelTerm(layout.group, "group", k - 1, slice(0, k), layout.labels)
    return ModelFit(
        labels=layout.labels, adjusted_mean=st.mean + shift, mean_cov=mse * unscaled,
        df=df, mse=mse, residuals=y - fitted_shifted, fitted=fitted_shifted + shift,
        leverage=inv_n[layout.codes], terms=(term,), design=md, n=n,
        coef=st.mean + shift, coef_cov_unscaled=unscaled, notes=(),
        response=layout.response, mean_shifted=st.mean, mean_cov_unscaled=unscaled,
        shift=shift, y_shifted=y)


def _check_design(layout: Layout, md: ModelDesign):
    """Block sizes and constant covariates (before any QR)."""
    src = layout.source
    for name, codes, labels in zip(md.block_names, md.block_codes, md.block_labels):
        counts = np.bincount(codes, minlength=len(labels))
        if len(labels) < 2:
            raise FamwiseInputError(
                f"block column {name!r} in {src!r} has a single level "
                f"({labels[0] if labels else ''!r}); a blocking factor needs two or more "
                f"blocks: drop block={name!r}")
        lone = np.flatnonzero(counts == 1)
        if lone.size:
            row = int(layout.rows[np.flatnonzero(codes == lone[0])[0]])
            raise FamwiseInputError(
                f"block {labels[lone[0]]!r} of {name!r} in {src!r} has only one plot "
                f"(row {row}); a block needs two or more plots to say anything about "
                f"the groups: merge it with a neighbouring block or set that row aside")
        empty = np.flatnonzero(counts == 0)
        if empty.size:
            raise FamwiseInputError(
                f"block {labels[empty[0]]!r} of {name!r} has no observations; drop it "
                f"from the block labels")
    for j, name in enumerate(md.covariate_names):
        col = md.covariates[:, j]
        if not np.all(np.isfinite(col)):
            raise FamwiseInputError(
                f"covariate {name!r} in {src!r} has missing or non-finite values; "
                f"set those rows aside before fitting")
        if not md.covariate_scales[j] > 1e-13 * max(1.0, float(np.max(np.abs(col)))):
            raise FamwiseInputError(
                f"covariate {name!r} in {src!r} is constant (every value {col[0]:.6g}); "
                f"a constant covariate carries no information: drop covariates={name!r}")


def _qr(X):
    from scipy.linalg import qr
    Q, R, piv = qr(X, mode="economic", pivoting=True, check_finite=False)
    d = np.abs(np.diag(R))
    tol = max(X.shape) * np.finfo(float).eps * (d[0] if d.size else 0.0)
    rank = int(np.sum(d > tol))
    return Q, R, piv, rank


def _rank(X) -> int:
    if X.shape[1] == 0:
        return 0
    return _qr(X)[3]


def _fit_qr(layout, md: ModelDesign, n, y, shift) -> ModelFit:
    from scipy.linalg import solve_triangular
    k = layout.k
    N = y.size
    X, slices = _design_matrix(md)
    p = X.shape[1]
    if p >= N:
        raise FamwiseInputError(
            f"the model has {p} parameters (group {k}, blocks "
            f"{sum(b - 1 for b in md.n_blocks)}, covariates {len(md.covariate_names)}) but "
            f"only {N} rows in {layout.source!r}: no degrees of freedom remain for error; "
            f"drop a covariate or a blocking factor, or supply more plots")
    Q, R, piv, rank = _qr(X)
    if rank < p:
        _explain_rank(layout, md, X, slices)
    df = N - p
    # beta = P R^-1 Q'y
    qty = Q.T @ y
    b_piv = solve_triangular(R, qty, check_finite=False)
    coef = np.empty(p)
    coef[piv] = b_piv
    fitted_shifted = X @ coef
    resid = y - fitted_shifted
    ss = float(resid @ resid)
    if not ss > 1e-28 * max(1.0, float(y @ y)):
        raise FamwiseInputError(
            "the model fits every value exactly (zero residual variance); the "
            "comparisons need some spread left after the groups, blocks and covariates")
    mse = ss / df
    leverage = np.einsum("ij,ij->i", Q, Q)
    Rinv = solve_triangular(R, np.eye(p), check_finite=False)
    xtx_inv_piv = Rinv @ Rinv.T
    xtx_inv = np.empty((p, p))
    xtx_inv[np.ix_(piv, piv)] = xtx_inv_piv
    L = md.lsmean_matrix()
    mean_shifted = L @ coef
    Y = L[:, piv] @ Rinv                  # L P R^-1
    unscaled = Y @ Y.T
    unscaled = 0.5 * (unscaled + unscaled.T)
    terms = [ModelTerm(layout.group, "group", k - 1, slices[0], layout.labels)]
    i = 1
    for name, labels in zip(md.block_names, md.block_labels):
        terms.append(ModelTerm(name, "block", len(labels) - 1, slices[i], labels))
        i += 1
    for name in md.covariate_names:
        terms.append(ModelTerm(name, "covariate", 1, slices[i]))
        i += 1
    coef_out = coef.copy()
    coef_out[:k] += shift
    # covariate columns were scaled; coef_cov in the scaled parametrisation
    notes = _confined_groups(layout, md)
    for note in notes:
        warnings.warn(ModelWarning(note), stacklevel=4)
    return ModelFit(
        labels=layout.labels, adjusted_mean=mean_shifted + shift, mean_cov=mse * unscaled,
        df=df, mse=mse, residuals=resid, fitted=fitted_shifted + shift, leverage=leverage,
        terms=tuple(terms), design=md, n=n, coef=coef_out, coef_cov_unscaled=xtx_inv,
        notes=tuple(notes), response=layout.response, mean_shifted=mean_shifted,
        mean_cov_unscaled=unscaled, shift=shift, y_shifted=y)


def _components(md: ModelDesign):
    """Connected pieces of the graph joining each group to its block levels."""
    from scipy.sparse import coo_matrix
    from scipy.sparse.csgraph import connected_components
    k = md.k
    offsets, total = [], k
    for b in md.n_blocks:
        offsets.append(total)
        total += b
    src, dst = [], []
    for codes, off in zip(md.block_codes, offsets):
        src.append(md.group_codes)
        dst.append(codes + off)
    if not src:
        return 1, np.zeros(k, dtype=int), offsets
    s, d = np.concatenate(src), np.concatenate(dst)
    g = coo_matrix((np.ones(s.size), (s, d)), shape=(total, total))
    ncomp, lab = connected_components(g, directed=False)
    return ncomp, lab, offsets


def _explain_rank(layout, md: ModelDesign, X, slices):
    """Raise the error that names why the model is not of full rank."""
    k = layout.k
    n_block_cols = sum(b - 1 for b in md.n_blocks)
    ncomp, lab, offsets = _components(md)
    if ncomp > 1:
        # the piece that holds the fewest groups, named with its blocks
        pieces = [np.flatnonzero(lab[:k] == c) for c in np.unique(lab[:k])]
        pieces.sort(key=len)
        grp = pieces[0]
        comp = lab[grp[0]]
        held = []
        for name, labels, off in zip(md.block_names, md.block_labels, offsets):
            lv = [labels[j] for j in range(len(labels)) if lab[off + j] == comp]
            held.append(f"{'block' if len(lv) == 1 else 'blocks'} "
                        f"{', '.join(map(repr, lv))} of {name!r}")
        groups = ", ".join(repr(layout.labels[g]) for g in grp)
        noun = "group" if grp.size == 1 else "groups"
        raise FamwiseInputError(
            f"the design is not connected: {noun} {groups} appear only in "
            f"{'; '.join(held)}, which hold no other group, so {'its' if grp.size == 1 else 'their'} "
            f"difference from the other groups cannot be separated from the block effects; "
            f"add plots of other groups to those blocks or analyse the pieces apart")
    gb = X[:, :k + n_block_cols]
    if _rank(gb) < k + n_block_cols:
        raise FamwiseInputError(
            f"the blocking factors {' and '.join(map(repr, md.block_names))} are confounded "
            f"with each other or with the groups (group effects are not estimable); check "
            f"the block columns or drop one blocking factor")
    for j, name in enumerate(md.covariate_names):
        sub = X[:, :k + n_block_cols + j + 1]
        if _rank(sub) < sub.shape[1]:
            what = "the groups" if not md.block_names else "the groups and blocks"
            raise FamwiseInputError(
                f"covariate {name!r} is collinear with {what} (or the covariates before "
                f"it): it is a linear function of them, so its effect cannot be separated; "
                f"drop covariates={name!r}")
    raise FamwiseInputError("the model's group effects are not estimable")  # pragma: no cover


def _confined_groups(layout, md: ModelDesign) -> list[str]:
    notes = []
    for name, codes, labels in zip(md.block_names, md.block_codes, md.block_labels):
        b = len(labels)
        pair = np.bincount(layout.codes * b + codes, minlength=layout.k * b).reshape(layout.k, b)
        present = pair > 0
        for g in np.flatnonzero(present.sum(axis=1) == 1):
            blk = int(np.flatnonzero(present[g])[0])
            if present[:, blk].sum() > 1:
                notes.append(
                    f"group {layout.labels[g]!r} appears only in block {labels[blk]!r} of "
                    f"{name!r}: its comparisons rest on that one block")
    return notes

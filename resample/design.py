"""Design algebra for resampling that follows the randomisation of a trial.

A blocked trial randomises the groups *within* each block, so the
permutation that mirrors it shuffles the group labels within blocks (Fisher
1935, *The Design of Experiments*, ch. II–IV): block totals, and so the
block effects, are the same in every permutation.  With covariates the
response is first reduced to the residuals of the model without groups
(blocks and covariates only), and those residuals are permuted within
blocks (Freedman & Lane 1983, *J. Bus. Econ. Statist.* 1:292–298,
doi:10.2307/1391660).

Everything a permutation leaves unchanged is computed here, once, with
numpy: the group-by-block incidence, the information matrix of the group
effects after the blocks and covariates are absorbed, its Cholesky factor,
each contrast's variance coefficient, each group's share of the residual
degrees of freedom.  The kernels in :mod:`famwise.resample.model_kernels`
then need only the permuted sums.

The additive model is y = group + block + covariates + error.  Write B
for the block indicators, X^c for the covariates centred within blocks, G
for the group indicators and Z = [B, X].  By Frisch–Waugh, the group
effects tau solve the reduced normal equations C tau = Q (Searle 1971,
*Linear Models*, ch. 7, from memory) with

    C = diag(n_g) - N diag(1/n_b) N' - (G'X^c) K^-1 (G'X^c)',   K = X^c'X^c,
    Q = G'r - (G'X^c) K^-1 X^c'r,

N the k x b incidence and r the within-block-centred response (or, with
covariates, the residual of the reduced model).  C depends on the layout
only, and a permutation within blocks keeps every group-by-block count, so
C is the same for every permutation.  The residual sum of squares is
r'r - u'K^-1 u - tau'Q with u = X^c'r.  When every block holds the groups in
proportion (n_gb = n_g n_b / N; a complete block design) and there are no
covariates, tau_g is the group mean of r and C needs no solving.

Contrasts w'tau are invariant to the choice of generalised inverse (the
weights sum to zero); the kernels fix tau of the last group at 0 and
solve the (k-1) x (k-1) system by its Cholesky factor.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from ..core.errors import FamwiseInputError
from ..core.families import Family
from ..core.layout import Layout
from .statistics import SE_FLOOR, TIE_ATOL, TIE_RTOL, ObservedStatistics

__all__ = ["DesignInputs", "PermutationDesign", "design_inputs", "permutation_design",
           "model_observed", "variance_terms", "RANK_TOL"]

# Relative eigenvalue below which a matrix counts as singular (the group
# effects are not estimable, or covariates are collinear).
RANK_TOL = 1e-9


@dataclass(frozen=True)
class DesignInputs:
    """Validated blocks and covariates, aligned with the layout's values."""

    blocks: np.ndarray            # (N,) int64 codes 0 .. b-1
    block_labels: tuple
    covariates: np.ndarray        # (N, q) float64
    covariate_names: tuple

    @property
    def n_blocks(self) -> int:
        return len(self.block_labels)

    @property
    def q(self) -> int:
        return int(self.covariates.shape[1])


def _design_arrays(design):
    """(blocks, covariates, covariate names) of a layout's Design or a fitted
    model's ModelDesign.  A second blocking factor (the columns of a Latin
    square) enters as indicator covariates: the residuals of the model
    without groups are then permuted within the first factor's blocks."""
    codes = tuple(getattr(design, "block_codes", ()) or ())
    labels = tuple(getattr(design, "block_labels", ()) or ())
    names = tuple(getattr(design, "block_names", ()) or ())
    cov = getattr(design, "covariates", None)
    cov_names = list(getattr(design, "covariate_names", ()) or ())
    cov = None if cov is None or np.asarray(cov).size == 0 else np.asarray(cov, dtype=float)
    if cov is not None and cov.ndim == 1:
        cov = cov[:, None]
    blocks = None
    if codes:
        first = np.asarray(codes[0])
        blocks = (np.asarray(labels[0], dtype=object)[first] if labels else first)
    if len(codes) > 1:
        second = np.asarray(codes[1])
        levels = labels[1] if len(labels) > 1 else tuple(range(int(second.max()) + 1))
        name = names[1] if len(names) > 1 else "block2"
        dummies = np.column_stack([(second == c).astype(float)
                                   for c in range(1, len(levels))])
        cov = dummies if cov is None else np.column_stack([cov, dummies])
        cov_names = cov_names + [f"{name}={levels[c]}" for c in range(1, len(levels))]
    return blocks, cov, (tuple(cov_names) if cov is not None else None)


def design_inputs(layout: Layout, blocks=None, covariates=None, model=None
                  ) -> DesignInputs | None:
    """Validate ``blocks`` and ``covariates``, or take them from ``model`` (a
    :class:`famwise.model.ModelFit`) or from ``layout.design``.

    Returns None for one-way data (none of these), so the one-way engine
    runs unchanged.
    """
    import pandas as pd
    names = None
    if model is not None:
        if blocks is not None or covariates is not None:
            raise FamwiseInputError(
                "give either model= or blocks=/covariates=, not both")
        mdesign = getattr(model, "design", None)
        if mdesign is None or not hasattr(mdesign, "block_codes"):
            raise FamwiseInputError(
                f"model must be a fitted famwise model (famwise.model.fit_model); got "
                f"{type(model).__name__}")
        fitted_n = getattr(mdesign, "n_obs", None)
        if fitted_n is not None and int(fitted_n) != layout.n_total:
            raise FamwiseInputError(
                f"the model was fitted to {int(fitted_n)} values but the layout has "
                f"{layout.n_total}; fit the model to this layout")
        blocks, covariates, names = _design_arrays(mdesign)
    elif blocks is None and covariates is None and getattr(layout, "design", None) is not None:
        blocks, covariates, names = _design_arrays(layout.design)
    if blocks is None and covariates is None:
        return None
    n_total = layout.n_total
    if blocks is None:
        codes, labels = np.zeros(n_total, dtype=np.int64), ("all",)
    else:
        raw = blocks.to_numpy() if isinstance(blocks, (pd.Series, pd.Index)) else blocks
        raw = np.asarray(raw, dtype=object).ravel()
        if raw.size != n_total:
            raise FamwiseInputError(
                f"blocks has {raw.size} entries but the data have {n_total} values; "
                f"give one block label per value, in the layout's order")
        missing = pd.isna(raw)
        if missing.any():
            i = int(np.flatnonzero(missing)[0])
            raise FamwiseInputError(
                f"blocks has a missing label at row {int(layout.rows[i])}; give that row "
                f"a block or set it aside")
        codes, uniques = pd.factorize(raw, sort=False)
        codes = codes.astype(np.int64)
        labels = tuple(str(u) for u in uniques)
    if covariates is None:
        cov = np.empty((n_total, 0))
        cov_names: tuple = ()
    else:
        if isinstance(covariates, pd.DataFrame):
            names = [str(c) for c in covariates.columns]
            frame = covariates
        elif isinstance(covariates, pd.Series):
            names = [str(covariates.name or "covariate")]
            frame = covariates.to_frame()
        else:
            arr = np.asarray(covariates, dtype=object)
            if arr.ndim == 1:
                arr = arr[:, None]
            if arr.ndim != 2:
                raise FamwiseInputError(
                    f"covariates must be a vector or an (N, q) matrix; got shape {arr.shape}")
            frame = pd.DataFrame(arr)
        if names is None or len(names) != frame.shape[1]:
            names = [f"covariate {j + 1}" for j in range(frame.shape[1])]
        names = list(names)
        if frame.shape[0] != n_total:
            raise FamwiseInputError(
                f"covariates have {frame.shape[0]} rows but the data have {n_total} "
                f"values; give one row per value, in the layout's order")
        cols = []
        for j, name in enumerate(names):
            col = pd.to_numeric(frame.iloc[:, j], errors="coerce").to_numpy(dtype=float)
            bad = ~np.isfinite(col)
            if bad.any():
                i = int(np.flatnonzero(bad)[0])
                raise FamwiseInputError(
                    f"covariate {name!r} holds {frame.iloc[i, j]!r} at row "
                    f"{int(layout.rows[i])}; covariates must be finite numbers")
            cols.append(col)
        cov = np.column_stack(cols) if cols else np.empty((n_total, 0))
        cov_names = tuple(names)
    return DesignInputs(codes, labels, np.ascontiguousarray(cov, dtype=np.float64), cov_names)


def _components(incidence: np.ndarray) -> list[set]:
    """Connected groups of the bipartite group-block graph (group indices)."""
    k, b = incidence.shape
    seen, parts = set(), []
    for start in range(k):
        if start in seen:
            continue
        part, stack, blocks_seen = set(), [start], set()
        while stack:
            g = stack.pop()
            if g in part:
                continue
            part.add(g)
            for bl in np.flatnonzero(incidence[g]):
                if bl not in blocks_seen:
                    blocks_seen.add(bl)
                    stack.extend(int(x) for x in np.flatnonzero(incidence[:, bl]))
        seen |= part
        parts.append(part)
    return parts


def _not_estimable(layout, inputs, incidence, covariates_involved):
    parts = _components(incidence)
    if len(parts) > 1:
        small = min(parts, key=len)
        g = min(small)
        blocks = [inputs.block_labels[b] for b in np.flatnonzero(incidence[g])]
        others = sorted(layout.labels[x] for x in small if x != g)
        alone = f" (with {', '.join(map(repr, others))})" if others else ""
        raise FamwiseInputError(
            f"group {layout.labels[g]!r}{alone} is not connected to the other groups: "
            f"its blocks {blocks} hold no other group; its effect cannot be separated "
            f"from those blocks' effects (add plots of other groups to those blocks, "
            f"or drop the blocking)")
    if covariates_involved:
        raise FamwiseInputError(
            f"the covariates {list(inputs.covariate_names)} are collinear with the "
            f"groups (or blocks): the group effects cannot be separated from them; "
            f"drop the covariate that is fixed by the group")
    raise FamwiseInputError("the group effects are not estimable in this design")


@dataclass(frozen=True)
class PermutationDesign:
    """The parts of the block (and covariate) model a permutation leaves fixed.

    Rows are sorted by block, and within a block by cell (the block's
    largest group-cell first, then the other groups in code order), so each
    group-by-block cell is a run of positions ``cell_lo .. cell_hi - 1``.
    """

    k: int
    n_blocks: int
    q: int
    order: np.ndarray = field(repr=False)       # sorted position -> layout row
    r: np.ndarray = field(repr=False)           # permuted quantity, sorted
    xc: np.ndarray = field(repr=False)          # (N, q) block-centred covariates
    blk_lo: np.ndarray = field(repr=False)
    blk_c0: np.ndarray = field(repr=False)
    blk_c1: np.ndarray = field(repr=False)
    cell_lo: np.ndarray = field(repr=False)
    cell_hi: np.ndarray = field(repr=False)
    cell_group: np.ndarray = field(repr=False)
    cell_block: np.ndarray = field(repr=False)
    cell_n: np.ndarray = field(repr=False)
    n_g: np.ndarray = field(repr=False)
    n_b: np.ndarray = field(repr=False)
    orthogonal: bool
    chol: np.ndarray = field(repr=False)        # (k-1, k-1) lower factor of C
    cinv: np.ndarray = field(repr=False)        # (k, k), last row/column 0
    fmat: np.ndarray = field(repr=False)        # (k, q) (G'X^c) K^-1
    kinv: np.ndarray = field(repr=False)        # (q, q)
    gtilde: np.ndarray = field(repr=False)      # (N, k) M_Z G, sorted rows
    sstot: float
    df_error: int
    d_g: np.ndarray = field(repr=False)         # each group's residual df share
    leverage: np.ndarray = field(repr=False)    # full-model leverages, sorted
    scale: float


def _block_centre(v: np.ndarray, blocks: np.ndarray, nb: int) -> np.ndarray:
    """v minus its block mean (two passes, as ``group_stats``)."""
    n_b = np.bincount(blocks, minlength=nb).astype(np.float64)
    if v.ndim == 1:
        mean = np.bincount(blocks, weights=v, minlength=nb) / n_b
        dev = v - mean[blocks]
        return dev - (np.bincount(blocks, weights=dev, minlength=nb) / n_b)[blocks]
    return np.column_stack([_block_centre(v[:, j], blocks, nb) for j in range(v.shape[1])]) \
        if v.shape[1] else v.copy()


def permutation_design(layout: Layout, inputs: DesignInputs) -> PermutationDesign:
    """Prepare the fixed parts of the model for within-block permutation."""
    k, nb, q = layout.k, inputs.n_blocks, inputs.q
    n_total = layout.n_total
    codes, blocks = layout.codes, inputs.blocks
    incidence = np.zeros((k, nb), dtype=np.int64)
    np.add.at(incidence, (codes, blocks), 1)
    n_g = incidence.sum(axis=1).astype(np.float64)
    n_b = incidence.sum(axis=0).astype(np.float64)
    # Cell order within each block: the largest cell first (its sums follow
    # from the block totals), then the other groups by code.
    rank = np.zeros((k, nb), dtype=np.int64)
    for bl in range(nb):
        present = np.flatnonzero(incidence[:, bl])
        first = present[np.argmax(incidence[present, bl])]
        rest = [g for g in present if g != first]
        for pos, g in enumerate([first] + rest):
            rank[g, bl] = pos
    order = np.lexsort((np.arange(n_total), rank[codes, blocks], blocks))
    sc, sb = codes[order], blocks[order]
    # Centre (median first: exact shifts near 1e12), then within blocks.
    y = layout.values - float(np.median(layout.values))
    yc = _block_centre(y, blocks, nb)
    scale = float(np.sqrt(np.mean(yc * yc))) or 1.0
    xc = _block_centre(inputs.covariates, blocks, nb)
    names = inputs.covariate_names
    for j in range(q):
        rms = float(np.sqrt(np.mean(xc[:, j] ** 2)))
        spread = float(np.ptp(inputs.covariates[:, j]))
        if not rms > 1e-12 * max(spread, np.abs(inputs.covariates[:, j]).max(), 1e-300):
            where = "constant" if spread == 0 else "constant within every block"
            raise FamwiseInputError(
                f"covariate {names[j]!r} is {where}; it carries no information "
                f"beyond the blocks: drop it")
        xc[:, j] /= rms
    if q:
        kmat = xc.T @ xc
        ev = np.linalg.eigvalsh(kmat)
        if ev[0] <= RANK_TOL * ev[-1]:
            raise FamwiseInputError(
                f"the covariates {list(names)} are collinear (after the blocks); "
                f"drop one of them")
        kinv = np.linalg.inv(kmat)
        gx = np.zeros((k, q))
        np.add.at(gx, codes, xc)
        fmat = gx @ kinv
        beta0 = kinv @ (xc.T @ yc)
        r = yc - xc @ beta0                     # Freedman-Lane residuals
    else:
        kinv = np.zeros((0, 0))
        fmat = np.zeros((k, 0))
        gx = fmat
        r = yc
    cmat = np.diag(n_g) - (incidence / n_b) @ incidence.T - fmat @ gx.T
    cmat = 0.5 * (cmat + cmat.T)
    cr = cmat[:k - 1, :k - 1]
    ev = np.linalg.eigvalsh(cr) if k > 1 else np.ones(1)
    if k > 1 and ev[0] <= RANK_TOL * max(ev[-1], 1.0):
        conn = np.diag(n_g) - (incidence / n_b) @ incidence.T
        ev0 = np.linalg.eigvalsh(conn[:k - 1, :k - 1])
        _not_estimable(layout, inputs, incidence,
                       covariates_involved=q > 0 and ev0[0] > RANK_TOL * max(ev0[-1], 1.0))
    chol = np.linalg.cholesky(cr) if k > 1 else np.zeros((0, 0))
    cinv = np.zeros((k, k))
    if k > 1:
        cinv[:k - 1, :k - 1] = np.linalg.inv(cr)
    orthogonal = q == 0 and bool(np.allclose(
        incidence * n_total, np.outer(n_g, n_b), rtol=0, atol=1e-9))
    df_error = int(n_total - k - nb + 1 - q)
    if df_error < 1:
        raise FamwiseInputError(
            f"the model has {k + nb - 1 + q} terms (groups, blocks, covariates) for "
            f"{n_total} values: no degrees of freedom remain for error; use fewer "
            f"blocks or covariates, or more data")
    # M_Z G and the full model's leverages (the groups' share of residual df).
    gtilde = (codes[:, None] == np.arange(k)[None, :]).astype(np.float64)
    gtilde -= (incidence.T / n_b[:, None])[blocks]
    if q:
        gtilde -= xc @ fmat.T
    lev = 1.0 / n_b[blocks] + np.einsum("ij,jk,ik->i", xc, kinv, xc) \
        + np.einsum("ij,jk,ik->i", gtilde, cinv, gtilde)
    d_g = np.bincount(codes, weights=1.0 - lev, minlength=k)
    # Cells in sorted order.
    starts = np.concatenate([[0], np.flatnonzero((np.diff(sc) != 0) | (np.diff(sb) != 0)) + 1])
    ends = np.concatenate([starts[1:], [n_total]])
    cell_group = sc[starts].astype(np.int64)
    cell_block = sb[starts].astype(np.int64)
    blk_c0 = np.searchsorted(cell_block, np.arange(nb), side="left").astype(np.int64)
    blk_c1 = np.searchsorted(cell_block, np.arange(nb), side="right").astype(np.int64)
    rs = np.ascontiguousarray(r[order])
    blk_lo = starts[blk_c0].astype(np.int64)
    return PermutationDesign(
        k=k, n_blocks=nb, q=q, order=order, r=rs, xc=np.ascontiguousarray(xc[order]),
        blk_lo=blk_lo, blk_c0=blk_c0, blk_c1=blk_c1,
        cell_lo=starts.astype(np.int64), cell_hi=ends.astype(np.int64),
        cell_group=cell_group, cell_block=cell_block,
        cell_n=(ends - starts).astype(np.float64), n_g=n_g, n_b=n_b,
        orthogonal=orthogonal, chol=np.ascontiguousarray(chol), cinv=cinv,
        fmat=np.ascontiguousarray(fmat), kinv=np.ascontiguousarray(kinv),
        gtilde=np.ascontiguousarray(gtilde[order]), sstot=float(rs @ rs),
        df_error=df_error, d_g=d_g, leverage=lev[order], scale=scale)


def variance_terms(design: PermutationDesign, family: Family, statistic: str):
    """The contrasts' variance coefficients in compressed sparse rows.

    Pooled: v_j = MSE * D_j with D_j = w_j' C^- w_j (one column).  Welch:
    v_j = sum_g H_jg s_g^2, the exact variance of the estimate when group g
    has error variance s_g^2, H_jg = sum over group g's rows of h_ji^2,
    with h_j = M_Z G C^- w_j the estimate's coefficients on the data.
    """
    weights = np.asarray(family.weights, dtype=np.float64)
    m = weights.shape[0]
    if statistic == "pooled":
        dj = np.einsum("jg,gh,jh->j", weights, design.cinv, weights)
        return np.arange(m + 1, dtype=np.int64), np.zeros(m, dtype=np.int64), dj
    if design.orthogonal:
        hmat = weights * weights / design.n_g[None, :]
    else:
        h = design.gtilde @ (design.cinv @ weights.T)          # (N, m)
        sc = np.empty(design.r.size, dtype=np.int64)
        for c in range(design.cell_group.size):
            sc[design.cell_lo[c]:design.cell_hi[c]] = design.cell_group[c]
        hmat = np.zeros((m, design.k))
        np.add.at(hmat.T, sc, h * h)
    rows, cols = np.nonzero(hmat)
    ptr = np.zeros(m + 1, dtype=np.int64)
    np.cumsum(np.bincount(rows, minlength=m), out=ptr[1:])
    return ptr, cols.astype(np.int64), hmat[rows, cols]


def _solve(design: PermutationDesign, s: np.ndarray, u: np.ndarray):
    """tau (last group 0), Q and the residual SS for group sums s, u = X^c'r."""
    q_vec = s - design.fmat @ u if design.q else s.copy()
    if design.orthogonal:
        tau = q_vec / design.n_g
    else:
        tau = design.cinv @ q_vec
    sse = design.sstot - float(tau @ q_vec)
    if design.q:
        sse -= float(u @ design.kinv @ u)
    return tau, q_vec, sse


def model_observed(design: PermutationDesign, family: Family, statistic: str,
                   alternative: str) -> ObservedStatistics:
    """The observed estimates, standard errors and statistics of the model."""
    k = design.k
    sc = np.empty(design.r.size, dtype=np.int64)
    sb = np.empty(design.r.size, dtype=np.int64)
    for c in range(design.cell_group.size):
        sc[design.cell_lo[c]:design.cell_hi[c]] = design.cell_group[c]
        sb[design.cell_lo[c]:design.cell_hi[c]] = design.cell_block[c]
    r = design.r
    s = np.bincount(sc, weights=r, minlength=k)
    u = design.xc.T @ r if design.q else np.zeros(0)
    tau, _, sse = _solve(design, s, u)
    weights = np.asarray(family.weights, dtype=np.float64)
    est = weights @ tau
    ptr, hcol, hval = variance_terms(design, family, statistic)
    if statistic == "pooled":
        s2 = np.array([max(sse, 0.0) / design.df_error])
    else:
        tbar = np.bincount(sb, weights=tau[sc], minlength=design.n_blocks) / design.n_b
        e = r - tau[sc] + tbar[sb]
        if design.q:
            e -= design.xc @ (design.kinv @ u - design.fmat.T @ tau)
        s2 = np.bincount(sc, weights=e * e, minlength=k) / design.d_g
    se2 = np.add.reduceat(hval * s2[hcol], ptr[:-1]) if hval.size else np.zeros(est.size)
    se2 = np.where(np.diff(ptr) > 0, se2, 0.0)
    bad = ~(se2 > 0)
    if np.any(bad):
        j = int(np.flatnonzero(bad)[0])
        raise FamwiseInputError(
            f"comparison {family.names[j]!r} has a zero standard error (no residual "
            f"spread left by the model); resampled statistics are undefined for it")
    se = np.sqrt(se2)
    t = est / se
    u_or = np.abs(t) if alternative == "two-sided" else (t if alternative == "greater" else -t)
    thr = u_or - (TIE_RTOL * np.abs(u_or) + TIE_ATOL)
    dj = np.einsum("jg,gh,jh->j", weights, design.cinv, weights)
    se2_floor = (SE_FLOOR * design.scale) ** 2 * dj
    return ObservedStatistics(est, se, t, u_or, thr, se2_floor)


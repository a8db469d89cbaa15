"""Analysis of variance of the additive model and the field-trial figures.

* :func:`anova_frame`: the table with each term adjusted for all the others
  (``kind="adjusted"``: the extra residual sum of squares when the term is
  left out; for an additive model without interactions this is what is
  often called type II, and equals type III), or the sequential table
  (``kind="sequential"``: blocks first, then covariates, then the groups,
  each adjusted for the terms before it; its sums of squares add up to the
  corrected total).  Group last means the sequential and adjusted group
  lines agree.
* :func:`group_test`: F and p for equal adjusted means.
* :func:`blocking_efficiency`: relative efficiency of the blocking against a
  completely randomised layout (Cochran & Cox 1957, section 4.37; Gomez &
  Gomez 1984, section 2.2.3 and 2.3.3): the error mean square the trial
  would have had without blocks,
  ``MSE_crd = (sum_f df_f MS_f + (df_g + df_e) MSE) / (sum_f df_f + df_g + df_e)``
  (for a complete block design ``((r-1) E_b + r (t-1) E_e) / ((rt-1) E_e)``,
  for a Latin square ``(E_r + E_c + (t-1) E_e) / ((t+1) E_e)``), over the
  observed ``MSE``; with fewer than 20 error df multiplied by Fisher's
  precision factor ``(n1+1)(n2+3) / ((n1+3)(n2+1))`` with ``n1`` the blocked
  and ``n2`` the unblocked error df, as Gomez & Gomez do.  ``MS_f`` is the
  block mean square adjusted for the other terms (with complete blocks the
  same as the sequential one).
* :func:`nonadditivity`: Tukey's (1949) one-degree-of-freedom test of
  group x block non-additivity, in the general form that adds the squared
  fitted values of the additive model as one extra regressor (Milliken &
  Graybill 1970); for a complete two-way layout it is Tukey's statistic.

References
----------
Cochran, W. G. and Cox, G. M. (1957). *Experimental Designs*, 2nd ed. Wiley.
Gomez, K. A. and Gomez, A. A. (1984). *Statistical Procedures for
Agricultural Research*, 2nd ed. Wiley.
Tukey, J. W. (1949). One degree of freedom for non-additivity. *Biometrics*
5(3):232-242. doi:10.2307/3001938
Milliken, G. A. and Graybill, F. A. (1970). Extensions of the general linear
hypothesis model. *JASA* 65(330):797-807. doi:10.1080/01621459.1970.10481125
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

__all__ = ["anova_frame", "group_test", "blocking_efficiency", "BlockingEfficiency",
           "nonadditivity", "NonAdditivity", "term_sums_of_squares"]


def _rss(X: np.ndarray, y: np.ndarray) -> float:
    if X.shape[1] == 0:
        return float(y @ y)
    Q, _ = np.linalg.qr(X)
    r = y - Q @ (Q.T @ y)
    return float(r @ r)




def term_sums_of_squares(fit, kind: str = "adjusted") -> list[tuple[str, str, int, float]]:
    """Return ``(name, kind, df, ss)`` per term, adjusted or sequential."""
    if kind not in ("adjusted", "sequential"):
        from ..core.errors import FamwiseInputError
        raise FamwiseInputError(f"kind must be 'adjusted' or 'sequential'; got {kind!r}")
    y = fit.y_shifted
    if fit.is_oneway:
        # closed form on median-shifted means
        n = fit.n.astype(float)
        grand = float(np.sum(n * fit.mean_shifted) / n.sum())
        ss_b = float(np.sum(n * (fit.mean_shifted - grand) ** 2))
        return [(fit.terms[0].name, "group", fit.terms[0].df, ss_b)]
    X = fit.design.matrix()
    N = y.size
    ones = np.ones((N, 1))
    group, others = fit.terms[0], fit.terms[1:]
    rss_full = fit.ss_residual
    out = []
    if kind == "adjusted":
        for t in others:
            keep = np.ones(X.shape[1], bool)
            keep[t.columns] = False
            out.append((t.name, t.kind, t.df, _rss(X[:, keep], y) - rss_full))
        keep = np.ones(X.shape[1], bool)
        keep[group.columns] = False
        ss_g = _rss(np.hstack([ones, X[:, keep]]), y) - rss_full
        out.append((group.name, "group", group.df, ss_g))
        return out
    cols = [ones]
    prev = _rss(ones, y)
    for t in others:
        cols.append(X[:, t.columns])
        cur = _rss(np.hstack(cols), y)
        out.append((t.name, t.kind, t.df, prev - cur))
        prev = cur
    out.append((group.name, "group", group.df, prev - rss_full))
    return out


def anova_frame(fit, kind: str = "adjusted"):
    """Return the analysis-of-variance table as a DataFrame.

    Rows: each blocking factor, each covariate, the groups, ``residual`` and
    ``total`` (corrected; in the adjusted table the term lines need not add
    up to it unless the design is balanced).  Columns: ``kind``, ``df``,
    ``sum_of_squares``, ``mean_square``, ``f``, ``p``.
    """
    import pandas as pd
    from scipy import stats as st
    rows = term_sums_of_squares(fit, kind)
    y = fit.y_shifted
    centred = y - y.mean()
    ss_total = float(centred @ centred)
    names, kinds, dfs, sss, mss, fs, ps = [], [], [], [], [], [], []
    for name, k, df, ss in rows:
        ss = max(ss, 0.0)
        ms = ss / df if df else np.nan
        f = ms / fit.mse
        names.append(name); kinds.append(k); dfs.append(df); sss.append(ss)
        mss.append(ms); fs.append(f); ps.append(float(st.f.sf(f, df, fit.df)))
    names += ["residual", "total"]
    kinds += ["residual", "total"]
    dfs += [fit.df, fit.n_obs - 1]
    sss += [fit.ss_residual, ss_total]
    mss += [fit.mse, np.nan]
    fs += [np.nan, np.nan]
    ps += [np.nan, np.nan]
    frame = pd.DataFrame({"kind": kinds, "df": dfs, "sum_of_squares": sss,
                          "mean_square": mss, "f": fs, "p": ps},
                         index=pd.Index(names, name="source"))
    frame.attrs["table"] = kind
    return frame


def group_test(fit) -> tuple[float, int, int, float]:
    """Return ``(F, df1, df2, p)`` for equal adjusted group means."""
    from scipy import stats as st
    name, _, df1, ss = [r for r in term_sums_of_squares(fit, "adjusted") if r[1] == "group"][0]
    f = max(ss, 0.0) / df1 / fit.mse
    return float(f), int(df1), int(fit.df), float(st.f.sf(f, df1, fit.df))


@dataclass(frozen=True)
class BlockingEfficiency:
    """Relative efficiency of the blocking against a completely randomised layout.

    Attributes
    ----------
    relative_efficiency : float
        ``MSE_crd / MSE``, times the precision factor when the error df are
        under 20 (Gomez & Gomez 1984).  1.5 means the blocked trial gave the
        precision an unblocked one would need 50% more plots for.
    unadjusted : float
        ``MSE_crd / MSE`` without the precision factor.
    mse_unblocked : float
        The estimated error mean square without the blocks.
    precision_factor : float
    factor_applied : bool
    blocks : tuple of str
    """

    relative_efficiency: float
    unadjusted: float
    mse_unblocked: float
    precision_factor: float
    factor_applied: bool
    blocks: tuple[str, ...]

    def sentence(self) -> str:
        pct = 100.0 * (self.relative_efficiency - 1.0)
        names = " and ".join(repr(b) for b in self.blocks)
        if pct >= 0:
            gain = (f"an unblocked trial would have needed about {pct:.0f}% more plots "
                    f"for the same precision")
        else:
            gain = ("the blocking cost precision (the blocks differ less than their "
                    "degrees of freedom cost)")
        note = " (with the small-df precision factor)" if self.factor_applied else ""
        return (f"Blocking by {names}: relative efficiency {self.relative_efficiency:.3g}"
                f"{note} against a completely randomised layout; {gain}.")

    def to_dict(self) -> dict:
        return {"relative_efficiency": self.relative_efficiency, "unadjusted": self.unadjusted,
                "mse_unblocked": self.mse_unblocked, "precision_factor": self.precision_factor,
                "factor_applied": self.factor_applied, "blocks": list(self.blocks)}


def blocking_efficiency(fit) -> BlockingEfficiency | None:
    """Return the relative efficiency of the blocking, or None without blocks."""
    blocks = [t for t in fit.terms if t.kind == "block"]
    if not blocks:
        return None
    rows = {name: (df, ss) for name, kind, df, ss in term_sums_of_squares(fit, "adjusted")
            if kind == "block"}
    df_blocks = sum(rows[t.name][0] for t in blocks)
    ss_blocks = sum(max(rows[t.name][1], 0.0) for t in blocks)
    df_g, df_e = fit.k - 1, fit.df
    mse_crd = (ss_blocks + (df_g + df_e) * fit.mse) / (df_blocks + df_g + df_e)
    unadjusted = mse_crd / fit.mse
    n1, n2 = df_e, df_e + df_blocks
    factor = (n1 + 1) * (n2 + 3) / ((n1 + 3) * (n2 + 1))
    applied = n1 < 20
    re = unadjusted * factor if applied else unadjusted
    return BlockingEfficiency(float(re), float(unadjusted), float(mse_crd), float(factor),
                              applied, tuple(t.name for t in blocks))


@dataclass(frozen=True)
class NonAdditivity:
    """Tukey's one-degree-of-freedom test of non-additivity.

    ``ss`` is the sum of squares for non-additivity (1 df), ``f`` its F
    ratio against the remaining residual on ``df_residual`` df, ``p`` the
    upper-tail probability.
    """

    ss: float
    f: float
    df_residual: int
    p: float


def nonadditivity(fit) -> NonAdditivity | None:
    """Tukey's (1949) test, or None without blocks or with too few residual df."""
    if not any(t.kind == "block" for t in fit.terms) or fit.df < 2:
        return None
    from scipy import stats as st
    X = fit.design.matrix()
    yhat = fit.fitted - fit.shift
    q = yhat ** 2
    q = q - q.mean()
    scale = np.sqrt(np.mean(q * q))
    if not scale > 0:
        return None
    aug = np.hstack([X, (q / scale)[:, None]])
    rss_aug = _rss(aug, fit.y_shifted)
    ss = max(fit.ss_residual - rss_aug, 0.0)
    df2 = fit.df - 1
    if not rss_aug > 0:
        return None
    f = ss / (rss_aug / df2)
    return NonAdditivity(float(ss), float(f), int(df2), float(st.f.sf(f, 1, df2)))

"""The validated data every procedure works on: values, group codes, labels.

A :class:`Layout` is built by :mod:`famwise.intake` from a file or DataFrame,
or directly from arrays with :meth:`Layout.from_groups` (handy in tests and
notebooks).  Groups are numbered ``0 .. k-1`` in the order of ``labels``;
that order is the order of first appearance in the input unless the caller
gives one (see :func:`famwise.intake.read`).
"""

from __future__ import annotations

from dataclasses import dataclass, field
from functools import cached_property
from typing import Sequence

import numpy as np

from .errors import FamwiseInputError

__all__ = ["Layout", "Design", "GroupStats", "group_stats"]


@dataclass(frozen=True)
class GroupStats:
    """Per-group size, mean and unbiased variance, computed stably.

    Means use a corrected two-pass sum and variances sum squares of deviations
    from the group mean, so adding a constant to every value (for example
    1e12) leaves the variances unchanged when the shifted values are exactly
    representable.
    """

    n: np.ndarray      # (k,) int64
    mean: np.ndarray   # (k,) float64
    var: np.ndarray    # (k,) float64, ddof = 1 (nan for n < 2)

    @property
    def k(self) -> int:
        return int(self.n.size)

    @property
    def sd(self) -> np.ndarray:
        return np.sqrt(self.var)

    @property
    def df_error(self) -> int:
        """Error degrees of freedom of the one-way model, N - k."""
        return int(self.n.sum() - self.n.size)

    @property
    def mse(self) -> float:
        """Pooled within-group variance (the ANOVA mean square error)."""
        return float(np.sum((self.n - 1) * self.var) / self.df_error)


def group_stats(values: np.ndarray, codes: np.ndarray, k: int) -> GroupStats:
    """Return per-group n, mean and variance by two passes over the data."""
    n = np.bincount(codes, minlength=k).astype(np.int64)
    safe_n = np.maximum(n, 1)
    mean = np.bincount(codes, weights=values, minlength=k) / safe_n
    dev = values - mean[codes]
    # Second pass: correct the mean by the mean deviation (removes the
    # rounding of the first sum), then sum squared deviations from it.
    corr = np.bincount(codes, weights=dev, minlength=k) / safe_n
    mean = mean + corr
    dev = dev - corr[codes]
    ss = np.bincount(codes, weights=dev * dev, minlength=k)
    with np.errstate(invalid="ignore", divide="ignore"):
        var = np.where(n > 1, ss / np.maximum(n - 1, 1), np.nan)
    return GroupStats(n=n, mean=mean, var=var)


def _label_codes(labels) -> tuple[np.ndarray, tuple[str, ...]]:
    """Return int64 codes (order of first appearance) and the level labels."""
    arr = [str(x) for x in labels]
    order: dict[str, int] = {}
    codes = np.fromiter((order.setdefault(x, len(order)) for x in arr), dtype=np.int64,
                        count=len(arr))
    return codes, tuple(order)


@dataclass(frozen=True, eq=False)
class Design:
    """Blocking factors and covariates that go with a layout's observations.

    Plain data, built by :mod:`famwise.intake` (``block=``, ``covariates=``)
    or by :meth:`Design.from_arrays`; :func:`famwise.model.fit_model` turns it
    into the additive model ``response = group + block(s) + covariate(s)``.

    Attributes
    ----------
    block_names : tuple of str
        Names of the blocking factors (none, one, or two for row and column
        blocks of a Latin square), usually the column names.
    block_codes : tuple of ndarray of int64, shape (N,) each
        Level index of each observation, ``0 .. b-1`` per factor.
    block_labels : tuple of tuple of str
        ``block_labels[f][c]`` names level ``c`` of factor ``f``.
    covariate_names : tuple of str
    covariates : ndarray of float64, shape (N, p)
        One column per covariate (``p = 0`` when there are none).
    """

    block_names: tuple[str, ...] = ()
    block_codes: tuple[np.ndarray, ...] = ()
    block_labels: tuple[tuple[str, ...], ...] = ()
    covariate_names: tuple[str, ...] = ()
    covariates: np.ndarray = field(default=None, repr=False)

    def __post_init__(self):
        names = tuple(str(x) for x in self.block_names)
        codes = tuple(np.ascontiguousarray(c, dtype=np.int64) for c in self.block_codes)
        labels = tuple(tuple(str(x) for x in lv) for lv in self.block_labels)
        if not (len(names) == len(codes) == len(labels)):
            raise FamwiseInputError(
                f"a design needs one name, one code array and one label set per blocking "
                f"factor; got {len(names)}, {len(codes)} and {len(labels)}")
        if len(names) > 2:
            raise FamwiseInputError(
                f"at most two blocking factors (rows and columns) are supported; got "
                f"{len(names)}: {list(names)}")
        cov_names = tuple(str(x) for x in self.covariate_names)
        cov = (np.empty((codes[0].size if codes else 0, 0)) if self.covariates is None
               else np.asarray(self.covariates, dtype=np.float64))
        if cov.ndim == 1:
            cov = cov[:, None]
        cov = np.ascontiguousarray(cov)
        if cov.shape[1] != len(cov_names):
            raise FamwiseInputError(
                f"got {cov.shape[1]} covariate columns but {len(cov_names)} covariate names")
        for c, lv, nm in zip(codes, labels, names):
            if c.ndim != 1 or (c.size and (c.min() < 0 or c.max() >= len(lv))):
                raise FamwiseInputError(
                    f"block codes of {nm!r} must be 1-D integers in 0..{len(lv) - 1}")
            c.flags.writeable = False
        cov.flags.writeable = False
        object.__setattr__(self, "block_names", names)
        object.__setattr__(self, "block_codes", codes)
        object.__setattr__(self, "block_labels", labels)
        object.__setattr__(self, "covariate_names", cov_names)
        object.__setattr__(self, "covariates", cov)

    @classmethod
    def from_arrays(cls, blocks=None, covariates=None) -> "Design":
        """Build a design from label arrays and numeric arrays.

        Parameters
        ----------
        blocks : mapping name -> labels, or sequence of label arrays, optional
            One or two blocking factors; labels are read as text, levels
            numbered in order of first appearance.
        covariates : mapping name -> values, (N,) or (N, p) array, optional
        """
        names, codes, labels = [], [], []
        if blocks is not None:
            items = (list(blocks.items()) if isinstance(blocks, dict) else
                     [(f"block{i + 1}" if i else "block", b) for i, b in enumerate(blocks)])
            for name, lab in items:
                c, lv = _label_codes(lab)
                names.append(name)
                codes.append(c)
                labels.append(lv)
        cov_names, cov = (), None
        if covariates is not None:
            if isinstance(covariates, dict):
                cov_names = tuple(covariates)
                cov = np.column_stack([np.asarray(v, dtype=np.float64)
                                       for v in covariates.values()])
            else:
                cov = np.asarray(covariates, dtype=np.float64)
                cov = cov[:, None] if cov.ndim == 1 else cov
                cov_names = tuple(f"covariate{i + 1}" if i else "covariate"
                                  for i in range(cov.shape[1]))
        if cov is None:
            n = codes[0].size if codes else 0
            cov = np.empty((n, 0))
        return cls(tuple(names), tuple(codes), tuple(labels), cov_names, cov)

    @property
    def n_obs(self) -> int:
        if self.block_codes:
            return int(self.block_codes[0].size)
        return int(self.covariates.shape[0])

    @property
    def is_empty(self) -> bool:
        """True when the design has neither blocks nor covariates (one-way)."""
        return not self.block_names and not self.covariate_names

    def take(self, index) -> "Design":
        """Return the design restricted to observations ``index`` (levels kept)."""
        return Design(self.block_names, tuple(c[index] for c in self.block_codes),
                      self.block_labels, self.covariate_names, self.covariates[index])


@dataclass(frozen=True)
class Layout:
    """Observations of one response, with a group code for each.

    Attributes
    ----------
    values : ndarray of float64, shape (N,)
        The usable response values, in input order.
    codes : ndarray of int64, shape (N,)
        Group index of each value, ``0 .. k-1``.
    labels : tuple of str
        Group labels; ``labels[c]`` names code ``c``.
    rows : ndarray of int64, shape (N,)
        1-based row number in the source of each value (see
        :mod:`famwise.intake` for how rows are counted).
    response, group, source : str
        Names of the response and group columns and of the source.
    design : Design or None
        Blocking factors and covariates of the observations (None: the
        one-way layout).  :func:`famwise.model.fit_model` reads it.
    censored : ndarray of bool, shape (N,), or None
        True where the observation is a non-detect: the value lies below
        ``values[i]``, its detection limit (left-censored).  None (the
        default) when every value was measured.
    """

    values: np.ndarray
    codes: np.ndarray
    labels: tuple[str, ...]
    rows: np.ndarray = field(repr=False, default=None)
    response: str = "response"
    group: str = "group"
    source: str = "<arrays>"
    design: Design | None = field(default=None, repr=False, compare=False)
    censored: np.ndarray | None = field(repr=False, default=None, compare=False)

    def __post_init__(self):
        values = np.ascontiguousarray(self.values, dtype=np.float64)
        codes = np.ascontiguousarray(self.codes, dtype=np.int64)
        if values.ndim != 1 or codes.shape != values.shape:
            raise FamwiseInputError(
                f"values and group codes must be 1-D of one length; got shapes "
                f"{values.shape} and {codes.shape}")
        rows = (np.arange(1, values.size + 1, dtype=np.int64)
                if self.rows is None else np.asarray(self.rows, dtype=np.int64))
        object.__setattr__(self, "values", values)
        object.__setattr__(self, "codes", codes)
        object.__setattr__(self, "rows", rows)
        object.__setattr__(self, "labels", tuple(str(x) for x in self.labels))
        design = self.design
        if design is not None:
            if not isinstance(design, Design):
                raise FamwiseInputError(
                    f"design must be a famwise.core.layout.Design; got {type(design).__name__}")
            if design.is_empty:
                design = None
            elif design.n_obs != values.size:
                raise FamwiseInputError(
                    f"the design describes {design.n_obs} observations but the layout "
                    f"has {values.size} values")
            object.__setattr__(self, "design", design)
        if self.censored is not None:
            cens = np.ascontiguousarray(self.censored, dtype=bool)
            if cens.shape != values.shape:
                raise FamwiseInputError(
                    f"censored flags must match the values; got shapes {cens.shape} "
                    f"and {values.shape}")
            if not cens.any():
                cens = None
            else:
                cens.flags.writeable = False
            object.__setattr__(self, "censored", cens)
        values.flags.writeable = False
        codes.flags.writeable = False

    @classmethod
    def from_groups(cls, groups: Sequence[Sequence[float]],
                    labels: Sequence[str] | None = None, *,
                    response: str = "response", group: str = "group",
                    censored: Sequence[Sequence[bool]] | None = None) -> "Layout":
        """Build a layout from one sequence of values per group.

        ``censored`` (one sequence of flags per group) marks non-detects,
        whose value is then their detection limit.
        """
        arrays = [np.asarray(g, dtype=np.float64).ravel() for g in groups]
        if labels is None:
            labels = [str(i) for i in range(len(arrays))]
        if len(labels) != len(arrays):
            raise FamwiseInputError(
                f"got {len(arrays)} groups but {len(labels)} labels")
        values = np.concatenate(arrays) if arrays else np.empty(0)
        codes = np.repeat(np.arange(len(arrays)), [a.size for a in arrays])
        flags = None
        if censored is not None:
            parts = [np.asarray(c, dtype=bool).ravel() for c in censored]
            if len(parts) != len(arrays) or any(p.size != a.size for p, a in zip(parts, arrays)):
                raise FamwiseInputError("censored must give one flag per value, per group")
            flags = np.concatenate(parts) if parts else np.empty(0, dtype=bool)
        return cls(values=values, codes=codes, labels=tuple(labels),
                   response=response, group=group, censored=flags)

    def with_design(self, blocks=None, covariates=None) -> "Layout":
        """Return this layout with blocks and covariates (see :meth:`Design.from_arrays`)."""
        from dataclasses import replace
        return replace(self, design=Design.from_arrays(blocks, covariates))

    @property
    def is_oneway(self) -> bool:
        """True when the layout has neither blocks nor covariates."""
        return self.design is None

    @property
    def k(self) -> int:
        """Number of groups."""
        return len(self.labels)

    @property
    def n_total(self) -> int:
        return int(self.values.size)

    @property
    def has_censoring(self) -> bool:
        """True when some values are non-detects (left-censored)."""
        return self.censored is not None

    @property
    def censored_flags(self) -> np.ndarray:
        """The censoring flags, all False when nothing is censored."""
        if self.censored is None:
            return np.zeros(self.values.size, dtype=bool)
        return self.censored

    @cached_property
    def stats(self) -> GroupStats:
        """Per-group n, mean and variance (computed once, then cached)."""
        return group_stats(self.values, self.codes, self.k)

    def group_values(self, code: int) -> np.ndarray:
        """Return the values of one group, in input order."""
        return self.values[self.codes == code]

    def split(self) -> list[np.ndarray]:
        """Return the values of every group, in label order."""
        order = np.argsort(self.codes, kind="stable")
        bounds = np.cumsum(np.bincount(self.codes, minlength=self.k))[:-1]
        return np.split(self.values[order], bounds)

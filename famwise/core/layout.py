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

__all__ = ["Layout", "GroupStats", "group_stats"]


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
    """

    values: np.ndarray
    codes: np.ndarray
    labels: tuple[str, ...]
    rows: np.ndarray = field(repr=False, default=None)
    response: str = "response"
    group: str = "group"
    source: str = "<arrays>"

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
        values.flags.writeable = False
        codes.flags.writeable = False

    @classmethod
    def from_groups(cls, groups: Sequence[Sequence[float]],
                    labels: Sequence[str] | None = None, *,
                    response: str = "response", group: str = "group") -> "Layout":
        """Build a layout from one sequence of values per group."""
        arrays = [np.asarray(g, dtype=np.float64).ravel() for g in groups]
        if labels is None:
            labels = [str(i) for i in range(len(arrays))]
        if len(labels) != len(arrays):
            raise FamwiseInputError(
                f"got {len(arrays)} groups but {len(labels)} labels")
        values = np.concatenate(arrays) if arrays else np.empty(0)
        codes = np.repeat(np.arange(len(arrays)), [a.size for a in arrays])
        return cls(values=values, codes=codes, labels=tuple(labels),
                   response=response, group=group)

    @property
    def k(self) -> int:
        """Number of groups."""
        return len(self.labels)

    @property
    def n_total(self) -> int:
        return int(self.values.size)

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

"""Compact letter display: groups that share a letter are not declared different.

Given which pairs of groups a procedure declared different, the display
gives each group a string of letters such that two groups share a letter
exactly when they were *not* declared different, every group has at least
one letter, and no letter of any group can be removed without breaking that
(no redundant letter).  The letter ``a`` goes to the group with the largest
mean, and letters run down the means.

Algorithm (Piepho 2004, sections 2-3): start with one letter shared by all
groups.  For each pair declared different, every letter column holding both
is *inserted* as two copies, one without each of the pair, and any column
that is now contained in another is *absorbed* (dropped).  A final *sweep*
removes, letter by letter, each group's membership that no pair needs (a
membership of group g in column c is needed when some other group in c shares
no other column with g, or when c is g's only letter).  The insert-absorb
columns are the maximal sets of mutually not-different groups, so for
patterns with many such sets (rare in practice: they arise when the decisions
do not follow the order of the means) the column count can grow quickly; past
``max_columns`` the display is built instead by a greedy cover of the
not-different pairs with such sets, then swept the same way.  Both routes
give a correct, non-redundant display; the route used is recorded in
:attr:`LetterDisplay.method`.

Letter names: up to 26 letters use ``a..z``; up to 52 continue with
``A..Z``; beyond 52 every letter is a code of equal width over ``a..z``
(``aa, ab, ..., zz``, then three characters) and a group's letters are
separated by a space, so the string can be read back unambiguously.

References
----------
Piepho, H.-P. (2004). An algorithm for a letter-based representation of
all-pairwise comparisons. *J. Comput. Graph. Stat.* 13(2):456-466.
doi:10.1198/1061860043515
"""

from __future__ import annotations

import string
from dataclasses import dataclass, field
from typing import Sequence

import numpy as np
import pandas as pd

from ..core.errors import FamwiseInputError

__all__ = ["LetterDisplay", "letter_display", "compact_letters", "reject_matrix",
           "letter_names"]


@dataclass(frozen=True)
class LetterDisplay:
    """A compact letter display.

    Attributes
    ----------
    letters : tuple of str
        One string per group, in group order.
    matrix : ndarray of bool, shape (k, L)
        ``matrix[g, c]``: group ``g`` carries letter ``c``; columns in letter
        order (column 0 is ``a`` and holds the largest mean).
    names : tuple of str
        The letter of each column.
    method : {"insert-absorb", "greedy-cover"}
        Which route built the columns (see the module notes).
    """

    letters: tuple[str, ...]
    matrix: np.ndarray = field(repr=False)
    names: tuple[str, ...] = field(repr=False)
    method: str = "insert-absorb"

    def to_frame(self, labels: Sequence[str] | None = None,
                 means: Sequence[float] | None = None) -> pd.DataFrame:
        """Return a table with one row per group: its label, mean, letters."""
        k = len(self.letters)
        data = {"group": list(labels) if labels is not None else list(range(k))}
        if means is not None:
            data["mean"] = np.asarray(means, dtype=float)
        data["letters"] = list(self.letters)
        return pd.DataFrame(data)


def letter_names(count: int) -> tuple[str, ...]:
    """Return the names of ``count`` letters (see the module notes)."""
    lower, upper = string.ascii_lowercase, string.ascii_uppercase
    if count <= 26:
        return tuple(lower[:count])
    if count <= 52:
        return tuple(lower) + tuple(upper[:count - 26])
    width = 2
    while 26 ** width < count:
        width += 1
    names = []
    for i in range(count):
        digits = []
        for _ in range(width):
            i, r = divmod(i, 26)
            digits.append(lower[r])
        names.append("".join(reversed(digits)))
    return tuple(names)


def reject_matrix(table: pd.DataFrame, labels: Sequence[str]) -> np.ndarray:
    """Return the symmetric k x k matrix of pairs a comparisons table rejected.

    Pairs the table does not hold (for example in a vs-reference family) are
    treated as not declared different.
    """
    for col in ("group_a", "group_b", "reject"):
        if col not in table.columns:
            raise FamwiseInputError(
                f"comparisons table lacks the column {col!r}; pass a table made by a "
                f"famwise procedure or a k x k reject matrix")
    labels = [str(x) for x in labels]
    index = {lab: i for i, lab in enumerate(labels)}
    if len(index) != len(labels):
        raise FamwiseInputError("labels must be distinct")
    k = len(labels)
    out = np.zeros((k, k), dtype=bool)
    for name, a, b, rej in zip(table.get("comparison", table["group_a"]),
                               table["group_a"], table["group_b"], table["reject"]):
        if b == "" or b is None:
            raise FamwiseInputError(
                f"letters need differences of two groups; comparison {name!r} is a "
                f"general contrast")
        for g in (a, b):
            if str(g) not in index:
                raise FamwiseInputError(
                    f"comparison {name!r}: group {g!r} is not among the labels "
                    f"{labels}")
        i, j = index[str(a)], index[str(b)]
        out[i, j] = out[j, i] = bool(rej)
    return out


def _check(means, reject) -> tuple[np.ndarray, np.ndarray]:
    means = np.asarray(means, dtype=np.float64).ravel()
    k = means.size
    if k == 0:
        raise FamwiseInputError("means: need at least one group")
    if not np.all(np.isfinite(means)):
        raise FamwiseInputError("means must be finite numbers")
    reject = np.asarray(reject)
    if reject.shape != (k, k):
        raise FamwiseInputError(
            f"reject matrix must be {k} x {k} (one row and column per mean); got "
            f"shape {reject.shape}")
    if reject.dtype != bool:
        if not np.all(np.isin(reject, (0, 1))):
            raise FamwiseInputError("reject matrix must hold True/False (or 1/0)")
        reject = reject.astype(bool)
    if not np.array_equal(reject, reject.T):
        i, j = np.argwhere(reject != reject.T)[0]
        raise FamwiseInputError(
            f"reject matrix must be symmetric; entries ({i}, {j}) and ({j}, {i}) differ")
    reject = reject.copy()
    np.fill_diagonal(reject, False)
    return means, reject


def _insert_absorb(reject: np.ndarray, order: np.ndarray, max_columns: int):
    """Piepho's insert and absorb steps; None when the columns outgrow the cap.

    The pairs are taken one group at a time: for group ``i`` and the set ``J``
    of groups declared different from it, inserting the pairs ``(i, j)``,
    ``j`` in ``J``, one after another and absorbing turns every column ``C``
    holding ``i`` and some of ``J`` into ``C - {i}`` and ``C - J`` (the
    intermediate columns are contained in these and are absorbed), so one
    vectorised step per group gives the same columns as one step per pair.
    """
    k = reject.shape[0]
    cols = np.ones((1, k), dtype=bool)
    for i in order.tolist():
        partners = reject[i]
        if not partners.any():
            continue
        hit = cols[:, i] & (cols.astype(np.int32) @ partners.astype(np.int32) > 0)
        if not hit.any():
            continue
        old = cols[hit]
        without_i = old.copy()
        without_i[:, i] = False
        without_partners = old & ~partners
        kept = cols[~hit]
        new = np.vstack([without_i, without_partners])
        new = new[new.any(axis=1)]
        # Absorb.  The kept columns were maximal and the new ones lie inside
        # the split ones, so only new columns can be contained in another.
        everything = np.vstack([kept, new])
        outside = (~everything).astype(np.int32)
        # contained[a, b]: new column a has no member outside column b
        contained = (new.astype(np.int32) @ outside.T) == 0
        nk = kept.shape[0]
        drop = contained[:, :nk].any(axis=1)
        sub = contained[:, nk:]
        equal = sub & sub.T
        strict = sub & ~equal
        earlier_equal = np.triu(equal, 1).any(axis=0)  # repeats an earlier one
        drop |= strict.any(axis=1) | earlier_equal
        cols = np.vstack([kept, new[~drop]])
        if cols.shape[0] > max_columns:
            return None
    return cols


def _greedy_cover(reject: np.ndarray, order: np.ndarray) -> np.ndarray:
    """Cover every not-different pair by a set of mutually not-different groups."""
    k = reject.shape[0]
    together = ~reject
    np.fill_diagonal(together, True)
    uncovered = together.copy()
    np.fill_diagonal(uncovered, False)
    cols = []
    placed = np.zeros(k, dtype=bool)
    for g in order.tolist():
        while uncovered[g].any():
            col = np.zeros(k, dtype=bool)
            col[g] = True
            allowed = together[g].copy()
            # grow in mean order: first partners not yet covered, then the rest
            first = order[uncovered[g][order]]
            then = order[together[g][order] & ~uncovered[g][order]]
            for h in np.concatenate([first, then]).tolist():
                if h != g and allowed[h]:
                    col[h] = True
                    allowed &= together[h]
            members = np.flatnonzero(col)
            uncovered[np.ix_(members, members)] = False
            placed[members] = True
            cols.append(col)
        if not placed[g]:  # declared different from every other group
            col = np.zeros(k, dtype=bool)
            col[g] = True
            placed[g] = True
            cols.append(col)
    return np.vstack(cols)


def _sweep(cols: np.ndarray, order: np.ndarray) -> np.ndarray:
    """Remove every membership that no pair needs (Piepho 2004, section 3)."""
    cols = cols.copy()
    shared = cols.astype(np.int64).T @ cols.astype(np.int64)  # (k, k) counts
    n_letters = cols.sum(axis=0).astype(np.int64)
    rank = np.empty(cols.shape[1], dtype=np.int64)
    rank[order] = np.arange(order.size)
    for c in range(cols.shape[0]):
        members = np.flatnonzero(cols[c])
        # visit the members from the smallest mean up, so letters stay with
        # the larger means where there is a choice
        for g in members[np.argsort(-rank[members], kind="stable")].tolist():
            others = np.flatnonzero(cols[c])
            others = others[others != g]
            if others.size == 0:
                needed = n_letters[g] == 1
            else:
                needed = bool(np.any(shared[g, others] == 1))
            if not needed:
                cols[c, g] = False
                shared[g, others] -= 1
                shared[others, g] -= 1
                shared[g, g] -= 1
                n_letters[g] -= 1
    return cols[cols.any(axis=1)]


def letter_display(means, reject, *, max_columns: int | None = None) -> LetterDisplay:
    """Return the compact letter display for ``means`` and a reject matrix.

    Parameters
    ----------
    means : array_like, shape (k,)
        Group means (or any values that order the groups; the largest gets
        ``a``).
    reject : array_like of bool, shape (k, k)
        Symmetric; ``reject[i, j]`` is True when groups i and j were declared
        different.  The diagonal is ignored.
    max_columns : int, optional
        Cap on the insert-absorb columns before the greedy cover takes over;
        default ``4 k + 64``.

    Returns
    -------
    LetterDisplay
    """
    means, reject = _check(means, reject)
    k = means.size
    order = np.argsort(-means, kind="stable")  # largest mean first
    cap = 4 * k + 64 if max_columns is None else int(max_columns)
    cols = _insert_absorb(reject, order, cap)
    method = "insert-absorb"
    if cols is None:
        cols, method = _greedy_cover(reject, order), "greedy-cover"
    cols = _sweep(cols, order)
    # letter order: by the mean ranks of each column's members, lexicographically
    rank = np.empty(k, dtype=np.int64)
    rank[order] = np.arange(k)
    keys = [tuple(sorted(rank[np.flatnonzero(c)].tolist())) for c in cols]
    cols = cols[sorted(range(len(keys)), key=keys.__getitem__)]
    names = letter_names(cols.shape[0])
    sep = "" if cols.shape[0] <= 52 else " "
    matrix = np.ascontiguousarray(cols.T)
    letters = tuple(sep.join(names[c] for c in np.flatnonzero(row)) for row in matrix)
    return LetterDisplay(letters, matrix, names, method)


def compact_letters(means, comparisons, labels: Sequence[str] | None = None, *,
                    max_columns: int | None = None) -> list[str]:
    """Return the compact letter display as one string per group, in group order.

    Parameters
    ----------
    means : array_like or pandas.Series, shape (k,)
        Group means in group order.  A Series indexed by label also supplies
        ``labels``.
    comparisons : array_like of bool, shape (k, k), or pandas.DataFrame
        A symmetric reject matrix, or a comparisons table made by a famwise
        procedure (its ``group_a``, ``group_b`` and ``reject`` columns are
        read; pairs it does not hold count as not declared different).
    labels : sequence of str, optional
        Group labels in the order of ``means``; needed with a table unless
        ``means`` is a Series.
    max_columns : int, optional
        See :func:`letter_display`.

    Returns
    -------
    list of str
        Two groups share a letter exactly when they were not declared
        different; ``"a"`` belongs to the largest mean.

    Examples
    --------
    >>> import numpy as np
    >>> rej = np.array([[0, 0, 1], [0, 0, 1], [1, 1, 0]], dtype=bool)
    >>> compact_letters([5.0, 4.0, 1.0], rej)
    ['a', 'a', 'b']
    """
    if isinstance(comparisons, pd.DataFrame):
        if labels is None:
            if isinstance(means, pd.Series):
                labels = [str(x) for x in means.index]
            else:
                raise FamwiseInputError(
                    "labels are needed to read a comparisons table; pass labels=... "
                    "in the order of the means")
        if len(labels) != np.size(means):
            raise FamwiseInputError(
                f"got {np.size(means)} means but {len(labels)} labels")
        reject = reject_matrix(comparisons, labels)
    else:
        reject = comparisons
    return list(letter_display(np.asarray(means, dtype=float), reject,
                               max_columns=max_columns).letters)

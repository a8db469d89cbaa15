"""Families of comparisons: all pairs, each group against a reference, contrasts.

A :class:`Family` is a matrix of contrast weights, one row per comparison and
one column per group, with names for the rows.  Every procedure estimates
``weights @ means``; pairwise families also carry their index pairs.

Order (stable and documented):

* all pairs: (0, 1), (0, 2), ..., (0, k-1), (1, 2), ... in label order;
  the difference is ``mean_a - mean_b`` with ``a`` the earlier label;
* vs reference: every other group in label order, ``mean_group - mean_ref``;
* contrasts: in the order given.

Contrast text
-------------
A contrast is a linear expression in group labels, for example
``(A + B)/2 - C`` or ``0.5*A + 0.5*B - C``.  Bare labels may contain letters,
digits, ``_`` and ``.``; any other label (spaces, ``+``, ``-``, parentheses)
is written in backticks or quotes: ```Rye + vetch` - Fallow`` or
``"Rye + vetch" - Fallow``.  Several contrasts are separated by ``;`` or given
as a list, optionally named ``name: expression``.  The text is parsed by a
small recursive-descent parser (never ``eval``); the weights must sum to zero.
"""

from __future__ import annotations

import re
from dataclasses import dataclass, field
from typing import Mapping, Sequence

import numpy as np

from .errors import FamwiseInputError, did_you_mean

__all__ = ["Family", "FAMILY_KINDS", "all_pairs", "vs_reference", "contrasts",
           "build_family", "parse_contrast"]

FAMILY_KINDS = ("all-pairs", "vs-reference", "contrasts")


@dataclass(frozen=True)
class Family:
    """A set of comparisons among ``k`` groups.

    Attributes
    ----------
    kind : {"all-pairs", "vs-reference", "contrasts"}
    labels : tuple of str
        The group labels (columns of ``weights``).
    weights : ndarray, shape (m, k)
        Contrast weights; each row sums to zero.
    names, group_a, group_b : tuple of str
        Per comparison: its name and the two sides (for a general contrast,
        ``group_a`` holds the expression and ``group_b`` is empty).
    pairs : ndarray of int, shape (m, 2), or None
        For pairwise families, the group indices ``(a, b)``.
    reference : int or None
        Index of the reference group for ``vs-reference``.
    """

    kind: str
    labels: tuple[str, ...]
    weights: np.ndarray = field(repr=False)
    names: tuple[str, ...]
    group_a: tuple[str, ...]
    group_b: tuple[str, ...]
    pairs: np.ndarray | None = field(default=None, repr=False)
    reference: int | None = None

    @property
    def m(self) -> int:
        """Number of comparisons."""
        return len(self.names)

    @property
    def k(self) -> int:
        return len(self.labels)

    @property
    def is_pairwise(self) -> bool:
        """True when every comparison is a difference of two group means."""
        return self.pairs is not None


def _pairwise(kind, labels, pairs, reference=None) -> Family:
    pairs = np.asarray(pairs, dtype=np.int64).reshape(-1, 2)
    m, k = len(pairs), len(labels)
    w = np.zeros((m, k))
    w[np.arange(m), pairs[:, 0]] = 1.0
    w[np.arange(m), pairs[:, 1]] = -1.0
    a = tuple(labels[i] for i in pairs[:, 0])
    b = tuple(labels[j] for j in pairs[:, 1])
    names = tuple(f"{x} - {y}" for x, y in zip(a, b))
    return Family(kind, tuple(labels), w, names, a, b, pairs, reference)


def all_pairs(labels: Sequence[str]) -> Family:
    """Return the family of all k(k-1)/2 pairwise differences."""
    k = len(labels)
    i, j = np.triu_indices(k, 1)
    return _pairwise("all-pairs", labels, np.column_stack([i, j]))


def _find_label(labels: Sequence[str], label: str, what: str) -> int:
    try:
        return list(labels).index(label)
    except ValueError:
        pass
    hint = did_you_mean(str(label), [str(x) for x in labels])
    raise FamwiseInputError(
        f"{what} {label!r} is not a group label (labels: "
        f"{', '.join(repr(x) for x in labels)}){hint}")


def vs_reference(labels: Sequence[str], reference: str) -> Family:
    """Return the family of every other group against ``reference``."""
    if reference is None:
        raise FamwiseInputError(
            "family 'vs-reference' needs a reference group: reference=LABEL "
            "(--reference LABEL on the command line)")
    r = _find_label(labels, reference, "reference")
    others = [i for i in range(len(labels)) if i != r]
    return _pairwise("vs-reference", labels, [(i, r) for i in others], reference=r)


# --- contrast parser ---------------------------------------------------------

_TOKEN = re.compile(r"""
    \s*(?:
      (?P<num>(?:\d+\.?\d*|\.\d+)(?:[eE][-+]?\d+)?)
    | `(?P<bq>[^`]*)`
    | "(?P<dq>[^"]*)"
    | '(?P<sq>[^']*)'
    | (?P<name>[A-Za-z_][A-Za-z0-9_.]*|[0-9][A-Za-z0-9_.]*[A-Za-z_][A-Za-z0-9_.]*)
    | (?P<op>[-+*/()])
    )""", re.VERBOSE)


def _tokens(text: str):
    pos, out = 0, []
    text = text.rstrip()
    while pos < len(text):
        mt = _TOKEN.match(text, pos)
        if mt is None or mt.end() == pos:
            raise FamwiseInputError(
                f"contrast {text!r}: cannot read {text[pos:].strip()[:20]!r} at "
                f"character {pos + 1}; put labels with spaces or symbols in backticks")
        pos = mt.end()
        if mt.group("num") is not None and mt.group("name") is None:
            out.append(("num", float(mt.group("num"))))
        elif mt.group("op") is not None:
            out.append(("op", mt.group("op")))
        else:
            label = next(g for g in (mt.group("bq"), mt.group("dq"),
                                     mt.group("sq"), mt.group("name")) if g is not None)
            out.append(("label", label.strip()))
    return out


class _Parser:
    """Linear expressions: expr := term (('+'|'-') term)*;
    term := factor (('*'|'/') factor)*; factor := ('+'|'-') factor | num |
    label | '(' expr ')'.  Values are (constant, {label: weight}) pairs and a
    product or quotient must have a constant on at least one side."""

    def __init__(self, text: str, labels: Sequence[str]):
        self.text, self.labels = text, labels
        self.toks = _tokens(text)
        self.i = 0

    def fail(self, why: str):
        raise FamwiseInputError(f"contrast {self.text!r}: {why}")

    def peek(self):
        return self.toks[self.i] if self.i < len(self.toks) else (None, None)

    def take(self):
        tok = self.peek()
        self.i += 1
        return tok

    def parse(self):
        if not self.toks:
            self.fail("is empty")
        value = self.expr()
        if self.i != len(self.toks):
            self.fail(f"unexpected {self.peek()[1]!r} after a complete expression")
        const, lin = value
        if const != 0.0:
            self.fail("has a constant term; a contrast combines group means only")
        return lin

    @staticmethod
    def add(x, y, sign):
        lin = dict(x[1])
        for key, w in y[1].items():
            lin[key] = lin.get(key, 0.0) + sign * w
        return (x[0] + sign * y[0], lin)

    @staticmethod
    def scale(x, c):
        return (x[0] * c, {key: w * c for key, w in x[1].items()})

    def expr(self):
        value = self.term()
        while self.peek() in (("op", "+"), ("op", "-")):
            sign = 1.0 if self.take()[1] == "+" else -1.0
            value = self.add(value, self.term(), sign)
        return value

    def term(self):
        value = self.factor()
        while self.peek() in (("op", "*"), ("op", "/")):
            op = self.take()[1]
            rhs = self.factor()
            if op == "*":
                if not value[1]:
                    value = self.scale(rhs, value[0])
                elif not rhs[1]:
                    value = self.scale(value, rhs[0])
                else:
                    self.fail("multiplies two group labels; weights must be numbers")
            else:
                if rhs[1]:
                    self.fail("divides by a group label; weights must be numbers")
                if rhs[0] == 0.0:
                    self.fail("divides by zero")
                value = self.scale(value, 1.0 / rhs[0])
        return value

    def factor(self):
        kind, tok = self.take()
        if kind == "op" and tok in "+-":
            inner = self.factor()
            return inner if tok == "+" else self.scale(inner, -1.0)
        if kind == "num":
            return (tok, {})
        if kind == "label":
            _find_label(self.labels, tok, f"contrast {self.text!r}: label")
            return (0.0, {tok: 1.0})
        if kind == "op" and tok == "(":
            value = self.expr()
            if self.take() != ("op", ")"):
                self.fail("has an unclosed '('")
            return value
        self.fail("ends too early" if kind is None else f"unexpected {tok!r}")


def parse_contrast(text: str, labels: Sequence[str]) -> dict[str, float]:
    """Parse contrast text such as ``(A + B)/2 - C`` into ``{label: weight}``."""
    return _Parser(str(text), labels).parse()


def _weights_row(spec, labels, name) -> np.ndarray:
    if isinstance(spec, str):
        spec = parse_contrast(spec, labels)
    if not isinstance(spec, Mapping):
        raise FamwiseInputError(
            f"contrast {name!r} must be text or a mapping {{label: weight}}; "
            f"got {type(spec).__name__}")
    row = np.zeros(len(labels))
    for label, w in spec.items():
        try:
            w = float(w)
        except (TypeError, ValueError):
            raise FamwiseInputError(
                f"contrast {name!r}: weight {w!r} of {label!r} is not a number") from None
        if not np.isfinite(w):
            raise FamwiseInputError(f"contrast {name!r}: weight of {label!r} is {w}")
        row[_find_label(labels, label, f"contrast {name!r}: label")] += w
    if not np.any(row):
        raise FamwiseInputError(f"contrast {name!r} has all weights zero")
    total = row.sum()
    if abs(total) > 1e-9 * max(1.0, np.abs(row).sum()):
        raise FamwiseInputError(
            f"contrast {name!r}: weights must sum to zero; they sum to {total:g}")
    return row


def contrasts(labels: Sequence[str], specs) -> Family:
    """Return a family of user contrasts.

    ``specs`` is text (several contrasts separated by ``;``, each optionally
    ``name: expression``), a list of texts or mappings, or a mapping from
    names to texts or to ``{label: weight}`` mappings.
    """
    if specs is None:
        raise FamwiseInputError("family 'contrasts' needs contrasts=...")
    if isinstance(specs, str):
        specs = [s for s in specs.split(";") if s.strip()]
    if isinstance(specs, Mapping) and all(isinstance(v, (int, float)) for v in specs.values()):
        specs = [specs]  # a single {label: weight} mapping
    items = list(specs.items()) if isinstance(specs, Mapping) else [(None, s) for s in specs]
    if not items:
        raise FamwiseInputError("no contrasts given")
    names, rows = [], []
    for name, spec in items:
        if name is None and isinstance(spec, str):
            head, sep, tail = spec.partition(":")
            if sep and not any(q in head for q in "`'\""):
                name, spec = head.strip(), tail
        if name is None:
            name = (spec.strip() if isinstance(spec, str)
                    else " ".join(f"{w:+g}*{lab}" for lab, w in spec.items()))
        rows.append(_weights_row(spec, labels, name))
        names.append(str(name))
    if len(set(names)) != len(names):
        dup = next(n for n in names if names.count(n) > 1)
        raise FamwiseInputError(f"contrast name {dup!r} is used twice")
    w = np.vstack(rows)
    # A contrast that is a plain difference of two groups keeps its pair, so
    # pairwise-only procedures can accept a family made of such contrasts.
    pairs = []
    for row in w:
        pos, neg = np.flatnonzero(row > 0), np.flatnonzero(row < 0)
        if len(pos) == 1 and len(neg) == 1 and row[pos[0]] == 1 and row[neg[0]] == -1:
            pairs.append((pos[0], neg[0]))
    names_t = tuple(names)
    return Family("contrasts", tuple(labels), w, names_t, names_t, ("",) * len(names),
                  np.array(pairs) if len(pairs) == len(w) else None)


def build_family(labels: Sequence[str], family: str = "all-pairs",
                 reference: str | None = None, contrasts_spec=None) -> Family:
    """Return the family named ``family`` over ``labels``."""
    if family not in FAMILY_KINDS:
        hint = did_you_mean(str(family), FAMILY_KINDS)
        raise FamwiseInputError(
            f"family must be one of {', '.join(FAMILY_KINDS)}; got {family!r}{hint}")
    if family == "all-pairs":
        return all_pairs(labels)
    if family == "vs-reference":
        return vs_reference(labels, reference)
    return contrasts(labels, contrasts_spec)

"""Block and covariate columns: their names, their cells, and the Design.

:func:`famwise.intake.read` takes ``block=`` (one column, or two for the rows
and columns of a Latin square) and ``covariates=`` (numeric columns).  This
module resolves the names, spots a block column that looks like measurements
(non-integer numbers: a warning, since integer codes are labels), and builds
the :class:`~famwise.core.layout.Design` of the rows that were used.  Rows
without a block label or a covariate value are set aside by the reader with
the ledger reasons ``missing-block``, ``missing-covariate`` and
``covariate-text``.
"""

from __future__ import annotations

import warnings

import numpy as np
import pandas as pd

from ..core.errors import FamwiseInputError, ModelWarning
from ..core.layout import Design

__all__ = ["column_names", "model_columns", "fractional_labels", "build_design"]


def column_names(value, option: str) -> list[str]:
    """Normalise ``block=`` / ``covariates=`` to a list of column names.

    A string may list names separated by commas (as on the command line).
    """
    if value is None:
        return []
    if isinstance(value, str):
        items = [v.strip() for v in value.split(",")] if "," in value else [value]
    else:
        try:
            items = [str(v) for v in value]
        except TypeError:
            raise FamwiseInputError(
                f"{option} must be a column name or a list of column names; got "
                f"{value!r}") from None
    items = [v for v in items if v != ""]
    if not items:
        return []
    if len(set(items)) != len(items):
        raise FamwiseInputError(f"{option} names a column twice: {items}")
    if option == "block" and len(items) > 2:
        raise FamwiseInputError(
            f"block takes one column, or two for the rows and columns of a Latin square; "
            f"got {len(items)}: {items}")
    return items


def model_columns(header, src, used: dict, block_names, covariate_names, find_column):
    """Positions of the block and covariate columns; none may repeat another role."""
    used = dict(used)
    out = []
    for names, role in ((block_names, "block"), (covariate_names, "covariate")):
        cols = []
        for name in names:
            j = find_column(header, name, src, role)
            if j in used:
                raise FamwiseInputError(
                    f"{role} column {header[j]!r} is already the {used[j]} column; "
                    f"name a different {role} column")
            used[j] = role
            cols.append(j)
        out.append(cols)
    return out[0], out[1]


def fractional_labels(cells: pd.Series, labels) -> list:
    """The labels of a block column that are non-integer numbers (empty for text)."""
    fractional = []
    for x, lab in zip(cells.to_numpy(dtype=object), labels):
        if lab == "":
            continue
        if isinstance(x, (float, np.floating)):
            if np.isfinite(x) and not float(x).is_integer():
                fractional.append(lab)
            continue
        if isinstance(x, (int, np.integer, bool, np.bool_)):
            continue
        try:
            v = float(str(lab).replace("\u2212", "-"))
        except ValueError:
            return []            # text labels: a factor for sure
        if np.isfinite(v) and not v.is_integer():
            fractional.append(lab)
    return fractional


def build_design(cells, src: str) -> tuple[Design, list[str]]:
    """Build the Design of the used rows, warning about blocks that look measured."""
    notes = []
    for name, labels, fractional in cells["blocks"]:
        if fractional:
            shown = ", ".join(map(repr, list(dict.fromkeys(fractional))[:3]))
            warnings.warn(ModelWarning(
                f"block column {name!r} in {src!r} holds non-integer numbers ({shown}); "
                f"blocks are labels, so each distinct value is a block of its own: if "
                f"{name!r} is a measurement, pass it as covariates={name!r}"), stacklevel=4)
            notes.append(f"block column {name!r} holds non-integer numbers; read as labels")
    blocks = {name: labels for name, labels, _ in cells["blocks"]} or None
    covs = {name: v for name, v in cells["covariates"]} or None
    design = Design.from_arrays(blocks, covs)
    for name, lv in zip(design.block_names, design.block_labels):
        notes.append(f"block {name!r}: {len(lv)} levels")
    for name in design.covariate_names:
        notes.append(f"covariate {name!r}")
    return design, notes

"""Result types: the decision record and the Comparison returned by compare().

These sit low in the package (they import no procedure module), so the
procedures, the cross-check and the report all depend downward on them.

Decision record schema (``schema = "famwise.decision/1"``); every key is
always present, ``null`` where it does not apply:

``input``        source, sha256 (of the file; null for a DataFrame), response,
                 group, layout ("long"/"wide"), ledger counts (read, used,
                 dropped, dropped_by_reason) and ledger notes
``family``       kind, m, reference, comparison names
``alpha``        the familywise level; ``margin`` the practical margin or null
``checks``       one object per check: area, name, method, statistic, p_value,
                 threshold, verdict, sentence, details
``policy``       every threshold of the policy in force
``route``        route, procedure, chosen_by ("policy"/"user"), reasons,
                 alternatives [{procedure, why}], against, warnings,
                 calibration (figures of a quick calibration, or null),
                 crosscheck (the second procedure)
``crosscheck``   primary, second, agree, total, sentence, disagreements
``resampling``   B, seed, chunks, backend, n_jobs, critical value, largest
                 Monte Carlo SE, unsettled comparisons (null if no resampling)
``environment``  famwise, python, numpy, scipy, pandas, numba, platform
``command``      the command line or call that reproduces the run
"""

from __future__ import annotations

import json
import platform
import sys
from dataclasses import asdict, dataclass, field
from typing import Any

import pandas as pd

__all__ = ["SCHEMA", "DecisionRecord", "Comparison", "environment"]

SCHEMA = "famwise.decision/1"


def environment() -> dict:
    """Versions of the software that produced a result."""
    import numpy
    import scipy

    from . import __version__
    try:
        import numba
        numba_version = numba.__version__
    except ImportError:  # pragma: no cover
        numba_version = None
    return {"famwise": __version__, "python": sys.version.split()[0],
            "numpy": numpy.__version__, "scipy": scipy.__version__,
            "pandas": pd.__version__, "numba": numba_version,
            "platform": platform.platform()}


@dataclass(frozen=True)
class DecisionRecord:
    """Why this procedure, on what data, with what result (see module notes)."""

    input: dict
    family: dict
    alpha: float
    margin: float | None
    checks: list
    policy: dict
    route: dict
    crosscheck: dict | None
    resampling: dict | None
    environment: dict
    command: str
    schema: str = SCHEMA

    def to_dict(self) -> dict:
        return asdict(self)

    def to_json(self, indent: int = 2) -> str:
        return json.dumps(self.to_dict(), indent=indent, ensure_ascii=False, allow_nan=False,
                          default=_jsonable)

    @classmethod
    def from_json(cls, text: str) -> "DecisionRecord":
        doc = json.loads(text)
        if doc.get("schema") != SCHEMA:
            raise ValueError(f"not a {SCHEMA} record (schema {doc.get('schema')!r})")
        return cls(**doc)

    def paragraph(self) -> str:
        """Render the record as one plain paragraph a reviewer can read."""
        inp, fam, route = self.input, self.family, self.route
        led = inp["ledger"]
        text = [f"{led['read']} {led['unit']}s were read from {inp['source']}"
                + (f" (SHA-256 {inp['sha256'][:12]}…)" if inp.get("sha256") else "")
                + f"; {led['used']} were used and {led['dropped']} set aside"
                + (" (" + ", ".join(f"{v} {k}" for k, v in led["dropped_by_reason"].items())
                   + ")" if led["dropped"] else "") + "."]
        what = {"all-pairs": "all pairs of groups", "vs-reference":
                f"each group against {fam.get('reference')!r}",
                "contrasts": f"{fam['m']} contrast{'s' if fam['m'] > 1 else ''}"}[fam["kind"]]
        text.append(f"The family was {what} ({fam['m']} comparison"
                    f"{'s' if fam['m'] > 1 else ''}) at a familywise level of {self.alpha:g}.")
        flagged = [c["sentence"] for c in self.checks if c["verdict"] != "ok"]
        text.append("The checks found: " + " ".join(flagged) if flagged
                    else "The checks raised no concern.")
        if route["chosen_by"] == "user":
            text.append(f"The user chose {route['procedure']}.")
            if route["against"]:
                text.append("Checks that argue against it: " + "; ".join(route["against"]) + ".")
        else:
            text.append(f"famwise chose {route['procedure']} ({route['route']} route). "
                        + " ".join(route["reasons"]))
            if route["alternatives"]:
                text.append("Set aside: " + "; ".join(
                    f"{a['procedure']} ({a['why']})" for a in route["alternatives"]) + ".")
        if self.crosscheck:
            text.append(self.crosscheck["sentence"])
        if self.resampling:
            r = self.resampling
            text.append(f"Resampling used B = {r['resamples']} with seed {r['seed']}; the "
                        f"largest Monte Carlo SE of an adjusted p-value was "
                        f"{r['max_mc_error']:.2g}"
                        + (f", and {r['n_unsettled']} comparison(s) remain unsettled."
                           if r["n_unsettled"] else "."))
        return " ".join(text)


def _jsonable(x):
    import numpy as np
    if isinstance(x, (np.integer,)):
        return int(x)
    if isinstance(x, (np.floating,)):
        return float(x) if np.isfinite(x) else None
    if isinstance(x, (np.bool_,)):
        return bool(x)
    if isinstance(x, np.ndarray):
        return x.tolist()
    raise TypeError(f"cannot serialise {type(x).__name__}")


@dataclass(frozen=True)
class Comparison:
    """What :func:`famwise.compare` returns.

    Attributes
    ----------
    groups : DataFrame
        One row per group: the summary (n, mean, SD, ...) and, for all-pairs
        families, the compact letters (``letters``; ``a`` = largest mean).
    comparisons : DataFrame
        The comparisons table of the chosen procedure (famwise.table).
    decision : DecisionRecord
        Why the procedure was chosen, and everything needed to reproduce it.
    crosscheck : CrossCheck or None
        Agreement with the independent second route.
    ledger : Ledger
        Every input row: used, or set aside and why.
    findings : Findings
        The diagnostic checks.
    """

    groups: pd.DataFrame = field(repr=False)
    comparisons: pd.DataFrame = field(repr=False)
    decision: DecisionRecord = field(repr=False)
    crosscheck: Any = field(repr=False)
    ledger: Any = field(repr=False)
    findings: Any = field(repr=False)
    layout: Any = field(repr=False)
    family: Any = field(repr=False)
    calibration: Any = field(default=None, repr=False)

    @property
    def procedure(self) -> str:
        return self.decision.route["procedure"]

    def __repr__(self) -> str:
        n_rej = int(self.comparisons["reject"].sum())
        return (f"Comparison(procedure={self.procedure!r}, comparisons={len(self.comparisons)}, "
                f"declared_different={n_rej}, alpha={self.decision.alpha:g})")

    def summary(self, width: int = 100) -> str:
        """Return the text summary (fits ``width`` columns)."""
        from .report.text import summary_text
        return summary_text(self, width=width)

    def save(self, folder, force: bool = False) -> list[str]:
        """Write comparisons.csv, groups.csv, decision.json, report.html and
        summary.txt into ``folder`` (atomically; refuses to overwrite without
        ``force``).  Returns the paths written."""
        from .report.files import save
        return save(self, folder, force=force)

    def to_html(self, path=None) -> str:
        """Return the self-contained HTML report; write it to ``path`` if given."""
        from .report.html import html_report
        text = html_report(self)
        if path is not None:
            from .output import write_atomic
            write_atomic(str(path), text)
        return text

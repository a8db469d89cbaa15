"""The decision record: why a procedure was chosen, and how to reproduce the run.

It sits low in the package (it imports no stage), so the procedures, the
cross-check and the report all depend downward on it.  The :class:`Comparison`
that :func:`famwise.compare` returns lives in :mod:`famwise.comparison`, above
the report it renders through.

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
``omnibus``      the route's omnibus test: test ("anova-f", "welch-anova",
                 "kruskal-wallis"), statistic, df (a list), p, note (why the
                 figures are null when the test is undefined for the data)
``environment``  famwise, python, numpy, scipy, pandas, numba, platform
``command``      the command line or call that reproduces the run (with one
                 ``--option KEY=VALUE`` per entry of ``options``)
``options``      the named procedure's own options as validated and parsed
                 (for example ``{"trim": 0.1}``), ``{}`` when none were given;
                 each procedure's allowed keys are declared in
                 :data:`famwise.procedures.catalogue.CATALOGUE`.  Records
                 written before this key existed read back with ``{}``.
``model``        with blocks or covariates: description, terms [{name, kind,
                 df}], df_residual, mean_square_error, group_f, group_df,
                 group_p, efficiency (relative efficiency of the blocking and
                 its parts, or null), efficiency_sentence, cv_percent,
                 means_correlated, notes; null for a one-way layout
``transform``    the scale: {"transform": "log", "offset", "sentence"}, or null
``censoring``    non-detects: mode ("keep"/"drop"), detection_limit option,
                 kept_censored (count and by group), set_aside, sentence, and
                 the substitution sensitivity table (null without non-detects)
"""

from __future__ import annotations

import json
import platform
import sys
from dataclasses import asdict, dataclass, field

__all__ = ["SCHEMA", "DecisionRecord", "environment"]

SCHEMA = "famwise.decision/1"


def environment() -> dict:
    """Versions of the software that produced a result."""
    import numpy
    import scipy

    from .version import __version__
    try:
        import numba
        numba_version = numba.__version__
    except ImportError:  # pragma: no cover
        numba_version = None
    return {"famwise": __version__, "python": sys.version.split()[0],
            "numpy": numpy.__version__, "scipy": scipy.__version__,
            "pandas": _pandas_version(), "numba": numba_version,
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
    omnibus: dict | None = None
    model: dict | None = None
    options: dict = field(default_factory=dict)
    schema: str = SCHEMA
    censoring: dict | None = None
    transform: dict | None = None

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
        if self.model:
            mod = self.model
            text.append(f"The groups were compared under the additive model "
                        f"{mod['description']}."
                        + (f" {mod['efficiency_sentence']}" if mod.get("efficiency_sentence")
                           else ""))
        flagged = [c["sentence"] for c in self.checks if c["verdict"] != "ok"]
        text.append("The checks found: " + " ".join(flagged) if flagged
                    else "The checks raised no concern.")
        if route["chosen_by"] == "user":
            opts = ", ".join(f"{k} = {v}" for k, v in (self.options or {}).items())
            text.append(f"The user chose {route['procedure']}"
                        + (f" with {opts}." if opts else "."))
            if route["against"]:
                text.append("Checks that argue against it: " + "; ".join(route["against"]) + ".")
        else:
            text.append(f"famwise chose {route['procedure']} ({route['route']} route). "
                        + " ".join(route["reasons"]))
            if route["alternatives"]:
                text.append("Set aside: " + "; ".join(
                    f"{a['procedure']} ({a['why']})" for a in route["alternatives"]) + ".")
        if self.omnibus and self.omnibus.get("p") is not None:
            o = self.omnibus
            df = ", ".join(f"{d:.4g}" for d in o["df"])
            text.append(f"The omnibus test ({o['test']}) gave {o['statistic']:.4g} on df "
                        f"{df}, p = {o['p']:.2g}.")
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


def _pandas_version():
    import pandas
    return pandas.__version__

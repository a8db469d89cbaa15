"""What a batch returns: the table of tasks, the false discovery screen across
them, the record and the files."""

from __future__ import annotations

import json
import os
from dataclasses import dataclass, field

import numpy as np
import pandas as pd

from ..procedures.adjust import bh, by as by_adjust
from ..core.errors import FamwiseInputError, FamwiseWarning
from ..report.output import prepare_folder, safe_csv_text, write_atomic


BATCH_SCHEMA = "famwise.batch/1"


BATCH_FILES = ("batch.csv", "batch.json")


_FDR = {"bh": bh, "by": by_adjust}


_FDR_NAMES = {"bh": "Benjamini-Hochberg (1995)", "by": "Benjamini-Yekutieli (2001)"}


CENSORED_CAUTION = (
    "Some values were reported below a detection or reporting limit; famwise kept them as "
    "left-censored values (below their limit) and compared those responses with rank "
    "procedures for censored data, never substituting a value (with nondetects='drop' "
    "they are set aside instead, which biases means upward; see n_set_aside). Where these "
    "results feed a regulatory or compliance decision, follow the applicable regulations "
    "and methods for censored data and have a qualified statistician review the analysis.")


class BatchWarning(FamwiseWarning):
    """Something a task of a batch reported (small groups, spellings, unsettled p)."""


@dataclass(frozen=True)
class BatchResult:
    """What :func:`batch` returns.

    Attributes
    ----------
    table : DataFrame
        One row per task (response, and stratum with ``by``): ``status``
        (``ok``, ``input-error``, ``internal-error``), ``reason``, ``route``,
        ``procedure``, ``omnibus``, ``omnibus_p``, ``omnibus_q``,
        ``omnibus_reject``, ``groups``, ``n_read``, ``n_used``,
        ``n_set_aside``, ``set_aside``, ``comparisons``,
        ``declared_different``, ``smallest_p_adjusted``, ``unsettled``,
        ``crosscheck_agree``, ``seed`` and ``folder``.
    results : dict
        ``(response, stratum) -> Comparison`` for the tasks that ran
        (``stratum`` is None without ``by``).
    record : dict
        The batch record written as ``batch.json`` (schema
        ``famwise.batch/1``).
    cautions : tuple of str
        Plain sentences the reader must see with the table.
    """

    table: pd.DataFrame = field(repr=False)
    results: dict = field(repr=False)
    record: dict = field(repr=False)
    cautions: tuple = field(default=(), repr=False)
    files: dict = field(default=None, repr=False)   # task index -> rendered texts

    def __repr__(self) -> str:
        ok = int((self.table["status"] == "ok").sum())
        return (f"BatchResult(tasks={len(self.table)}, ran={ok}, "
                f"omnibus_rejected={int(self.table['omnibus_reject'].fillna(False).sum())}, "
                f"fdr={self.record['fdr']['method']!r})")

    def to_json(self, indent: int = 2) -> str:
        """Return the batch record as JSON (NaN written as null)."""
        return json.dumps(_plain(self.record), indent=indent, ensure_ascii=False,
                          allow_nan=False)

    def summary(self, width: int = 100) -> str:
        """Return the text summary: counts, the FDR line, the table, reasons, cautions."""
        from ..report.textformat import frame_text
        import textwrap
        rec = self.record
        t = self.table
        fdr = rec["fdr"]
        n_ok = int((t["status"] == "ok").sum())
        lines = [f"famwise batch: {len(t)} task(s) from {rec['input']['source']}, groups "
                 f"from {rec['input']['group']!r}"
                 + (f", strata from {rec['input']['by']!r}" if rec["input"]["by"] else "")
                 + f"; {n_ok} ran, {len(t) - n_ok} could not run."]
        lines += textwrap.wrap(
            f"Across tasks: {_FDR_NAMES[fdr['method']]} over the omnibus p-values of "
            f"{fdr['family_size']} task(s) at a false discovery rate of {fdr['level']:g}: "
            f"{fdr['rejected']} rejected. This screens the responses; it is not a "
            f"familywise error rate. Within each task the comparisons hold the "
            f"familywise error rate at {rec['settings']['alpha']:g}.", width=width)
        lines.append("")
        view = pd.DataFrame({"response": t["response"]})
        if "stratum" in t:
            view["stratum"] = t["stratum"]
        ran = t["status"] == "ok"
        view["procedure"] = t["procedure"].where(ran, "(" + t["status"] + ")")
        view["omnibus"] = t["omnibus"].map({"anova-f": "F", "welch-anova": "Welch",
                                            "kruskal-wallis": "KW",
                                            "min-adjusted-p": "min p"})
        view["p"] = t["omnibus_p"]
        view["q"] = t["omnibus_q"]
        view["screened"] = t["omnibus_reject"]
        view["different"] = [f"{d}/{m}" if r else "-" for d, m, r in
                             zip(t["declared_different"], t["comparisons"], ran)]
        view["min_p_adj"] = t["smallest_p_adjusted"]
        view["unsettled"] = t["unsettled"]
        view["set_aside"] = t["n_set_aside"]
        lines.append(frame_text(_display(view), max_label=26))
        lines += textwrap.wrap(
            f"(p: omnibus p-value, F = one-way ANOVA, Welch = Welch's ANOVA, KW = "
            f"Kruskal-Wallis, min p = the smallest adjusted p of the censored route; q: "
            f"{fdr['method'].upper()}-adjusted across tasks; screened: q <= "
            f"{fdr['level']:g}; different: comparisons declared different / comparisons)",
            width=width)
        failed = t[t["status"] != "ok"]
        if len(failed):
            lines += ["", "Could not run:"]
            for r in failed.itertuples():
                where = r.response + (f" / {r.stratum}" if "stratum" in t else "")
                lines += textwrap.wrap(f"- {where}: {r.reason}", width=width,
                                       subsequent_indent="  ")
        if self.cautions:
            lines.append("")
            for c in self.cautions:
                lines += textwrap.wrap("Caution: " + c, width=width, subsequent_indent="  ")
        return "\n".join(lines)

    def save(self, folder, force: bool = False) -> list[str]:
        """Write ``batch.csv``, ``batch.json`` and each task's files into ``folder``.

        Task files go to ``<folder>/<response>[/<stratum>]`` (see
        :func:`folder_name`), as :meth:`Comparison.save` writes them.  Every
        destination is checked before anything is written; existing files are
        refused unless ``force``.  Files rendered by the workers (``out=`` of
        :func:`batch`) are reused; others are rendered here.
        """
        from ..report.files import OUTPUT_FILES, render_files
        folder = os.fspath(folder)
        prepare_folder(folder, BATCH_FILES, force=force)
        ok = self.table[self.table["status"] == "ok"]
        subs = [os.path.join(folder, *f.split("/")) for f in ok["folder"]]
        for sub in subs:           # refuse before writing anything
            present = [n for n in OUTPUT_FILES if os.path.exists(os.path.join(sub, n))]
            if present and not force:
                raise FamwiseInputError(
                    f"output folder {sub!r} already holds {', '.join(present)}; "
                    f"pass --force (force=True) to replace them")
        written = []
        keys = list(zip(ok["response"], ok["stratum"] if "stratum" in ok else [None] * len(ok)))
        for index, key, sub in zip(ok.index, keys, subs):
            texts = (self.files or {}).get(int(index)) or render_files(self.results[key])
            prepare_folder(sub, OUTPUT_FILES, force=True)
            for name in OUTPUT_FILES:
                path = os.path.join(sub, name)
                write_atomic(path, texts[name])
                written.append(path)
        # The summary files last: their presence means the folder is complete.
        path = os.path.join(folder, "batch.csv")
        write_atomic(path, safe_csv_text(self.table))
        written.append(path)
        path = os.path.join(folder, "batch.json")
        write_atomic(path, self.to_json() + "\n")
        written.append(path)
        return written


def _display(view: pd.DataFrame) -> pd.DataFrame:
    """Pre-format numeric columns holding missing values ("-"), right-aligned."""
    from ..report.textformat import format_number
    view = view.copy()
    for c in view.columns:
        col = view[c]
        if col.isna().any() and (pd.api.types.is_numeric_dtype(col.dtype)
                                 or pd.api.types.is_bool_dtype(col.dtype)):
            cast = int if pd.api.types.is_integer_dtype(col.dtype) else (
                bool if pd.api.types.is_bool_dtype(col.dtype) else float)
            text = ["-" if pd.isna(v) else format_number(cast(v)) for v in col]
            width = max(len(str(c)), *(len(t) for t in text))
            view[c] = pd.Series([t.rjust(width) for t in text], index=view.index, dtype=object)
        elif not (pd.api.types.is_numeric_dtype(col.dtype)
                  or pd.api.types.is_bool_dtype(col.dtype)):
            view[c] = col.fillna("-")
    return view


def _plain(x):
    """Return ``x`` with numpy scalars as Python ones and NaN/NA as None."""
    if isinstance(x, dict):
        return {str(k): _plain(v) for k, v in x.items()}
    if isinstance(x, (list, tuple)):
        return [_plain(v) for v in x]
    if x is None or x is pd.NA:
        return None
    if isinstance(x, (bool, np.bool_)):
        return bool(x)
    if isinstance(x, (int, np.integer)):
        return int(x)
    if isinstance(x, (float, np.floating)):
        return float(x) if np.isfinite(x) else None
    if isinstance(x, np.ndarray):
        return _plain(x.tolist())
    return x


def _tabulate(tasks, outcomes, stratified, fdr, alpha):
    rows, results, records, notices = [], {}, [], []
    for task, o in zip(tasks, outcomes):
        assert task.index == o.index
        row = {"response": task.response}
        if stratified:
            row["stratum"] = task.stratum
        row.update(status=o.status, reason=o.reason)
        led = o.ledger
        res = o.result
        rec = {"response": task.response, "stratum": task.stratum, "status": o.status,
               "reason": o.reason, "folder": task.folder if res is not None else None,
               "seed": task.seed, "seconds": o.seconds}
        if res is not None:
            route = o.record["route"]
            unsettled = o.row["unsettled"]
            row.update(o.row)
            results[(task.response, task.stratum)] = res
            rec.update(o.record)
            where = task.response + (f" / {task.stratum}" if task.stratum is not None else "")
            for w in route["warnings"]:
                notices.append(f"{where}: {w}")
            if unsettled:
                notices.append(f"{where}: {unsettled} adjusted p-value(s) are unsettled at "
                               f"alpha (Monte Carlo error); raise resamples")
            for note in led.notes:
                if "differ only by case or spacing" in note:
                    notices.append(f"{where}: {note}")
        row.update(seed=task.seed, folder=task.folder if res is not None else "")
        rows.append(row)
        records.append(rec)
    table = pd.DataFrame(rows)
    for col, dtype in (("route", object), ("procedure", object), ("omnibus", object),
                       ("omnibus_p", float), ("groups", "Int64"), ("n_read", "Int64"),
                       ("n_used", "Int64"), ("n_set_aside", "Int64"), ("set_aside", object),
                       ("comparisons", "Int64"), ("declared_different", "Int64"),
                       ("smallest_p_adjusted", float), ("unsettled", "Int64"),
                       ("crosscheck_agree", "Int64")):
        if col not in table:
            table[col] = pd.Series([None] * len(table), dtype=object)
        table[col] = table[col].astype(dtype) if dtype is not object else table[col]
    # The screen across tasks: BH (or BY) over the omnibus p-values that exist.
    p = np.where((table["status"] == "ok").to_numpy(),
                 table["omnibus_p"].to_numpy(dtype=float), np.nan)
    q, reject = fdr_screen(p, fdr, alpha)
    pos = table.columns.get_loc("omnibus_p") + 1
    table.insert(pos, "omnibus_q", q)
    table.insert(pos + 1, "omnibus_reject", reject)
    order = (["response"] + (["stratum"] if stratified else [])
             + ["status", "route", "procedure", "omnibus", "omnibus_p", "omnibus_q",
                "omnibus_reject", "groups", "n_read", "n_used", "n_set_aside", "set_aside",
                "comparisons", "declared_different", "smallest_p_adjusted", "unsettled",
                "crosscheck_agree", "seed", "folder", "reason"])
    table = table[order]
    for rec, qi, ri, r in zip(records, q, reject, table.to_dict("records")):
        rec.update(omnibus=r["omnibus"], omnibus_p=r["omnibus_p"], omnibus_q=qi,
                   omnibus_reject=None if ri is pd.NA else bool(ri),
                   declared_different=r["declared_different"],
                   comparisons=r["comparisons"], smallest_p_adjusted=r["smallest_p_adjusted"],
                   unsettled=r["unsettled"])
    # one notice per distinct message (small-group warnings repeat across responses)
    seen = {}
    for text in notices:
        head, _, msg = text.partition(": ")
        seen.setdefault(msg, []).append(head)
    merged = [f"{msg} ({', '.join(heads[:3])}{' ...' if len(heads) > 3 else ''}; "
              f"{len(heads)} task(s))" for msg, heads in seen.items()]
    return table, results, records, merged


def fdr_screen(p, method: str = "bh", level: float = 0.05):
    """Adjust the finite entries of ``p`` by BH or BY and screen them at ``level``.

    Entries that are NaN (tasks that did not run, or had no omnibus p-value)
    stay out of the family: their adjusted value is NaN and their decision
    is missing (``pd.NA``).  Uses :func:`famwise.procedures.adjust.bh` /
    :func:`famwise.procedures.adjust.by`.

    Returns
    -------
    q : ndarray of float
        Adjusted p-values (NaN outside the family).
    reject : pandas BooleanArray
        ``q <= level``, missing outside the family.
    """
    if method not in _FDR:
        raise FamwiseInputError(f"fdr must be one of 'bh', 'by'; got {method!r}")
    p = np.asarray(p, dtype=float)
    have = np.isfinite(p)
    q = np.full(p.shape, np.nan)
    if have.any():
        q[have] = _FDR[method](p[have])
    reject = pd.array([bool(v <= level) if h else None for v, h in zip(q, have)],
                      dtype="boolean")
    return q, reject
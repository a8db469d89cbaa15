"""The tasks of a batch: choosing the response columns, naming folders, seeds,
and running one task (read its subset, compare, omnibus p-value, render)."""

from __future__ import annotations

import os
import shlex
import time
import unicodedata
import warnings
from contextlib import nullcontext
from dataclasses import dataclass, field, replace

import numpy as np
import pandas as pd

from ..core.errors import FamwiseInputError, FamwiseWarning
from ..intake.reader import Intake, read
from ..intake.ledger import Dropped, Ledger
from ..procedures.catalogue import option_arguments
from ..procedures.omnibus import OMNIBUS  # noqa: F401  (re-exported for run.py)




_CENSORED_REASONS = ("below-limit", "not-detected")
_FILLED = "\x00famwise-row-filled"      # marker column: the source row holds something


_FORBIDDEN = set('/\\:*?"<>|')


_RESERVED = {"con", "prn", "aux", "nul", *(f"com{i}" for i in range(1, 10)),
             *(f"lpt{i}" for i in range(1, 10))}


def folder_name(label, taken=()) -> str:
    """Return a safe, collision-free folder name for ``label``.

    Path separators, characters Windows refuses (``: * ? " < > |``) and
    control characters become ``_``; leading and trailing dots and spaces go
    (so no name is ``.`` or ``..``); device names such as ``CON`` get a
    leading ``_``; letters of any script are kept.  Names longer than 80
    characters are cut.  A name already in ``taken`` (compared ignoring case
    and Unicode normal form, as case-insensitive file systems do) gets
    ``-2``, ``-3``, ... appended.
    """
    text = unicodedata.normalize("NFC", str(label))
    text = "".join("_" if (ch in _FORBIDDEN or unicodedata.category(ch) in ("Cc", "Cf",
                                                                              "Zl", "Zp"))
                   else ch for ch in text)
    text = text.strip(" .")[:80].strip(" .") or "_"
    if text.split(".")[0].casefold() in _RESERVED:
        text = "_" + text
    folded = {unicodedata.normalize("NFC", t).casefold() for t in taken}
    name, i = text, 1
    while name.casefold() in folded:
        i += 1
        name = f"{text}-{i}"
    return name


def numeric_columns(raw, skip=(), decimal=".") -> tuple[list[int], list[dict]]:
    """Return the columns of ``raw`` that hold measurements, and why others do not.

    A column counts as numeric when it holds at least one number, and its
    numbers and censored entries (``"<0.5"``, ``"<DL"``, ``"n.d."``)
    outnumber its other text; blank and missing cells do not count.  So an
    analyte written mostly as ``"<DL"`` stays in (and its task reports that
    it has too few numbers), while dates, notes and sample codes stay out.
    """
    from ..intake.reader import parse_values
    chosen, skipped = [], []
    for j, name in enumerate(raw.header):
        if j in skip:
            continue
        if not name:
            skipped.append({"column": f"#{j + 1}", "why": "no header"})
            continue
        _, reasons, _ = parse_values(raw.body[j], decimal)
        numbers = int(np.sum(reasons == ""))
        censored = int(np.isin(reasons, _CENSORED_REASONS).sum())
        text = int(np.sum(reasons == "text"))
        if numbers >= 1 and numbers + censored > text:
            chosen.append(j)
        else:
            skipped.append({"column": name, "why": "no numbers" if numbers == 0
                            else f"mostly text ({text} text cells, {numbers} numbers)"})
    return chosen, skipped


def _stratum_label(x) -> str:
    if x is None or x is pd.NA or (isinstance(x, float) and np.isnan(x)):
        return ""
    if isinstance(x, float) and x.is_integer():
        return str(int(x))
    return str(x).strip()


@dataclass(frozen=True)
class _Task:
    index: int
    response: str
    stratum: str | None
    columns: dict = field(repr=False)         # response, group, row-filled marker arrays
    rows: np.ndarray = field(repr=False)      # the source's row number of each frame row
    seed: int = 0
    folder: str = ""
    command: str = ""


@dataclass(frozen=True)
class _Outcome:
    index: int
    status: str
    reason: str
    result: object = field(repr=False, default=None)
    omnibus: str | None = None
    omnibus_p: float = float("nan")
    ledger: Ledger | None = field(repr=False, default=None)
    files: dict | None = field(repr=False, default=None)
    seconds: float = 0.0
    row: dict | None = field(repr=False, default=None)      # summary-table cells
    record: dict | None = field(repr=False, default=None)   # batch.json pieces


def task_seed(root: np.random.SeedSequence, index: int) -> int:
    """Return the seed of task ``index``: 63 bits of the root's ``index``-th child."""
    child = np.random.SeedSequence(root.entropy, spawn_key=tuple(root.spawn_key) + (index,))
    return int(child.generate_state(1, dtype=np.uint64)[0] >> np.uint64(1))


def _remap(intake: Intake, rows: np.ndarray, source: str, notes) -> Intake:
    """Give the subset's layout and ledger the source's row numbers and name."""
    lay, led = intake.layout, intake.ledger
    layout = replace(lay, rows=rows[lay.rows - 1], source=source)
    dropped = tuple(Dropped(int(rows[d.row - 1]), d.column, d.value, d.reason, d.group)
                    for d in led.dropped)
    censored = tuple(replace(c, row=int(rows[c.row - 1])) for c in led.censored)
    ledger = Ledger(source, led.unit, led.read, led.used, dropped,
                    tuple(notes) + tuple(led.notes), censored)
    return Intake(layout, ledger)


def _omnibus(result):
    """The task's omnibus test, as :func:`famwise.compare` recorded it
    (:mod:`famwise.procedures.omnibus`)."""
    return result.omnibus.test, float(result.omnibus.p)


def _run_task(task: _Task, source: str, group: str, notes, options: dict, render: bool,
              quiet: bool) -> _Outcome:
    """Run one task (in a worker): read the subset, compare, omnibus p, render."""
    from ..api import compare
    start = time.perf_counter()
    where = repr(source) + (f" ({options['by']} = {task.stratum!r})"
                            if task.stratum is not None else "")
    context = warnings.catch_warnings() if quiet else nullcontext()
    with context:
        if quiet:
            warnings.simplefilter("ignore", FamwiseWarning)
        try:
            intake = read(pd.DataFrame(task.columns), task.response, group,
                          merge_spellings=options["merge_spellings"],
                          block=options.get("block"), covariates=options.get("covariates"),
                          nondetects=options.get("nondetects", "keep"),
                          detection_limit=options.get("detection_limit"))
            extra = [f"stratum: {options['by']} = {task.stratum!r}"] \
                if task.stratum is not None else []
            intake = _remap(intake, task.rows, source, list(notes) + extra)
            result = compare(intake, family=options["family"],
                             reference=options["reference"], procedure=options["procedure"],
                             alpha=options["alpha"], resamples=options["resamples"],
                             seed=task.seed, n_jobs=1, backend="threads",
                             policy=options["policy"], crosscheck=options["crosscheck"],
                             progress=False, command=task.command,
                             options=options.get("options"))
        except FamwiseInputError as exc:
            return _Outcome(task.index, "input-error",
                            str(exc).replace("'<DataFrame>'", where),
                            seconds=time.perf_counter() - start)
        except KeyboardInterrupt:
            raise
        except Exception as exc:  # a bug: keep the batch going, report it
            return _Outcome(task.index, "internal-error",
                            f"{type(exc).__name__}: {exc}".splitlines()[0],
                            seconds=time.perf_counter() - start)
        name, p = _omnibus(result)
        files = None
        if render:
            from ..report.files import render_files
            files = render_files(result)
        row, record = _task_summary(result, name, p)
    return _Outcome(task.index, "ok", "", result, name, p, result.ledger, files,
                    time.perf_counter() - start, row, record)


def _task_summary(result, omnibus, omnibus_p) -> tuple[dict, dict]:
    """The summary-table cells and record pieces of one task, made in the worker
    (so the parent's serial share of a batch stays small)."""
    t, led, route = result.comparisons, result.ledger, result.decision.route
    unsettled = int(t["unsettled"].sum()) if "unsettled" in t else 0
    cc = result.decision.crosscheck
    row = dict(route=route["route"], procedure=route["procedure"], omnibus=omnibus,
               omnibus_p=omnibus_p, groups=result.layout.k, n_read=led.read, n_used=led.used,
               n_set_aside=len(led.dropped),
               set_aside=", ".join(f"{v} {k}" for k, v in led.counts().items()),
               comparisons=len(t), declared_different=int(t["reject"].sum()),
               smallest_p_adjusted=float(t["p_adjusted"].min()), unsettled=unsettled,
               crosscheck_agree=cc["agree"] if cc else None)
    record = dict(ledger=led.to_dict(), route=route, crosscheck=cc,
                  resampling=result.decision.resampling, command=result.decision.command)
    return row, record


def _task_command(source, data, response, group, stratum, settings, seed, command):
    """The command that repeats one task (a compare run when there are no strata)."""
    if stratum is not None or not isinstance(data, (str, os.PathLike)):
        base = command or "famwise.batch(...)"
        return f"{base}  # task: response {response!r}" + (
            f", {settings['by']} = {stratum!r}" if stratum is not None else "") + \
            f", seed {seed}"
    parts = ["famwise", "compare", os.fspath(data), "--response", response, "--group", group,
             "--family", settings["family"]]
    if settings["reference"] is not None:
        parts += ["--reference", settings["reference"]]
    if settings.get("block"):
        parts += ["--block", ",".join(settings["block"])]
    if settings.get("covariates"):
        parts += ["--covariate", ",".join(settings["covariates"])]
    parts += ["--alpha", f"{settings['alpha']:g}"]
    if settings["procedure"] != "auto":
        parts += ["--procedure", settings["procedure"],
                  *option_arguments(settings.get("options") or {})]
    parts += ["--resamples", str(settings["resamples"]), "--seed", str(seed)]
    if settings["merge_spellings"]:
        parts.append("--merge-spellings")
    if settings.get("detection_limit") is not None:
        parts += ["--detection-limit", str(settings["detection_limit"])]
    if settings.get("nondetects", "keep") != "keep":
        parts += ["--nondetects", settings["nondetects"]]
    return shlex.join(parts)
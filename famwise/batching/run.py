"""Many responses (and strata) at once, with false discovery control across them.

:func:`batch` runs the whole :func:`famwise.compare` pipeline (intake,
checks, route, procedure, cross-check) for every response column and, with
``by``, for every stratum of that column (each year, each site), in
parallel over these *tasks*.  It returns a :class:`BatchResult` whose
``table`` has one row per task, and controls the false discovery rate
across the tasks' omnibus p-values.

The pipeline, top to bottom:

1. read the table once (:mod:`famwise.intake`); choose the responses (named,
   or every numeric column); list the tasks in a stable order: responses in
   the order given (or column order), then strata in order of first
   appearance;
2. give task ``i`` its own seed, the ``i``-th child of the batch seed's
   :class:`numpy.random.SeedSequence`, so every result is identical for any
   ``n_jobs`` and backend;
3. run the tasks with joblib (threads, processes, or a ``dask.distributed``
   cluster); each task reads its subset through :func:`famwise.intake.read`
   (so every row is in its ledger, under the file's own row numbers) and
   runs :func:`famwise.compare` with ``n_jobs=1``.  A subset that cannot be
   compared (a station with one sample in a stratum, a response with no
   numbers) keeps its row in the table with the one-line reason;
4. the omnibus p-value of each task that ran: Fisher's one-way ANOVA F test
   (``anova-f``) where the route was classical (or ``bh`` on pooled t),
   Welch's (1951) heteroscedastic ANOVA (``welch-anova``) where the route
   was unequal-variance or resampling; the column ``omnibus`` names the test;
5. Benjamini-Hochberg (1995), or Benjamini-Yekutieli (2001) for any
   dependence, across those omnibus p-values, at level ``alpha``: columns
   ``omnibus_p``, ``omnibus_q`` (adjusted) and ``omnibus_reject``.

What the numbers control: within a task, the comparisons declared different
hold the familywise error rate at ``alpha`` for that response and stratum,
as :func:`famwise.compare` says.  Across tasks, only the omnibus screen is
controlled, and for the false discovery rate, not the familywise error
rate; counting declared differences over many responses inherits no
across-response guarantee.

References
----------
Benjamini, Y. and Hochberg, Y. (1995). Controlling the false discovery rate.
*JRSS B* 57(1):289-300. doi:10.1111/j.2517-6161.1995.tb02031.x
Benjamini, Y. and Yekutieli, D. (2001). The control of the false discovery
rate in multiple testing under dependency. *Ann. Statist.* 29(4):1165-1188.
doi:10.1214/aos/1013699998
Welch, B. L. (1951). On the comparison of several mean values: an
alternative approach. *Biometrika* 38(3-4):330-336. doi:10.1093/biomet/38.3-4.330
"""

from __future__ import annotations

import json
import logging
import os
import shlex
import time
import unicodedata
import warnings
from dataclasses import dataclass, field, replace

import numpy as np
import pandas as pd

from ..procedures.adjust import bh, by as by_adjust
from ..core.errors import FamwiseInputError, FamwiseWarning
from ..intake.reader import Intake, file_sha256, find_column, read
from ..intake.ledger import Dropped, Ledger
from ..report.output import prepare_folder, safe_csv_text, write_atomic

__all__ = ["batch", "BatchResult", "BatchWarning", "BATCH_SCHEMA", "BATCH_FILES", "CENSORED_CAUTION",
           "fdr_screen", "folder_name", "numeric_columns", "task_seed"]

BATCH_SCHEMA = "famwise.batch/1"
BATCH_FILES = ("batch.csv", "batch.json")
_BACKENDS = ("threads", "processes", "dask")
_FDR = {"bh": bh, "by": by_adjust}
_FDR_NAMES = {"bh": "Benjamini-Hochberg (1995)", "by": "Benjamini-Yekutieli (2001)"}
OMNIBUS = {
    "anova-f": "one-way ANOVA F test (pooled variance), for the classical route",
    "welch-anova": "Welch's (1951) ANOVA (unequal variances), for the unequal-variance "
                   "and resampling routes",
}
_FILLED = "\x00famwise-row-filled"      # marker column: the source row holds something
_CENSORED_REASONS = ("below-limit", "not-detected")
CENSORED_CAUTION = (
    "Some values were reported below a detection or reporting limit; famwise set them "
    "aside rather than substitute a value, which biases means upward where such values "
    "are common (see n_set_aside). Where these results feed a regulatory or compliance "
    "decision, follow the applicable regulations and methods for censored data and have "
    "a qualified statistician review the analysis.")


class BatchWarning(FamwiseWarning):
    """Something a task of a batch reported (small groups, spellings, unsettled p)."""


# --- results -------------------------------------------------------------------

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
        view["omnibus"] = t["omnibus"].map({"anova-f": "F", "welch-anova": "Welch"})
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
            f"(p: omnibus p-value, F = one-way ANOVA, Welch = Welch's ANOVA; q: "
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


# --- naming folders --------------------------------------------------------------

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


# --- choosing the responses --------------------------------------------------------

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


# --- the tasks ---------------------------------------------------------------------

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
    ledger = Ledger(source, led.unit, led.read, led.used, dropped,
                    tuple(notes) + tuple(led.notes))
    return Intake(layout, ledger)


def _omnibus(result):
    from ..procedures.classical import anova_table
    from ..procedures.unequal import welch_anova
    route = result.decision.route["route"]
    if route in ("classical", "fdr"):
        return "anova-f", float(anova_table(result.layout).p)
    try:
        return "welch-anova", float(welch_anova(result.layout).p)
    except (FamwiseInputError, ZeroDivisionError, FloatingPointError):
        return "welch-anova", float("nan")


def _run_task(task: _Task, source: str, group: str, notes, options: dict, render: bool,
              quiet: bool) -> _Outcome:
    """Run one task (in a worker): read the subset, compare, omnibus p, render."""
    from ..api import compare
    start = time.perf_counter()
    where = repr(source) + (f" ({options['by']} = {task.stratum!r})"
                            if task.stratum is not None else "")
    context = warnings.catch_warnings() if quiet else _nothing()
    with context:
        if quiet:
            warnings.simplefilter("ignore", FamwiseWarning)
        try:
            intake = read(pd.DataFrame(task.columns), task.response, group,
                          merge_spellings=options["merge_spellings"])
            extra = [f"stratum: {options['by']} = {task.stratum!r}"] \
                if task.stratum is not None else []
            intake = _remap(intake, task.rows, source, list(notes) + extra)
            result = compare(intake, family=options["family"],
                             reference=options["reference"], procedure=options["procedure"],
                             alpha=options["alpha"], resamples=options["resamples"],
                             seed=task.seed, n_jobs=1, backend="threads",
                             policy=options["policy"], crosscheck=options["crosscheck"],
                             progress=False, command=task.command)
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


class _nothing:
    def __enter__(self):
        return self

    def __exit__(self, *exc):
        return False


# --- running them ------------------------------------------------------------------

def _start_cluster(n_jobs):
    try:
        import distributed
    except ImportError:  # pragma: no cover - optional dependency
        raise FamwiseInputError(
            "backend='dask' needs dask.distributed; install famwise[dask]") from None
    import joblib
    workers = joblib.effective_n_jobs(n_jobs) if n_jobs not in (None, 1) else (os.cpu_count() or 1)
    with warnings.catch_warnings():
        # The scheduler's bare HTTP endpoint binds 127.0.0.1 and moves to a free
        # port when 8787 is taken; that move is not the user's concern.
        warnings.filterwarnings("ignore", message="Port .* is already in use")
        cluster = distributed.LocalCluster(n_workers=max(1, workers), threads_per_worker=1,
                                           processes=True, host="127.0.0.1",
                                           dashboard_address=None, silence_logs=logging.ERROR)
    return distributed.Client(cluster, set_as_default=False), cluster


def _dask_client(scheduler, n_jobs):
    """Return (client, things to close, description) for the dask backend."""
    try:
        import distributed
    except ImportError:  # pragma: no cover - optional dependency
        raise FamwiseInputError(
            "backend='dask' needs dask.distributed; install famwise[dask]") from None
    if scheduler is None:
        try:
            client = distributed.get_client()
            return client, (), f"the current dask client ({client.scheduler.address})"
        except ValueError:
            client, cluster = _start_cluster(n_jobs)
            n = len(client.scheduler_info()["workers"])
            return client, (client, cluster), f"a LocalCluster on 127.0.0.1 ({n} workers)"
    if isinstance(scheduler, str):
        try:
            client = distributed.Client(scheduler, set_as_default=False, timeout="10s")
        except OSError as exc:
            raise FamwiseInputError(
                f"cannot reach the dask scheduler {scheduler!r}: {exc}".splitlines()[0]) \
                from None
        return client, (client,), f"the dask scheduler at {scheduler}"
    if isinstance(scheduler, distributed.Client):
        return scheduler, (), f"the dask client given ({scheduler.scheduler.address})"
    raise FamwiseInputError(
        f"scheduler must be a dask.distributed Client or an address string; "
        f"got {type(scheduler).__name__}")


def _execute(calls, n_jobs, backend, scheduler):
    """Run the delayed ``calls`` and return their results in order, and a description."""
    import joblib
    if backend == "dask":
        client, closing, where = _dask_client(scheduler, n_jobs)
        config = joblib.parallel_config(backend="dask", client=client)
        jobs = -1 if n_jobs in (None, 1) else n_jobs
    else:
        closing, where = (), f"{joblib.effective_n_jobs(n_jobs)} {backend}"
        config = joblib.parallel_config(prefer=backend)
        jobs = n_jobs
    try:
        with config:
            out = joblib.Parallel(n_jobs=jobs)(calls)
    finally:
        for thing in closing:
            thing.close()
    return list(out), where


# --- the public function -------------------------------------------------------------

def batch(data, responses="all-numeric", group=None, *, by=None, family="all-pairs",
          reference=None, procedure="auto", alpha=0.05, fdr="bh", resamples=9999,
          seed=None, n_jobs=1, backend="processes", scheduler=None, policy=None,
          crosscheck=True, out=None, force=False, caution=None, command=None,
          sheet=None, delimiter=None, decimal=".", encoding=None,
          merge_spellings=False) -> BatchResult:
    """Compare groups for many responses (and strata) and screen them by false discovery rate.

    Parameters
    ----------
    data : path-like or pandas.DataFrame
        A long table (one row per sample): the group column, the optional
        stratum column and the response columns (see :func:`famwise.intake.read`
        for the file types).
    responses : list of str or "all-numeric", default="all-numeric"
        The response columns, in the order to run them; ``"all-numeric"``
        takes every column that holds measurements (:func:`numeric_columns`),
        in column order, apart from ``group`` and ``by``.
    group : str
        The column of group labels.
    by : str, optional
        A column of strata; each response is compared within each stratum
        (strata in order of first appearance).
    family, reference, procedure, alpha, resamples, policy, crosscheck
        As for :func:`famwise.compare`, applied to every task.  ``alpha`` is
        also the false discovery rate of the screen across tasks.
    fdr : {"bh", "by"}, default="bh"
        Benjamini-Hochberg (independent or positively dependent p-values) or
        Benjamini-Yekutieli (any dependence; responses measured on the same
        samples are often correlated in unknown ways) across the omnibus
        p-values of the tasks that ran.
    seed : int, optional
        The batch seed (drawn and recorded when not given); task ``i`` gets
        the ``i``-th child of its SeedSequence, shown in the ``seed`` column.
    n_jobs : int, default=1
        Tasks run at once (joblib's meaning; -1: all cores).  Each task runs
        :func:`famwise.compare` with ``n_jobs=1``.
    backend : {"processes", "threads", "dask"}, default="processes"
        How tasks run in parallel.  Processes by default: a task is mostly
        Python code that holds the interpreter lock, so threads overlap only
        its compiled resampling.  ``"dask"`` sends the tasks to
        ``scheduler``, or to the current dask client, or else to a
        LocalCluster on 127.0.0.1 that famwise starts and closes (``n_jobs``
        workers when it is above 1, else one per core).  Results are
        identical for every backend and ``n_jobs``.
    scheduler : str or dask.distributed.Client, optional
        A dask scheduler address (``tcp://host:8786``) or client.
    out : path-like, optional
        Write the results there (see :meth:`BatchResult.save`); the workers
        then also render each task's files, in parallel.
    force : bool, default=False
        Replace existing output files.
    caution : str, optional
        A sentence to print with the summary and record in ``batch.json``.
    command : str, optional
        The command line to record (the CLI passes its own).
    sheet, delimiter, decimal, encoding, merge_spellings
        Reading options, as for :func:`famwise.intake.read`.

    Returns
    -------
    BatchResult
        ``.table`` (one row per task), ``.results``, ``.record``,
        ``.summary()``, ``.save(dir)``, ``.to_json()``.

    Notes
    -----
    1. Each task's comparisons control the familywise error rate at
       ``alpha`` within that response and stratum; nothing controls the
       familywise error rate across tasks.
    2. The screen across tasks controls the false discovery rate of the
       omnibus hypotheses "all group means are equal": BH under independence
       or positive regression dependence (Benjamini & Yekutieli 2001,
       Theorem 1.2), BY under any dependence.
    3. The omnibus test follows the task's route: the pooled F test where
       the checks found equal spreads and fair shape, Welch's ANOVA
       otherwise.  Neither is robust to gross skew; the resampling route's
       pairwise results are, its omnibus p-value less so.
    4. Values below a detection limit are set aside, never substituted; the
       summary then carries a caution (:data:`CENSORED_CAUTION`).

    Examples
    --------
    >>> from famwise.batch import batch                       # doctest: +SKIP
    >>> res = batch("demos/water_quality.csv", "all-numeric", "station",
    ...             seed=1, n_jobs=2)                         # doctest: +SKIP
    >>> res.table[["response", "procedure", "omnibus_q"]]     # doctest: +SKIP
    """
    from ..api import _policy
    from ..intake.reader import load_table
    from ..procedures.catalogue import check_procedure
    from ..core.validate import check_alpha
    started = time.perf_counter()
    alpha = check_alpha(alpha)
    if fdr not in _FDR:
        raise FamwiseInputError(f"fdr must be one of 'bh', 'by'; got {fdr!r}")
    if backend not in _BACKENDS:
        raise FamwiseInputError(
            f"backend must be one of {', '.join(_BACKENDS)}; got {backend!r}")
    if scheduler is not None and backend != "dask":
        raise FamwiseInputError(f"scheduler is for backend='dask'; got backend={backend!r}")
    if procedure != "auto":
        check_procedure(procedure)
    if group is None:
        raise FamwiseInputError("name the group column (group=...)")
    if isinstance(seed, (bool, np.bool_)) or not (
            seed is None or (isinstance(seed, (int, np.integer)) and seed >= 0)):
        raise FamwiseInputError(f"seed must be a non-negative integer or None; got {seed!r}")
    if decimal not in (".", ","):
        raise FamwiseInputError(f"decimal must be '.' or ','; got {decimal!r}")
    pol = _policy(policy)
    root = np.random.SeedSequence(seed)
    raw = load_table(data, sheet=sheet, delimiter=delimiter, decimal=decimal, encoding=encoding)
    source = raw.source
    header = raw.header
    g = find_column(header, group, source, "group")
    b = find_column(header, by, source, "stratum (by)") if by is not None else None
    if b == g:
        raise FamwiseInputError(f"by and group are the same column {header[g]!r}")
    skipped = []
    if isinstance(responses, str) and responses == "all-numeric":
        picked, skipped = numeric_columns(raw, skip={g, b}, decimal=decimal)
        if not picked:
            raise FamwiseInputError(
                f"{source!r} has no numeric column besides {header[g]!r}"
                + (f" and {header[b]!r}" if b is not None else ""))
    else:
        if isinstance(responses, str):
            raise FamwiseInputError(
                f"responses must be a list of column names or 'all-numeric'; got {responses!r}")
        picked = [find_column(header, r, source, "response") for r in responses]
        if not picked:
            raise FamwiseInputError("responses is empty; name at least one column")
        for j in picked:
            if picked.count(j) > 1:
                raise FamwiseInputError(f"responses lists {header[j]!r} twice")
            if j in (g, b):
                raise FamwiseInputError(
                    f"{header[j]!r} is the {'group' if j == g else 'by'} column; "
                    f"it cannot also be a response")
    names = [header[j] for j in picked]

    # The frame every task cuts its columns from (cells as read, so the task's
    # own intake parses them and accounts for every row).
    body = raw.body
    cells = body.to_numpy(dtype=object)
    empty = pd.isna(body).to_numpy() | (np.char.strip(cells.astype(str)) == "")
    filled = np.where(empty.all(axis=1), "", "x").astype(object)
    if b is not None:
        labels = np.array([_stratum_label(x) for x in body[b].to_numpy(dtype=object)],
                          dtype=object)
        strata = list(dict.fromkeys(s for s in labels if s != ""))
        no_stratum = int(np.sum((labels == "") & (filled == "x")))
        if not strata:
            raise FamwiseInputError(f"column {header[b]!r} of {source!r} holds no labels")
        members = [np.flatnonzero(labels == s) for s in strata]
    else:
        strata, members, no_stratum = [None], [np.arange(len(body))], 0
    sub_names = {}
    for s in strata:
        if s is not None:
            sub_names[s] = folder_name(s, taken=sub_names.values())
    top = {}
    for name in names:
        top[name] = folder_name(name, taken=list(top.values()) + list(BATCH_FILES))

    settings = dict(family=family, reference=reference, procedure=procedure, alpha=alpha,
                    resamples=resamples, policy=pol, crosscheck=bool(crosscheck),
                    merge_spellings=bool(merge_spellings), by=header[b] if b is not None else None)
    tasks = []
    group_cells = body[g].to_numpy(dtype=object)
    for j, name in zip(picked, names):
        for s, rows in zip(strata, members):
            index = len(tasks)
            values = body[j].to_numpy() if pd.api.types.is_numeric_dtype(body[j].dtype) \
                else body[j].to_numpy(dtype=object)
            frame = {name: values[rows], header[g]: group_cells[rows], _FILLED: filled[rows]}
            folder = top[name] + ("" if s is None else "/" + sub_names[s])
            seed_i = task_seed(root, index)
            tasks.append(_Task(index, name, s, frame, raw.rows[rows], seed_i, folder,
                               _task_command(source, data, name, header[g], s, settings,
                                             seed_i, command)))

    if out is not None:             # refuse before the work, not after it
        prepare_folder(os.fspath(out), BATCH_FILES, force=force)
    quiet = not (backend == "threads" and len(tasks) > 1)
    calls = [(_run_task, (t, source, header[g], raw.notes, settings, out is not None, quiet),
              {}) for t in tasks]
    import joblib
    delayed = [joblib.delayed(fn)(*a, **kw) for fn, a, kw in calls]
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", FamwiseWarning)   # threads: the parent warns
        if backend != "dask" and joblib.effective_n_jobs(n_jobs) == 1:
            outcomes, where = [fn(*a, **kw) for fn, a, kw in calls], "in this process"
        else:
            outcomes, where = _execute(delayed, n_jobs, backend, scheduler)

    table, results, task_records, notices = _tabulate(tasks, outcomes, strata != [None],
                                                      fdr, alpha)
    for text in notices:
        warnings.warn(BatchWarning(text), stacklevel=2)
    cautions = []
    if _has_censored(raw, picked, decimal):
        cautions.append(CENSORED_CAUTION)
    if caution:
        cautions.append(" ".join(str(caution).split()))
    ok = table["status"] == "ok"
    p_ok = table["omnibus_p"].notna() & ok
    from ..core.results import environment
    record = {
        "schema": BATCH_SCHEMA,
        "input": {"source": source, "sha256": _sha256(data), "group": header[g],
                  "by": header[b] if b is not None else None, "responses": names,
                  "columns_not_used": skipped, "strata": [s for s in strata if s is not None],
                  "rows_read": int(len(body)), "rows_without_stratum": no_stratum,
                  "notes": list(raw.notes)},
        "settings": {"family": family, "reference": reference, "procedure": procedure,
                     "alpha": alpha, "resamples": resamples, "seed": _entropy(root),
                     "seeds": "task i uses the i-th child of numpy SeedSequence(seed), "
                              "63 bits of its state (the seed column)",
                     "crosscheck": bool(crosscheck), "policy": pol.to_dict(),
                     "n_jobs": n_jobs, "backend": backend, "ran_on": where},
        "fdr": {"method": fdr, "name": _FDR_NAMES[fdr], "level": alpha,
                "family_size": int(p_ok.sum()),
                "rejected": int(table["omnibus_reject"].fillna(False).sum()),
                "controls": "the false discovery rate of the omnibus hypotheses across "
                            "tasks, not the familywise error rate"},
        "omnibus_tests": OMNIBUS,
        "counts": {"tasks": len(table), "ok": int(ok.sum()),
                   "input_error": int((table["status"] == "input-error").sum()),
                   "internal_error": int((table["status"] == "internal-error").sum())},
        "cautions": cautions,
        "tasks": task_records,
        "environment": environment(),
        "command": command or _batch_command(data, names, responses, header[g], settings,
                                              fdr, root),
        "seconds": time.perf_counter() - started,
    }
    files = {o.index: o.files for o in outcomes if o.files is not None} if out else None
    result = BatchResult(table=table, results=results, record=record,
                         cautions=tuple(cautions), files=files)
    if out is not None:
        result.save(out, force=force)
    return result


def _has_censored(raw, columns, decimal) -> bool:
    """Whether any response cell is a non-detect or below-limit text."""
    from ..intake.reader import parse_values
    return any(np.isin(parse_values(raw.body[j], decimal)[1], _CENSORED_REASONS).any()
               for j in columns)


def _entropy(root):
    ent = root.entropy
    return int(ent) if np.ndim(ent) == 0 else [int(x) for x in np.ravel(ent)]


def _sha256(data):
    return file_sha256(data) if isinstance(data, (str, os.PathLike)) else None


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
    parts += ["--alpha", f"{settings['alpha']:g}"]
    if settings["procedure"] != "auto":
        parts += ["--procedure", settings["procedure"]]
    parts += ["--resamples", str(settings["resamples"]), "--seed", str(seed)]
    if settings["merge_spellings"]:
        parts.append("--merge-spellings")
    return shlex.join(parts)


def _batch_command(data, names, responses, group, settings, fdr, root):
    source = os.fspath(data) if isinstance(data, (str, os.PathLike)) else "<DataFrame>"
    parts = ["famwise", "batch", source]
    parts += (["--all-numeric"] if isinstance(responses, str)
              else ["--responses", ",".join(names)])
    parts += ["--group", group]
    if settings["by"]:
        parts += ["--by", settings["by"]]
    parts += ["--family", settings["family"]]
    if settings["reference"] is not None:
        parts += ["--reference", settings["reference"]]
    parts += ["--fdr", fdr, "--alpha", f"{settings['alpha']:g}", "--procedure",
              settings["procedure"], "--resamples", str(settings["resamples"]),
              "--seed", str(_entropy(root))]
    return shlex.join(parts)

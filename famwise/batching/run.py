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
   was unequal-variance or resampling, Kruskal-Wallis (``kruskal-wallis``)
   where it was ranks (:mod:`famwise.procedures.omnibus`, the test
   ``compare`` records as ``result.omnibus``); the column ``omnibus`` names
   the test;
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

import os
import shlex
import time
import warnings
from contextlib import ExitStack
from dataclasses import dataclass

import numpy as np
import pandas as pd

from ..core.errors import FamwiseInputError, FamwiseWarning
from ..intake.reader import file_sha256, find_column
from ..procedures.catalogue import check_options, option_arguments
from ..report.output import prepare_folder
from ..resample.dask_client import dask_session
from .results import (_FDR, _FDR_NAMES, BATCH_FILES, BATCH_SCHEMA, CENSORED_CAUTION,
                      BatchResult, BatchWarning, _tabulate, fdr_screen)
from .tasks import (_CENSORED_REASONS, _FILLED, OMNIBUS, _run_task, _stratum_label, _Task,
                    _task_command, folder_name, numeric_columns, task_seed)

__all__ = ["batch", "BatchResult", "BatchWarning", "BATCH_SCHEMA", "BATCH_FILES", "CENSORED_CAUTION",
           "fdr_screen", "folder_name", "numeric_columns", "task_seed"]

_BACKENDS = ("threads", "processes", "dask")


# --- running the tasks ------------------------------------------------------------

def _execute(calls, n_jobs, backend, scheduler):
    """Run the delayed ``calls`` and return their results in order, and a description."""
    import joblib
    with ExitStack() as stack:
        if backend == "dask":
            # the scheduler given, else the current client, else a LocalCluster
            # on 127.0.0.1 started (and closed) for this batch
            session = stack.enter_context(dask_session(scheduler, n_jobs=n_jobs,
                                                       start_local=True))
            stack.enter_context(joblib.parallel_config(backend="dask", client=session.client))
            jobs, where = (-1 if n_jobs in (None, 1) else n_jobs), session.where
        else:
            stack.enter_context(joblib.parallel_config(prefer=backend))
            jobs, where = n_jobs, f"{joblib.effective_n_jobs(n_jobs)} {backend}"
        out = joblib.Parallel(n_jobs=jobs)(calls)
    return list(out), where


# --- the public function -------------------------------------------------------------

def batch(data, responses="all-numeric", group=None, *, by=None, family="all-pairs",
          reference=None, procedure="auto", alpha=0.05, fdr="bh", resamples=9999,
          seed=None, n_jobs=1, backend="processes", scheduler=None, policy=None,
          crosscheck=True, out=None, force=False, caution=None, command=None,
          sheet=None, delimiter=None, decimal=".", encoding=None,
          merge_spellings=False, block=None, covariates=None, options=None,
          detection_limit=None, nondetects="keep") -> BatchResult:
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
    block, covariates : str or list of str, optional
        Blocking and covariate columns, as for :func:`famwise.compare`,
        applied to every task (and never taken as responses); the omnibus
        test is then the model's F for groups, adjusted for the blocks and
        covariates.
    options : dict, optional
        The named procedure's own options, as for :func:`famwise.compare`
        (checked up front, applied to every task, recorded in the batch
        record's settings and in each task's command).
    detection_limit, nondetects
        Non-detects, as for :func:`famwise.intake.read`: kept as
        left-censored values by default (their responses take the censored
        route); ``detection_limit`` (a number or a column) gives bare tokens
        such as ``"<DL"`` their limit in every response.

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
    4. Values below a detection limit are kept as left-censored values
       (their responses take the censored route; ``nondetects="drop"`` sets
       them aside), never substituted; the summary then carries a caution
       (:data:`CENSORED_CAUTION`).  The omnibus p-value of the censored and
       robust routes is the smallest adjusted p-value of their procedure.

    Examples
    --------
    >>> from famwise import batch                             # doctest: +SKIP
    >>> res = batch("demos/water_quality.csv", "all-numeric", "station",
    ...             seed=1, n_jobs=2)                         # doctest: +SKIP
    >>> res.table[["response", "procedure", "omnibus_q"]]     # doctest: +SKIP
    """
    from ..api import _policy
    from ..intake.reader import load_table
    started = time.perf_counter()
    alpha = _check_settings(alpha, fdr, backend, scheduler, procedure, group, seed, decimal)
    options = check_options(procedure, options)
    from ..intake.nondetects import check_mode
    check_mode(nondetects)
    pol = _policy(policy)
    root = np.random.SeedSequence(seed)
    raw = load_table(data, sheet=sheet, delimiter=delimiter, decimal=decimal, encoding=encoding)
    g = find_column(raw.header, group, raw.source, "group")
    b = find_column(raw.header, by, raw.source, "stratum (by)") if by is not None else None
    if b == g:
        raise FamwiseInputError(f"by and group are the same column {raw.header[g]!r}")
    model_cols = _model_columns(raw, block, covariates, g, b)
    picked, skipped = _pick_responses(raw, responses, g, b, decimal, model_cols)
    settings = dict(family=family, reference=reference, procedure=procedure, alpha=alpha,
                    resamples=resamples, policy=pol, crosscheck=bool(crosscheck),
                    merge_spellings=bool(merge_spellings),
                    by=raw.header[b] if b is not None else None,
                    block=[raw.header[j] for j in model_cols["block"]] or None,
                    covariates=[raw.header[j] for j in model_cols["covariates"]] or None,
                    options=options,
                    nondetects=nondetects, detection_limit=detection_limit)
    plan = _plan_tasks(raw, data, picked, g, b, settings, root, command)

    if out is not None:             # refuse before the work, not after it
        prepare_folder(os.fspath(out), BATCH_FILES, force=force)
    outcomes, where = _run_all(plan.tasks, raw, raw.header[g], settings, out is not None,
                               n_jobs, backend, scheduler)

    table, results, task_records, notices = _tabulate(plan.tasks, outcomes,
                                                      plan.strata != [None], fdr, alpha)
    for text in notices:
        warnings.warn(BatchWarning(text), stacklevel=2)
    cautions = []
    if _has_censored(raw, picked, decimal):
        cautions.append(CENSORED_CAUTION)
    if caution:
        cautions.append(" ".join(str(caution).split()))
    record = _batch_record(
        raw, data, plan, table, g, b, skipped, settings, fdr, root, where, cautions,
        task_records, n_jobs, backend,
        command or _batch_command(data, plan.names, responses, raw.header[g], settings,
                                  fdr, root),
        time.perf_counter() - started)
    files = {o.index: o.files for o in outcomes if o.files is not None} if out else None
    result = BatchResult(table=table, results=results, record=record,
                         cautions=tuple(cautions), files=files)
    if out is not None:
        result.save(out, force=force)
    return result


# --- the steps of batch() ---------------------------------------------------------------

def _check_settings(alpha, fdr, backend, scheduler, procedure, group, seed, decimal):
    """Validate batch's own options up front; return the checked alpha."""
    from ..core.validate import check_alpha
    from ..procedures.catalogue import check_procedure
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
    return alpha


def _model_columns(raw, block, covariates, g, b) -> dict:
    """Indices of the block and covariate columns (checked against group and by)."""
    from ..intake.model_columns import column_names as _names
    out = {"block": [], "covariates": []}
    for key, value, role in (("block", block, "block"), ("covariates", covariates,
                                                          "covariate")):
        for name in _names(value, key):
            j = find_column(raw.header, name, raw.source, role)
            if j in (g, b):
                raise FamwiseInputError(
                    f"{role} column {raw.header[j]!r} is the "
                    f"{'group' if j == g else 'by'} column; name a different column")
            out[key].append(j)
    return out


def _pick_responses(raw, responses, g, b, decimal, model_cols=None):
    """The response columns (indices) in run order, and the columns not used."""
    header, source = raw.header, raw.source
    skipped = []
    model = set((model_cols or {}).get("block", [])) | set(
        (model_cols or {}).get("covariates", []))
    if isinstance(responses, str) and responses == "all-numeric":
        picked, skipped = numeric_columns(raw, skip={g, b} | model, decimal=decimal)
        if not picked:
            raise FamwiseInputError(
                f"{source!r} has no numeric column besides {header[g]!r}"
                + (f" and {header[b]!r}" if b is not None else ""))
        return picked, skipped
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
        if j in model:
            raise FamwiseInputError(
                f"{header[j]!r} is a block or covariate column; it cannot also be a response")
    return picked, skipped


@dataclass(frozen=True)
class _Plan:
    tasks: list
    names: list
    strata: list
    no_stratum: int


def _plan_tasks(raw, data, picked, g, b, settings, root, command) -> _Plan:
    """List the tasks: responses in order, then strata in order of first appearance."""
    header, source = raw.header, raw.source
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
    tasks = []
    group_cells = body[g].to_numpy(dtype=object)
    for j, name in zip(picked, names):
        values = body[j].to_numpy() if pd.api.types.is_numeric_dtype(body[j].dtype) \
            else body[j].to_numpy(dtype=object)
        for s, rows in zip(strata, members):
            index = len(tasks)
            frame = {name: values[rows], header[g]: group_cells[rows], _FILLED: filled[rows]}
            for col in (settings.get("block") or []) + (settings.get("covariates") or []):
                j = header.index(col)
                cells = body[j].to_numpy() if pd.api.types.is_numeric_dtype(body[j].dtype) \
                    else body[j].to_numpy(dtype=object)
                frame[col] = cells[rows]
            folder = top[name] + ("" if s is None else "/" + sub_names[s])
            seed_i = task_seed(root, index)
            tasks.append(_Task(index, name, s, frame, raw.rows[rows], seed_i, folder,
                               _task_command(source, data, name, header[g], s, settings,
                                             seed_i, command)))
    return _Plan(tasks, names, strata, no_stratum)


def _run_all(tasks, raw, group_name, settings, render, n_jobs, backend, scheduler):
    """Run every task (in this process, or in parallel); outcomes in task order."""
    import joblib
    quiet = not (backend == "threads" and len(tasks) > 1)
    calls = [(_run_task, (t, raw.source, group_name, raw.notes, settings, render, quiet), {})
             for t in tasks]
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", FamwiseWarning)   # threads: the parent warns
        if backend != "dask" and joblib.effective_n_jobs(n_jobs) == 1:
            return [fn(*a, **kw) for fn, a, kw in calls], "in this process"
        delayed = [joblib.delayed(fn)(*a, **kw) for fn, a, kw in calls]
        return _execute(delayed, n_jobs, backend, scheduler)


def _batch_record(raw, data, plan, table, g, b, skipped, settings, fdr, root, where,
                  cautions, task_records, n_jobs, backend, command, seconds) -> dict:
    """The batch record written as batch.json (schema famwise.batch/1)."""
    from ..core.results import environment
    header = raw.header
    s = settings
    ok = table["status"] == "ok"
    p_ok = table["omnibus_p"].notna() & ok
    return {
        "schema": BATCH_SCHEMA,
        "input": {"source": raw.source, "sha256": _sha256(data), "group": header[g],
                  "by": header[b] if b is not None else None, "responses": plan.names,
                  "columns_not_used": skipped,
                  "strata": [x for x in plan.strata if x is not None],
                  "rows_read": int(len(raw.body)), "rows_without_stratum": plan.no_stratum,
                  "notes": list(raw.notes)},
        "settings": {"family": s["family"], "reference": s["reference"],
                     "procedure": s["procedure"], "options": dict(s["options"]),
                     "alpha": s["alpha"], "resamples": s["resamples"], "seed": _entropy(root),
                     "seeds": "task i uses the i-th child of numpy SeedSequence(seed), "
                              "63 bits of its state (the seed column)",
                     "crosscheck": s["crosscheck"], "policy": s["policy"].to_dict(),
                     "n_jobs": n_jobs, "backend": backend, "ran_on": where},
        "fdr": {"method": fdr, "name": _FDR_NAMES[fdr], "level": s["alpha"],
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
        "command": command,
        "seconds": seconds,
    }


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


def _batch_command(data, names, responses, group, settings, fdr, root):
    source = os.fspath(data) if isinstance(data, (str, os.PathLike)) else "<DataFrame>"
    parts = ["famwise", "batch", source]
    parts += (["--all-numeric"] if isinstance(responses, str)
              else ["--responses", ",".join(names)])
    parts += ["--group", group]
    if settings["by"]:
        parts += ["--by", settings["by"]]
    if settings.get("block"):
        parts += ["--block", ",".join(settings["block"])]
    if settings.get("covariates"):
        parts += ["--covariate", ",".join(settings["covariates"])]
    parts += ["--family", settings["family"]]
    if settings["reference"] is not None:
        parts += ["--reference", settings["reference"]]
    parts += ["--fdr", fdr, "--alpha", f"{settings['alpha']:g}", "--procedure",
              settings["procedure"], *option_arguments(settings.get("options") or {}),
              "--resamples", str(settings["resamples"]), "--seed", str(_entropy(root))]
    return shlex.join(parts)

"""The Python API: the one place that wires the stages together.

``compare`` runs intake -> checks -> route -> procedure -> cross-check ->
decision record; ``inspect`` runs intake and the checks alone.  The command
line and batch sit above this module.
"""

from __future__ import annotations

import dataclasses
import os
import shlex
import warnings
from dataclasses import dataclass

import numpy as np
import pandas as pd

from .diagnostics import Findings, Policy, load_policy, run_checks
from .diagnostics.route import Route, choose
from .core.errors import FamwiseInputError, SmallGroupWarning
from .core.families import Family, build_family
from .intake.reader import Intake, file_sha256, read
from .core.layout import Layout
from .intake.ledger import Ledger
from .procedures.margin import check_margin, classify
from .procedures.catalogue import (CATALOGUE, check_options, check_procedure, option_arguments,
                                   run_procedure)
from .comparison import Comparison
from .core.results import DecisionRecord, environment
from .intake.summary import group_summary
from .core.validate import check_alpha, check_alternative

__all__ = ["compare", "inspect", "calibrate", "Inspection", "load_data"]

_BACKENDS = ("threads", "processes", "dask")


@dataclass(frozen=True)
class Inspection:
    """What :func:`inspect` returns: the data's account and the checks."""

    layout: Layout
    ledger: Ledger
    groups: pd.DataFrame
    findings: Findings


def load_data(data, response=None, group=None, *, block=None, covariates=None,
              **read_options) -> Intake:
    """Return an :class:`Intake` from a path, DataFrame, Intake or Layout.

    ``block`` and ``covariates`` name columns of a file or DataFrame; a
    Layout or Intake carries its own (``Layout.with_design``).  With either,
    the model is fitted here, so a design that cannot be analysed (not
    connected, a block with one plot, a constant or collinear covariate)
    fails before any check runs.
    """
    if isinstance(data, (Intake, Layout)) and (block is not None or covariates is not None):
        raise FamwiseInputError(
            "block= and covariates= name columns of a file or DataFrame; a Layout carries "
            "its own blocks and covariates (build it with Layout.with_design(blocks=..., "
            "covariates=...))")
    intake = _load(data, response, group, block=block, covariates=covariates,
                   **read_options)
    lay = intake.layout
    if lay.design is not None:
        if lay.censored is not None and lay.censored.any():
            raise FamwiseInputError(
                f"{int(lay.censored.sum())} value(s) of {lay.response!r} in {lay.source!r} are "
                f"non-detects (below a detection limit), and the model with blocks or "
                f"covariates needs measured values; set them aside with nondetects='drop' "
                f"(CLI --nondetects drop; this biases means upward) or compare without "
                f"block= and covariates= on the censored route")
        from .model import fit_model
        fit_model(lay)
    return intake


def _load(data, response, group, **read_options) -> Intake:
    if isinstance(data, Intake):
        return data
    if isinstance(data, Layout):
        ledger = Ledger(data.source, "row", data.n_total, data.n_total, (),
                        ("data given as a Layout",))
        return Intake(data, ledger)
    return read(data, response, group, **read_options)


def _policy(policy) -> Policy:
    if policy is None:
        return Policy()
    if isinstance(policy, Policy):
        return policy
    if isinstance(policy, dict):
        return Policy().replace(**policy)
    return load_policy(policy)


def _seed(seed):
    if seed is None:
        return int(np.random.SeedSequence().entropy % (2 ** 63))
    if isinstance(seed, (bool, np.bool_)) or not isinstance(seed, (int, np.integer)) or seed < 0:
        raise FamwiseInputError(f"seed must be a non-negative integer or None; got {seed!r}")
    return int(seed)


def inspect(data, response=None, group=None, *, block=None, covariates=None, policy=None,
            **read_options) -> Inspection:
    """Read ``data``, account for every row, summarise the groups and run the checks.

    With ``block=`` or ``covariates=`` the checks run on the residuals of the
    additive model and ``.groups`` carries the adjusted means.
    """
    intake = load_data(data, response, group, block=block, covariates=covariates,
                       **read_options)
    pol = _policy(policy)
    return Inspection(intake.layout, intake.ledger, _groups(intake.layout),
                      run_checks(intake.layout, pol))


def _groups(layout: Layout) -> pd.DataFrame:
    """The group summary, with the model's adjusted means and SEs under a design."""
    groups = group_summary(layout)
    if layout.design is not None:
        from .model import fit_model
        fit = fit_model(layout)
        groups = groups.assign(adjusted_mean=fit.adjusted_mean, adjusted_se=fit.adjusted_se)
    return groups


def compare(data, response=None, group=None, *, family="all-pairs", reference=None,
            contrasts=None, procedure="auto", alpha=0.05, alternative="two-sided",
            margin=None, resamples=9999, seed=None, n_jobs=1, backend="threads",
            scheduler=None, policy=None, crosscheck=True, progress=None,
            calibrate=False, command=None, block=None, covariates=None,
            options=None, transform=None, log_offset=None, **read_options) -> Comparison:
    """Compare groups: check the data, choose a procedure, run it and cross-check it.

    Parameters
    ----------
    data : path-like, pandas.DataFrame, Intake or Layout
        The observations (see :func:`famwise.intake.read` for files).
    response, group : str
        Long layout: the value column and the group column.
    family : {"all-pairs", "vs-reference", "contrasts"}, default="all-pairs"
    reference : str, optional
        The reference (control) group for ``family="vs-reference"``.
    contrasts : str, list or dict, optional
        The contrasts for ``family="contrasts"`` (see :mod:`famwise.core.families`).
    procedure : str, default="auto"
        ``"auto"`` lets the policy choose; or a procedure identifier
        (``famwise procedures`` lists them).
    alpha : float, default=0.05
        Familywise error rate (false discovery rate for ``bh``).
    alternative : {"two-sided", "greater", "less"}, default="two-sided"
        One-sided tests are offered for the reference family.
    margin : float, optional
        The smallest difference that matters; adds the ``practical`` column.
    resamples : int or "auto", default=9999
        Resamples B for resampling procedures; ``"auto"`` grows B until no
        adjusted p-value is unsettled at alpha.
    seed : int, optional
        Seed of the resampling (drawn and recorded when not given).
    n_jobs : int, default=1
        Parallel jobs (joblib meaning); results do not depend on it.
    backend : {"threads", "processes", "dask"}, default="threads"
    scheduler : str or dask.distributed.Client, optional
        A dask scheduler for ``backend="dask"``.
    policy : Policy, dict or path of a TOML file, optional
        Routing thresholds (see :class:`famwise.diagnostics.Policy`).
    crosscheck : bool, default=True
        Run the independent second route.
    transform : {None, "log"}, default=None
        ``"log"``: analyse ``log(x + log_offset)`` and add the ratio columns
        ``ratio``, ``ratio_lower``, ``ratio_upper`` (ratios of geometric
        means; see :mod:`famwise.model.scale`).  Values at or below zero are
        refused, naming their rows, unless ``log_offset`` lifts them.
    log_offset : float, optional
        A non-negative constant added before the log (recorded).
    calibrate : bool or int, default=False
        Also estimate every candidate's familywise error, and the automatic
        pipeline's, at the observed design (an int sets the replicates;
        ``True`` means 2,000); see :func:`calibrate`.
    block : str or list of str, optional
        The blocking column (replicate), or two columns (rows and columns of
        a Latin square).  The groups are then compared under the additive
        model ``response = group + block(s) + covariate(s)``
        (:func:`famwise.model.fit_model`): adjusted means, the model's error
        mean square and df, checks on its residuals.
    covariates : str or list of str, optional
        Numeric covariate columns (baseline measurements) for the same model.
    command : str, optional
        The command line to record (the CLI passes its own); by default the
        record gets the command that reproduces this call.
    options : dict, optional
        The named procedure's own options, for example ``{"trim": 0.1}`` for
        ``yuen-holm`` or ``{"statistic": "pooled"}`` for the permutation
        procedures (``famwise procedures`` lists each procedure's options).
        Keys are checked against the procedure's allowed keys and values
        parsed to their types (text such as ``"0.1"`` is accepted); they
        need a named ``procedure``, not ``"auto"``, and are recorded in the
        decision record (``options``) and its command line.
    **read_options
        Passed to :func:`famwise.intake.read` (wide, columns, sheet, decimal,
        encoding, order, merge_spellings, delimiter).

    Returns
    -------
    Comparison
        ``.groups``, ``.comparisons``, ``.decision``, ``.crosscheck``,
        ``.ledger``, ``.summary()``, ``.save(dir)``, ``.to_html(path)``.
    """
    alpha = check_alpha(alpha)
    alternative = check_alternative(alternative)
    margin = check_margin(margin)
    if procedure != "auto":
        check_procedure(procedure)
    options = check_options(procedure, options)
    if backend not in _BACKENDS:
        raise FamwiseInputError(f"backend must be one of {', '.join(_BACKENDS)}; got {backend!r}")
    if alternative != "two-sided" and family != "vs-reference":
        raise FamwiseInputError(
            f"alternative={alternative!r} is offered for family 'vs-reference' only; "
            f"use a two-sided test for {family!r}")
    pol = _policy(policy)
    seed = _seed(seed)
    from .model.scale import add_ratio_columns, check_transform, log_layout
    scale = check_transform(transform, log_offset)
    if scale.name is not None and margin is not None:
        raise FamwiseInputError("a margin is a difference on the original scale; with "
                                "transform='log' compare the ratio columns with your margin "
                                "as a ratio instead")
    intake = load_data(data, response, group, block=block, covariates=covariates,
                       **read_options)
    layout, ledger = intake.layout, intake.ledger
    original = layout
    if scale.name is not None:
        if layout.design is not None:
            raise FamwiseInputError("transform='log' is not yet available with blocks or "
                                    "covariates; take the log of the column first")
        layout = log_layout(layout, scale)
    fam = build_family(layout.labels, family, reference, contrasts)
    findings = run_checks(layout, pol)
    route = choose(findings, fam, layout, pol, procedure, alpha, seed=seed, scale=scale.name,
                   margin=margin)
    for w in route.warnings:
        warnings.warn(SmallGroupWarning(w), stacklevel=2)
    resampling_options = dict(resamples=resamples, seed=seed, n_jobs=n_jobs, backend=backend,
                              scheduler=scheduler, progress=progress)
    run_options = dict(options)
    if CATALOGUE[route.procedure].route == "ranks" and route.procedure != "brunner-munzel-maxt":
        # asymptotic with groups of policy.rank_permutation_below or more, else
        # permutation, unless the user named a method (options={"method": ...})
        run_options.setdefault("method", pol.rank_method(layout.stats.n))
    table = _run(route.procedure, layout, fam, alpha, alternative, resampling_options,
                 run_options)
    check = None
    if crosscheck and route.crosscheck:
        from .procedures.crosscheck import crosscheck as run_crosscheck
        cc_resampling = dict(resampling_options)
        if cc_resampling["resamples"] == "auto":
            cc_resampling["resamples"] = 9999
        statistic = ("pooled" if CATALOGUE[route.procedure].route == "classical"
                     and layout.design is None else None)
        check = run_crosscheck(table, route.crosscheck, layout, fam, alpha=alpha,
                               alternative=alternative, resampling=cc_resampling,
                               statistic=statistic)
    if margin is not None:
        table = table.assign(practical=classify(table["ci_lower"], table["ci_upper"], margin))
    if scale.name is not None:
        table = add_ratio_columns(table)
    groups = _groups(original)
    if scale.name is not None:
        groups = groups.assign(geometric_mean=np.exp(layout.stats.mean) - scale.offset)
    if fam.kind == "all-pairs":
        from .procedures.letters import compact_letters
        means = groups["adjusted_mean" if layout.design is not None else "mean"].to_numpy(
            dtype=float)
        if scale.name is not None:
            means = layout.stats.mean.copy()
        # A group of non-detects only has no Kaplan-Meier mean; order it by its limit.
        means = np.where(np.isfinite(means), means, groups["min"].to_numpy(dtype=float))
        groups = groups.assign(letters=compact_letters(means, table, list(layout.labels)))
    calibration = None
    if calibrate and layout.has_censoring:
        warnings.warn(SmallGroupWarning(
            "calibration simulates procedures on means under normal errors; it is not "
            "available for data with non-detects, so none was run"), stacklevel=2)
        calibrate = False
    if calibrate:
        from .diagnostics.calibrate import calibrate_layout
        reps = 2000 if calibrate is True else int(calibrate)
        calibration = calibrate_layout(layout, fam, alpha=alpha, replicates=reps, seed=seed,
                                       policy=pol)
    from .procedures.omnibus import omnibus_test
    omnibus = omnibus_test(route.route, layout, table)
    if command is None:
        command = _reproduce(data, response, group, fam, alpha, route,
                             table.attrs.get("resampling"), seed, block, covariates,
                             options or {}, read_options)
        if scale.name is not None:
            command += " --transform log" + (f" --log-offset {scale.offset:g}"
                                             if scale.offset else "")
    record = _record(intake, data, fam, alpha, margin, findings, pol, route, check, table,
                     command, response, group, seed, block, covariates, options, read_options)
    record = dataclasses.replace(record, omnibus=omnibus.to_dict(),
                                 transform=scale.to_dict())
    return Comparison(groups=groups, comparisons=table, decision=record, crosscheck=check,
                      ledger=ledger, findings=findings, layout=layout, family=fam,
                      calibration=calibration, omnibus=omnibus)


def calibrate(data, response=None, group=None, *, family="all-pairs", reference=None,
              contrasts=None, alpha=0.05, replicates=2000, shape="normal", seed=None,
              procedures=None, pipeline=True, policy=None, block=None, covariates=None,
              options=None, **read_options):
    """Estimate familywise error rates under the complete null at the observed design.

    For every candidate procedure of the family (or those named in
    ``procedures``) and for the whole automatic pipeline (checks and routing
    included), at the observed group sizes and SDs, with normal errors or
    (``shape="observed"``) errors resampled from the standardised residuals.
    See :mod:`famwise.diagnostics.calibrate` for the methods.

    ``options`` (a mapping, as for :func:`compare`) apply to every procedure
    in ``procedures``, which must then be named; each key is checked against
    each procedure's allowed keys.  The simulation covers ``trim`` for
    ``yuen-holm`` and ``statistic`` ``"welch"`` or ``"pooled"`` for the
    resampling procedures; other combinations are refused, never ignored.
    The options are shown in the table's ``method`` and kept in
    ``.design["options"]``.

    Returns
    -------
    Calibration
        ``.table`` (procedure, fwer, se, replicates, method, holds),
        ``.independent`` (1 - (1 - alpha)^m), ``.routes`` (how often the
        pipeline chose each procedure), ``.sentence()``, ``.to_dict()``.
    """
    from .diagnostics.calibrate import calibrate_layout
    alpha = check_alpha(alpha)
    if procedures is not None:
        procedures = [check_procedure(p).name for p in procedures]
    if options and procedures is None:
        check_options("auto", options)          # raises: options need named procedures
    parsed = {}
    for name in procedures or ():
        parsed = check_options(name, options)
    intake = load_data(data, response, group, block=block, covariates=covariates,
                       **read_options)
    fam = build_family(intake.layout.labels, family, reference, contrasts)
    return calibrate_layout(intake.layout, fam, alpha=alpha, replicates=int(replicates),
                            shape=shape, seed=_seed(seed), procedures=procedures,
                            pipeline=pipeline, policy=_policy(policy), options=parsed)


def _run(name, layout, fam, alpha, alternative, resampling_options, own=None) -> pd.DataFrame:
    info = CATALOGUE[name]
    options = dict(own or {})
    if info.route in ("resample", "ranks"):
        options.update(resampling_options)
    if alternative != "two-sided":
        options["alternative"] = alternative
    return run_procedure(name, layout, fam, alpha=alpha, **options)


def _record(intake, data, fam: Family, alpha, margin, findings, pol, route: Route, check,
            table, command, response, group, seed, block=None, covariates=None,
            options=None, read_options=None) -> DecisionRecord:
    led = intake.ledger
    is_file = isinstance(data, (str, os.PathLike))
    resampling = table.attrs.get("resampling")
    if resampling is not None:
        resampling = dict(resampling, max_mc_error=float(np.nanmax(table["mc_error"])),
                          unsettled=[c for c, u in zip(table["comparison"], table["unsettled"])
                                     if u])
    if command is None:
        command = _reproduce(data, response, group, fam, alpha, route, resampling, seed,
                             block, covariates, options or {}, read_options or {})
    model = None
    if intake.layout.design is not None:
        from .diagnostics.model_route import model_summary
        model = model_summary(intake.layout)
    return DecisionRecord(
        input={"source": led.source, "sha256": file_sha256(data) if is_file else None,
               "response": intake.layout.response, "group": intake.layout.group,
               "layout": "wide" if led.unit == "cell" else "long",
               "ledger": led.to_dict()},
        family={"kind": fam.kind, "m": fam.m,
                "reference": fam.labels[fam.reference] if fam.reference is not None else None,
                "comparisons": list(fam.names)},
        alpha=alpha, margin=margin, checks=findings.to_records(), policy=pol.to_dict(),
        route=route.to_dict(), crosscheck=check.to_dict() if check is not None else None,
        resampling=resampling, environment=environment(), command=command, model=model,
        options=dict(options or {}),
        censoring=_censoring(intake, table, read_options or {}))


def _censoring(intake, table, read_options) -> dict | None:
    """The decision record's account of non-detects (None when there were none)."""
    led, lay = intake.ledger, intake.layout
    mode = read_options.get("nondetects", "keep")
    dropped = sum(d.reason in ("below-limit", "not-detected") for d in led.dropped)
    if not lay.has_censoring and not dropped:
        return None
    return {"nondetects": mode,
            "detection_limit": read_options.get("detection_limit"),
            "kept_censored": len(led.censored),
            "kept_censored_by_group": {lab: int(lay.censored_flags[lay.codes == g].sum())
                                       for g, lab in enumerate(lay.labels)},
            "set_aside": dropped,
            "sentence": (f"{len(led.censored)} non-detect(s) kept as left-censored values"
                         if mode == "keep" else
                         f"{dropped} non-detect(s) set aside on request (nondetects='drop'); "
                         f"summaries of the remaining values are biased upward"),
            "sensitivity": table.attrs.get("sensitivity")}


def _columns_option(value) -> str:
    return value if isinstance(value, str) else ",".join(map(str, value))


def _reproduce(data, response, group, fam, alpha, route, resampling, seed, block=None,
               covariates=None, options=None, read_options=None) -> str:
    source = os.fspath(data) if isinstance(data, (str, os.PathLike)) else "<DataFrame>"
    parts = ["famwise", "compare", source]
    if response:
        parts += ["--response", str(response)]
    if group:
        parts += ["--group", str(group)]
    if block:
        parts += ["--block", _columns_option(block)]
    if covariates:
        parts += ["--covariate", _columns_option(covariates)]
    parts += ["--family", fam.kind]
    if fam.reference is not None:
        parts += ["--reference", fam.labels[fam.reference]]
    if fam.kind == "contrasts":
        parts += ["--contrasts", "; ".join(fam.names)]
    parts += ["--alpha", f"{alpha:g}"]
    if route.chosen_by == "user":
        parts += ["--procedure", route.procedure]
        parts += option_arguments(options or {})
    if resampling is not None:
        parts += ["--resamples", str(resampling["resamples"])]
    parts += ["--seed", str(seed)]
    read_options = read_options or {}
    if read_options.get("detection_limit") is not None:
        parts += ["--detection-limit", str(read_options["detection_limit"])]
    if read_options.get("nondetects", "keep") != "keep":
        parts += ["--nondetects", str(read_options["nondetects"])]
    return shlex.join(parts)

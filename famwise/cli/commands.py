"""The ``famwise`` command line: a thin layer over the Python API.

Exit codes: 0 success; 2 bad input or usage (one line on standard error, no
traceback); 1 an internal error (set ``FAMWISE_DEBUG=1`` for the traceback).
"""

from __future__ import annotations

import argparse
import json
import os
import sys
import warnings

from ..core.version import __version__
from ..core.errors import FamwiseInputError, FamwiseWarning

__all__ = ["main", "build_parser"]

EXAMPLES = """\
examples:
  famwise compare trial.csv --response nitrate_mg_kg --group mix --out results/
  famwise compare trial.csv -r nitrate_mg_kg -g mix --family vs-reference \\
      --reference "Bare fallow" --alternative less --margin 5
  famwise compare trial.csv -r nitrate_mg_kg -g mix --family contrasts \\
      --contrasts 'legumes: (`Rye + hairy vetch` + `Crimson clover`)/2 - `Cereal rye`'
  famwise inspect trial.csv --response nitrate_mg_kg --group mix
  famwise inspect plots.xlsx --sheet 2025 --response yield --group variety
  famwise inspect wide.csv --wide --columns "Rye,Fallow,Clover"
  famwise plan trial.csv -r nitrate_mg_kg -g mix --margin 5 --out plan/
  famwise plan --sd 4,4,6 --margin 5 --n 6,8,10,12
  famwise plan trial.csv -r nitrate_mg_kg -g mix --transform log --margin 1.5 \\
      --family vs-reference --reference "Bare fallow"
  famwise demo --out out/demo
"""


BATCH_EXAMPLES = """\
examples:
  famwise batch survey.csv --all-numeric --group station --out results/
  famwise batch survey.csv --responses nitrate,chloride --group station --by year --fdr by
  famwise batch survey.csv --all-numeric -g station --jobs 2
  famwise batch survey.csv --all-numeric -g station --backend dask --scheduler tcp://10.0.0.5:8786
"""


class _Parser(argparse.ArgumentParser):
    """argparse that reports usage errors in one line with exit code 2."""

    def error(self, message):
        self.exit(2, f"famwise: error: {message} (see famwise {self.prog.split()[-1]} --help)\n"
                  if " " in self.prog else f"famwise: error: {message} (see famwise --help)\n")


def _add_file_options(p: argparse.ArgumentParser) -> None:
    """How to read the file: sheet, delimiter, decimal mark, encoding, labels."""
    p.add_argument("--sheet", metavar="NAME", help="Excel sheet (default: the first)")
    p.add_argument("--delimiter", metavar="CHAR", help="field delimiter (default: detected)")
    p.add_argument("--decimal-comma", action="store_true",
                   help="numbers use a decimal comma (3,7)")
    p.add_argument("--encoding", metavar="NAME", help="text encoding (default UTF-8)")
    p.add_argument("--merge-spellings", action="store_true",
                   help="merge labels that differ only by case or spacing")
    p.add_argument("--detection-limit", metavar="NUMBER|COL",
                   help="limit of bare non-detects such as 'n.d.' or '<DL': a number, or "
                        "the column holding each row's limit")
    p.add_argument("--nondetects", choices=("keep", "drop"), default="keep",
                   help="keep non-detects as left-censored values (default) or set them "
                        "aside")


def _file_options(args) -> dict:
    out = dict(sheet=args.sheet, delimiter=args.delimiter,
               decimal="," if args.decimal_comma else ".", encoding=args.encoding,
               merge_spellings=args.merge_spellings)
    if getattr(args, "detection_limit", None) is not None:
        out["detection_limit"] = args.detection_limit
    if getattr(args, "nondetects", "keep") != "keep":
        out["nondetects"] = args.nondetects
    return out


def _add_data_options(p: argparse.ArgumentParser) -> None:
    p.add_argument("file", help="CSV/TSV/TXT, Excel (.xlsx) or Parquet file")
    p.add_argument("--response", "-r", metavar="COL", help="column of measured values")
    p.add_argument("--group", "-g", metavar="COL", help="column of group labels")
    p.add_argument("--wide", action="store_true",
                   help="wide layout: one column per group")
    p.add_argument("--columns", metavar="A,B,...",
                   help="wide layout: the group columns to use (comma-separated)")
    p.add_argument("--order", metavar="A,B,...",
                   help="group order (default: order of first appearance)")
    _add_file_options(p)
    p.add_argument("--exclude-rows", metavar="N,M,...",
                   help="set aside these file rows (listed in the ledger as excluded)")
    _add_model_options(p)


def _add_model_options(p: argparse.ArgumentParser) -> None:
    p.add_argument("--block", metavar="COL[,COL]",
                   help="blocking column (replicate), or two for the rows and columns of a "
                        "Latin square: groups are compared under group + block model")
    p.add_argument("--covariate", metavar="COL[,COL]",
                   help="numeric covariate column(s) (baseline measurements) for the model")


def _add_compare_options(p: argparse.ArgumentParser) -> None:
    p.add_argument("--family", choices=("all-pairs", "vs-reference", "contrasts"),
                   default="all-pairs", help="which comparisons (default: all-pairs)")
    p.add_argument("--reference", metavar="LABEL", help="reference group for vs-reference")
    p.add_argument("--contrasts", metavar="TEXT",
                   help="contrasts, e.g. '(A + B)/2 - C; B - C' (labels with spaces in "
                        "backticks)")
    p.add_argument("--procedure", "-p", default="auto", metavar="NAME",
                   help="procedure identifier, or auto (default); see famwise procedures")
    _add_option_flag(p)
    p.add_argument("--alpha", type=float, default=0.05, help="familywise level (default 0.05)")
    p.add_argument("--alternative", choices=("two-sided", "greater", "less"),
                   default="two-sided", help="direction, for vs-reference (default two-sided)")
    p.add_argument("--margin", type=float, metavar="D",
                   help="smallest difference that matters, in the response's unit")
    p.add_argument("--resamples", "-B", default="9999", metavar="B",
                   help="resamples for resampling procedures, or auto (default 9999)")
    p.add_argument("--seed", type=int, help="seed of the resampling (default: drawn, recorded)")
    p.add_argument("--jobs", "-j", type=int, default=1, metavar="N",
                   help="parallel jobs for resampling (-1: all cores)")
    p.add_argument("--backend", choices=("threads", "processes", "dask"), default="threads")
    p.add_argument("--scheduler", metavar="ADDRESS", help="dask scheduler address")
    p.add_argument("--policy", metavar="FILE", help="routing thresholds from a TOML file")
    p.add_argument("--no-crosscheck", action="store_true", help="skip the second route")
    p.add_argument("--transform", choices=("log",), default=None,
                   help="analyse on the log scale; results as ratios of geometric means")
    p.add_argument("--log-offset", type=float, default=None, metavar="C",
                   help="constant added before the log (recorded), e.g. for zeros")
    p.add_argument("--calibrate", nargs="?", type=int, const=2000, default=0, metavar="N",
                   help="also estimate familywise error rates at this design (N replicates, "
                        "default 2000)")
    p.add_argument("--out", "-o", metavar="DIR", help="write the result files to DIR")
    p.add_argument("--force", action="store_true", help="replace files already in DIR")
    p.add_argument("--format", choices=("text", "json", "csv"), default="text",
                   help="what to print: the summary, the decision record, or the table")
    p.add_argument("--quiet", "-q", action="store_true", help="print nothing but warnings")


def _add_option_flag(p: argparse.ArgumentParser) -> None:
    p.add_argument("--option", action="append", default=[], metavar="KEY=VALUE",
                   help="an option of the named procedure, e.g. trim=0.1 (repeatable; "
                        "famwise procedures lists each procedure's options)")


def _procedure_options(pairs) -> dict | None:
    """``--option KEY=VALUE`` arguments as a dict of texts (parsed by the catalogue)."""
    out = {}
    for pair in pairs or ():
        key, sep, value = pair.partition("=")
        key = key.strip()
        if not sep or not key:
            raise FamwiseInputError(f"--option needs KEY=VALUE, e.g. --option trim=0.1; "
                                    f"got {pair!r}")
        if key in out:
            raise FamwiseInputError(f"--option {key} is given twice")
        out[key] = value.strip()
    return out or None


def _resamples(text):
    if text == "auto":
        return "auto"
    try:
        value = int(text)
    except ValueError:
        raise FamwiseInputError(f"--resamples must be a whole number or auto; got {text!r}") \
            from None
    if value < 1:
        raise FamwiseInputError(f"--resamples must be at least 1; got {value}")
    return value


def build_parser() -> argparse.ArgumentParser:
    parser = _Parser(
        prog="famwise",
        description="Compare groups robustly on messy data.",
        epilog=EXAMPLES, formatter_class=argparse.RawDescriptionHelpFormatter)
    parser.add_argument("--version", action="version", version=f"famwise {__version__}")
    sub = parser.add_subparsers(dest="command", metavar="COMMAND", parser_class=_Parser)

    p = sub.add_parser("inspect", help="read a file, account for every row, run the checks",
                       description="Read a file, account for every row, summarise each "
                                   "group and run the checks on the data.", epilog=EXAMPLES,
                       formatter_class=argparse.RawDescriptionHelpFormatter)
    _add_data_options(p)
    p.add_argument("--policy", metavar="FILE", help="check thresholds from a TOML file")
    p.add_argument("--format", choices=("text", "json", "csv"), default="text",
                   help="what to print on standard output (default: text)")
    p.add_argument("--quiet", "-q", action="store_true", help="print warnings only")
    p.set_defaults(run=_run_inspect)

    p = sub.add_parser("compare", help="check the data, choose a procedure, compare the groups",
                       description="Check the data, choose a simultaneous procedure (or use "
                                   "the one you name), compare the groups, cross-check the "
                                   "result and say why.", epilog=EXAMPLES,
                       formatter_class=argparse.RawDescriptionHelpFormatter)
    _add_data_options(p)
    _add_compare_options(p)
    p.set_defaults(run=_run_compare)

    p = sub.add_parser("calibrate", help="estimate familywise error rates at your design",
                       description="Estimate, under the complete null at the observed group "
                                   "sizes and SDs, the familywise error rate of every "
                                   "candidate procedure and of the automatic pipeline.")
    _add_data_options(p)
    p.add_argument("--family", choices=("all-pairs", "vs-reference", "contrasts"),
                   default="all-pairs")
    p.add_argument("--reference", metavar="LABEL")
    p.add_argument("--contrasts", metavar="TEXT")
    p.add_argument("--alpha", type=float, default=0.05)
    p.add_argument("--replicates", type=int, default=2000, metavar="N")
    p.add_argument("--procedure", "-p", action="append", metavar="NAME",
                   help="calibrate only this procedure (repeatable; default: every candidate)")
    _add_option_flag(p)
    p.add_argument("--shape", choices=("normal", "observed"), default="normal",
                   help="errors: normal, or resampled from the observed residuals")
    p.add_argument("--seed", type=int)
    p.add_argument("--policy", metavar="FILE", help="routing thresholds from a TOML file")
    p.add_argument("--format", choices=("text", "json", "csv"), default="text")
    p.set_defaults(run=_run_calibrate)

    p = sub.add_parser("batch", help="compare groups for many responses (and strata) at once",
                       description="Run the whole comparison for every response column (and, "
                                   "with --by, every stratum), screen the responses by false "
                                   "discovery rate across their omnibus p-values, and write "
                                   "one summary row per response and stratum.",
                       epilog=BATCH_EXAMPLES,
                       formatter_class=argparse.RawDescriptionHelpFormatter)
    p.add_argument("file", help="CSV/TSV/TXT, Excel (.xlsx) or Parquet file, one row per sample")
    which = p.add_mutually_exclusive_group(required=True)
    which.add_argument("--responses", metavar="A,B,...",
                       help="the response columns, in the order to run them")
    which.add_argument("--all-numeric", action="store_true",
                       help="every column holding measurements, except --group and --by")
    p.add_argument("--group", "-g", metavar="COL", required=True, help="column of group labels")
    p.add_argument("--by", metavar="COL", help="column of strata (each year, each site ...)")
    _add_model_options(p)
    p.add_argument("--fdr", choices=("bh", "by"), default="bh",
                   help="screen across responses: Benjamini-Hochberg (default) or "
                        "Benjamini-Yekutieli (any dependence)")
    p.add_argument("--family", choices=("all-pairs", "vs-reference"), default="all-pairs")
    p.add_argument("--reference", metavar="LABEL", help="reference group for vs-reference")
    p.add_argument("--procedure", "-p", default="auto", metavar="NAME",
                   help="procedure identifier for every task, or auto (default)")
    _add_option_flag(p)
    p.add_argument("--alpha", type=float, default=0.05,
                   help="familywise level within a task, and false discovery rate across "
                        "tasks (default 0.05)")
    p.add_argument("--resamples", "-B", default="9999", metavar="B",
                   help="resamples for resampling procedures, or auto (default 9999)")
    p.add_argument("--seed", type=int, help="batch seed (default: drawn, recorded)")
    p.add_argument("--jobs", "-j", type=int, default=1, metavar="N",
                   help="tasks at once (-1: all cores)")
    p.add_argument("--backend", choices=("processes", "threads", "dask"), default="processes",
                   help="how tasks run in parallel (default processes); dask without "
                        "--scheduler starts a LocalCluster on 127.0.0.1")
    p.add_argument("--scheduler", metavar="ADDRESS",
                   help="address of a running dask.distributed scheduler (with --backend dask)")
    p.add_argument("--policy", metavar="FILE", help="routing thresholds from a TOML file")
    p.add_argument("--no-crosscheck", action="store_true", help="skip the second route")
    _add_file_options(p)
    p.add_argument("--out", "-o", metavar="DIR",
                   help="write batch.csv, batch.json and one folder per task to DIR")
    p.add_argument("--force", action="store_true", help="replace files already in DIR")
    p.add_argument("--format", choices=("text", "json", "csv"), default="text",
                   help="what to print: the summary, the batch record, or the table")
    p.add_argument("--quiet", "-q", action="store_true", help="print nothing but warnings")
    p.set_defaults(run=_run_batch)

    p = sub.add_parser("plan", help="power and group sizes for the next trial, by simulation",
                       description="Estimate, by simulating data like a pilot's (or with "
                                   "the SDs you state), the power of each procedure and of "
                                   "the automatic pipeline to find a difference of at least "
                                   "the margin, their familywise error at the same design, "
                                   "and the smallest group size that reaches a target power.")
    p.add_argument("file", nargs="?", help="a pilot: CSV/TSV/TXT, Excel (.xlsx) or Parquet")
    p.add_argument("--response", "-r", metavar="COL", help="column of measured values")
    p.add_argument("--group", "-g", metavar="COL", help="column of group labels")
    p.add_argument("--wide", action="store_true", help="wide layout: one column per group")
    p.add_argument("--columns", metavar="A,B,...", help="wide layout: the group columns")
    p.add_argument("--order", metavar="A,B,...", help="group order (the first two carry the "
                                                      "margin under one-pair)")
    _add_file_options(p)
    p.add_argument("--exclude-rows", metavar="N,M,...", help="set aside these pilot rows")
    p.add_argument("--block", metavar="COL",
                   help="the pilot's block column: plan a randomised complete block design "
                        "(one plot of every group per block; --n counts blocks)")
    p.add_argument("--margin", type=float, required=True, metavar="D",
                   help="smallest difference that matters, in the response's unit; with "
                        "--transform log, a ratio of geometric means (1.5: 50%% higher, "
                        "0.8: 20%% lower)")
    p.add_argument("--sd", metavar="S1,S2,...",
                   help="group SDs (without a pilot: one per group, named g1, g2, ...; with "
                        "one: replaces its SDs); with --transform log, SDs of the natural log "
                        "(about the CV when it is small)")
    p.add_argument("--family", choices=("all-pairs", "vs-reference"), default="all-pairs",
                   help="which comparisons (default: all-pairs)")
    p.add_argument("--reference", metavar="LABEL",
                   help="reference group for vs-reference (without a pilot: g1, g2, ...)")
    p.add_argument("--transform", choices=("log",), default=None,
                   help="plan the analysis on the log scale (as compare --transform log): "
                        "the margin is then a ratio of geometric means")
    p.add_argument("--log-offset", type=float, default=None, metavar="C",
                   help="constant added to the pilot's values before the log (recorded)")
    p.add_argument("--n", metavar="N1,N2,...",
                   help="group sizes to evaluate (default: search the smallest that reaches "
                        "the target)")
    p.add_argument("--target-power", type=float, default=0.8, metavar="P",
                   help="power to reach (default 0.8)")
    p.add_argument("--goal", choices=("any", "each", "all"), default="any",
                   help="which power the target is for: at least one true difference "
                        "(default), each on average, or all")
    p.add_argument("--placement", choices=("one-pair", "one-vs-rest", "observed"),
                   default="one-pair", help="where the margin sits (default one-pair)")
    p.add_argument("--procedure", "-p", action="append", metavar="NAME",
                   help="a procedure to evaluate (repeat; auto is the pipeline; default: the "
                        "route's candidates and auto)")
    p.add_argument("--replicates", type=int, default=2000, metavar="N",
                   help="simulated data sets per size (default 2000)")
    p.add_argument("--alpha", type=float, default=0.05, help="familywise level (default 0.05)")
    p.add_argument("--shape", choices=("normal", "observed"),
                   help="errors: normal, or resampled from the pilot's residuals (default "
                        "with a pilot)")
    p.add_argument("--allocation", choices=("equal", "pilot"), default="equal",
                   help="equal groups, or the pilot's proportions")
    p.add_argument("--max-n", type=int, default=500, metavar="N",
                   help="largest size per group the search tries (default 500)")
    p.add_argument("--seed", type=int, help="seed (default: drawn, recorded)")
    p.add_argument("--jobs", "-j", type=int, default=1, metavar="N",
                   help="parallel jobs (-1: all cores)")
    p.add_argument("--backend", choices=("threads", "processes", "dask"), default="threads")
    p.add_argument("--scheduler", metavar="ADDRESS", help="dask scheduler address")
    p.add_argument("--policy", metavar="FILE", help="routing thresholds from a TOML file")
    p.add_argument("--out", "-o", metavar="DIR",
                   help="write power.csv, power.json, power.txt, power.html and power.svg to DIR")
    p.add_argument("--force", action="store_true", help="replace files already in DIR")
    p.add_argument("--format", choices=("text", "json", "csv"), default="text",
                   help="what to print: the summary, the plan record, or the table")
    p.add_argument("--quiet", "-q", action="store_true", help="print nothing but warnings")
    p.set_defaults(run=_run_plan)

    p = sub.add_parser("procedures", help="list the procedures and what each is for",
                       description="List the procedure identifiers, their route, the "
                                   "families they handle and when each fits.")
    p.add_argument("--format", choices=("text", "json"), default="text")
    p.set_defaults(run=_run_procedures)

    p = sub.add_parser("demo", help="run famwise on the invented cover-crop trial",
                       description="Run famwise on the invented cover-crop trial and "
                                   "write the results to a folder.")
    p.add_argument("--out", metavar="DIR", default="out/demo", help="output folder")
    p.add_argument("--force", action="store_true", help="replace existing output files")
    p.add_argument("--quiet", "-q", action="store_true", help="print warnings only")
    p.set_defaults(run=_run_demo)
    return parser


def _split(text):
    return None if text is None else [s.strip() for s in text.split(",") if s.strip()]


def _read_options(args) -> dict:
    return dict(wide=args.wide, columns=_split(args.columns), order=_split(args.order),
                exclude_rows=_split(args.exclude_rows) or (),
                block=_split(getattr(args, "block", None)),
                covariates=_split(getattr(args, "covariate", None)), **_file_options(args))


def _read(args):
    from ..intake.reader import read
    return read(args.file, args.response, args.group, **_read_options(args))


def _inspection_text(ins) -> str:
    import textwrap

    import pandas as pd

    from ..report.textformat import frame_text
    checks = pd.DataFrame([(c.name, c.verdict, c.statistic, c.p_value)
                           for c in ins.findings.checks],
                          columns=["check", "verdict", "statistic", "p-value"])
    lines = ["Rows", *ins.ledger.lines(), "", "Groups", frame_text(ins.groups), "",
             "Checks", frame_text(checks)]
    lines += [textwrap.fill(f"{c.name}: {c.sentence}", width=100, subsequent_indent="  ")
              for c in ins.findings.checks if c.verdict != "ok"]
    return "\n".join(lines)


def _run_inspect(args) -> int:
    from ..api import inspect
    ins = inspect(args.file, args.response, args.group, policy=args.policy,
                  **_read_options(args))
    if args.quiet:
        return 0
    if args.format == "json":
        print(json.dumps({"ledger": ins.ledger.to_dict(),
                          "dropped": ins.ledger.to_frame().to_dict(orient="records"),
                          "groups": ins.groups.to_dict(orient="records"),
                          "checks": ins.findings.to_records()}, indent=2, default=str))
    elif args.format == "csv":
        from ..report.output import safe_csv_text
        sys.stdout.write(safe_csv_text(ins.groups))
    else:
        print(_inspection_text(ins))
    return 0


def _compare(args, command):
    from ..api import compare
    return compare(args.file, args.response, args.group, family=args.family, reference=args.reference,
                   contrasts=args.contrasts, procedure=args.procedure, alpha=args.alpha,
                   alternative=args.alternative, margin=args.margin,
                   resamples=_resamples(args.resamples), seed=args.seed, n_jobs=args.jobs,
                   backend=args.backend, scheduler=args.scheduler, policy=args.policy,
                   crosscheck=not args.no_crosscheck, calibrate=args.calibrate,
                   command=command, options=_procedure_options(args.option),
                   transform=args.transform, log_offset=args.log_offset,
                   **_read_options(args))


def _emit(result, args) -> None:
    if args.out:
        result.save(args.out, force=args.force)
    if args.quiet:
        return
    if args.format == "json":
        print(result.decision.to_json())
    elif args.format == "csv":
        from ..report.output import safe_csv_text
        sys.stdout.write(safe_csv_text(result.comparisons))
    else:
        print(result.summary())
        if args.out:
            print(f"\nwrote the report and tables to {args.out}")


def _run_compare(args) -> int:
    import shlex
    command = shlex.join(["famwise", *sys.argv[1:]]) if sys.argv[1:] else None
    if args.out:
        from ..report.output import prepare_folder
        from ..report.files import OUTPUT_FILES
        prepare_folder(args.out, OUTPUT_FILES, force=args.force)   # fail before the work
    _emit(_compare(args, command), args)
    return 0


def _run_calibrate(args) -> int:
    from ..api import calibrate
    from ..report.textformat import frame_text
    result = calibrate(args.file, args.response, args.group, family=args.family,
                       reference=args.reference, contrasts=args.contrasts, alpha=args.alpha,
                       replicates=args.replicates, shape=args.shape, seed=args.seed,
                       policy=args.policy, procedures=args.procedure,
                       options=_procedure_options(args.option), **_read_options(args))
    if args.format == "json":
        print(json.dumps(result.to_dict(), indent=2))
    elif args.format == "csv":
        from ..report.output import safe_csv_text
        sys.stdout.write(safe_csv_text(result.table))
    else:
        shown = result.table[["procedure", "fwer", "se", "replicates", "holds"]].copy()
        shown["holds"] = ["not simulated" if h is None or h != h else ("yes" if h else "no")
                          for h in shown["holds"]]
        print(frame_text(shown))
        print()
        import textwrap
        print(textwrap.fill(result.sentence(), width=100))
        print("Pipeline choices: " + ", ".join(f"{p} {c}" for p, c in result.routes.items()))
    return 0


def _run_batch(args) -> int:
    """famwise batch: exit 0, or 1 when a task hit an internal error (after writing)."""
    import shlex
    from ..batching.run import batch
    if args.scheduler and args.backend != "dask":
        raise FamwiseInputError("--scheduler needs --backend dask")
    if args.family == "vs-reference" and not args.reference:
        raise FamwiseInputError("--family vs-reference needs --reference LABEL")
    command = shlex.join(["famwise", *sys.argv[1:]]) if sys.argv[1:] else None
    result = batch(args.file, "all-numeric" if args.all_numeric else _split(args.responses),
                   args.group, by=args.by, family=args.family, reference=args.reference,
                   procedure=args.procedure, alpha=args.alpha, fdr=args.fdr,
                   resamples=_resamples(args.resamples), seed=args.seed, n_jobs=args.jobs,
                   backend=args.backend, scheduler=args.scheduler, policy=args.policy,
                   crosscheck=not args.no_crosscheck, out=args.out, force=args.force,
                   command=command, block=_split(args.block),
                   covariates=_split(args.covariate), options=_procedure_options(args.option),
                   **_file_options(args))
    if not args.quiet:
        if args.format == "json":
            print(result.to_json())
        elif args.format == "csv":
            from ..report.output import safe_csv_text
            sys.stdout.write(safe_csv_text(result.table))
        else:
            print(result.summary())
            if args.out:
                print(f"\nwrote batch.csv, batch.json and one folder per task to {args.out}")
    failed = result.table[result.table["status"] == "internal-error"]
    for r in failed.itertuples():
        print(f"famwise: internal error in task {r.response}: {r.reason} "
              f"(set FAMWISE_DEBUG=1 and run the task's compare command)", file=sys.stderr)
    return 1 if len(failed) else 0


def _numbers(text, option, kind):
    if text is None:
        return None
    out = []
    for part in _split(text):
        try:
            out.append(kind(part))
        except ValueError:
            raise FamwiseInputError(
                f"{option} must be a comma-separated list of "
                f"{'whole numbers' if kind is int else 'numbers'}, e.g. "
                f"{'6,8,10' if kind is int else '1,1,2'}; got {part!r} in {text!r}") from None
    if not out:
        raise FamwiseInputError(f"{option} is empty; give e.g. "
                                f"{'6,8,10' if kind is int else '1,1,2'}")
    return out


def _run_plan(args) -> int:
    from ..planning.plan import plan
    if args.file is None and args.sd is None:
        raise FamwiseInputError("famwise plan needs a pilot FILE (with -r and -g) or --sd "
                                "S1,S2,... (one SD per group)")
    if args.scheduler and args.backend != "dask":
        raise FamwiseInputError("--scheduler needs --backend dask")
    if args.out:
        from ..report.output import prepare_folder
        from ..report.plan_files import PLAN_FILES
        prepare_folder(args.out, PLAN_FILES, force=args.force)   # fail before the work
    read = _read_options(args) if args.file is not None else {}
    block = read.pop("block", None) or (_split(args.block) if args.block else None)
    if block is not None and len(block) != 1:
        raise FamwiseInputError(f"famwise plan takes one block column (--block COL); got "
                                f"{','.join(block)}")
    result = plan(args.file, args.response, args.group, sd=_numbers(args.sd, "--sd", float),
                  n=_numbers(args.n, "--n", int), margin=args.margin,
                  placement=args.placement, target_power=args.target_power,
                  procedures=args.procedure, replicates=args.replicates, seed=args.seed,
                  n_jobs=args.jobs, backend=args.backend, scheduler=args.scheduler,
                  alpha=args.alpha, shape=args.shape, goal=args.goal,
                  allocation=args.allocation, max_n=args.max_n, policy=args.policy,
                  family=args.family, reference=args.reference, transform=args.transform,
                  log_offset=args.log_offset, block=block[0] if block else None, **read)
    if args.out:
        result.save(args.out, force=args.force)
    if args.quiet:
        return 0
    if args.format == "json":
        print(result.to_json())
    elif args.format == "csv":
        from ..report.output import safe_csv_text
        sys.stdout.write(safe_csv_text(result.table))
    else:
        print(result.summary())
        if args.out:
            print(f"\nwrote the power report and tables to {args.out}")
    return 0


def _run_procedures(args) -> int:
    from ..procedures.catalogue import CATALOGUE
    if args.format == "json":
        print(json.dumps([{"name": p.name, "route": p.route, "families": list(p.families),
                           "purpose": p.purpose,
                           "options": [{"name": o.name, "kind": o.kind, "default": o.default,
                                        "choices": list(o.choices), "low": o.low,
                                        "high": o.high, "doc": o.doc} for o in p.options]}
                          for p in CATALOGUE.values()], indent=2))
        return 0
    import textwrap
    for p in CATALOGUE.values():
        print(f"{p.name}  [{p.route}; {', '.join(p.families)}]")
        print(textwrap.fill(p.purpose, width=96, initial_indent="    ",
                            subsequent_indent="    "))
        for o in p.options:
            print(textwrap.fill(f"--option {o.name}=... (default {o.default}): {o.doc}",
                                width=96, initial_indent="      ",
                                subsequent_indent="        "))
    return 0


def _run_demo(args) -> int:
    from ..scenarios.covercrop import run_demo
    text, folder = run_demo(args.out, force=args.force)
    if not args.quiet:
        print(text)
        print(f"\nwrote the report and tables to {folder}")
    return 0


def _show_warning(message, category, filename, lineno, file=None, line=None):
    print(f"famwise: warning: {message}", file=sys.stderr)


def main(argv=None) -> int:
    """Run the command line; return the exit code."""
    parser = build_parser()
    args = parser.parse_args(argv)
    if args.command is None:
        parser.print_help()
        return 2
    previous = warnings.showwarning
    warnings.showwarning = _show_warning
    try:
        with warnings.catch_warnings():
            # famwise's own warnings speak to the user; numerical warnings
            # from inside numpy or scipy do not, and are not shown.
            warnings.simplefilter("ignore")
            warnings.simplefilter("always", FamwiseWarning)
            return int(args.run(args) or 0)
    except FamwiseInputError as exc:
        print(f"famwise: error: {exc}", file=sys.stderr)
        return 2
    except KeyboardInterrupt:
        print("famwise: interrupted; nothing was written", file=sys.stderr)
        return 130
    except BrokenPipeError:
        return 0
    except Exception as exc:  # an internal error: a bug to report
        if os.environ.get("FAMWISE_DEBUG"):
            raise
        print(f"famwise: internal error: {type(exc).__name__}: {exc} "
              f"(set FAMWISE_DEBUG=1 for the traceback)", file=sys.stderr)
        return 1
    finally:
        warnings.showwarning = previous


if __name__ == "__main__":  # pragma: no cover
    sys.exit(main())

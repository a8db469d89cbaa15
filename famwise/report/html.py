"""The self-contained HTML report of a :class:`~famwise.comparison.Comparison`.

One file, readable offline and printable: the style sheet is inline, the
figures are inline SVG (:mod:`famwise.report.figures`), there is no
JavaScript, and a Content-Security-Policy forbids the page to fetch or run
anything, so even a string that slipped past escaping could not load a
resource.  Every user-supplied string (labels, column names, file names,
notes, sentences that quote labels, the command line) goes through
:func:`html.escape`; numbers through :func:`famwise.report.textformat.format_number`.

Sections, each a ``<section>`` with a stable ``id``:

``verdict``      What was compared: the data, the family, the verdict in
                 plain words, the groups, and why this procedure
``rows``         Accounting of rows: read, used, set aside and why
``model``        The model (only with blocks or covariates): terms, ANOVA
                 tables, efficiency, CV, adjusted means, residuals against
                 fitted values, block effects
``checks``       Checks on the data: the table, a residual quantile plot and a
                 spread-against-level plot
``comparisons``  Comparisons: the table, the interval plot (zero line, margin
                 band) and the compact letters
``crosscheck``   Cross-check: agreement with the independent second route
``calibration``  Calibration (only when the result carries one)
``reproduce``    Reproducing this result: command, seed, input hash, versions,
                 policy thresholds
``cautions``     Cautions

The same result always gives the same bytes (no dates, fixed figure ids).
"""

from __future__ import annotations

import dataclasses
import math
from html import escape

import numpy as np
import pandas as pd

from .estimates import censoring_sentence, estimate_sentence
from .textformat import format_number
from . import figures

__all__ = ["html_report", "SECTIONS", "CAUTIONS", "CSP"]

#: Section ids and headings, in page order.
SECTIONS = (
    ("verdict", "What was compared"),
    ("rows", "Accounting of rows"),
    ("model", "The model: groups, blocks and covariates"),
    ("checks", "Checks on the data"),
    ("comparisons", "Comparisons"),
    ("crosscheck", "Cross-check"),
    ("calibration", "Calibration"),
    ("reproduce", "Reproducing this result"),
    ("cautions", "Cautions"),
)

CAUTIONS = (
    "Statistical significance is not practical importance: a small p-value says a "
    "difference is unlikely to be zero, not that it is large enough to matter. Read the "
    "intervals against the smallest difference that matters in your field.",
    "Observational field data do not prove causes. Groups that were not assigned at "
    "random can differ for reasons other than the one that names them.",
    "For clinical, food-safety, environmental-compliance or other regulated or safety "
    "decisions, follow the applicable regulations and have a qualified statistician "
    "review the analysis before acting on it.",
    "Choosing a procedure after looking at the data is itself a procedure; the checks "
    "and the route are recorded so a reviewer can judge them, and a calibration at the "
    "observed design estimates the error rate of the whole pipeline.",
)

#: Nothing may be fetched or run; inline styles and data: images only.
CSP = "default-src 'none'; style-src 'unsafe-inline'; img-src data:; base-uri 'none'; form-action 'none'"

_STYLE = """
:root { --ink: #1b1b1b; --muted: #5f5f5f; --rule: #d4d4d4; --accent: #b3432b;
        --pale: #f4f6f8; }
* { box-sizing: border-box; }
body { font-family: "Helvetica Neue", Arial, "Liberation Sans", "DejaVu Sans", sans-serif;
       color: var(--ink); background: #fff; line-height: 1.45; font-size: 15px;
       max-width: 64rem; margin: 0 auto; padding: 1.5rem 1.5rem 3rem; }
header { border-bottom: 3px solid var(--ink); margin-bottom: 1rem; }
header h1 { font-size: 1.6rem; margin: 0 0 .2rem; }
header p { margin: .2rem 0 .8rem; color: var(--muted); }
nav ol { margin: 0 0 1rem; padding: 0; list-style: none; display: flex; flex-wrap: wrap;
         gap: .3rem 1.2rem; font-size: .9rem; }
nav a { color: var(--ink); }
section { margin: 2rem 0 0; }
h2 { font-size: 1.25rem; border-bottom: 1px solid var(--rule); padding-bottom: .2rem;
     margin: 0 0 .7rem; }
h3 { font-size: 1.02rem; margin: 1.2rem 0 .4rem; }
p { margin: .45rem 0; }
.verdict { font-size: 1.08rem; background: var(--pale); border-left: 4px solid var(--ink);
           padding: .6rem .9rem; }
.verdict ul { margin: .3rem 0 .2rem 1.1rem; padding: 0; }
.small { font-size: .88rem; color: var(--muted); }
table { border-collapse: collapse; margin: .4rem 0 .8rem; font-size: .88rem; }
th, td { padding: .22rem .6rem; border-bottom: 1px solid var(--rule); vertical-align: top;
         text-align: left; }
thead th { border-bottom: 1.5px solid var(--ink); font-weight: 600; }
td.num, th.num { text-align: right; font-variant-numeric: tabular-nums;
                 white-space: nowrap; }
.wrap { overflow-x: auto; }          /* scrolls only when its table cannot fit */
table.comparisons th.num { white-space: normal; }
table.comparisons td:first-child { max-width: 18rem; overflow-wrap: anywhere; }
table.comparisons td.num, table.comparisons th.num { padding-left: .45rem;
                                                     padding-right: .45rem; }
details.more { margin: .2rem 0 .8rem; }
details.more > summary { cursor: pointer; color: var(--muted); font-size: .9rem; }
.tag { display: inline-block; padding: 0 .4rem; border: 1px solid currentColor;
       border-radius: 3px; font-size: .8rem; white-space: nowrap; }
.tag.ok { color: #2f6b3a; } .tag.concern { color: #8a5a00; }
.tag.violated, .tag.differ { color: var(--accent); } .tag.same { color: var(--muted); }
figure { margin: .8rem 0 1.2rem; break-inside: avoid; page-break-inside: avoid; }
figure svg { max-width: 100%; height: auto; }
figcaption { font-size: .85rem; color: var(--muted); max-width: 44rem; }
.figures { display: flex; flex-wrap: wrap; gap: 0 1.5rem; }
.figures > figure { flex: 0 1 28rem; }
pre { background: var(--pale); padding: .6rem .8rem; white-space: pre-wrap;
      word-break: break-all; font-size: .85rem; }
code, pre { font-family: "DejaVu Sans Mono", Menlo, Consolas, monospace; }
dl.facts { display: grid; grid-template-columns: max-content 1fr; gap: .15rem 1rem;
           margin: .4rem 0; }
dl.facts dt { color: var(--muted); } dl.facts dd { margin: 0; }
footer { margin-top: 2.5rem; border-top: 1px solid var(--rule); padding-top: .5rem; }
@media print {
  body { font-size: 10.5pt; max-width: none; padding: 0; }
  nav { display: none; }
  section { break-before: auto; }
  h2 { break-after: avoid; page-break-after: avoid; }
  table, figure { break-inside: avoid; page-break-inside: avoid; }
  .wrap { overflow: visible; }
  a { color: inherit; text-decoration: none; }
}
"""


_NUM = ' class="num"'


class _Html(str):
    """A string that is already HTML (never escaped again)."""


def _e(value) -> str:
    """Escape any value for HTML text or a quoted attribute."""
    if isinstance(value, _Html):
        return value
    return escape(str(value), quote=True)


def _num(x) -> str:
    return format_number(x)


def _is_number(x) -> bool:
    return isinstance(x, (int, float, np.integer, np.floating)) and not isinstance(
        x, (bool, np.bool_))


def _table(headers, rows, numeric=(), css: str = "") -> str:
    """Render a table; cells are escaped text, numbers or :class:`_Html`."""
    numeric = set(numeric)
    head = "".join(f'<th scope="col"{_NUM if i in numeric else ""}>{_e(h)}</th>'
                   for i, h in enumerate(headers))
    body = []
    for row in rows:
        cells = []
        for i, v in enumerate(row):
            if _is_number(v) or v is None:
                cells.append(f'<td class="num">{_num(v)}</td>')
            elif isinstance(v, (bool, np.bool_)):
                cells.append(f"<td>{'yes' if v else 'no'}</td>")
            else:
                cells.append(f'<td{_NUM if i in numeric else ""}>{_e(v)}</td>')
        body.append("<tr>" + "".join(cells) + "</tr>")
    klass = f' class="{_e(css)}"' if css else ""
    return (f'<div class="wrap"><table{klass}><thead><tr>{head}</tr></thead>'
            f"<tbody>{''.join(body)}</tbody></table></div>")


def _facts(pairs) -> str:
    return '<dl class="facts">' + "".join(f"<dt>{_e(k)}</dt><dd>{_e(v)}</dd>"
                                          for k, v in pairs) + "</dl>"


def _tag(text: str, kind: str) -> _Html:
    return _Html(f'<span class="tag {_e(kind)}">{_e(text)}</span>')


def _list(items) -> str:
    return "<ul>" + "".join(f"<li>{_e(i)}</li>" for i in items) + "</ul>"


def _section(sid: str, body: str) -> str:
    heading = dict(SECTIONS)[sid]
    return (f'<section id="{sid}" aria-labelledby="{sid}-h">'
            f'<h2 id="{sid}-h">{_e(heading)}</h2>{body}</section>')


def _figure(svg: str, caption: str, name: str) -> str:
    return (f'<figure class="figure" data-figure="{_e(name)}">{svg}'
            f"<figcaption>{_e(caption)}</figcaption></figure>")


def _level(alpha: float) -> str:
    return f"{100 * (1 - alpha):g}%"


def _plain(x: float) -> str:
    return _num(x) if math.isfinite(x) else ("no upper limit" if x > 0 else "no lower limit")


# --------------------------------------------------------------------------- sections


def _verdict(result) -> str:
    rec, lay, t = result.decision, result.layout, result.comparisons
    led = rec.input["ledger"]
    fam = rec.family
    level = _level(rec.alpha)
    what = {"all-pairs": "every pair of groups",
            "vs-reference": f"each group against the reference group “{fam.get('reference')}”",
            "contrasts": f"{fam['m']} contrast{'s' if fam['m'] != 1 else ''} among the groups"
            }.get(fam["kind"], fam["kind"])
    labels = ", ".join(f"“{x}”" for x in lay.labels)
    intro = (f"<p>The response <strong>{_e(lay.response)}</strong> was compared across "
             f"{lay.k} groups of <strong>{_e(lay.group)}</strong> ({_e(labels)}), using "
             f"{led['used']} of {led['read']} {_e(led['unit'])}s read from "
             f"<code>{_e(led['source'])}</code>. The family is {_e(what)}: {fam['m']} "
             f"comparison{'s' if fam['m'] != 1 else ''} at a familywise error rate of "
             f"{rec.alpha:g}"
             + (" (a false discovery rate, for this procedure)" if rec.route["route"] == "fdr"
                else "") + ".</p>")
    rejected = t[t["reject"].to_numpy(dtype=bool)]
    kept = len(t) - len(rejected)
    mean_word = "adjusted mean" if lay.design is not None else "mean"
    proc = rec.route["procedure"]
    lines = []
    for r in rejected.itertuples():
        lo, hi, d = float(r.ci_lower), float(r.ci_upper), float(r.difference)
        if r.group_b:
            big, small_, lo2, hi2 = ((r.group_a, r.group_b, lo, hi) if d > 0
                                     else (r.group_b, r.group_a, -hi, -lo))
            lines.append(f"“{big}” has a higher {mean_word} {lay.response} than “{small_}”, by "
                         f"{_num(abs(d))} ({level} interval {_plain(lo2)} to {_plain(hi2)}; "
                         f"adjusted p = {_num(r.p_adjusted)}).")
        else:
            lines.append(f"The contrast “{r.comparison}” is {_num(d)}, not zero ({level} "
                         f"interval {_plain(lo)} to {_plain(hi)}; adjusted p = "
                         f"{_num(r.p_adjusted)}).")
        if "practical" in t:
            lines[-1] = lines[-1][:-1] + f"; against the margin: {r.practical}."
    if len(rejected):
        head = (f"By {proc}, {len(rejected)} of {len(t)} comparison"
                f"{'s' if len(t) != 1 else ''} {'are' if len(rejected) != 1 else 'is'} "
                f"declared different at the familywise level {rec.alpha:g}:")
        tail = (f"For the other {kept} comparison{'s' if kept != 1 else ''}, the data fail "
                f"to reject a zero difference; this is not evidence that the groups "
                f"compared are the same." if kept else "")
    else:
        head = (f"By {proc}, none of the {len(t)} comparison{'s' if len(t) != 1 else ''} is "
                f"declared different at the familywise level {rec.alpha:g}. The data fail to "
                f"reject a zero difference for each; this is not evidence that the groups "
                f"are the same.")
        tail = ""
    if "practical" in t:
        counts = t["practical"].value_counts()
        tail += (f" Against the margin of {_num(rec.margin)}: "
                 + ", ".join(f"{n} {k}" for k, n in counts.items()) + ".")
    verdict = (f'<div class="verdict" id="verdict-text"><p>{_e(head)}</p>'
               + (_list(lines) if lines else "") + (f"<p>{_e(tail.strip())}</p>" if tail
                                                    else "") + "</div>")
    g = result.groups
    cols = [c for c in ("group", "n", "censored", "percent_censored", "adjusted_mean",
                        "adjusted_se", "mean", "sd", "se", "median", "median_se",
                        "geometric_mean", "min", "max") if c in g]
    names = {"group": "group", "n": "n", "mean": "mean", "sd": "SD", "se": "SE of mean",
             "median": "median", "min": "smallest", "max": "largest",
             "adjusted_mean": "adjusted mean", "adjusted_se": "SE of adjusted mean",
             "censored": "non-detects", "percent_censored": "% non-detects",
             "median_se": "SE of median", "geometric_mean": "geometric mean"}
    groups = ("<h3>The groups</h3>"
              + _table([names[c] for c in cols], g[cols].itertuples(index=False, name=None),
                       numeric=range(1, len(cols))))
    if "censored" in g:
        groups += ("<p>Non-detects are kept as values known only to lie below their "
                   "detection limit. Mean, SD, median and their standard errors are "
                   "Kaplan-Meier estimates on flipped data (Helsel 2012); where a group's "
                   "smallest value is a non-detect, its mean places what lies below at that "
                   "limit, so it is an upper bound. “smallest” is the smallest value or "
                   "limit.</p>")
    return _section("verdict", intro + verdict + groups + _why(rec))


def _why(rec) -> str:
    from ..procedures.catalogue import CATALOGUE
    route = rec.route
    proc = route["procedure"]
    out = ["<h3>Why this procedure</h3>"]
    who = ("chosen by the user" if route["chosen_by"] == "user"
           else f"chosen by the policy ({route['route']} route)")
    info = CATALOGUE.get(proc)
    out.append(f"<p><strong>{_e(proc)}</strong>, {_e(who)}."
               + (f" {_e(info.purpose)}" if info else "") + "</p>")
    out.append(_list(route["reasons"]))
    if route["against"]:
        out.append("<p>Checks that argue against this choice:</p>" + _list(route["against"]))
    if route["alternatives"]:
        out.append("<p>Set aside:</p>" + _list(f"{a['procedure']}: {a['why']}"
                                                for a in route["alternatives"]))
    if route["warnings"]:
        out.append("<p>Notes:</p>" + _list(route["warnings"]))
    if route.get("proposal"):
        out.append(f"<p>Scale: {_e(route['proposal'])}</p>")
    if getattr(rec, "transform", None):
        out.append(f"<p>Scale: {_e(rec.transform['sentence'])}.</p>")
    cal = route.get("calibration")
    if cal and cal.get("candidates"):
        out.append("<p>The calibration at this design used to choose ("
                   + _e(cal["method"]) + f"; {_e(cal['replicates'])} simulated data sets; "
                   f"alternative: {_e(cal['alternative']['sentence'])}; a candidate holds "
                   f"when {_e(cal['limit_rule'])}):</p>"
                   + _table(["procedure", "familywise error", "SE", "holds", "power"],
                            [[c["procedure"], c["fwer"], c["fwer_se"], bool(c["holds"]),
                              c["power"]] for c in cal["candidates"]]))
        if cal.get("quick"):
            out.append("<p>The quick calibration between Games-Howell and Dunnett's T3:</p>"
                       + _value_html(cal["quick"]))
    elif cal:
        out.append("<p>The quick calibration used to choose:</p>" + _value_html(cal))
    return "".join(out)


def _rows(result) -> str:
    led = result.ledger
    unit = led.unit + "s"
    out = [f"<p>{led.read} {_e(unit)} were read from <code>{_e(led.source)}</code>; "
           f"{led.used} became observations and {len(led.dropped)} "
           f"{'were' if len(led.dropped) != 1 else 'was'} set aside. Every {_e(led.unit)} "
           f"is accounted for: read = used + set aside.</p>"]
    out.append(_table(["read", "used", "set aside"], [(led.read, led.used, len(led.dropped))],
                      numeric=(0, 1, 2)))
    if led.dropped:
        from ..intake.ledger import REASONS
        out.append("<h3>Set aside, by reason</h3>")
        out.append(_table(["reason", "count"],
                          [(REASONS.get(k, k), v) for k, v in led.counts().items()],
                          numeric=(1,)))
        limit = 200
        frame = led.to_frame()
        out.append(f"<h3>Each {_e(led.unit)} set aside</h3>")
        out.append(_table(["row", "column", "group", "value as read", "why"],
                          ((int(r.row), r.column, r.group,
                            repr(r.value) if r.value != "" else "(empty)", r.explanation)
                           for r in frame.head(limit).itertuples()),
                          numeric=(0,)))
        if len(frame) > limit:
            out.append(f"<p class=\"small\">… and {len(frame) - limit} more; the saved "
                       f"ledger.csv lists them all.</p>")
    if led.notes:
        out.append("<h3>Notes on reading the data</h3>" + _list(led.notes))
    return _section("rows", "".join(out))


def _model(result) -> str:
    """The model section: terms, ANOVA tables, efficiency, adjusted means, figures."""
    from ..model import fit_model
    from ..diagnostics.model_checks import nonadditivity_check
    lay = result.layout
    fit = fit_model(lay)
    out = [f"<p>The groups are compared under the additive model "
           f"<strong>{_e(fit.describe())}</strong>: each plot's value is its group's effect "
           f"plus its block's (and its covariates' contribution), plus an error of one "
           f"common variance. The groups' means are adjusted (least-squares means): equal "
           f"weight to every block, covariates at their overall means.</p>"]
    facts = [("residual degrees of freedom", fit.df), ("error mean square", _num(fit.mse))]
    eff = fit.efficiency()
    if eff is not None:
        facts.append(("relative efficiency of the blocking", _num(eff.relative_efficiency)))
    if math.isfinite(fit.cv):
        facts.append(("coefficient of variation", f"{fit.cv:.3g}%"))
    facts.append(("adjusted means correlated", "yes" if fit.means_correlated else "no"))
    out.append(_facts(facts))
    if eff is not None:
        out.append(f"<p>{_e(eff.sentence())}</p>")
    for kind, heading in (("adjusted", "Analysis of variance, each term adjusted for the "
                                       "others"),
                          ("sequential", "Sequential analysis of variance (blocks, then "
                                         "covariates, then groups)")):
        tab = fit.anova(kind)
        out.append(f"<h3>{_e(heading)}</h3>" + _table(
            ["source", "kind", "df", "sum of squares", "mean square", "F", "p"],
            ((src, r.kind, int(r.df), float(r.sum_of_squares), float(r.mean_square),
              float(r.f), float(r.p)) for src, r in tab.iterrows()), numeric=range(2, 7)))
    g = result.groups
    cols = [c for c in ("group", "n", "adjusted_mean", "adjusted_se", "mean", "letters")
            if c in g]
    heads = {"group": "group", "n": "n", "adjusted_mean": "adjusted mean",
             "adjusted_se": "SE", "mean": "raw mean", "letters": "letters"}
    ordered = g.sort_values("adjusted_mean", ascending=False)
    out.append("<h3>Adjusted means</h3>" + _table(
        [heads[c] for c in cols], ordered[cols].itertuples(index=False, name=None),
        numeric=range(1, 5)))
    if "letters" in g:
        out.append("<p class=\"small\">Groups sharing a letter were not declared different "
                   "by the procedure.</p>")
    slopes = fit.covariate_slopes
    if slopes.size:
        out.append("<h3>Covariates</h3>" + _table(
            ["covariate", "slope per unit", "overall mean"],
            zip(fit.design.covariate_names, map(float, slopes),
                map(float, fit.design.covariate_means)), numeric=(1, 2)))
    check = nonadditivity_check(lay)
    if check is not None:
        out.append(f"<p>{_e(check.sentence)}</p>")
    t = fit.studentized_residuals()
    flagged = np.nan_to_num(np.abs(t)) > 3.5
    out.append('<div class="figures">')
    out.append(_figure(figures.residual_fitted_svg(fit.fitted, fit.residuals, flagged,
                                                   response=lay.response),
                       "The model's residual of every plot against its fitted value. A "
                       "funnel means spread grows with the level; a curve means the effects "
                       "are not additive on this scale (a log scale may suit); marked plots "
                       "have a studentised residual beyond 3.5.", "residuals-fitted"))
    if fit.block_effects:
        out.append(_figure(figures.block_effects_svg(fit.design.block_names,
                                                     fit.design.block_labels,
                                                     fit.block_effects, lay.response),
                           "The estimated effect of every block on the response, centred to "
                           "mean zero: how much of the variation the blocking removed from "
                           "the comparisons.", "block-effects"))
    out.append("</div>")
    return _section("model", "".join(out))


def _checks(result) -> str:
    from ..diagnostics.shape import residuals, standardised_residuals
    f, lay = result.findings, result.layout
    rows = []
    for area in ("shape", "spread", "design"):
        for c in getattr(f, area):
            rows.append((area, c.name, c.method, c.statistic, c.p_value, c.threshold,
                         _tag(c.verdict, c.verdict), c.sentence))
    model = lay.design is not None
    out = [("<p>The checks look at the residuals of the model (each plot's value minus its "
            "fitted value): their shape, their spread by group and the design.</p>") if model
           else ("<p>The checks look at the within-group residuals (each value minus its "
                 "group mean): their shape, the spread of the groups and the design.</p>"),
           _table(["area", "check", "method", "statistic", "p-value", "flagged when",
                   "verdict", "finding"], rows, numeric=(3, 4))]
    if model:
        from ..diagnostics.model_checks import group_residual_sd, model_scaled_residuals
        from ..model import fit_model
        fit = fit_model(lay)
        z = model_scaled_residuals(fit)
        means, sds, res = fit.adjusted_mean, group_residual_sd(fit), fit.residuals
        level = means[lay.codes]
    else:
        z = standardised_residuals(lay)
        st = lay.stats
        means, sds, res = st.mean, st.sd, residuals(lay)
        level = st.mean[lay.codes]
    qq = figures.residual_quantile_svg(z)
    thin = (" Above 2000 residuals the plot shows the 100 most extreme at each end and an "
            "even selection of the rest." if z.size > 2000 else "")
    sl = figures.spread_level_svg(lay.labels, means, sds,
                                  level if lay.n_total <= 5000 else None,
                                  np.abs(res) if lay.n_total <= 5000 else None,
                                  response=lay.response)
    out.append('<div class="figures">')
    out.append(_figure(qq, "Each residual divided by its group's SD (with the small-sample "
                           "correction), against the normal quantile of its rank (Blom's "
                           "plotting positions). Points near the dashed line mean the "
                           "normal shape is plausible; curved ends mean skew or heavy tails."
                       + thin, "residual-quantiles"))
    out.append(_figure(sl, "Each group's SD against its mean (grey: the absolute residuals "
                           "of single observations). A rising pattern means spread grows "
                           "with the level, where a pooled variance misleads and a "
                           "transformation or an unequal-variance procedure may fit.",
                       "spread-level"))
    out.append("</div>")
    flagged = [c for c in f.checks if c.details and c.verdict != "ok"]
    for c in flagged:
        out.append(f"<h3>Details of the {_e(c.name)} check ({_e(c.verdict)})</h3>"
                   + _value_html(c.details))
    return _section("checks", "".join(out))


def _reference_df(t: pd.DataFrame) -> list:
    """The df column as a reader needs it: "resampled" where the reference
    distribution is the resampled one (the table stores df = inf there)."""
    resampled = "mc_error" in t
    return ["resampled" if resampled and not np.isfinite(d) else
            ("∞" if not np.isfinite(d) else d) for d in t["df"].to_numpy(dtype=float)]


def _comparisons(result) -> str:
    rec, t = result.decision, result.comparisons
    level = _level(rec.alpha)
    # The table a reader came for fits a 1280-pixel window: estimate, interval,
    # adjusted p and the decision; the rest follows in a block of its own.
    cols = [("comparison", "comparison"), ("difference", "difference"),
            ("ci_lower", f"{level} lower"), ("ci_upper", f"{level} upper"),
            ("p_adjusted", "p adjusted")]
    if "ratio" in t:
        cols += [("ratio", "ratio"), ("ratio_lower", f"{level} ratio lower"),
                 ("ratio_upper", f"{level} ratio upper")]
    rows = []
    for _, r in t.iterrows():
        row = [r[c] for c, _ in cols]
        row.append(_tag("differ", "differ") if r["reject"] else
                   _tag("not shown to differ", "same"))
        if "practical" in t:
            row.append(r["practical"])
        rows.append(row)
    headers = [h for _, h in cols] + ["decision"] + (["against the margin"]
                                                     if "practical" in t else [])
    resampled = "mc_error" in t
    dfs = _reference_df(t)
    more_rows = [[r["comparison"], r["std_error"], d, r["statistic"], r["p_unadjusted"]]
                 + ([r["mc_error"]] if resampled else [])
                 for (_, r), d in zip(t.iterrows(), dfs)]
    more_head = ["comparison", "SE", "df" if not resampled else "reference distribution",
                 "statistic", "p alone"] + (["Monte Carlo SE of p"] if resampled else [])
    ref_note = (" The reference distribution is the resampled one (no degrees of freedom "
                "apply); the Monte Carlo SE is that of the adjusted p-value."
                if resampled else "")
    out = [f"<p>Procedure <strong>{_e(rec.route['procedure'])}</strong>; difference = first "
           f"group minus second (or the contrast's estimate); {level} intervals. "
           f"“p adjusted” accounts for the whole family.</p>",
           f"<p>{_e(estimate_sentence(result))}</p>",
           _table(headers, rows, numeric=range(1, len(cols)), css="comparisons"),
           '<details class="more" open><summary>Standard errors, test statistics, '
           'degrees of freedom and unadjusted p-values</summary>'
           + (f'<p class="small">{_e(ref_note.strip())}</p>' if ref_note else "")
           + _table(more_head, more_rows, numeric=range(1, len(more_head)),
                    css="comparisons")
           + "</details>"]
    withheld = t.attrs.get("intervals_withheld")
    if withheld:
        out.append(f"<p>Intervals withheld for {_e(', '.join(withheld['comparisons']))}: "
                   f"{_e(withheld['reason'])}.</p>")
    nd_text = censoring_sentence(result)
    if nd_text:
        out.append(f"<h3>Non-detects</h3><p>{_e(nd_text)}</p>")
        sens = (rec.censoring or {}).get("sensitivity")
        if sens:
            subs = sens["substitutions"]
            out.append(_table(
                ["comparison", "censored analysis"] + [f"with {s}" for s in subs],
                [[r["comparison"], "differ" if r["reject"] else "not shown"]
                 + [("-" if r.get(f"reject_{s}") is None else
                     ("differ" if r[f"reject_{s}"] else "not shown")) for s in subs]
                 for r in sens["rows"]]))
    if rec.margin is not None:
        out.append(f"<p>Margin: {_num(rec.margin)} (the smallest difference that matters). "
                   f"“important”: the whole interval lies beyond the margin; “equivalent "
                   f"within margin”: it lies inside; otherwise the difference is real but "
                   f"may be small, or the data cannot tell.</p>")
    svg = figures.interval_svg(list(t["comparison"]), t["difference"], t["ci_lower"],
                               t["ci_upper"], t["reject"], margin=rec.margin, level=level)
    cap = (f"Each comparison's estimate and {level} interval, with the zero line"
           + (f" and the shaded band from −{_num(rec.margin)} to {_num(rec.margin)}"
              if rec.margin is not None else "")
           + ". Filled diamonds mark the comparisons declared different; an arrow marks an "
             "interval with no limit on that side.")
    out.append(_figure(svg, cap, "intervals"))
    if "letters" in result.groups:
        g = result.groups.sort_values("mean", ascending=False, kind="stable")
        out.append("<h3>Compact letters</h3><p>Largest mean first; groups that share a "
                   "letter were not declared different.</p>")
        out.append(_table(["group", "mean", "letters"],
                          g[["group", "mean", "letters"]].itertuples(index=False, name=None),
                          numeric=(1,)))
    if rec.resampling:
        r = rec.resampling
        out.append("<h3>Resampling</h3>" + _facts([
            ("resamples", r.get("resamples")), ("seed", r.get("seed")),
            ("largest Monte Carlo SE", _num(r.get("max_mc_error"))),
            ("unsettled at alpha", ", ".join(r.get("unsettled") or []) or "none")]))
    return _section("comparisons", "".join(out))


def _crosscheck(result) -> str:
    rec, cc = result.decision, result.crosscheck
    if cc is None:
        second = rec.route.get("crosscheck")
        body = ("<p>No cross-check was run"
                + (f" (the second route would be {_e(second)})" if second else "")
                + ".</p>")
        return _section("crosscheck", body)
    out = [f"<p>{_e(cc.sentence())}</p>"]
    if cc.note:
        out.append(f"<p class=\"small\">{_e(cc.note)}</p>")
    if cc.total:
        tab = cc.table
        has_mc = np.isfinite(tab["mc_error"].to_numpy(dtype=float)).any()
        rows = [(r.comparison, r.p_primary, r.p_second,
                 "differ" if r.reject_primary else "not shown to differ",
                 "differ" if r.reject_second else "not shown to differ",
                 _tag("agree", "ok") if r.agree else _tag("disagree", "violated"))
                + ((r.mc_error,) if has_mc else ())
                for r in tab.itertuples()]
        out.append(_table(["comparison", f"p adjusted, {cc.primary}",
                           f"p adjusted, {cc.second}", cc.primary, cc.second, "agreement"]
                          + (["Monte Carlo SE"] if has_mc else []), rows,
                          numeric=(1, 2) + ((6,) if has_mc else ())))
        if cc.resampling:
            r = cc.resampling
            out.append("<p class=\"small\">" + _e(
                f"The second route used B = {r.get('resamples')} resamples with seed "
                f"{r.get('seed')}.") + "</p>")
    return _section("crosscheck", "".join(out))


def _calibration(cal, procedure: str) -> str:
    """Render a :class:`famwise.diagnostics.calibrate.Calibration` (or plain data)."""
    out = []
    sentence = getattr(cal, "sentence", None)
    if callable(sentence):
        sentence = sentence()
    if isinstance(sentence, str) and sentence:
        out.append(f"<p>{_e(sentence)}</p>")
    table = getattr(cal, "table", None)
    if isinstance(table, pd.DataFrame) and {"procedure", "fwer", "se"} <= set(table):
        alpha = getattr(cal, "alpha", None)
        out.append("<p>Estimated familywise error rate of each candidate under the "
                   "complete null (every group mean equal) at the observed group sizes and "
                   "SDs; the procedure used here is marked.</p>")
        rows = []
        for r in table.to_dict(orient="records"):
            holds = r.get("holds")
            rows.append((r["procedure"] + ("  (used here)" if r["procedure"] == procedure
                                           else ""),
                         r["fwer"], r["se"], r.get("replicates"),
                         _tag("not simulated", "concern") if holds is None or holds != holds
                         else _tag("within alpha + 2 SE", "ok") if holds else
                         _tag("above alpha + 2 SE", "violated"), r.get("method", "")))
        out.append(_table(["procedure", "estimated error rate", "Monte Carlo SE",
                           "replicates", f"against alpha = {alpha:g}" if alpha else "verdict",
                           "how"], rows, numeric=(1, 2, 3)))
        routes = getattr(cal, "routes", None)
        if routes:
            total = sum(routes.values())
            out.append("<h3>Procedures the pipeline chose on the simulated data</h3>"
                       + _table(["procedure", "replicates", "share"],
                                [(k, v, v / total) for k, v in sorted(routes.items())],
                                numeric=(1, 2)))
        facts = [(k, getattr(cal, k)) for k in ("shape", "replicates", "seed")
                 if hasattr(cal, k)]
        if facts:
            out.append(_facts([("errors simulated as" if k == "shape" else k, v)
                               for k, v in facts]))
    else:
        if hasattr(cal, "to_dict"):
            data = cal.to_dict()
        elif dataclasses.is_dataclass(cal) and not isinstance(cal, type):
            data = dataclasses.asdict(cal)
        else:
            data = cal
        out.append(_value_html(data))
    return _section("calibration", "".join(out))


def _frame(frame: pd.DataFrame) -> str:
    numeric = [i for i, c in enumerate(frame.columns)
               if pd.api.types.is_numeric_dtype(frame[c].dtype)]
    return _table([str(c) for c in frame.columns],
                  frame.itertuples(index=False, name=None), numeric=numeric)


def _value_html(value, depth: int = 0) -> str:
    """Render plain data (dicts, lists of records, frames, scalars) as HTML."""
    if isinstance(value, pd.DataFrame):
        return _frame(value)
    if isinstance(value, dict):
        if value and depth < 3 and all(isinstance(v, dict) for v in value.values()):
            keys = []
            for v in value.values():
                keys += [k for k in v if k not in keys]
            if all(not isinstance(v.get(k), (dict, list, tuple)) for v in value.values()
                   for k in keys):
                return _table([""] + keys, ([name] + [v.get(k) for k in keys]
                                            for name, v in value.items()),
                              numeric=range(1, len(keys) + 1))
        items = []
        for k, v in value.items():
            if isinstance(v, (dict, list, tuple, pd.DataFrame)) and depth < 3:
                items.append(f"<dt>{_e(k)}</dt><dd>{_value_html(v, depth + 1)}</dd>")
            else:
                items.append(f"<dt>{_e(k)}</dt><dd>{_scalar(v)}</dd>")
        return '<dl class="facts">' + "".join(items) + "</dl>"
    if isinstance(value, (list, tuple)):
        if value and all(isinstance(v, dict) for v in value):
            keys = []
            for v in value:
                keys += [k for k in v if k not in keys]
            return _table(keys, ([v.get(k) for k in keys] for v in value))
        return _e(", ".join(_scalar_text(v) for v in value)) if value else "none"
    return _scalar(value)


def _scalar_text(v) -> str:
    if v is None:
        return "-"
    if _is_number(v) or isinstance(v, (bool, np.bool_)):
        return _num(v)
    return str(v)


def _scalar(v) -> str:
    return _e(_scalar_text(v))


def _reproduce(result) -> str:
    rec = result.decision
    inp, env = rec.input, rec.environment
    seed = rec.resampling.get("seed") if rec.resampling else None
    if seed is None and result.crosscheck is not None and result.crosscheck.resampling:
        seed = result.crosscheck.resampling.get("seed")
    out = ["<p>This command repeats the analysis (the saved decision.json holds the full "
           "record):</p>", f"<pre><code>{_e(rec.command)}</code></pre>"]
    facts = [("input", inp["source"]),
             ("SHA-256 of the input", inp["sha256"] or "none (data given in memory, not "
                                                     "as a file)"),
             ("response column", inp["response"]), ("group column", inp["group"]),
             ("layout", inp["layout"]),
             ("seed", seed if seed is not None else "not used (no resampling)"),
             ("familywise alpha", f"{rec.alpha:g}"),
             ("margin", _num(rec.margin) if rec.margin is not None else "none"),
             ("record schema", rec.schema)]
    out.append(_facts(facts))
    out.append("<h3>Software</h3>" + _table(["component", "version"],
                                            [(k, v if v is not None else "-")
                                             for k, v in env.items()]))
    out.append("<h3>Policy thresholds in force</h3>" + _value_html(rec.policy))
    return _section("reproduce", "".join(out))


def _cautions() -> str:
    return _section("cautions", _list(CAUTIONS))


# --------------------------------------------------------------------------- page


def html_report(result) -> str:
    """Return the self-contained HTML report of ``result`` as text.

    Parameters
    ----------
    result : famwise.comparison.Comparison
        What :func:`famwise.compare` returned.

    Returns
    -------
    str
        A complete HTML5 document: inline CSS, inline SVG figures, no script
        and no reference to any network resource; the same result gives the
        same text.
    """
    lay, rec = result.layout, result.decision
    title = f"famwise report: {lay.response} by {lay.group}"
    sections = [_verdict(result), _rows(result)]
    present = ["verdict", "rows"]
    if lay.design is not None:
        sections.append(_model(result))
        present.append("model")
    sections += [_checks(result), _comparisons(result), _crosscheck(result)]
    present += ["checks", "comparisons", "crosscheck"]
    if result.calibration is not None:
        sections.append(_calibration(result.calibration, rec.route["procedure"]))
        present.append("calibration")
    sections += [_reproduce(result), _cautions()]
    present += ["reproduce", "cautions"]
    headings = dict(SECTIONS)
    nav = ('<nav aria-label="Sections"><ol>'
           + "".join(f'<li><a href="#{s}">{_e(headings[s])}</a></li>' for s in present)
           + "</ol></nav>")
    header = (f"<header><h1>{_e(title)}</h1><p>{_e(rec.route['procedure'])} · "
              f"{rec.family['m']} comparison{'s' if rec.family['m'] != 1 else ''} · "
              f"familywise alpha {rec.alpha:g} · famwise "
              f"{_e(rec.environment.get('famwise', ''))}</p></header>")
    return ("<!DOCTYPE html>\n<html lang=\"en\">\n<head>\n<meta charset=\"utf-8\">\n"
            f"<meta http-equiv=\"Content-Security-Policy\" content=\"{CSP}\">\n"
            "<meta name=\"viewport\" content=\"width=device-width, initial-scale=1\">\n"
            "<meta name=\"referrer\" content=\"no-referrer\">\n"
            f"<title>{_e(title)}</title>\n<style>{_STYLE}</style>\n</head>\n<body>\n"
            f"{header}\n{nav}\n<main>\n" + "\n".join(sections) + "\n</main>\n"
            "<footer class=\"small\"><p>Written by famwise. Self-contained: this file loads "
            "nothing from elsewhere.</p></footer>\n</body>\n</html>\n")

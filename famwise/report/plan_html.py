"""The self-contained HTML power report of a plan.

Same conventions as :mod:`famwise.report.html`: inline CSS, the power curves
as inline SVG drawn by matplotlib without pyplot
(:func:`famwise.report.figures.power_curve_svg`), no JavaScript, the same
Content-Security-Policy that forbids every fetch, every user-supplied string
escaped, and the same plan always giving the same bytes.

Sections (stable ids): ``assumed`` (what was assumed), ``curves`` (power
curves), ``sizes`` (the smallest sizes that reach the target), ``table``
(every estimate with its Monte Carlo error), ``reproduce`` and ``cautions``.
"""

from __future__ import annotations

import shlex

import numpy as np

from . import figures
from .html import CSP, _STYLE, _e, _facts, _figure, _list, _num, _table
from .plan_text import (PLAN_CAUTIONS, family_words, liberal_procedures, margin_words,
                        plan_statements)

__all__ = ["plan_html", "PLAN_SECTIONS", "plan_command", "curves_svg", "standalone_svg"]

PLAN_SECTIONS = (
    ("assumed", "What was assumed"),
    ("curves", "Power curves"),
    ("sizes", "Sizes that reach the target"),
    ("table", "Every estimate"),
    ("reproduce", "Reproducing this plan"),
    ("cautions", "Cautions"),
)


def _section(sid: str, body: str) -> str:
    heading = dict(PLAN_SECTIONS)[sid]
    return (f'<section id="{sid}" aria-labelledby="{sid}-h">'
            f'<h2 id="{sid}-h">{_e(heading)}</h2>{body}</section>')


def plan_command(result) -> str:
    """The command line that repeats this plan."""
    s = result.settings
    parts = ["famwise", "plan"]
    from_file = s["source"] is not None and s["sha256"] is not None
    if from_file:
        parts += [s["source"], "-r", str(s["response"]), "-g", str(s["group"])]
    else:
        parts += ["--sd", ",".join(f"{v:g}" for v in s["sd"])]
    if s.get("family") == "vs-reference":
        parts += ["--family", "vs-reference", "--reference", str(s["reference"])]
    if s.get("transform") == "log":
        parts += ["--transform", "log"]
        if s.get("log_offset") and from_file:
            parts += ["--log-offset", f"{s['log_offset']:g}"]
    parts += ["--margin", f"{s['margin']:g}", "--placement", s["placement"],
              "--target-power", f"{s['target_power']:g}", "--goal", s["goal"],
              "--alpha", f"{s['alpha']:g}", "--shape", s["shape"]]
    if s["candidates"]:
        parts += ["--n", ",".join(map(str, s["candidates"]))]
    else:
        parts += ["--max-n", str(s["max_n"])]
    for p in s["procedures"]:
        parts += ["--procedure", p]
    parts += ["--replicates", str(s["replicates"]), "--seed", str(s["seed"])]
    return shlex.join(parts)


def curves_svg(result) -> tuple[str, str]:
    """The power-curve figure of a plan and its caption: power against the
    size per group, one line per procedure, the target line."""
    t = result.table
    s = result.settings
    n = sorted(t["n_per_group"].unique())
    liberal = liberal_procedures(result)
    col, what = f"power_{s['goal']}", f"power ({s['goal']})"
    series = {}
    for p in s["procedures"]:
        sub = t[t["procedure"] == p].set_index("n_per_group")[col]
        label = "automatic pipeline" if p == "auto" else p
        if p in liberal:
            label += " (liberal here)"
        series[label] = [float(sub.get(v, np.nan)) for v in n]
    unit = ("blocks (one plot of every group in each)" if s.get("blocks")
            else "observations per group")
    svg = figures.power_curve_svg(n, series, s["target_power"], what=what,
                                  highlight="automatic pipeline",
                                  unit="blocks" if s.get("blocks") else
                                  "observations per group")
    caption = (f"Estimated {what} against {unit} ({margin_words(s)}), one line per "
               f"procedure; the dashed line is the target {s['target_power']:g}. Each point "
               f"is a Monte Carlo estimate from {s['replicates']} data sets (largest SE "
               f"{_num(float(t['mc_se'].max()))}). Procedures marked liberal exceed the "
               f"familywise level at this design.")
    return svg, caption


def standalone_svg(svg: str) -> str:
    """The power curves (:func:`curves_svg`) as a file of their own
    (``power.svg``): the inline figure with the namespaces an image file needs."""
    svg = svg.replace("<svg ", '<svg xmlns="http://www.w3.org/2000/svg" '
                               'xmlns:xlink="http://www.w3.org/1999/xlink" ', 1)
    return '<?xml version="1.0" encoding="utf-8"?>\n' + svg + "\n"


def _curves(result, curves=None) -> str:
    svg, caption = curves or curves_svg(result)
    return _section("curves", _figure(svg, caption, "power-curves"))


def _sizes(result) -> str:
    s = result.settings
    rows = []
    for p, v in result.recommended.items():
        name = "automatic pipeline" if p == "auto" else p
        if v is None:
            rows.append((name, "not reached", "-", "-", "-"))
            continue
        r = result.table[(result.table["n_per_group"] == v) & (result.table["procedure"] == p)]
        r = r.iloc[0]
        sizes = ", ".join(map(str, result.sizes[v]))
        rows.append((name, int(v), sizes, float(r[f"power_{s['goal']}"]), float(r["fwer"])))
    liberal = liberal_procedures(result)
    rows = [row + ("no" if (("auto" if row[0] == "automatic pipeline" else row[0]) in liberal)
                   else "yes",) for row in rows]
    body = _table(["procedure", "blocks" if s.get("blocks") else "per group", "group sizes", f"power ({s['goal']})",
                   "familywise error at the null", "holds its level (over the sizes tried)"],
                  rows, numeric=(1, 3, 4))
    return _section("sizes", body + "<p>" + "</p><p>".join(
        _e(x) for x in plan_statements(result)[1:]) + "</p>")


def plan_html(result, curves: tuple[str, str] | None = None) -> str:
    """Return the self-contained HTML power report of ``result`` (a Plan);
    ``curves``: the figure and caption of :func:`curves_svg`, when already drawn."""
    s = result.settings
    title = "famwise power report" + (f": {s['response']} by {s['group']}"
                                      if s["response"] else "")
    log = s.get("transform") == "log"
    facts = [("groups", ", ".join(s["labels"])),
             ("comparisons", family_words(s)),
             ("scale", ("natural log of the values"
                        + (f" + {s['log_offset']:g}" if s.get("log_offset") else "")
                        + "; differences are ratios of geometric means") if log
              else "the response's unit; differences of means"),
             ("SDs of the natural log" if log else "SDs", ", ".join(_num(v) for v in s["sd"])),
             ("true means (log scale)" if log else "true means",
              ", ".join(_num(v) for v in s["true_means"])),
             ("margin", margin_words(s).removeprefix("margin: ").removeprefix("margin ")),
             ("placement", s["placement"]),
             ("true differences", ", ".join(s["true_differences"])),
             ("error shape", s["shape"]), ("familywise alpha", f"{s['alpha']:g}"),
             ("target power", f"{s['target_power']:g} ({s['goal']})"),
             ("simulated data sets per size", s["replicates"])]
    if s["source"]:
        facts.insert(0, ("pilot", s["source"]))
    assumed = _section("assumed", f'<p class="verdict">{_e(plan_statements(result)[0])}</p>'
                       + _facts(facts))
    t = result.table
    table = _section("table", _table(
        ["n per group", "procedure", "power (each)", "power (any)", "power (all)",
         "familywise error", "Monte Carlo SE"],
        [(int(r.n_per_group), "automatic pipeline" if r.procedure == "auto" else r.procedure,
          float(r.power_each), float(r.power_any), float(r.power_all), float(r.fwer),
          float(r.mc_se)) for r in t.itertuples()], numeric=(0, 2, 3, 4, 5, 6))
        + "<p class=\"small\">" + _e(
            f"The plan's {margin_words(s)}. "
            "power (each): the mean per-comparison power over the true differences; (any): "
            "at least one found; (all): every one found. Familywise error: on data sets at "
            "the complete null with the same sizes and spreads.") + "</p>"
        + "<h3>How each procedure was simulated</h3>"
        + _list(f"{'automatic pipeline' if p == 'auto' else p}: {m}"
                for p, m in result.methods.items()))
    reproduce = _section("reproduce", f"<pre>{_e(plan_command(result))}</pre>" + _facts(
        [("seed", s["seed"]), ("SHA-256 of the pilot", s["sha256"] or "none"),
         ("record schema", "famwise.plan/1")]))
    cautions = _section("cautions", _list(PLAN_CAUTIONS))
    sections = [assumed, _curves(result, curves), _sizes(result), table, reproduce, cautions]
    nav = ('<nav aria-label="Sections"><ol>'
           + "".join(f'<li><a href="#{sid}">{_e(h)}</a></li>' for sid, h in PLAN_SECTIONS)
           + "</ol></nav>")
    shown = (f"ratio {_num(s['margin'])} (log scale)" if log else _num(s["margin"]))
    header = (f"<header><h1>{_e(title)}</h1><p>{s['k']} groups · margin {_e(shown)} · "
              f"familywise alpha {s['alpha']:g} · target power {s['target_power']:g}</p>"
              "</header>")
    return ("<!DOCTYPE html>\n<html lang=\"en\">\n<head>\n<meta charset=\"utf-8\">\n"
            f"<meta http-equiv=\"Content-Security-Policy\" content=\"{CSP}\">\n"
            "<meta name=\"viewport\" content=\"width=device-width, initial-scale=1\">\n"
            "<meta name=\"referrer\" content=\"no-referrer\">\n"
            f"<title>{_e(title)}</title>\n<style>{_STYLE}</style>\n</head>\n<body>\n"
            f"{header}\n{nav}\n<main>\n" + "\n".join(sections) + "\n</main>\n"
            "<footer class=\"small\"><p>Written by famwise. Self-contained: this file loads "
            "nothing from elsewhere.</p></footer>\n</body>\n</html>\n")

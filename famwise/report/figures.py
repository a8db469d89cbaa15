"""The report's figures, drawn with matplotlib and returned as inline SVG text.

Five figures, each a plain function of plain data (the last two for a
blocked or covariate model):

:func:`residual_quantile_svg`
    standardised within-group residuals against normal quantiles, with the
    line y = x (the residuals are already on a unit scale);
:func:`spread_level_svg`
    each group's SD (and each observation's absolute residual) against the
    group mean, to show spread that grows with the level;
:func:`interval_svg`
    one row per comparison: the estimate and its interval, the zero line, the
    band ``(-margin, margin)`` when a margin is given, and the comparisons
    declared different drawn apart from the others;
:func:`residual_fitted_svg`
    the model's residuals against its fitted values, plots with a large
    studentised residual marked;
:func:`block_effects_svg`
    the estimated effect of every block (one panel per blocking factor),
    centred to mean zero.

No pyplot is used: each figure is a bare :class:`matplotlib.figure.Figure`
saved through the SVG backend, so nothing opens a window or touches the
global backend.  Output is deterministic (a fixed ``svg.hashsalt`` per
figure, no date or creator in the metadata) and text stays text
(``svg.fonttype = "none"``), which matplotlib escapes for XML.  Labels are
drawn with mathtext parsing off, so a ``$`` in a group label is shown as is.
"""

from __future__ import annotations

import io
import math
import re

import numpy as np
from scipy import stats

__all__ = ["residual_quantile_svg", "spread_level_svg", "interval_svg", "svg_text",
           "plotting_positions", "power_curve_svg", "residual_fitted_svg",
           "block_effects_svg"]

#: Colours: dark ink, a muted grey for the rest, one accent, a pale band.
INK, MUTED, ACCENT, BAND = "#1b1b1b", "#8a8a8a", "#b3432b", "#e4ecf4"
_MAX_POINTS = 2000          # thin the quantile plot above this many residuals
_MAX_LABEL = 40             # clip labels drawn inside figures to this length
_CONTROL = re.compile(r"[\x00-\x08\x0b\x0c\x0e-\x1f\x7f]")

_RC = {
    "svg.fonttype": "none",          # text as <text>, escaped by matplotlib
    "text.parse_math": False,        # '$' in a label is a dollar sign
    "font.family": "sans-serif",
    "font.sans-serif": ["DejaVu Sans"],
    "font.size": 9.0,
    "axes.edgecolor": "#555555",
    "axes.linewidth": 0.8,
    "axes.spines.top": False,
    "axes.spines.right": False,
    "xtick.color": "#333333",
    "ytick.color": "#333333",
    "axes.titlesize": 10.0,
    "axes.titleweight": "bold",
    "axes.titlelocation": "left",
    "legend.frameon": False,
    "path.simplify": True,
}


def _clip(label: str, width: int = _MAX_LABEL) -> str:
    label = _CONTROL.sub("\ufffd", str(label))
    return label if len(label) <= width else label[:width - 1] + "…"


def svg_text(draw, name: str, size: tuple[float, float], title: str = "") -> str:
    """Draw a figure with ``draw(fig)`` and return its ``<svg>`` element as text.

    Parameters
    ----------
    draw : callable
        Receives a fresh :class:`matplotlib.figure.Figure` and draws on it.
    name : str
        Used for the root element's ``id`` (``fig-<name>``) and as the hash
        salt of the element ids inside, so figures on one page never share
        an id and the same input gives byte-identical output.
    size : (float, float)
        Width and height in inches.
    title : str, optional
        Accessible title (``aria-label``) of the figure.
    """
    import matplotlib
    from matplotlib.figure import Figure

    rc = dict(_RC, **{"svg.hashsalt": f"famwise-{name}"})
    with matplotlib.rc_context(rc):
        fig = Figure(figsize=size, dpi=72, layout="constrained")
        draw(fig)
        buf = io.StringIO()
        fig.savefig(buf, format="svg", metadata={"Date": None, "Creator": None,
                                                  "Format": None, "Type": None})
    text = buf.getvalue()
    text = text[text.index("<svg"):]
    text = re.sub(r"\s*<metadata>.*?</metadata>", "", text, count=1, flags=re.S)
    # Inline SVG shares the page's id space: prefix every id and local
    # reference, and drop the namespace declarations HTML does not need.
    text = re.sub(r'\bid="([^"]*)"', rf'id="{name}-\1"', text)
    text = re.sub(r'url\(#([^)]*)\)', rf'url(#{name}-\1)', text)
    text = re.sub(r'href="#([^"]*)"', rf'href="#{name}-\1"', text)
    text = re.sub(r'\s+xmlns(:xlink)?="[^"]*"', "", text)
    from html import escape
    text = text.replace("<svg ", f'<svg id="fig-{name}" role="img" '
                                 f'aria-label="{escape(title or name)}" ', 1)
    return text.strip()


def plotting_positions(n: int) -> np.ndarray:
    """Return Blom's (1958) plotting positions ``(i - 3/8) / (n + 1/4)``.

    Blom, G. (1958). *Statistical Estimates and Transformed Beta-Variables*.
    Wiley, New York.
    """
    i = np.arange(1, n + 1, dtype=np.float64)
    return (i - 0.375) / (n + 0.25)


def residual_quantile_svg(z: np.ndarray) -> str:
    """Return the normal quantile plot of standardised residuals ``z``.

    Above ``_MAX_POINTS`` residuals, the 100 most extreme at each end and an
    evenly spaced selection of the rest are drawn (the caption says so), so
    the page stays small while the tails stay visible.
    """
    z = np.sort(np.asarray(z, dtype=np.float64)[np.isfinite(z)])
    n = z.size
    q = stats.norm.ppf(plotting_positions(n)) if n else np.empty(0)
    if n > _MAX_POINTS:
        inner = np.linspace(100, n - 101, _MAX_POINTS - 200).round().astype(int)
        keep = np.unique(np.concatenate([np.arange(100), inner, np.arange(n - 100, n)]))
        z, q = z[keep], q[keep]

    def draw(fig):
        ax = fig.add_subplot()
        if z.size:
            lim = float(max(np.max(np.abs(z)), np.max(np.abs(q)), 1.0)) * 1.08
            ax.plot([-lim, lim], [-lim, lim], color=MUTED, lw=1, ls="--",
                    label="y = x (normal errors)")
            ax.plot(q, z, "o", ms=3.5, mfc="none", mec=INK, mew=0.8,
                    label="standardised residual")
            ax.set_xlim(-lim, lim)
            ax.set_ylim(-lim, lim)
            ax.legend(loc="upper left", fontsize=8)
        else:
            ax.text(0.5, 0.5, "no residuals", ha="center", va="center",
                    transform=ax.transAxes)
        ax.set_xlabel("normal quantile")
        ax.set_ylabel("standardised residual")
        ax.set_title("Residuals against normal quantiles")
        ax.grid(True, color="#e6e6e6", lw=0.6)
        ax.set_axisbelow(True)

    return svg_text(draw, "residual-quantiles", (4.6, 4.2),
                    "Normal quantile plot of the standardised within-group residuals")


def spread_level_svg(labels, mean, sd, residual_level=None, residual_abs=None,
                     response: str = "response") -> str:
    """Return the spread-against-level plot: group SD against group mean.

    Parameters
    ----------
    labels : sequence of str
        Group labels (drawn beside the points when there are at most 20).
    mean, sd : array_like
        Group means and SDs.
    residual_level, residual_abs : array_like, optional
        For each observation, its group's mean and its absolute residual;
        drawn as small grey points behind the SDs.
    response : str
        Name of the response, for the axis labels.
    """
    mean = np.asarray(mean, dtype=np.float64)
    sd = np.asarray(sd, dtype=np.float64)
    labels = [_clip(s, 24) for s in labels]
    resp = _clip(response, 30)

    def draw(fig):
        ax = fig.add_subplot()
        if residual_level is not None and np.size(residual_level):
            ax.plot(residual_level, residual_abs, ".", ms=3, color="#c4c4c4",
                    label="|residual| of one observation")
        ok = np.isfinite(mean) & np.isfinite(sd)
        ax.plot(mean[ok], sd[ok], "s", ms=6, color=INK, label="group SD")
        ax.set_xlabel(f"group mean of {resp}")
        ax.set_ylabel("spread (SD; grey: |residual|)")
        ax.set_title("Spread against level")
        ax.set_ylim(bottom=0)
        ax.margins(x=0.12)               # room for the labels beside the points
        ax.grid(True, color="#e6e6e6", lw=0.6)
        ax.set_axisbelow(True)
        legend = ax.legend(loc="upper left", fontsize=8)
        if len(labels) <= 20:
            place_labels(ax, mean[ok], sd[ok], list(np.asarray(labels, dtype=object)[ok]),
                         avoid=[legend])

    return svg_text(draw, "spread-level", (4.6, 4.2),
                    "Group standard deviation against group mean")


#: Where a point's label may go, in points from the point, tried in turn: the
#: four sides close by, then further up and down with a leader line.
_OFFSETS = ([(5, 3, "left"), (5, -10, "left"), (-5, 3, "right"), (-5, -10, "right")]
            + [(dx, dy, ha) for step in range(1, 9) for dy in (3 + 9 * step, -10 - 9 * step)
               for dx, ha in ((8, "left"), (-8, "right"))])


def place_labels(ax, xs, ys, labels, avoid=(), fontsize: float = 8.0) -> list:
    """Label points so no label overlaps another label, a point or ``avoid``.

    The figure's layout is settled first (and then frozen), so positions
    measured here are the ones saved.  Each label takes the first of
    :data:`_OFFSETS` whose box, in display coordinates with a small margin,
    meets no box already taken and stays inside the axes; labels moved
    away from their point get a thin leader line.  When every place is
    taken (very crowded plots) the label goes where it overlaps least.
    Returns the text artists, in the order of ``labels``.
    """
    from matplotlib.backends.backend_agg import FigureCanvasAgg
    fig = ax.figure
    canvas = FigureCanvasAgg(fig)        # a renderer to measure text with
    canvas.draw()                        # settle the constrained layout ...
    fig.set_layout_engine("none")        # ... and keep it, so boxes stay put
    renderer = canvas.get_renderer()
    frame = ax.bbox
    pts = ax.transData.transform(np.column_stack([xs, ys])) if len(xs) else np.zeros((0, 2))
    from matplotlib.text import Text
    from matplotlib.transforms import Bbox
    taken = [Bbox.from_bounds(px - 4, py - 4, 8, 8) for px, py in pts]
    taken += [a.get_window_extent(renderer) for a in avoid]
    order = np.argsort(-np.asarray(ys, dtype=float), kind="stable")
    placed = {}
    for i in order.tolist():
        x, y, lab = xs[i], ys[i], labels[i]
        best = None                      # (overlap, offset, box): the least crowded place
        for dx, dy, ha in _OFFSETS:
            t = ax.annotate(lab, (x, y), xytext=(dx, dy), textcoords="offset points",
                            ha=ha, va="bottom" if dy > 0 else "top", fontsize=fontsize)
            t.update_positions(renderer)
            box = Text.get_window_extent(t, renderer).padded(2)    # the text alone
            t.remove()
            outside = not (box.x0 >= frame.x0 and box.x1 <= frame.x1
                           and box.y0 >= frame.y0 and box.y1 <= frame.y1)
            clash = sum(_overlap(box, b) for b in taken) + (1e9 if outside else 0.0)
            if best is None or clash < best[0]:
                best = (clash, (dx, dy, ha), box)
            if clash == 0.0:
                break
        _, (dx, dy, ha), box = best
        far = abs(dy) > 12
        placed[i] = ax.annotate(
            lab, (x, y), xytext=(dx, dy), textcoords="offset points", ha=ha,
            va="bottom" if dy > 0 else "top", fontsize=fontsize, color="#333333",
            annotation_clip=False,
            arrowprops=dict(arrowstyle="-", color="#9a9a9a", lw=0.5, shrinkA=1,
                            shrinkB=4) if far else None)
        taken.append(box)
    return [placed[i] for i in range(len(labels))]


def _overlap(a, b) -> float:
    """Area shared by two display boxes (0 when they are apart)."""
    w = min(a.x1, b.x1) - max(a.x0, b.x0)
    h = min(a.y1, b.y1) - max(a.y0, b.y0)
    return w * h if w > 0 and h > 0 else 0.0


def interval_svg(names, difference, lower, upper, reject, *, margin=None,
                 level: str = "95%", unit: str = "") -> str:
    """Return the interval plot: one row per comparison, first comparison on top.

    Intervals that are unbounded on one side (one-sided tests) run to the
    edge of the plot and end in an arrow head.  Comparisons declared
    different are drawn in the accent colour with a filled marker; the others
    in grey with an open marker.
    """
    d = np.asarray(difference, dtype=np.float64)
    lo = np.asarray(lower, dtype=np.float64)
    hi = np.asarray(upper, dtype=np.float64)
    rej = np.asarray(reject, dtype=bool)
    m = d.size
    names = [_clip(s) for s in names]
    finite = np.concatenate([v[np.isfinite(v)] for v in (d, lo, hi)] + [np.zeros(1)])
    if margin is not None:
        finite = np.concatenate([finite, [-margin, margin]])
    span = float(finite.max() - finite.min()) or 1.0
    xmin, xmax = finite.min() - 0.06 * span, finite.max() + 0.06 * span
    height = min(1.5 + 0.28 * m, 60.0)

    def draw(fig):
        ax = fig.add_subplot()
        y = np.arange(m)[::-1].astype(float)
        if margin is not None:
            ax.axvspan(-margin, margin, color=BAND, lw=0, gid="margin-band",
                       label=f"margin ±{_fmt(margin)}", zorder=0)
        ax.axvline(0.0, color=INK, lw=0.9, zorder=1, gid="zero-line")
        for group, colour, marker, fill, text, gid in (
                (rej, ACCENT, "D", ACCENT, "declared different", "declared-different"),
                (~rej, MUTED, "o", "white", "not shown to differ", "not-shown-to-differ")):
            if not group.any():
                continue
            a = np.where(np.isfinite(lo[group]), lo[group], xmin)
            b = np.where(np.isfinite(hi[group]), hi[group], xmax)
            ax.hlines(y[group], a, b, color=colour, lw=2.2, zorder=2, gid=gid + "-intervals")
            ax.plot(d[group], y[group], marker, ms=5.5, mfc=fill, mec=colour, mew=1.3,
                    ls="none", zorder=3, label=text, gid=gid)
            for yy, open_lo, open_hi in zip(y[group], ~np.isfinite(lo[group]),
                                            ~np.isfinite(hi[group])):
                if open_lo:
                    ax.plot([xmin], [yy], "<", color=colour, ms=6, zorder=3)
                if open_hi:
                    ax.plot([xmax], [yy], ">", color=colour, ms=6, zorder=3)
        ax.set_yticks(y, names)
        ax.set_ylim(-0.7, m - 0.3)
        ax.set_xlim(xmin, xmax)
        ax.set_xlabel("difference" + (f" ({_clip(unit, 30)})" if unit else "")
                      + f", {level} interval")
        ax.grid(True, axis="x", color="#e6e6e6", lw=0.6)
        ax.set_axisbelow(True)
        ax.spines["left"].set_visible(False)
        ax.tick_params(axis="y", length=0)
        fig.legend(loc="outside upper left", ncol=3, fontsize=8)

    return svg_text(draw, "intervals", (7.2, height),
                    "Differences with their intervals, the zero line"
                    + (" and the margin band" if margin is not None else ""))


_LINE_STYLES = ("-", "--", "-.", ":", (0, (5, 1, 1, 1)), (0, (3, 1)))
_MARKERS = ("o", "s", "^", "D", "v", "P", "X")


def power_curve_svg(n, series: dict, target: float, *, what: str = "power",
                    highlight: str | None = None,
                   unit: str = "observations per group") -> str:
    """Return the power-curve plot: power against n per group (``unit``), one line per
    procedure (the highlighted one in the accent colour), and the target line.

    ``series`` maps a procedure's name to its powers at ``n`` (NaN where not
    evaluated).  Lines differ by dash pattern and marker as well as shade, so
    the plot reads in grey print.
    """
    x = np.asarray(n, dtype=np.float64)

    def draw(fig):
        ax = fig.add_subplot()
        ax.axhline(target, color=INK, lw=0.9, ls=(0, (2, 2)), zorder=1, gid="target-line",
                   label=f"target {target:g}")
        for i, (name, values) in enumerate(series.items()):
            y = np.asarray(values, dtype=np.float64)
            ok = np.isfinite(y)
            accent = name == highlight
            ax.plot(x[ok], y[ok], ls=_LINE_STYLES[i % len(_LINE_STYLES)],
                    marker=_MARKERS[i % len(_MARKERS)], ms=4.5,
                    color=ACCENT if accent else (INK if i % 2 == 0 else MUTED),
                    lw=2.0 if accent else 1.3, zorder=3 if accent else 2,
                    label=_clip(name, 30), gid=f"curve-{i}")
        ax.set_ylim(-0.02, 1.02)
        if x.size:
            span = float(x.max() - x.min()) or 1.0
            ax.set_xlim(x.min() - 0.04 * span, x.max() + 0.04 * span)
        ax.set_xlabel(unit)
        ax.set_ylabel(what)
        ax.grid(True, color="#e6e6e6", lw=0.6)
        ax.set_axisbelow(True)
        fig.legend(loc="outside upper left", ncol=3, fontsize=8)

    return svg_text(draw, "power", (7.2, 4.2),
                    f"Estimated {what} against {unit}, one line per "
                    f"procedure, with the target line")


def _fmt(x: float) -> str:
    from .textformat import format_number
    return format_number(x) if math.isfinite(x) else str(x)


def residual_fitted_svg(fitted, residuals, flagged=None, response: str = "response") -> str:
    """Return the model's residuals against its fitted values.

    ``flagged`` (boolean, optional) marks plots drawn in the accent colour
    (a large studentised residual).  A funnel means spread grows with the
    level; a curve means the effects are not additive on this scale.
    """
    x = np.asarray(fitted, dtype=np.float64)
    y = np.asarray(residuals, dtype=np.float64)
    flag = np.zeros(x.size, bool) if flagged is None else np.asarray(flagged, dtype=bool)
    if x.size > _MAX_POINTS:
        keep = np.unique(np.concatenate([
            np.linspace(0, x.size - 1, _MAX_POINTS).round().astype(int),
            np.flatnonzero(flag)]))
        x, y, flag = x[keep], y[keep], flag[keep]
    resp = _clip(response, 30)

    def draw(fig):
        ax = fig.add_subplot()
        ax.axhline(0.0, color=MUTED, lw=1, ls="--")
        ax.plot(x[~flag], y[~flag], "o", ms=3.5, mfc="none", mec=INK, mew=0.8,
                label="plot", gid="residuals")
        if flag.any():
            ax.plot(x[flag], y[flag], "D", ms=5, color=ACCENT, ls="none",
                    label="large studentised residual", gid="flagged")
        ax.set_xlabel(f"fitted {resp} (group + blocks + covariates)")
        ax.set_ylabel("residual")
        ax.set_title("Residuals against fitted values")
        ax.grid(True, color="#e6e6e6", lw=0.6)
        ax.set_axisbelow(True)
        ax.legend(loc="upper left", fontsize=8)

    return svg_text(draw, "residuals-fitted", (4.6, 4.2),
                    "Residuals of the model against its fitted values")


def block_effects_svg(names, labels, effects, response: str = "response") -> str:
    """Return the estimated block effects, one panel per blocking factor.

    Parameters
    ----------
    names : sequence of str
        The blocking factors.
    labels : sequence of sequences of str
        The levels of each factor.
    effects : sequence of arrays
        The estimated effect of each level (centred to mean zero).
    """
    names = [_clip(n, 30) for n in names]
    labels = [[_clip(s, 24) for s in lv] for lv in labels]
    effects = [np.asarray(e, dtype=np.float64) for e in effects]
    total = sum(len(lv) for lv in labels) or 1
    height = min(0.9 + 0.7 * max(len(names), 1) + 0.22 * total, 40.0)
    resp = _clip(response, 30)

    def draw(fig):
        axes = fig.subplots(max(len(names), 1), 1, squeeze=False,
                            height_ratios=[max(len(lv), 1) for lv in labels] or None)[:, 0]
        for ax, name, lv, eff in zip(axes, names, labels, effects):
            y = np.arange(len(lv))[::-1].astype(float)
            ax.axvline(0.0, color=MUTED, lw=0.9)
            ax.hlines(y, 0.0, eff, color=MUTED, lw=1.4)
            ax.plot(eff, y, "o", ms=5, color=INK, ls="none", gid=f"effects-{len(lv)}")
            ax.set_yticks(y, lv if len(lv) <= 40 else [""] * len(lv))
            ax.set_ylim(-0.7, len(lv) - 0.3)
            ax.set_xlabel(f"effect on {resp}")
            ax.set_title(f"Blocks: {name}")
            ax.grid(True, axis="x", color="#e6e6e6", lw=0.6)
            ax.set_axisbelow(True)
            ax.spines["left"].set_visible(False)
            ax.tick_params(axis="y", length=0)

    return svg_text(draw, "block-effects", (4.8, height),
                    "Estimated block effects, centred to mean zero")

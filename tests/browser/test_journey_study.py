"""Journey through a saved study in chromium: overview, phase I, a removal by clicking the
chart, the index moving, sign-off and export. Screenshots go to test-artifacts/study-*.png.
"""

from __future__ import annotations

import base64
import re
import shutil

import pytest

try:  # the shared browser helpers (moved out of conftest.py at some point)
    from browser_support import ARTIFACTS, ROOT, run_with_retry
except ImportError:  # pragma: no cover
    from conftest import ARTIFACTS, ROOT, run_with_retry

from studykit.store import StudyFile

NAME = "flange_thickness"

# where a data point of a bokeh figure is on the page: walk the views from Bokeh.index.roots, find
# the figure by its title, map data -> screen with the frame's scales
POINT_JS = """([title, x, y]) => {
  const views = [];
  const walk = (v) => { if (!v) return; views.push(v);
                        if (v.child_views) for (const c of v.child_views) walk(c); };
  for (const r of Bokeh.index.roots) walk(r);
  for (const v of views) {
    if (v.frame && v.model.title && v.model.title.text.startsWith(title)) {
      const r = v.el.getBoundingClientRect();
      if (!v.el.isConnected || r.width === 0) continue;  // a view of an earlier rendering
      return {x: r.left + v.frame.x_scale.compute(x), y: r.top + v.frame.y_scale.compute(y)};
    }
  }
  return null;
}"""


@pytest.fixture(scope="module")
def study_server(tmp_path_factory):
    from studykit.app.server import running_server
    from studykit.app.session import demo_study_path

    path = tmp_path_factory.mktemp("journey") / "pilot.study"
    shutil.copy(demo_study_path(), path)
    ARTIFACTS.mkdir(exist_ok=True)
    log = open(ARTIFACTS / "voila-study-journey.log", "w")  # noqa: SIM115
    try:
        with running_server(
            ROOT / "notebooks" / "workbook.ipynb", env={"STUDYKIT_STUDY": str(path)}, log=log
        ) as url:
            yield url, path
    finally:
        log.close()


def open_step(page, key: str) -> None:
    page.locator(f".sk-step-{key}").click()
    page.wait_for_selector(f".sk-step-{key}.sk-current")


def shot(page, name: str, *, full: bool = False) -> None:
    """Screenshot; ``full`` grows the viewport to the workbook's height first (Voila scrolls
    inside its own container, so Playwright's full_page sees one screen only)."""
    size = page.viewport_size
    if full:
        height = page.evaluate("() => document.querySelector('.sk-root').scrollHeight")
        page.set_viewport_size(
            {"width": size["width"], "height": max(size["height"], int(height) + 80)}
        )
        page.wait_for_timeout(600)
    page.screenshot(path=str(ARTIFACTS / f"study-{name}.png"))
    if full:
        page.set_viewport_size(size)
        page.wait_for_timeout(300)


def lower_bound_text(page) -> str:
    text = page.locator(".sk-verdict").inner_text()
    found = re.search(r"lower 95% confidence bound of \w+ is ([0-9.]+)", text)
    assert found, text
    return found.group(1)


def test_study_journey(browser, study_server, artifacts):
    url, path = study_server
    fresh = path.with_name("fresh.study")
    shutil.copy(path, fresh)

    def journey(page, console):
        shutil.copy(fresh, path)  # a retry starts from the same file
        page.goto(url, wait_until="domcontentloaded")
        page.wait_for_selector(".sk-stepbar .sk-step", state="visible")
        assert "QV-4410" in page.locator(".sk-header").inner_text()

        # overview: every characteristic analysed on opening, with its chart; then open
        # flange_thickness from its row
        open_step(page, "limits")
        page.wait_for_selector(".sk-overview-panel .sk-chip")
        page.wait_for_selector(".sk-overview-panel .sk-overview-bokeh canvas", state="attached")
        assert page.locator(".sk-overview-panel :text('not analysed yet')").count() == 0
        shot(page, "overview-1280", full=True)
        page.locator(".sk-who input").first.fill("A. Tester")
        page.locator(f".sk-open-{NAME}").click()
        page.wait_for_selector(".sk-step-stability.sk-current")
        page.wait_for_selector(".sk-stability-chart canvas", state="attached")
        page.wait_for_function(
            "() => document.querySelector('.sk-picker select') && "
            "document.querySelector('.sk-picker select').value !== ''"
        )

        # the capability before the removal
        open_step(page, "capability")
        page.wait_for_selector(".sk-verdict :text('lower 95% confidence bound')")
        before = lower_bound_text(page)
        open_step(page, "stability")
        page.wait_for_selector(".sk-stability-chart canvas", state="attached")
        page.wait_for_timeout(1500)

        # phase I: the recorded exclusions already cover every signal
        page.get_by_role("button", name="Find rule-breaking subgroups").click()
        page.wait_for_selector(":text('nothing to propose')")

        # remove subgroup 5 by clicking its point on the mean chart
        summary = page.locator(".sk-stability-summary").inner_text()
        assert "26 of 28" in summary, summary
        chart = page.locator(".sk-stability-chart")
        chart.scroll_into_view_if_needed()
        page.wait_for_timeout(500)
        point = None
        for _ in range(20):  # the chart may still be laying out
            point = page.evaluate(POINT_JS, ["Subgroup mean", 5, subgroup_mean(path, "5")])
            if point:
                break
            page.wait_for_timeout(300)
        assert point, "mean chart not found"
        page.mouse.move(point["x"], point["y"])
        page.wait_for_timeout(400)
        shot(page, "hover-1280")
        page.mouse.click(point["x"], point["y"])
        page.wait_for_function(
            "() => document.querySelector('.sk-subgroup-pick select').value === '5'"
        )
        assert "in use" in page.locator(".sk-selected-info").inner_text()
        remove = page.get_by_role("button", name="Remove subgroup")
        assert remove.is_disabled()
        page.locator(".sk-removal-reason textarea").fill("gauge dropped, parts re-measured")
        page.wait_for_function("() => !document.querySelector('.sk-remove').disabled")
        remove.click()
        page.wait_for_selector(":text('Subgroup 5 of flange_thickness removed and recorded')")
        page.wait_for_selector(".sk-removal-table :text('gauge dropped, parts re-measured')")
        assert "25 of 28" in page.locator(".sk-stability-summary").inner_text()
        page.wait_for_timeout(800)
        shot(page, "removed-1280", full=True)

        # the index moved
        open_step(page, "capability")
        page.wait_for_function(
            "(b) => !document.querySelector('.sk-verdict').innerText.includes("
            "'bound of Ppk is ' + b + ',')",
            arg=before,
        )
        after = lower_bound_text(page)
        assert after != before
        page.wait_for_selector(".sk-interval-chart canvas", state="attached")
        page.wait_for_timeout(800)
        shot(page, "capability-1280", full=True)

        # sign-off: the approval gate lists what has no verdict; waivers with reasons, then
        # approve, and the study is locked
        open_step(page, "signoff")
        page.wait_for_selector(".sk-open-verdicts")
        for name in ("pull_off_force", "leak_test_defectives", "shaft_seat_diameter"):
            page.locator(".sk-picker select").first.select_option(name)
            page.locator(".sk-waive-reason input").fill(f"journey waiver for {name}")
            page.wait_for_function("() => !document.querySelector('.sk-waive').disabled")
            page.locator(".sk-waive").click()
            page.wait_for_selector(f".sk-rules-box :text('journey waiver for {name}')")
        page.wait_for_function("() => !document.querySelector('.sk-open-verdicts')")
        page.locator(".sk-sign-role input").fill("approved")
        page.locator(".sk-sign-decision button:has-text('Approve')").click()
        page.get_by_role("button", name="Sign the study as it stands").click()
        page.wait_for_selector(".sk-lock-state :text('Approved and locked')")
        assert "Approved · locked" in page.locator(".sk-header").inner_text()
        shot(page, "signed-1280", full=True)

        # export: JSON and the PDF evidence as downloads (data: URLs, no server path)
        open_step(page, "export")
        page.get_by_role("button", name="Results as JSON").click()
        page.wait_for_selector("a.sk-download[download$='results.json']")
        page.get_by_role("button", name="Make the PDF evidence").click()
        link = page.locator("a.sk-download[download$='.pdf']")
        link.wait_for(state="attached", timeout=120_000)
        href = link.get_attribute("href")
        assert href.startswith("data:application/pdf;base64,")
        assert base64.b64decode(href.split(",", 1)[1][:8]).startswith(b"%PDF")
        shot(page, "export-1280", full=True)

        body = page.locator("body").inner_text()
        assert "Traceback" not in body and "Something went wrong" not in body
        return True

    assert run_with_retry(browser, journey, viewport={"width": 1280, "height": 800})
    study = StudyFile(path).load()
    d = study.excluded_subgroups(NAME)["5"]
    assert (d.who, d.reason) == ("A. Tester", "gauge dropped, parts re-measured")
    assert study.is_locked


def subgroup_mean(path, label: str) -> float:
    """Mean of one subgroup of flange_thickness from the study's data copy (numpy)."""
    import csv
    import io

    import numpy as np

    study = StudyFile(path).load()
    rows = list(csv.reader(io.StringIO(study.data.decode("utf-8-sig"))))
    col = next(i for i, h in enumerate(rows[0]) if h.startswith(NAME))
    return float(np.mean([float(r[col]) for r in rows[1:] if r and r[0] == label]))


@pytest.mark.parametrize("width, height", [(1920, 1080)])
def test_study_panels_at_full_hd(browser, study_server, artifacts, width, height):
    url, _path = study_server

    def journey(page, console):
        page.goto(url, wait_until="domcontentloaded")
        page.wait_for_selector(".sk-stepbar .sk-step", state="visible")
        for key, wait in (
            ("stability", ".sk-stability-chart canvas"),
            ("shape", ".sk-shape-chart canvas"),
            ("capability", ".sk-interval-chart canvas"),
        ):
            open_step(page, key)
            page.wait_for_selector(wait, state="attached")
            page.wait_for_timeout(1200)
            shot(page, f"{key}-{width}", full=True)
        body = page.locator("body").inner_text()
        assert "Traceback" not in body and "Something went wrong" not in body
        return True

    assert run_with_retry(browser, journey, viewport={"width": width, "height": height})

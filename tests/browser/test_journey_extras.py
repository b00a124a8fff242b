"""Journey in chromium: the demo study's capability step shows the tolerance-interval panel of
the bore (criterion "at least 99 % within specification with 95 % confidence") and the
mounting-hole position view (scatter, PPM, index, shortcut); the export step makes the analysis
notebook. Screenshots go to test-artifacts/extras-*.png.
"""

from __future__ import annotations

import base64
import json
import shutil

import pytest

try:  # the shared browser helpers
    from browser_support import ARTIFACTS, ROOT, run_with_retry
except ImportError:  # pragma: no cover
    from conftest import ARTIFACTS, ROOT, run_with_retry


@pytest.fixture(scope="module")
def extras_server(tmp_path_factory):
    from studykit.app.server import running_server
    from studykit.app.session import demo_study_path

    d = tmp_path_factory.mktemp("extras-journey")
    path = d / "pilot.study"
    shutil.copy(demo_study_path(), path)
    ARTIFACTS.mkdir(exist_ok=True)
    log = open(ARTIFACTS / "voila-extras-journey.log", "w")  # noqa: SIM115
    try:
        with running_server(
            ROOT / "notebooks" / "workbook.ipynb", env={"STUDYKIT_STUDY": str(path)}, log=log
        ) as url:
            yield url
    finally:
        log.close()


def test_interval_position_and_notebook(browser, extras_server, artifacts):
    url = extras_server

    def journey(page, console):
        page.goto(url, wait_until="domcontentloaded")
        page.wait_for_selector(".sk-stepbar .sk-step", state="visible")
        page.locator(".sk-step-capability").click()
        page.wait_for_selector(".sk-step-capability.sk-current")
        page.locator(".sk-picker select").first.select_option("bore_diameter")
        page.wait_for_selector(".sk-tolerance-interval :text('ISO 16269-6')")
        panel = page.locator(".sk-tolerance-interval").inner_text()
        assert "at least 99% of parts within specification with 95% confidence" in panel, panel
        assert "473" in panel and "Meets" in panel, panel
        page.locator(".sk-tolerance-interval").scroll_into_view_if_needed()
        page.wait_for_timeout(400)
        page.screenshot(path=str(ARTIFACTS / "extras-interval-1280.png"))
        page.wait_for_selector(".sk-position-numbers :text('mounting_hole_position')")
        pos = page.locator(".sk-position-numbers").inner_text()
        assert "one-dimensional shortcut" in pos.lower() and "Expected PPM" in pos, pos
        assert "times fewer than the two-dimensional model" in pos, pos
        assert page.locator(".sk-position-view img").count() == 1
        page.locator(".sk-position-view").scroll_into_view_if_needed()
        page.wait_for_timeout(400)
        page.screenshot(path=str(ARTIFACTS / "extras-position-1280.png"))
        page.locator(".sk-step-export").click()
        page.wait_for_selector(".sk-step-export.sk-current")
        page.locator(".sk-make-notebook").click()
        link = page.wait_for_selector("a.sk-download[download$='analysis.ipynb']")
        href = link.get_attribute("href")
        nb = json.loads(base64.b64decode(href.split("base64,", 1)[1]))
        code = "\n".join(c["source"] for c in nb["cells"] if c["cell_type"] == "code")
        assert "STUDY = Path('pilot.study')" in code, code[:300]
        page.screenshot(path=str(ARTIFACTS / "extras-notebook-1280.png"))
        body = page.locator("body").inner_text()
        assert "Traceback" not in body and "Something went wrong" not in body
        return True

    assert run_with_retry(browser, journey, viewport={"width": 1280, "height": 800})

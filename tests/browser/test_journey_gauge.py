"""Journey in chromium: open the demo study (a copy), open "Gauge check", see the stored gauge
study's verdict and its figures, then run a new gauge study from the demo readings and attach it
with a name and a reason. Screenshots go to test-artifacts/gauge-*.png.
"""

from __future__ import annotations

import shutil

import pytest

try:  # the shared browser helpers
    from browser_support import ARTIFACTS, ROOT, run_with_retry
except ImportError:  # pragma: no cover
    from conftest import ARTIFACTS, ROOT, run_with_retry

from studykit.store import StudyFile

NAME = "flange_thickness"


@pytest.fixture(scope="module")
def gauge_server(tmp_path_factory):
    from studykit.app.server import running_server
    from studykit.app.session import demo_study_path

    path = tmp_path_factory.mktemp("gauge-journey") / "pilot.study"
    shutil.copy(demo_study_path(), path)
    ARTIFACTS.mkdir(exist_ok=True)
    log = open(ARTIFACTS / "voila-gauge-journey.log", "w")  # noqa: SIM115
    try:
        with running_server(
            ROOT / "notebooks" / "workbook.ipynb", env={"STUDYKIT_STUDY": str(path)}, log=log
        ) as url:
            yield url, path
    finally:
        log.close()


def shot(page, name: str, *, full: bool = False) -> None:
    """Screenshot; ``full`` grows the viewport to the workbook's height first (Voila scrolls
    inside its own container)."""
    size = page.viewport_size
    if full:
        height = page.evaluate("() => document.querySelector('.sk-root').scrollHeight")
        page.set_viewport_size(
            {"width": size["width"], "height": max(size["height"], int(height) + 80)}
        )
        page.wait_for_timeout(600)
    page.screenshot(path=str(ARTIFACTS / f"gauge-{name}.png"))
    if full:
        page.set_viewport_size(size)
        page.wait_for_timeout(300)


def test_gauge_journey(browser, gauge_server, artifacts):
    url, path = gauge_server
    fresh = path.with_name("fresh.study")
    shutil.copy(path, fresh)
    readings = (ROOT / "demo_data" / "gauge_flange_thickness.csv").read_bytes()
    stored = StudyFile(path).results("gauge_rr", NAME)[-1]
    pct = f"{stored.payload['verdict']['pct_grr_study_variation']:.1f} %"

    def journey(page, console):
        shutil.copy(fresh, path)  # a retry starts from the same file
        page.goto(url, wait_until="domcontentloaded")
        page.wait_for_selector(".sk-stepbar .sk-step", state="visible")
        page.locator(".sk-step-measuring").click()
        page.wait_for_selector(".sk-step-measuring.sk-current")
        page.wait_for_selector(".sk-gauge-verdict", state="visible")
        page.locator(".sk-picker select").select_option(NAME)
        page.wait_for_selector(f".sk-gauge-heading :text('{NAME}')")
        verdict = page.locator(".sk-gauge-stored")
        verdict.wait_for(state="visible")
        page.wait_for_function(
            "(p) => document.querySelector('.sk-gauge-stored').innerText.includes(p)", arg=pct
        )
        text = verdict.inner_text()
        assert "Acceptable" in text and stored.who in text, text
        # the figures are real images with a size
        img = page.locator("img.sk-gauge-figure-sources").first
        img.wait_for(state="visible")
        page.wait_for_function(
            "() => { const i = document.querySelector('img.sk-gauge-figure-sources');"
            " return i && i.complete && i.naturalWidth > 300; }"
        )
        assert page.locator("img.sk-gauge-figure").count() == 3
        shot(page, "1280")
        shot(page, "full-1280", full=True)

        # a new study from the readings: columns guessed, preview, attach with name and reason
        with page.expect_file_chooser() as chooser:
            page.locator(".sk-gauge-upload").click()
        chooser.value.set_files(
            files=[
                {"name": "gauge_flange_thickness.csv", "mimeType": "text/csv", "buffer": readings}
            ]
        )
        page.wait_for_selector(".sk-gauge-compute:not([disabled])")
        assert page.locator(".sk-gauge-col-value select").input_value() == "value"
        assert page.locator(".sk-gauge-lsl input").input_value() == "7.9"
        page.locator(".sk-gauge-compute").click()
        page.wait_for_selector(".sk-gauge-preview :text('Preview (not stored yet)')")
        page.locator(".sk-who input").first.fill("A. Tester")
        page.locator(".sk-gauge-reason input").fill("gauge GR-07 after recalibration")
        page.wait_for_selector(".sk-gauge-attach:not([disabled])")
        page.locator(".sk-gauge-new").scroll_into_view_if_needed()
        page.wait_for_timeout(400)
        shot(page, "preview-1280")
        page.locator(".sk-gauge-attach").click()
        page.wait_for_selector(":text('Gauge study attached to flange_thickness')")
        page.wait_for_selector(".sk-gauge-stored :text('A. Tester')")
        body = page.locator("body").inner_text()
        assert "Traceback" not in body and "Something went wrong" not in body
        return True

    assert run_with_retry(browser, journey, viewport={"width": 1280, "height": 800})
    new = StudyFile(path).results("gauge_rr", NAME)[-1]
    assert (new.who, new.payload["reason"]) == ("A. Tester", "gauge GR-07 after recalibration")

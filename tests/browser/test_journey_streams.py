"""Journey: a characteristic of several streams in the workbook (demo: the invented 4-cavity
impeller hub bore). The Capability step shows the Streams panel with its table, the two tests
and the group chart, and the time-dependent model class (A2: the cavities mixed, stable over time);
the overview lists the four cavities under the characteristic.
Screenshots: test-artifacts/streams-*.png."""

from __future__ import annotations

import shutil

import pytest

try:
    from browser_support import ARTIFACTS, ROOT, run_with_retry
except ImportError:  # pragma: no cover
    from conftest import ARTIFACTS, ROOT, run_with_retry

NAME = "impeller_hub_bore"


@pytest.fixture(scope="module")
def streams_server(tmp_path_factory):
    from studykit.app.server import running_server
    from studykit.app.session import demo_study_path

    path = tmp_path_factory.mktemp("streams") / "pilot.study"
    shutil.copy(demo_study_path(), path)
    ARTIFACTS.mkdir(exist_ok=True)
    log = open(ARTIFACTS / "voila-streams.log", "w")  # noqa: SIM115
    try:
        with running_server(
            ROOT / "notebooks" / "workbook.ipynb", env={"STUDYKIT_STUDY": str(path)}, log=log
        ) as url:
            yield url
    finally:
        log.close()


def _shot(page, name):
    size = page.viewport_size
    height = page.evaluate("() => document.querySelector('.sk-root').scrollHeight")
    page.set_viewport_size(
        {"width": size["width"], "height": max(size["height"], int(height) + 80)}
    )
    page.wait_for_timeout(700)
    page.screenshot(path=str(ARTIFACTS / f"streams-{name}.png"))
    page.set_viewport_size(size)


def test_streams_in_the_workbook(browser, streams_server, artifacts):
    def journey(page, console):
        page.goto(streams_server, wait_until="domcontentloaded")
        page.wait_for_selector(".sk-stepbar .sk-step", state="visible")
        page.locator(".sk-step-capability").click()
        page.wait_for_selector(".sk-step-capability.sk-current")
        page.locator(".sk-picker select").first.select_option(NAME)
        page.wait_for_selector(".sk-streams-box .sk-stream-row")
        box = page.locator(".sk-streams-box").inner_text()
        assert "Worst stream: 3" in box and "one-way ANOVA" in box
        assert page.locator(".sk-streams-box .sk-stream-row").count() == 4
        page.wait_for_selector(".sk-group-chart", state="visible")
        page.locator(".sk-group-chart").scroll_into_view_if_needed()
        _shot(page, "capability")
        assert "Class A2" in page.locator(".sk-time-model-box").inner_text()
        page.locator(".sk-step-limits").click()
        page.wait_for_selector(".sk-step-limits.sk-current")
        # the overview analyses every characteristic when it opens (no button)
        page.wait_for_selector(".sk-ovstream")
        page.wait_for_function("() => [...document.querySelectorAll('.sk-ovstream')].length === 4")
        text = page.locator(".sk-ovtable").inner_text()
        assert "stream 3 (worst)" in text
        _shot(page, "overview")
        body = page.locator("body").inner_text()
        assert "Traceback" not in body

    run_with_retry(browser, journey, viewport={"width": 1280, "height": 900})

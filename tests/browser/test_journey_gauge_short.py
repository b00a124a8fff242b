"""Journey in chromium: a copy of the demo study with a short gauge study attached (readings
invented for the test); "Gauge check" shows the short study's verdict and the gauge-error panel
(observed against process-only indices). Screenshots go to test-artifacts/gauge-short-*.png.
"""

from __future__ import annotations

import shutil

import pytest

try:  # the shared browser helpers
    from browser_support import ARTIFACTS, ROOT, run_with_retry
except ImportError:  # pragma: no cover
    from conftest import ARTIFACTS, ROOT, run_with_retry

NAME = "flange_thickness"
READINGS = [
    8.0012,
    8.0009,
    8.0015,
    8.0007,
    8.0011,
    8.0013,
    8.0008,
    8.0010,
    8.0014,
    8.0009,
    8.0012,
    8.0006,
    8.0011,
    8.0010,
    8.0013,
    8.0008,
    8.0012,
    8.0009,
    8.0011,
    8.0010,
    8.0012,
    8.0010,
    8.0009,
    8.0013,
    8.0011,
]


@pytest.fixture(scope="module")
def short_server(tmp_path_factory):
    from studykit.app.server import running_server
    from studykit.app.session import demo_study_path
    from studykit.cli import main

    d = tmp_path_factory.mktemp("gauge-short-journey")
    path = d / "pilot.study"
    shutil.copy(demo_study_path(), path)
    csv = d / "reference.csv"
    csv.write_text("reading\n" + "\n".join(f"{v:.4f}" for v in READINGS) + "\n")
    assert (
        main(
            [
                "gauge",
                str(csv),
                "--reference",
                "8.0004",
                "--value",
                "reading",
                "--study",
                str(path),
                "--characteristic",
                NAME,
                "--who",
                "R. Tester",
            ]
        )
        == 0
    )
    ARTIFACTS.mkdir(exist_ok=True)
    log = open(ARTIFACTS / "voila-gauge-short-journey.log", "w")  # noqa: SIM115
    try:
        with running_server(
            ROOT / "notebooks" / "workbook.ipynb", env={"STUDYKIT_STUDY": str(path)}, log=log
        ) as url:
            yield url
    finally:
        log.close()


def test_short_study_and_gauge_error_are_shown(browser, short_server, artifacts):
    url = short_server

    def journey(page, console):
        page.goto(url, wait_until="domcontentloaded")
        page.wait_for_selector(".sk-stepbar .sk-step", state="visible")
        page.locator(".sk-step-measuring").click()
        page.wait_for_selector(".sk-step-measuring.sk-current")
        page.locator(".sk-picker select").select_option(NAME)
        page.wait_for_selector(f".sk-gauge-heading :text('{NAME}')")
        page.wait_for_selector(".sk-gauge-short-verdict :text('R. Tester')")
        short = page.locator(".sk-gauge-short").inner_text()
        assert "Short gauge study (one reference part)" in short and "Cg, Cgk" in short, short
        page.wait_for_selector(".sk-gauge-error :text('Process only')")
        err = page.locator(".sk-gauge-error-box").inner_text()
        assert "Gauge error taken out" in err and "Cp" in err and "Pp" in err, err
        page.locator(".sk-gauge-short").scroll_into_view_if_needed()
        page.wait_for_timeout(400)
        page.screenshot(path=str(ARTIFACTS / "gauge-short-1280.png"))
        page.locator(".sk-gauge-error-box").scroll_into_view_if_needed()
        page.wait_for_timeout(400)
        page.screenshot(path=str(ARTIFACTS / "gauge-short-error-1280.png"))
        body = page.locator("body").inner_text()
        assert "Traceback" not in body and "Something went wrong" not in body
        return True

    assert run_with_retry(browser, journey, viewport={"width": 1280, "height": 800})

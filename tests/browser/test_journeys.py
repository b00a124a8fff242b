"""Journeys through the workbook in chromium: open, see the steps, upload, confirm, errors."""

from __future__ import annotations

import numpy as np
import pytest
from browser_support import run_with_retry


def sample_csv() -> bytes:
    """A wide table with a subgroup column (UI fixture, not reference data)."""
    rng = np.random.default_rng(20261202)
    lines = ["Lot,Bore diameter (mm),Flange thickness (mm),Torque (Nm)"]
    for lot in range(1, 26):
        for _ in range(5):
            bore = 12.000 + rng.normal(0, 0.004)
            flange = 3.20 + rng.normal(0, 0.02)
            torque = 24.5 + rng.normal(0, 0.6)
            lines.append(f"{lot},{bore:.4f},{flange:.3f},{torque:.2f}")
    lines[37] = lines[37].rsplit(",", 1)[0] + ","  # one empty torque cell
    return ("\n".join(lines) + "\n").encode()


STEP_TITLES = [
    "Bring in data",
    "Specification & criterion",
    "Gauge check",
    "Stability",
    "Shape",
    "Capability",
    "Review & sign",
    "Evidence & hand-off",
]


def open_workbook(page, url):
    page.goto(url, wait_until="domcontentloaded")
    page.wait_for_selector(".sk-stepbar .sk-step", state="visible")
    page.wait_for_selector(".sk-upload", state="visible")


def upload(page, name: str, data: bytes, mime: str = "text/csv"):
    # ipywidgets 8 keeps its <input type=file> outside the document: use the file chooser
    with page.expect_file_chooser() as chooser:
        page.locator(".sk-upload").click()
    chooser.value.set_files(files=[{"name": name, "mimeType": mime, "buffer": data}])


@pytest.mark.parametrize("width, height", [(1280, 800), (1920, 1080)])
def test_open_upload_confirm(browser, workbook_url, artifacts, width, height):
    def journey(page, console):
        open_workbook(page, workbook_url)
        steps = page.locator(".sk-stepbar .sk-step").all_inner_texts()
        assert [s.split(maxsplit=1)[1].strip() for s in steps] == STEP_TITLES
        assert "No study loaded" in page.locator(".sk-header").inner_text()
        page.screenshot(path=str(artifacts / f"workbook-empty-{width}x{height}.png"))

        upload(page, "housing-trial.csv", sample_csv())
        table = page.locator(".sk-detected")
        table.wait_for(state="visible")
        text = table.inner_text()
        for name in ("Bore diameter", "Flange thickness", "Torque", "mm", "Nm"):
            assert name in text
        assert "5 (all 25 subgroups)" in text
        # the values chart (bokeh canvas inside its shadow DOM; Playwright CSS pierces it)
        page.wait_for_selector(".sk-intake-chart canvas", state="attached")
        page.wait_for_timeout(800)
        page.screenshot(
            path=str(artifacts / f"workbook-detected-{width}x{height}.png"), full_page=True
        )

        page.get_by_role("button", name="Use this data").click()
        page.wait_for_selector(".sk-overview-card td:text('Torque')")
        assert "Data confirmed" in page.locator(".sk-header").inner_text()
        assert "✓" in page.locator(".sk-step-intake").inner_text()
        page.screenshot(
            path=str(artifacts / f"workbook-confirmed-{width}x{height}.png"), full_page=True
        )
        page.locator(".sk-step-stability").click()
        page.wait_for_selector(".sk-guidance:has-text('Step 4 of 8')")
        body = page.locator("body").inner_text()
        assert "Traceback" not in body and "Something went wrong" not in body
        errors = [c for c in console if c.startswith("error") and "Bokeh" in c]
        assert not errors, errors

    run_with_retry(browser, journey, viewport={"width": width, "height": height})


def test_bad_upload_shows_a_readable_message(browser, workbook_url, artifacts):
    def journey(page, console):
        open_workbook(page, workbook_url)
        upload(page, "notes.csv", b"just some words\nwithout numbers\nat all\n")
        message = page.locator(".sk-msg-error")
        message.wait_for(state="visible")
        text = message.inner_text()
        assert "notes.csv" in text
        assert "Traceback" not in page.locator("body").inner_text()
        page.screenshot(path=str(artifacts / "workbook-bad-upload-1280x800.png"))

    run_with_retry(browser, journey, viewport={"width": 1280, "height": 800})

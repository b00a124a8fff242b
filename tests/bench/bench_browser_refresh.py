"""Benchmark: a removal (and its undo) as seen in the browser, click to every panel updated.

Serves a copy of the demo study, opens Stability in Debian's chromium, and times from the click
on "Remove subgroup" / "Restore subgroup" until the page shows the new state (the chart summary's
subgroup count and the removal log). Target <= 500 ms. Prints every run, the median and the
ratio to the target. Needs /usr/bin/chromium.

    .venv/bin/python tests/bench/bench_browser_refresh.py [--runs 5]
"""

from __future__ import annotations

import argparse
import shutil
import statistics
import sys
import tempfile
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parents[2]
sys.path.insert(0, str(ROOT))

ARGS = [
    "--headless",
    "--no-sandbox",
    "--disable-gpu",
    "--disable-quic",
    "--no-first-run",
    "--disable-background-networking",
    "--disable-component-update",
    "--disable-sync",
]
NAME = "bore_diameter"


def main() -> None:
    ap = argparse.ArgumentParser()
    ap.add_argument("--runs", type=int, default=5)
    args = ap.parse_args()
    from playwright.sync_api import sync_playwright

    from studykit.app.server import running_server
    from studykit.app.session import demo_study_path

    tmp = Path(tempfile.mkdtemp())
    study = tmp / "pilot.study"
    shutil.copy(demo_study_path(), study)
    times: list[float] = []
    with (
        running_server(
            ROOT / "notebooks" / "workbook.ipynb", env={"STUDYKIT_STUDY": str(study)}
        ) as url,
        sync_playwright() as p,
    ):
        browser = p.chromium.launch(executable_path="/usr/bin/chromium", headless=True, args=ARGS)
        page = browser.new_page(viewport={"width": 1280, "height": 800})
        page.set_default_timeout(90_000)
        page.goto(url)
        page.wait_for_selector(".sk-stepbar .sk-step", state="visible")
        page.locator(".sk-who input").first.fill("B. Bench")
        page.wait_for_selector(f".sk-open-{NAME}")
        page.locator(f".sk-open-{NAME}").click()
        page.wait_for_selector(".sk-step-stability.sk-current")
        page.wait_for_selector(".sk-stability-chart canvas", state="attached")
        page.wait_for_timeout(1500)
        for i in range(args.runs):
            label = str(3 + i)
            page.locator(".sk-subgroup-pick select").select_option(label)
            page.wait_for_function(
                f"() => document.querySelector('.sk-subgroup-pick select').value === '{label}'"
            )
            page.locator(".sk-removal-reason textarea").fill(f"bench removal {i}")
            page.wait_for_function("() => !document.querySelector('.sk-remove').disabled")
            before = page.locator(".sk-stability-summary").inner_text()
            t0 = time.perf_counter()
            page.locator(".sk-remove").click()
            page.wait_for_function(
                "(b) => document.querySelector('.sk-stability-summary').innerText !== b", arg=before
            )
            page.wait_for_selector(f".sk-removal-table :text('bench removal {i}')")
            times.append(time.perf_counter() - t0)
            page.wait_for_timeout(300)
        browser.close()
    shutil.rmtree(tmp, ignore_errors=True)
    for i, t in enumerate(times, 1):
        print(f"run {i}: click to updated page {t * 1000:.0f} ms")
    med = statistics.median(times)
    print(
        f"median {med * 1000:.0f} ms; target 500 ms; ratio {med / 0.5:.2f} "
        f"({'met' if med <= 0.5 else 'not met'})"
    )


if __name__ == "__main__":
    main()

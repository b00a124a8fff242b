"""Shared pieces of the browser journeys and the app benchmark (chromium path, flags, retry)."""

from __future__ import annotations

import os
from pathlib import Path

ROOT = Path(__file__).resolve().parents[2]
ARTIFACTS = ROOT / "test-artifacts"
CHROMIUM = os.environ.get("STUDYKIT_CHROMIUM", "/usr/bin/chromium")
CHROMIUM_ARGS = [
    "--headless",
    "--no-sandbox",
    "--disable-gpu",
    "--disable-quic",
    "--no-first-run",
    "--disable-background-networking",
    "--disable-component-update",
    "--disable-sync",
]
TIMEOUT_MS = int(os.environ.get("STUDYKIT_BROWSER_TIMEOUT_MS", "90000"))


def run_with_retry(browser, journey, *, viewport, attempts: int = 2):
    """Run ``journey(page)`` in a fresh page; on failure try once more in a new page."""
    last = None
    for attempt in range(attempts):
        context = browser.new_context(viewport=viewport)
        context.set_default_timeout(TIMEOUT_MS)
        page = context.new_page()
        console = []
        page.on("console", lambda m, console=console: console.append(f"{m.type}: {m.text}"))
        try:
            return journey(page, console)
        except Exception as exc:  # noqa: BLE001 - retried once, then re-raised
            last = exc
            try:
                page.screenshot(path=str(ARTIFACTS / f"failed-attempt-{attempt + 1}.png"))
            except Exception:  # noqa: BLE001
                pass
        finally:
            context.close()
    raise last

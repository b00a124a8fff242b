"""Real-browser journeys: Playwright driving Debian's chromium (never `playwright install`).

Skipped, with the reason, when /usr/bin/chromium or Playwright is missing. Screenshots go to
test-artifacts/ at the repository root. Journeys get generous timeouts and one retry
(STACK.md: about one run in nine of a Voila journey hangs for minutes).
"""

from __future__ import annotations

import os
import shutil
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parents[2]
ARTIFACTS = ROOT / "test-artifacts"
CHROMIUM = os.environ.get("STUDYKIT_CHROMIUM", "/usr/bin/chromium")
CHROMIUM_ARGS = ["--headless", "--no-sandbox", "--disable-gpu", "--disable-quic",
                 "--no-first-run", "--disable-background-networking",
                 "--disable-component-update", "--disable-sync"]
TIMEOUT_MS = int(os.environ.get("STUDYKIT_BROWSER_TIMEOUT_MS", "90000"))

_missing = None
if not (os.path.isfile(CHROMIUM) and os.access(CHROMIUM, os.X_OK)) and not shutil.which(CHROMIUM):
    _missing = (f"browser journeys need Debian's chromium at {CHROMIUM} "
                "(apt-get install chromium chromium-driver; scripts/setup --browser)")
try:
    import playwright.sync_api  # noqa: F401
except ImportError:  # pragma: no cover
    _missing = "browser journeys need the playwright package (pip install -e '.[dev]')"


def pytest_collection_modifyitems(config, items):
    here = Path(__file__).parent
    for item in items:
        if here in Path(str(item.fspath)).parents:
            item.add_marker(pytest.mark.browser)
            if _missing:
                item.add_marker(pytest.mark.skip(reason=_missing))


@pytest.fixture(scope="session")
def browser_type_launch_args(browser_type_launch_args):
    return {**browser_type_launch_args, "executable_path": CHROMIUM, "args": CHROMIUM_ARGS,
            "headless": True}


@pytest.fixture(scope="session")
def artifacts() -> Path:
    ARTIFACTS.mkdir(exist_ok=True)
    return ARTIFACTS


@pytest.fixture(scope="module")
def workbook_url():
    from studykit.app.server import running_server

    log = open(ARTIFACTS.parent / "test-artifacts" / "voila-journeys.log", "w")  # noqa: SIM115
    try:
        with running_server(ROOT / "notebooks" / "workbook.ipynb",
                            env={"STUDYKIT_STUDY": ""}, log=log) as url:
            yield url
    finally:
        log.close()


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

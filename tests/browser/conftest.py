"""Real-browser journeys: Playwright driving Debian's chromium (never `playwright install`).

Skipped, with the reason, when /usr/bin/chromium or Playwright is missing. Screenshots go to
test-artifacts/ at the repository root. Journeys get generous timeouts and one retry
(DEVELOPERS.md, "Stack notes": about one run in nine of a Voila journey hangs for minutes).
"""

from __future__ import annotations

import os
import shutil
from pathlib import Path

import pytest

# re-exported for journeys that import them from here
from browser_support import (  # noqa: F401
    ARTIFACTS,
    CHROMIUM,
    CHROMIUM_ARGS,
    ROOT,
    TIMEOUT_MS,
    run_with_retry,
)

_missing = None
if not (os.path.isfile(CHROMIUM) and os.access(CHROMIUM, os.X_OK)) and not shutil.which(CHROMIUM):
    _missing = (
        f"browser journeys need Debian's chromium at {CHROMIUM} "
        "(apt-get install chromium chromium-driver; scripts/setup --browser)"
    )
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
    return {
        **browser_type_launch_args,
        "executable_path": CHROMIUM,
        "args": CHROMIUM_ARGS,
        "headless": True,
    }


@pytest.fixture(scope="session")
def artifacts() -> Path:
    ARTIFACTS.mkdir(exist_ok=True)
    return ARTIFACTS


@pytest.fixture(scope="module")
def workbook_url(artifacts):
    from studykit.app.server import running_server

    log = open(artifacts / "voila-journeys.log", "w")  # noqa: SIM115
    try:
        with running_server(
            ROOT / "notebooks" / "workbook.ipynb", env={"STUDYKIT_STUDY": ""}, log=log
        ) as url:
            yield url
    finally:
        log.close()

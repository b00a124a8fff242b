"""The workbook server with real pages in chromium: ten pages opened at the same moment all
render, the kernel of a closed page is shut down at once, and a file above the upload limit is
refused in the page before anything is sent.

The server runs as `studykit serve` runs it (preheated kernel, default idle time), on a copy of
the demo study. It is killed with its process group when the module ends, also on failure.
Idle culling itself is tested over raw HTTP in tests/test_serve_security.py.
"""

from __future__ import annotations

import re
import shutil
import time

import pytest
from browser_support import ARTIFACTS, ROOT

from studykit.app.server import kernel_pids, server_process

PAGES = 10
# ten kernels and ten pages on 2 cores took 2 min (load average 9 from other jobs) to 5 min
# (load average 17); the bound only matters when something hangs
PAGE_TIMEOUT_MS = 480_000


@pytest.fixture(scope="module")
def served(tmp_path_factory):
    from studykit.app.session import demo_study_path

    study = tmp_path_factory.mktemp("pages") / "pilot.study"
    shutil.copy(demo_study_path(), study)
    ARTIFACTS.mkdir(exist_ok=True)
    log_path = ARTIFACTS / "voila-serve-pages.log"
    with (
        open(log_path, "w") as log,
        server_process(
            ROOT / "notebooks" / "workbook.ipynb",
            env={"STUDYKIT_STUDY": str(study)},
            log=log,
            timeout=180,
            extra_args=("--VoilaConfiguration.preheat_kernel=True",),
        ) as server,
    ):
        yield server, log_path


def kernel_of(page) -> str:
    found = re.search(r'"kernelId": "([0-9a-f-]{36})"', page.content())
    assert found, "no kernel id in the page"
    return found.group(1)


def wait_until(predicate, timeout: float, step: float = 0.5) -> bool:
    deadline = time.monotonic() + timeout
    while time.monotonic() < deadline:
        if predicate():
            return True
        time.sleep(step)
    return predicate()


@pytest.mark.slow
def test_ten_pages_opened_at_once_all_show_the_first_chart(browser, served):
    server, log_path = served
    contexts = [browser.new_context(viewport={"width": 1280, "height": 800}) for _ in range(PAGES)]
    try:
        pages = [c.new_page() for c in contexts]
        for page in pages:
            page.set_default_timeout(PAGE_TIMEOUT_MS)
        for page in pages:  # start every navigation before waiting for any
            page.evaluate("url => { window.location.href = url; }", server.url)
        for page in pages:
            page.wait_for_selector(".sk-stepbar .sk-step", state="visible")
        for page in pages:
            page.locator(".sk-step-stability").click()
        for i, page in enumerate(pages):
            page.wait_for_selector(".sk-stability-chart canvas", state="attached")
            assert "Traceback" not in page.locator("body").inner_text(), i
        pages[-1].wait_for_timeout(800)
        pages[-1].screenshot(path=str(ARTIFACTS / "serve-ten-pages-last.png"))
        kernels = {kernel_of(page) for page in pages}
        assert len(kernels) == PAGES  # one kernel each, all alive
        assert kernels <= set(kernel_pids(server.pid))
        assert "Timeout waiting for IOPub output" not in log_path.read_text()
        for page in pages:  # leave the way a user does, so the kernels go too
            page.goto("about:blank")
        assert wait_until(lambda: not kernels & set(kernel_pids(server.pid)), 60)
    finally:
        for c in contexts:
            c.close()


def test_closed_page_kernel_is_shut_down(browser, served):
    server, log_path = served
    context = browser.new_context(viewport={"width": 1280, "height": 800})
    try:
        page = context.new_page()
        page.set_default_timeout(PAGE_TIMEOUT_MS)
        page.goto(server.url, wait_until="domcontentloaded")
        page.wait_for_selector(".sk-stepbar .sk-step", state="visible")
        kernel = kernel_of(page)
        assert kernel in kernel_pids(server.pid)
        page.locator(".sk-step-stability").click()
        page.wait_for_selector(".sk-stability-chart canvas", state="attached")
        # leaving the page sends Voila's shutdown beacon (with the _xsrf cookie now set)
        page.goto("about:blank")
        assert wait_until(lambda: kernel not in kernel_pids(server.pid), 20)
        log = log_path.read_text()
        assert f"Kernel shutdown: {kernel}" in log
        assert "_xsrf' argument missing" not in log
    finally:
        context.close()


def test_upload_over_the_limit_is_refused_in_the_page(browser, served, tmp_path):
    server, _ = served
    big = tmp_path / "all-lines-2026.csv"
    with open(big, "wb") as f:  # 150 MB, above the websocket limit too: it used to drop the page
        f.truncate(150 * 1024 * 1024)
    small = tmp_path / "small.csv"
    small.write_text(
        "Lot,Bore (mm)\n" + "".join(f"{i // 5 + 1},{12 + (i % 7) / 1000:.3f}\n" for i in range(50))
    )
    context = browser.new_context(viewport={"width": 1280, "height": 800})
    try:
        page = context.new_page()
        page.set_default_timeout(PAGE_TIMEOUT_MS)
        page.goto(server.url, wait_until="domcontentloaded")
        page.wait_for_selector(".sk-stepbar .sk-step", state="visible")
        page.locator(".sk-step-intake").click()
        page.wait_for_selector(".sk-upload", state="visible")
        with page.expect_file_chooser() as chooser:
            page.locator(".sk-upload").click()
        chooser.value.set_files(str(big))
        refused = page.locator(".sk-upload-refused")
        refused.wait_for(state="visible", timeout=30_000)
        text = refused.inner_text()
        assert "all-lines-2026.csv" in text and "150.0 MB" in text
        assert "above the upload limit of 50.0 MB" in text and "nothing was sent" in text
        page.screenshot(path=str(ARTIFACTS / "serve-upload-refused.png"))
        button = page.locator(".sk-upload")
        assert button.get_attribute("data-files") == "0"  # the widget got nothing
        assert "(0)" not in button.inner_text()  # and the label carries no counter
        # the kernel connection is still up: a file within the limit is read as before
        with page.expect_file_chooser() as chooser:
            page.locator(".sk-upload").click()
        chooser.value.set_files(str(small))
        page.wait_for_selector(".sk-detected", state="visible")
        assert "Bore" in page.locator(".sk-detected").inner_text()
        assert page.locator(".sk-upload-refused").count() == 0
    finally:
        context.close()


def test_a_websocket_message_above_the_server_cap_is_refused_in_the_page(browser, served):
    """Any message above the server's websocket cap (not only a chosen file) is refused in the
    page with a message naming both sizes, before a byte is sent; the page keeps working."""
    from studykit.app.server import WEBSOCKET_MAX_MESSAGE

    server, _ = served
    context = browser.new_context(viewport={"width": 1280, "height": 800})
    try:
        page = context.new_page()
        page.set_default_timeout(PAGE_TIMEOUT_MS)
        page.goto(server.url, wait_until="domcontentloaded")
        page.wait_for_selector(".sk-stepbar .sk-step", state="visible")
        kernel = kernel_of(page)
        sent = page.evaluate(
            """async ([kernel, cap]) => {
            const ws = new WebSocket(`ws://${location.host}/api/kernels/${kernel}/channels`);
            await new Promise((ok, fail) => { ws.onopen = ok; ws.onerror = fail; });
            const small = ws.send(new ArrayBuffer(16));  // below the cap: passed on
            const big = ws.send(new ArrayBuffer(cap + 1));  // above it: refused here
            const state = ws.readyState;
            ws.close();
            return {small: small === undefined, big: big === undefined, state: state};
        }""",
            [kernel, WEBSOCKET_MAX_MESSAGE],
        )
        assert sent["state"] == 1  # the connection was still open after the refusal
        refused = page.locator(".sk-upload-refused")
        refused.wait_for(state="visible", timeout=30_000)
        text = refused.inner_text()
        # one byte above: the megabytes would read the same, so the message gives bytes
        assert f"a message of {WEBSOCKET_MAX_MESSAGE + 1:,} bytes" in text
        assert f"above what the server accepts ({WEBSOCKET_MAX_MESSAGE:,} bytes)" in text
        assert "it was not sent, and the connection to the workbook stays open" in text
        page.screenshot(path=str(ARTIFACTS / "serve-frame-refused.png"))
        # the page's own kernel connection is untouched: a step still opens
        page.locator(".sk-step-stability").click()
        page.wait_for_selector(".sk-stability-chart canvas", state="attached")
    finally:
        context.close()

"""The workbook server against a page of another site, over raw HTTP: foreign Host and Origin
refused on every route and on the kernel websocket (DNS rebinding), the token never logged,
kernels shut down on page close (XSRF kept) and culled when idle.

The servers run like `studykit serve` runs them (preheated kernel); each is killed with its
process group when its fixture ends, also on failure (studykit.app.server.server_process).
"""

from __future__ import annotations

import base64
import http.client
import os
import re
import time
from urllib.parse import urlsplit

import pytest

from studykit.app.server import BOKEHJS_ROUTE, kernel_pids, server_process

NOTEBOOK = (
    __import__("pathlib").Path(__file__).resolve().parents[1] / "notebooks" / "workbook.ipynb"
)
PREHEAT = "--VoilaConfiguration.preheat_kernel=True"
IDLE_SECONDS = 15  # --StudykitVoila.kernel_idle_minutes=0.25 below
EVIL = "evil.example"

pytestmark = pytest.mark.slow


def port_of(url: str) -> int:
    return urlsplit(url).port


def raw(url, method, path, *, host=None, headers=None, body=None, timeout=180):
    """One request with exactly the given Host header: (status, body text, response headers)."""
    port = port_of(url)
    conn = http.client.HTTPConnection("127.0.0.1", port, timeout=timeout)
    try:
        all_headers = {"Host": host or f"127.0.0.1:{port}", **(headers or {})}
        conn.request(method, path, body=body, headers=all_headers)
        r = conn.getresponse()
        return r.status, r.read().decode("utf-8", "replace"), r.headers
    finally:
        conn.close()


def ws_handshake(url, path, *, host=None, origin=None) -> int:
    """The status of a websocket opening handshake (RFC 6455 section 4.1): 101 = opened."""
    port = port_of(url)
    conn = http.client.HTTPConnection("127.0.0.1", port, timeout=60)
    try:
        headers = {
            "Host": host or f"127.0.0.1:{port}",
            "Upgrade": "websocket",
            "Connection": "Upgrade",
            "Sec-WebSocket-Version": "13",
            "Sec-WebSocket-Key": base64.b64encode(os.urandom(16)).decode(),
        }
        if origin:
            headers["Origin"] = origin
        conn.request("GET", path, headers=headers)
        return conn.getresponse().status
    finally:
        conn.close()


def open_page(url, path="/"):
    """GET the workbook page as a browser would; (kernel id, the _xsrf cookie value)."""
    status, html, headers = raw(url, "GET", path)
    assert status == 200, html[:300]
    kernel = re.search(r'"kernelId": "([0-9a-f-]{36})"', html)
    assert kernel, "no kernel id in the page"
    xsrf = None
    for cookie in headers.get_all("Set-Cookie") or []:
        if cookie.startswith("_xsrf="):
            xsrf = cookie.split(";", 1)[0].split("=", 1)[1]
    return kernel.group(1), xsrf


def wait_until(predicate, timeout: float, step: float = 0.5) -> bool:
    deadline = time.monotonic() + timeout
    while time.monotonic() < deadline:
        if predicate():
            return True
        time.sleep(step)
    return predicate()


@pytest.fixture(scope="module")
def loopback(tmp_path_factory):
    log_path = tmp_path_factory.mktemp("serve") / "server.log"
    with (
        open(log_path, "w") as log,
        server_process(
            NOTEBOOK,
            env={"STUDYKIT_STUDY": ""},
            log=log,
            timeout=180,
            extra_args=(
                PREHEAT,
                f"--StudykitVoila.kernel_idle_minutes={IDLE_SECONDS / 60:g}",
                "--StudykitVoila.allow_hosts=review.example,10.0.0.7",
            ),
        ) as server,
    ):
        yield server, log_path


def test_foreign_host_is_refused_on_every_route(loopback):
    server, _ = loopback
    kernel, _ = open_page(server.url)
    routes = [
        ("GET", "/"),
        ("GET", "/?token=x"),
        ("GET", f"{BOKEHJS_ROUTE}bokeh.min.js"),
        ("GET", "/voila/static/voila.js"),
        ("GET", f"/api/kernels/{kernel}"),
        ("POST", f"/voila/api/shutdown/{kernel}"),
        ("GET", "/login"),
        ("GET", "/voila/files/workbook.ipynb"),
        ("DELETE", f"/api/kernels/{kernel}"),
        ("GET", "/no/such/route"),
    ]
    for method, path in routes:
        status, body, _ = raw(server.url, method, path, host=f"{EVIL}:{port_of(server.url)}")
        assert status == 403, (method, path, status)
        assert "is not one of this server's names" in body, (method, path)
        # the same request with a name of this server is answered (not by the refusal)
        status, body, _ = raw(server.url, method, path, host="localhost")
        assert "is not one of this server's names" not in body, (method, path)
    assert raw(server.url, "GET", f"{BOKEHJS_ROUTE}bokeh.min.js")[0] == 200
    for name in ("127.0.0.1", "localhost", "[::1]", "review.example", "10.0.0.7"):  # + allowed
        assert (
            raw(
                server.url,
                "GET",
                f"{BOKEHJS_ROUTE}bokeh.min.js",
                host=f"{name}:{port_of(server.url)}",
            )[0]
            == 200
        ), name
    for name in ("review.example.evil.example", "10.0.0.8", "192.168.1.20"):  # others are not
        assert raw(server.url, "GET", "/", host=f"{name}:{port_of(server.url)}")[0] == 403, name
    assert kernel in kernel_pids(server.pid)  # nothing above shut the kernel down


def test_kernel_websocket_refuses_foreign_host_and_origin(loopback):
    server, log_path = loopback
    port = port_of(server.url)
    kernel, _ = open_page(server.url)
    path = f"/api/kernels/{kernel}/channels?session_id=probe"
    # DNS rebinding: the browser sends the other site's name as Host and Origin
    assert (
        ws_handshake(server.url, path, host=f"{EVIL}:{port}", origin=f"http://{EVIL}:{port}") == 403
    )
    # a page of another site talking to the real address
    assert ws_handshake(server.url, path, origin=f"http://{EVIL}") == 403
    assert ws_handshake(server.url, path, origin=f"http://{EVIL}:{port}") == 403
    assert ws_handshake(server.url, path, origin=f"http://127.0.0.1:{port + 1}") == 403
    assert ws_handshake(server.url, path, origin="null") == 403
    # the workbook's own page
    assert ws_handshake(server.url, path, origin=f"http://127.0.0.1:{port}") == 101
    log = log_path.read_text()
    assert f"the request comes from a page of another site ('http://{EVIL}')" in log


def test_page_close_shuts_its_kernel_down_with_the_xsrf_check_kept(loopback):
    server, _ = loopback
    kernel, xsrf = open_page(server.url)
    assert xsrf, "the page must set the _xsrf cookie its close beacon sends back"
    assert kernel in kernel_pids(server.pid)
    path = f"/voila/api/shutdown/{kernel}"
    origin = {"Origin": server.url.rstrip("/")}
    # without the XSRF value (a forged cross-site beacon could not read the cookie) -> refused
    status, _, _ = raw(
        server.url, "POST", path, headers={**origin, "Cookie": f"_xsrf={xsrf}"}, body=""
    )
    assert status == 403 and kernel in kernel_pids(server.pid)
    status, _, _ = raw(
        server.url,
        "POST",
        path,
        headers={**origin, "Content-Type": "application/x-www-form-urlencoded"},
        body=f"_xsrf={xsrf}",
    )
    assert status == 403 and kernel in kernel_pids(server.pid)  # value without the cookie
    # what Voila's page sends on close: the cookie and the same value in the form
    status, _, _ = raw(
        server.url,
        "POST",
        path,
        body=f"_xsrf={xsrf}",
        headers={
            **origin,
            "Cookie": f"_xsrf={xsrf}",
            "Content-Type": "application/x-www-form-urlencoded",
        },
    )
    assert status == 204
    assert wait_until(lambda: kernel not in kernel_pids(server.pid), 30)


def test_idle_kernel_is_culled_and_the_preheated_one_kept(loopback):
    server, log_path = loopback
    kernel, _ = open_page(server.url)  # a page that never connects (closed before it could)
    assert kernel in kernel_pids(server.pid)
    assert wait_until(lambda: kernel not in kernel_pids(server.pid), IDLE_SECONDS + 90, 1.0)
    assert re.search(rf"Culling 'idle' kernel .*{kernel}", log_path.read_text())
    # the preheated kernel waiting in the pool is idle too, and never culled: wait until the
    # kernels of the other pages here are culled and the pool's one is left
    assert wait_until(lambda: len(kernel_pids(server.pid)) == 1, IDLE_SECONDS + 120, 1.0)
    pooled = set(kernel_pids(server.pid))
    time.sleep(IDLE_SECONDS + 8)
    assert pooled <= set(kernel_pids(server.pid))
    served, _ = open_page(server.url)
    assert served in pooled  # the next page gets it


def test_a_connected_kernel_is_never_culled(loopback):
    import asyncio
    import concurrent.futures

    from tornado.httpclient import HTTPRequest
    from tornado.websocket import websocket_connect

    server, log_path = loopback
    port = port_of(server.url)
    connected, _ = open_page(server.url)
    unconnected, _ = open_page(server.url)

    async def hold_open():
        ws = await websocket_connect(
            HTTPRequest(
                f"ws://127.0.0.1:{port}/api/kernels/{connected}/channels?session_id=held",
                headers={"Origin": f"http://127.0.0.1:{port}"},
            )
        )
        try:
            gone = False
            deadline = time.monotonic() + IDLE_SECONDS + 90
            while time.monotonic() < deadline and not gone:
                await asyncio.sleep(1.0)
                gone = unconnected not in kernel_pids(server.pid)
            await asyncio.sleep(4.0)  # a few more culler rounds
            return gone, connected in kernel_pids(server.pid)
        finally:
            ws.close()

    # in a thread of its own: the browser tests' Playwright may hold this thread's event loop
    with concurrent.futures.ThreadPoolExecutor(1) as pool:
        gone, kept = pool.submit(asyncio.run, hold_open()).result()
    assert gone, "the culler never ran"
    assert kept, "a kernel with its page connected was culled"
    assert not re.search(rf"Culling .*{connected}", log_path.read_text())


@pytest.fixture(scope="module")
def with_token(tmp_path_factory):
    token = "Tq8-" + base64.urlsafe_b64encode(os.urandom(18)).decode().rstrip("=")
    log_path = tmp_path_factory.mktemp("serve-token") / "server.log"
    with (
        open(log_path, "w") as log,
        server_process(
            NOTEBOOK,
            env={"STUDYKIT_STUDY": "", "STUDYKIT_SERVE_TOKEN": token},
            log=log,
            timeout=180,
        ) as server,
    ):
        yield server, token, log_path


def test_token_never_reaches_the_log_or_a_kernel(with_token):
    server, token, log_path = with_token
    port = port_of(server.url)
    # a good page: the kernel started for it must not get the token in its environment
    status, html, _ = raw(server.url, "GET", f"/?token={token}&theme=light")
    assert status == 200
    kernel = re.search(r'"kernelId": "([0-9a-f-]{36})"', html).group(1)
    # failures of every kind, each carrying the token somewhere
    near_miss = token[:-2] + ("xx" if not token.endswith("xx") else "yy")
    failures = [
        ("GET", f"/?token={near_miss}", {}),  # wrong token: login redirect
        ("GET", f"/?token={token}", {"Host": f"{EVIL}:{port}"}),  # foreign name
        ("GET", f"/api/kernels/{kernel}/channels?token={token}", {"Origin": f"http://{EVIL}"}),
        ("GET", f"/voila/files/secret.txt?token={token}", {}),  # 403/404
        ("POST", f"/voila/api/shutdown/not-a-kernel?token={token}", {}),  # 403/404/500
        ("GET", "/voila/files/x", {"Authorization": f"token {token}"}),
        ("GET", f"/login?next=%2F%3Ftoken%3D{token}", {"Referer": f"/?token={token}"}),
    ]
    statuses = []
    for method, path, headers in failures:
        host = headers.pop("Host", None)
        statuses.append(
            raw(
                server.url,
                method,
                path,
                host=host,
                headers=headers,
                body="" if method == "POST" else None,
            )[0]
        )
    assert statuses[0] in (302, 401, 403) and statuses[1] == 403 and statuses[2] == 403
    assert all(s >= 300 for s in statuses[:6]), statuses
    pids = kernel_pids(server.pid)
    assert kernel in pids
    for pid in pids.values():
        with open(f"/proc/{pid}/environ", "rb") as f:
            environ = f.read().decode("utf-8", "replace")
        assert token not in environ and near_miss not in environ
    time.sleep(1.0)
    log = log_path.read_text()
    assert re.search(r"\b403 GET /api/kernels/\S+/channels\b", log)  # failures were logged...
    assert "refused GET /: the address name" in log
    assert token not in log and near_miss not in log  # ...without the token
    assert token[:12] not in log

"""A tornado application served from a thread with its own event loop, for tests of request
handlers. (tornado's ``AsyncHTTPTestCase`` runs its loop in the test's thread, which fails once
another loop runs there, e.g. Playwright's in the browser tests of the same session.)"""

from __future__ import annotations

import asyncio
import contextlib
import http.client
import socket
import threading

import tornado.httpserver
import tornado.web


@contextlib.contextmanager
def serving(app: tornado.web.Application):
    """Serve ``app`` on a free loopback port; yield its port."""
    sock = socket.socket()
    sock.bind(("127.0.0.1", 0))
    sock.listen(128)
    sock.setblocking(False)
    port = sock.getsockname()[1]
    loop = asyncio.new_event_loop()
    ready = threading.Event()
    holder: dict = {}

    def run() -> None:
        asyncio.set_event_loop(loop)

        async def start() -> None:
            server = tornado.httpserver.HTTPServer(app)
            server.add_sockets([sock])
            holder["server"] = server
            ready.set()

        loop.run_until_complete(start())
        loop.run_forever()

    thread = threading.Thread(target=run, daemon=True)
    thread.start()
    if not ready.wait(10):
        raise RuntimeError("the test server did not start")
    try:
        yield port
    finally:

        def stop() -> None:
            holder["server"].stop()
            loop.stop()

        loop.call_soon_threadsafe(stop)
        thread.join(10)
        loop.close()


def request(port: int, path: str, method: str = "GET", **headers):
    """Status, headers (``http.client.HTTPMessage``: names in any case) and body, nothing
    decoded."""
    conn = http.client.HTTPConnection("127.0.0.1", port, timeout=30)
    try:
        conn.request(method, path, headers=headers)
        r = conn.getresponse()
        return r.status, r.headers, r.read()
    finally:
        conn.close()

"""The Voila server that hosts the workbook, with BokehJS served once as a static file.

``python -m studykit.app.server [voila options] NOTEBOOK`` behaves exactly like ``voila`` with
two additions:

* ``/studykit/bokehjs/<bokeh version>/<file>`` serves BokehJS from the installed ``bokeh``
  package (gzip-compressed, cacheable), so pages need neither a CDN nor 1-8 MB of inline
  JavaScript. The workbook kernel finds the address in the ``STUDYKIT_BOKEHJS_URL`` environment
  variable (set here, inherited by every kernel) and writes one ``<script src>`` tag.
* ``STUDYKIT_SERVE_TOKEN`` in the environment, when set, becomes ``Voila.token`` (Jupyter
  server token authentication: pages without ``?token=`` are refused).
* The kernel websocket accepts messages up to the upload limit plus headroom, so an upload of
  up to :data:`studykit.app.widgets.MAX_UPLOAD_BYTES` reaches the kernel (tornado's default cap
  is 10 MiB).

Nothing else changes: authentication (``--Voila.token``), ports and templates are Voila's.
"""

from __future__ import annotations

import contextlib
import os
import socket
import subprocess
import sys
import time
import urllib.error
import urllib.request

import bokeh
import tornado.web
from bokeh.util.paths import bokehjs_path
from jupyter_server.utils import url_path_join
from voila.app import Voila

from studykit.app.widgets import MAX_UPLOAD_BYTES

ENV_BOKEHJS_URL = "STUDYKIT_BOKEHJS_URL"
ENV_TOKEN = "STUDYKIT_SERVE_TOKEN"  # set by `studykit serve` for non-loopback addresses
BOKEHJS_FILES = ("bokeh.min.js", "bokeh-widgets.min.js", "bokeh-tables.min.js")
BOKEHJS_ROUTE = f"/studykit/bokehjs/{bokeh.__version__}/"


class BokehJSHandler(tornado.web.StaticFileHandler):
    """Serves only the listed BokehJS bundles; every other name is a 404."""

    def validate_absolute_path(self, root, absolute_path):
        if os.path.basename(absolute_path) not in BOKEHJS_FILES:
            raise tornado.web.HTTPError(404)
        return super().validate_absolute_path(root, absolute_path)

    @classmethod
    def get_cache_time(cls, path, modified, mime_type):
        # the URL carries the bokeh version, so the file never changes under it
        return 365 * 24 * 3600


class StudykitVoila(Voila):
    """Voila plus the BokehJS route and a websocket size fitting the upload limit."""

    name = "studykit-voila"

    def init_handlers(self):
        handlers = super().init_handlers()
        route = url_path_join(self.server_url, BOKEHJS_ROUTE, r"(.*)")
        handlers.insert(0, (route, BokehJSHandler, {"path": str(bokehjs_path() / "js")}))
        return handlers

    def initialize(self, argv=None):
        super().initialize(argv)
        # serve no files from the notebook folder (Voila's default allows images)
        self.voila_configuration.file_allowlist = []

    def init_settings(self):
        settings = super().init_settings()
        settings["websocket_max_message_size"] = MAX_UPLOAD_BYTES * 2 + 1024 * 1024
        settings["compress_response"] = True  # BokehJS: 1.3 MB -> about 0.35 MB on the wire
        return settings

    def start(self):
        # the token arrives through the environment (not argv, which `ps` shows to everyone);
        # take it out again so kernels and their code never see it
        token = os.environ.pop(ENV_TOKEN, "")
        if token:
            self.token = token
        os.environ[ENV_BOKEHJS_URL] = url_path_join(self.base_url,
                                                    BOKEHJS_ROUTE)
        # (browser signing) tell the kernels whether this server is loopback, token or open
        from studykit.app.access import ENV_ACCESS, access_kind

        os.environ[ENV_ACCESS] = access_kind(self.ip, bool(self.token) or bool(self.auto_token))
        super().start()


def free_port(host: str = "127.0.0.1") -> int:
    """A TCP port that is free right now on ``host``."""
    with socket.socket() as s:
        s.bind((host, 0))
        return s.getsockname()[1]


@contextlib.contextmanager
def running_server(path, *, port: int | None = None, env: dict | None = None,
                   extra_args: tuple[str, ...] = (), timeout: float = 90.0, log=None):
    """Run this server on a notebook or folder in a subprocess; yield its base URL.

    For tests and benchmarks. The server is stopped (SIGTERM, then SIGKILL) on exit.
    """
    port = port or free_port()
    path = os.fspath(path)
    cwd = path if os.path.isdir(path) else os.path.dirname(os.path.abspath(path))
    cmd = [sys.executable, "-m", "studykit.app.server", os.path.abspath(path), "--no-browser",
           f"--port={port}", "--Voila.ip=127.0.0.1", "--Voila.port_retries=0", *extra_args]
    proc = subprocess.Popen(cmd, cwd=cwd, env={**os.environ, **(env or {})},
                            stdout=log or subprocess.DEVNULL, stderr=subprocess.STDOUT)
    url = f"http://127.0.0.1:{port}/"
    try:
        deadline = time.monotonic() + timeout
        while True:
            if proc.poll() is not None:
                raise RuntimeError(f"voila exited with status {proc.returncode}")
            try:
                with urllib.request.urlopen(url + "studykit/ping", timeout=2):
                    break
            except urllib.error.HTTPError:  # any HTTP answer (here 404) means it is up
                break
            except OSError:
                if time.monotonic() > deadline:
                    raise RuntimeError(f"voila did not answer on {url} in {timeout} s") from None
                time.sleep(0.2)
        yield url
    finally:
        proc.terminate()
        try:
            proc.wait(timeout=20)
        except subprocess.TimeoutExpired:
            proc.kill()
            proc.wait()


def main(argv: list[str] | None = None) -> None:
    """Run the server (the command line of ``voila``)."""
    StudykitVoila.launch_instance(argv=sys.argv[1:] if argv is None else argv)


if __name__ == "__main__":  # pragma: no cover
    main()

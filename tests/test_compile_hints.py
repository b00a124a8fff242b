"""The page's scripts are served with V8's compile hint as their first line and otherwise
byte for byte as installed; sizes, ranges and validators follow the served bytes; other files
are untouched (studykit.app.compile_hints). Measured effect: tests/bench/bench_app.py (README,
performance). The hint is the magic comment of the "Explicit JavaScript Compile Hints"
proposal (W3C TAG design review, github.com/w3ctag/design-reviews issue 947; MDN, JavaScript
reference, "Magic comments"), read by Chromium's V8."""

from __future__ import annotations

import gzip
import http.client
from pathlib import Path
from urllib.parse import urlsplit

import pytest
import tornado.web
from static_server import request, serving

from studykit.app.compile_hints import COMPILE_HINT, HintedScripts, with_hint
from studykit.app.server import BOKEHJS_ROUTE, server_process

NOTEBOOK = Path(__file__).resolve().parents[1] / "notebooks" / "workbook.ipynb"
SCRIPT = b"'use strict';\nvar answer = 42;\nfunction f() { return answer; }\n" * 50
STYLE = b"body { color: black; }\n" * 20


def test_the_hint_is_a_single_line_comment():
    # a comment line: a browser without the hint runs the script unchanged, and a
    # 'use strict' directive after it still opens the script's directive prologue
    assert COMPILE_HINT == b"//# allFunctionsCalledOnLoad\n"
    assert COMPILE_HINT.count(b"\n") == 1 and COMPILE_HINT.endswith(b"\n")


def test_with_hint_puts_the_mixin_first_once():
    cls = with_hint(tornado.web.StaticFileHandler)
    assert cls.__mro__[1] is HintedScripts
    assert with_hint(tornado.web.StaticFileHandler) is cls
    assert with_hint(cls) is cls


@pytest.fixture(scope="module")
def hinted_port(tmp_path_factory):
    root = tmp_path_factory.mktemp("files")
    (root / "app.js").write_bytes(SCRIPT)
    (root / "style.css").write_bytes(STYLE)
    app = tornado.web.Application(
        [
            (r"/hinted/(.*)", with_hint(tornado.web.StaticFileHandler), {"path": str(root)}),
            (r"/plain/(.*)", tornado.web.StaticFileHandler, {"path": str(root)}),
        ]
    )
    with serving(app) as port:
        yield port


def test_script_is_the_hint_then_the_file(hinted_port):
    status, headers, body = request(hinted_port, "/hinted/app.js")
    assert status == 200
    assert body == COMPILE_HINT + SCRIPT
    assert int(headers["Content-Length"]) == len(COMPILE_HINT) + len(SCRIPT)


def test_other_files_are_served_as_they_are(hinted_port):
    _, headers, body = request(hinted_port, "/hinted/style.css")
    assert body == STYLE
    assert headers["Etag"] == request(hinted_port, "/plain/style.css")[1]["Etag"]


def test_validator_follows_the_served_bytes(hinted_port):
    hinted = request(hinted_port, "/hinted/app.js")[1]["Etag"]
    assert hinted != request(hinted_port, "/plain/app.js")[1]["Etag"]
    assert request(hinted_port, "/hinted/app.js", **{"If-None-Match": hinted})[0] == 304


def test_head_gives_the_served_size(hinted_port):
    _, headers, _ = request(hinted_port, "/hinted/app.js", method="HEAD")
    assert int(headers["Content-Length"]) == len(COMPILE_HINT) + len(SCRIPT)


def test_ranges_are_ranges_of_the_served_bytes(hinted_port):
    served = COMPILE_HINT + SCRIPT
    n = len(COMPILE_HINT)
    for spec, expected in [
        ("bytes=0-9", served[0:10]),  # inside the hint
        (f"bytes={n - 4}-{n + 11}", served[n - 4 : n + 12]),  # across its end
        (f"bytes={n}-{n + 5}", served[n : n + 6]),  # the file's first bytes
        (f"bytes={n + 100}-", served[n + 100 :]),  # the rest, from inside the file
        ("bytes=-7", served[-7:]),  # the last bytes
    ]:
        status, headers, body = request(hinted_port, "/hinted/app.js", Range=spec)
        assert status == 206, spec
        assert body == expected, spec
        assert int(headers["Content-Length"]) == len(expected), spec


def _raw_get(url: str, path: str, **headers) -> tuple[int, dict, bytes]:
    parts = urlsplit(url)
    conn = http.client.HTTPConnection(parts.hostname, parts.port, timeout=180)
    try:
        conn.request("GET", path, headers={"Host": f"127.0.0.1:{parts.port}", **headers})
        r = conn.getresponse()
        return r.status, dict(r.getheaders()), r.read()
    finally:
        conn.close()


def _installed_files() -> dict[str, Path]:
    """Served address -> installed file, for a script of each of the page's routes."""
    import voila.paths
    from bokeh.util.paths import bokehjs_path
    from jupyterlab_server.config import get_federated_extensions
    from voila.utils import get_voila_labextensions_path

    template_static = next(
        Path(p) / "voila.js"
        for p in voila.paths.collect_static_paths(["voila", "nbconvert"], "lab")
        if (Path(p) / "voila.js").exists()
    )
    bokeh_ext = get_federated_extensions(get_voila_labextensions_path())["@bokeh/jupyter_bokeh"]
    entry = bokeh_ext["jupyterlab"]["_build"]["load"]
    return {
        "/voila/templates/lab/static/voila.js": template_static,
        "/voila/static/voila.js": template_static,  # the same file on Voila's own route
        "/voila/templates/lab/static/voila-style.js": template_static.with_name("voila-style.js"),
        f"{BOKEHJS_ROUTE}bokeh.min.js": bokehjs_path() / "js" / "bokeh.min.js",
        f"/voila/labextensions/@bokeh/jupyter_bokeh/{entry}": Path(bokeh_ext["ext_path"]) / entry,
    }


@pytest.mark.slow
@pytest.mark.parametrize("hint", [True, False])
def test_the_server_serves_the_page_scripts_with_the_hint(tmp_path, hint):
    files = _installed_files()
    args = () if hint else ("--StudykitVoila.script_compile_hint=False",)
    with (
        open(tmp_path / "server.log", "w") as log,
        server_process(
            NOTEBOOK, env={"STUDYKIT_STUDY": ""}, extra_args=args, log=log, timeout=180
        ) as server,
    ):
        prefix = COMPILE_HINT if hint else b""
        for path, installed in files.items():
            status, _, body = _raw_get(server.url, path)
            assert status == 200, path
            assert body == prefix + installed.read_bytes(), path
            # compressed (once per server, studykit.app.gzip_once): the same bytes inside
            status, headers, body = _raw_get(server.url, path, **{"Accept-Encoding": "gzip"})
            assert status == 200 and headers.get("Content-Encoding") == "gzip", path
            assert gzip.decompress(body) == prefix + installed.read_bytes(), path
        css = "/voila/templates/lab/static/index.css"
        status, _, body = _raw_get(server.url, css)
        assert status == 200 and not body.startswith(COMPILE_HINT)

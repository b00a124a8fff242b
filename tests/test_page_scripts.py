"""The workbook page loads only the front-end extensions it needs, announces their entry scripts,
and announces to later pages the extension scripts earlier pages asked for
(studykit.app.page_scripts). Measured effect: tests/bench/bench_app.py (README, performance)."""

from __future__ import annotations

import http.client
import json
import re
from pathlib import Path
from urllib.parse import urlsplit

import pytest

from studykit.app.page_scripts import (
    MAX_REMEMBERED,
    WORKBOOK_EXTENSIONS,
    ScriptMemory,
    entry_scripts,
    preload_tags,
)
from studykit.app.server import server_process

NOTEBOOK = Path(__file__).resolve().parents[1] / "notebooks" / "workbook.ipynb"
ROUTE = "/voila/labextensions/"


def test_memory_keeps_only_extension_scripts_with_a_version_tag():
    memory = ScriptMemory("/base/")
    good = "/base/voila/labextensions/@x/y/static/7.2a0c.js"
    assert memory.record(good, "v=2a0c5e")
    assert not memory.record(good, "v=2a0c5e")  # once
    assert memory.record("/base/voila/labextensions/@x/y/static/remoteEntry.12ab.js", "")
    refused = [
        ("/voila/labextensions/@x/y/static/8.js", ""),  # not below this server's base URL
        ("/base/voila/static/8.voila.js", ""),  # not an extension's file
        ("/base/voila/labextensions/@x/y/static/style.css", ""),  # not a script
        ('/base/voila/labextensions/@x/"><script>.js', ""),  # characters no bundle name has
        ("/base/voila/labextensions/@x/y/static/9.js", "v=12ab&token=secret"),
        ("/base/voila/labextensions/@x/y/static/9.js", "token=secret"),
    ]
    for path, query in refused:
        assert not memory.record(path, query), (path, query)
    assert memory.urls() == [
        good + "?v=2a0c5e",
        "/base/voila/labextensions/@x/y/static/remoteEntry.12ab.js",
    ]


def test_memory_is_bounded():
    memory = ScriptMemory("/")
    for i in range(MAX_REMEMBERED + 10):
        memory.record(f"/voila/labextensions/x/static/{i}.js", "")
    assert len(memory.urls()) == MAX_REMEMBERED


def test_preload_tags_escape_the_address():
    assert preload_tags(['/a/b.js?v=1&x="2"']) == (
        '<link rel="preload" as="script" href="/a/b.js?v=1&amp;x=&quot;2&quot;">'
    )


def test_entry_scripts_of_the_installed_extensions():
    from jupyterlab_server.config import get_federated_extensions
    from voila.utils import get_voila_labextensions_path

    paths = get_voila_labextensions_path()
    urls = entry_scripts("/", paths, [*WORKBOOK_EXTENSIONS, "not-installed"])
    installed = get_federated_extensions(paths)
    assert urls == [
        f"{ROUTE}{name}/{installed[name]['jupyterlab']['_build']['load']}"
        for name in WORKBOOK_EXTENSIONS
    ]
    assert all(
        re.fullmatch(r"/voila/labextensions/.+/static/remoteEntry\.[0-9a-f]+\.js", u) for u in urls
    )


def _get(url: str, path: str) -> tuple[int, str]:
    parts = urlsplit(url)
    conn = http.client.HTTPConnection(parts.hostname, parts.port, timeout=180)
    try:
        conn.request("GET", path, headers={"Host": f"127.0.0.1:{parts.port}"})
        r = conn.getresponse()
        return r.status, r.read().decode("utf-8", "replace")
    finally:
        conn.close()


def _head_preloads(page: str) -> list[str]:
    head = page.split("</head>", 1)[0]
    return re.findall(r'<link rel="preload" as="script" href="([^"]+)">', head)


def _page_extensions(page: str) -> list[str]:
    config = re.search(
        r'<script id="jupyter-config-data" type="application/json">(.*?)</script>', page, re.S
    )
    assert config, "no page configuration in the page"
    return [e["name"] for e in json.loads(config.group(1))["federated_extensions"]]


@pytest.mark.slow
def test_pages_announce_entry_scripts_and_what_earlier_pages_asked_for(tmp_path):
    from jupyterlab_server.config import get_federated_extensions
    from voila.utils import get_voila_labextensions_path

    installed = get_federated_extensions(get_voila_labextensions_path())
    manager = "@jupyter-widgets/jupyterlab-manager"
    static = Path(installed[manager]["ext_path"]) / "static"
    chunk = next(
        p.name for p in sorted(static.glob("*.js")) if re.fullmatch(r"\d+\.[0-9a-f]+\.js", p.name)
    )
    tag = chunk.split(".")[1]
    with (
        open(tmp_path / "server.log", "w") as log,
        server_process(NOTEBOOK, env={"STUDYKIT_STUDY": ""}, log=log, timeout=180) as server,
    ):
        status, first = _get(server.url, "/")
        assert status == 200
        assert sorted(_page_extensions(first)) == sorted(WORKBOOK_EXTENSIONS)
        entries = [
            f"{ROUTE}{n}/{installed[n]['jupyterlab']['_build']['load']}"
            for n in WORKBOOK_EXTENSIONS
        ]
        assert set(entries) <= set(_head_preloads(first))
        chunk_url = f"{ROUTE}{manager}/static/{chunk}?v={tag}"
        assert chunk_url not in _head_preloads(first)
        # what a page's code asks for, as the browser asks: then the next page announces it
        assert _get(server.url, chunk_url)[0] == 200
        assert _get(server.url, f"{ROUTE}{manager}/static/{chunk}?token=abc")[0] == 200
        assert _get(server.url, f"{ROUTE}{manager}/static/no-such-file.js")[0] == 404
        status, second = _get(server.url, "/")
        assert status == 200
        preloads = _head_preloads(second)
        assert chunk_url in preloads
        # announced after what the head asks for itself (its blocking style script first)
        head = second.split("</head>", 1)[0]
        assert "voila-style.js" in head
        assert head.index("voila-style.js") < head.index(chunk_url)
        assert not any("token=" in u or "no-such-file" in u for u in preloads)

"""The page's static files are compressed once per server and served as tornado's own
compression serves them: same bytes after decompression, same media types compressed, ranges
and clients without gzip answered by tornado (studykit.app.gzip_once). The compressed form is
gzip (RFC 1952), read back with Python's ``gzip`` module."""

from __future__ import annotations

import gzip
from unittest import mock

import pytest
import tornado.web
from static_server import request, serving

from studykit.app import gzip_once
from studykit.app.compile_hints import COMPILE_HINT, with_hint
from studykit.app.gzip_once import GzipOnce, compressible, with_gzip_once

SCRIPT = b"function f(x) { return x + 1; }\n" * 400
STYLE = b".a { color: red; }\n" * 300
FONT = bytes(range(256)) * 40


def test_with_gzip_once_keeps_the_public_mark_only_where_it_was():
    from jupyter_server.base.handlers import FileFindHandler

    public = with_gzip_once(FileFindHandler)
    assert public.__mro__[1] is GzipOnce
    assert getattr(public.get, "__allow_unauthenticated", False)
    assert not getattr(
        with_gzip_once(tornado.web.StaticFileHandler).get, "__allow_unauthenticated", False
    )


def test_compressible_follows_tornado():
    for media in tornado.web.GZipContentEncoding.CONTENT_TYPES:
        assert compressible(media)
    assert compressible("text/html; charset=UTF-8")
    assert not compressible("image/png") and not compressible("font/woff2")


GZ = {"Accept-Encoding": "gzip"}


@pytest.fixture(scope="module")
def port(tmp_path_factory):
    root = tmp_path_factory.mktemp("files")
    (root / "app.js").write_bytes(SCRIPT)
    (root / "style.css").write_bytes(STYLE)
    (root / "font.woff2").write_bytes(FONT)
    path = {"path": str(root)}
    app = tornado.web.Application(
        [
            (r"/once/(.*)", with_gzip_once(tornado.web.StaticFileHandler), path),
            (r"/hinted/(.*)", with_gzip_once(with_hint(tornado.web.StaticFileHandler)), path),
            (r"/tornado/(.*)", tornado.web.StaticFileHandler, path),
        ],
        compress_response=True,
    )
    with serving(app) as p:
        yield p


def test_compressed_as_tornado_compresses(port):
    for name, content in (("app.js", SCRIPT), ("style.css", STYLE)):
        ours, theirs = request(port, f"/once/{name}", **GZ), request(port, f"/tornado/{name}", **GZ)
        assert ours[0] == theirs[0] == 200
        assert ours[1]["Content-Encoding"] == theirs[1]["Content-Encoding"] == "gzip"
        assert gzip.decompress(ours[2]) == gzip.decompress(theirs[2]) == content
        assert ours[1]["Content-Type"] == theirs[1]["Content-Type"]
        assert "Accept-Encoding" in ours[1]["Vary"]
        assert int(ours[1]["Content-Length"]) == len(ours[2])
        assert ours[1]["Etag"] == theirs[1]["Etag"]


def test_compressed_once(port):
    made = []
    real = gzip_once.gzip.compress

    def counting(data, **kwargs):
        made.append(len(data))
        return real(data, **kwargs)

    gzip_once.CACHE._bodies.clear()
    with mock.patch.object(gzip_once.gzip, "compress", counting):
        bodies = {request(port, "/once/app.js", **GZ)[2] for _ in range(3)}
    assert len(bodies) == 1
    assert made == [len(SCRIPT)]


def test_hinted_scripts_are_compressed_with_the_hint(port):
    assert gzip.decompress(request(port, "/hinted/app.js", **GZ)[2]) == COMPILE_HINT + SCRIPT
    assert gzip.decompress(request(port, "/hinted/style.css", **GZ)[2]) == STYLE


def test_other_answers_are_tornados(port):
    status, headers, body = request(port, "/once/app.js")  # no gzip asked for
    assert "Content-Encoding" not in headers and body == SCRIPT
    asked = {**GZ, "Range": "bytes=0-9"}
    ranged, theirs = (
        request(port, "/once/app.js", **asked),
        request(port, "/tornado/app.js", **asked),
    )
    assert ranged[0] == theirs[0] == 206
    assert ranged[2] == theirs[2]  # (tornado compresses a range's bytes)
    assert _decoded(ranged) == SCRIPT[:10]
    status, headers, body = request(port, "/once/font.woff2", **GZ)
    assert "Content-Encoding" not in headers and body == FONT
    assert request(port, "/once/nothing.js", **GZ)[0] == 404


def test_not_modified(port):
    etag = request(port, "/once/app.js", **GZ)[1]["Etag"]
    status, _, body = request(port, "/once/app.js", **GZ, **{"If-None-Match": etag})
    assert status == 304 and body == b""


def test_head_gives_the_compressed_size(port):
    body = request(port, "/once/style.css", **GZ)[2]
    headers = request(port, "/once/style.css", method="HEAD", **GZ)[1]
    assert int(headers["Content-Length"]) == len(body)


def test_the_cache_is_bounded():
    cache = gzip_once._Cache(3)
    for i in range(5):
        assert cache.get(("k", i), lambda i=i: bytes([i])) == bytes([i])
    assert len(cache) == 3
    # the most recently used stay: 2 is used again, then 5 added, so 3 is dropped
    cache.get(("k", 2), lambda: b"never")
    cache.get(("k", 5), lambda: b"\x05")
    assert cache.get(("k", 3), lambda: b"made again") == b"made again"
    assert cache.get(("k", 2), lambda: b"never") == b"\x02"


def _decoded(response) -> bytes:
    _, headers, body = response
    return gzip.decompress(body) if headers.get("Content-Encoding") == "gzip" else body

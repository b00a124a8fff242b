"""The page's static files are compressed once per server and served as tornado's own
compression serves them: same bytes after decompression, same media types compressed, ranges
and clients without gzip answered by tornado (studykit.app.gzip_once). The compressed form is
gzip (RFC 1952), read back with Python's ``gzip`` module."""

from __future__ import annotations

import gzip
import tempfile
from pathlib import Path
from unittest import mock

import tornado.testing
import tornado.web

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


class GzipOnceTest(tornado.testing.AsyncHTTPTestCase):
    def get_app(self):
        self._dir = tempfile.TemporaryDirectory()
        root = Path(self._dir.name)
        (root / "app.js").write_bytes(SCRIPT)
        (root / "style.css").write_bytes(STYLE)
        (root / "font.woff2").write_bytes(FONT)
        path = {"path": str(root)}
        return tornado.web.Application(
            [
                (r"/once/(.*)", with_gzip_once(tornado.web.StaticFileHandler), path),
                (r"/hinted/(.*)", with_gzip_once(with_hint(tornado.web.StaticFileHandler)), path),
                (r"/tornado/(.*)", tornado.web.StaticFileHandler, path),
            ],
            compress_response=True,
        )

    def tearDown(self):
        super().tearDown()
        self._dir.cleanup()

    def _get(self, path, **headers):
        return self.fetch(path, headers=headers, decompress_response=False)

    def test_compressed_as_tornado_compresses(self):
        for name, content in (("app.js", SCRIPT), ("style.css", STYLE)):
            ours = self._get(f"/once/{name}", **{"Accept-Encoding": "gzip"})
            theirs = self._get(f"/tornado/{name}", **{"Accept-Encoding": "gzip"})
            assert ours.code == theirs.code == 200
            assert ours.headers["Content-Encoding"] == theirs.headers["Content-Encoding"] == "gzip"
            assert gzip.decompress(ours.body) == gzip.decompress(theirs.body) == content
            assert ours.headers["Content-Type"] == theirs.headers["Content-Type"]
            assert "Accept-Encoding" in ours.headers["Vary"]
            assert int(ours.headers["Content-Length"]) == len(ours.body)
            assert ours.headers["Etag"] == theirs.headers["Etag"]

    def test_compressed_once(self):
        made = []
        real = gzip_once.gzip.compress

        def counting(data, **kwargs):
            made.append(len(data))
            return real(data, **kwargs)

        with mock.patch.object(gzip_once.gzip, "compress", counting):
            bodies = {
                self._get("/once/app.js", **{"Accept-Encoding": "gzip"}).body for _ in range(3)
            }
        assert len(bodies) == 1
        assert made == [len(SCRIPT)]

    def test_hinted_scripts_are_compressed_with_the_hint(self):
        r = self._get("/hinted/app.js", **{"Accept-Encoding": "gzip"})
        assert gzip.decompress(r.body) == COMPILE_HINT + SCRIPT
        css = self._get("/hinted/style.css", **{"Accept-Encoding": "gzip"})
        assert gzip.decompress(css.body) == STYLE

    def test_other_answers_are_tornados(self):
        plain = self._get("/once/app.js")  # no gzip asked for
        assert "Content-Encoding" not in plain.headers and plain.body == SCRIPT
        asked = {"Accept-Encoding": "gzip", "Range": "bytes=0-9"}
        ranged, theirs = self._get("/once/app.js", **asked), self._get("/tornado/app.js", **asked)
        assert ranged.code == theirs.code == 206
        assert ranged.body == theirs.body  # (tornado compresses a range's bytes)
        assert _decoded(ranged) == SCRIPT[:10]
        font = self._get("/once/font.woff2", **{"Accept-Encoding": "gzip"})
        assert "Content-Encoding" not in font.headers and font.body == FONT
        missing = self._get("/once/nothing.js", **{"Accept-Encoding": "gzip"})
        assert missing.code == 404

    def test_not_modified(self):
        first = self._get("/once/app.js", **{"Accept-Encoding": "gzip"})
        again = self._get(
            "/once/app.js", **{"Accept-Encoding": "gzip", "If-None-Match": first.headers["Etag"]}
        )
        assert again.code == 304 and again.body == b""

    def test_head_gives_the_compressed_size(self):
        body = self._get("/once/style.css", **{"Accept-Encoding": "gzip"}).body
        head = self.fetch("/once/style.css", method="HEAD", headers={"Accept-Encoding": "gzip"})
        assert int(head.headers["Content-Length"]) == len(body)


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
    if response.headers.get("Content-Encoding") == "gzip":
        return gzip.decompress(response.body)
    return response.body

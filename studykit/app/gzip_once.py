"""The page's static files compressed once per server, not on every request.

The server compresses its answers (tornado's ``compress_response``): BokehJS goes from 1.3 MB
to about 0.35 MB on the wire. Tornado compresses each answer as it is sent, so every page
cost the server the compression of some 4.5 MB of scripts and styles (about 100 files): the
server is one process, so the page's files queued behind each other. :class:`GzipOnce`
(mixed into the server's static-file handlers) keeps each file's compressed bytes (at most
:data:`MAX_CACHED` files of up to :data:`MAX_FILE_BYTES` each, the least recently used
dropped first) and serves them to every page that accepts gzip.

The answer is what tornado's compression gives: the same media types compressed
(``GZipContentEncoding.CONTENT_TYPES`` and ``text/*``), the same level, ``Vary:
Accept-Encoding``; a request for a range, a client without gzip, a larger file or another
media type gets tornado's own answer.

Measured with ``tests/bench/bench_app.py`` (README, performance).
"""

from __future__ import annotations

import gzip
import os
import threading
from collections import OrderedDict

import tornado.web

__all__ = ["MAX_CACHED", "MAX_FILE_BYTES", "GzipOnce", "compressible", "with_gzip_once"]

#: files whose compressed bytes are kept (the workbook's page asks for about 100)
MAX_CACHED = 256
#: larger files are compressed per request, as tornado does (the largest page script: 1.3 MB)
MAX_FILE_BYTES = 8 * 1024 * 1024
_LEVEL = tornado.web.GZipContentEncoding.GZIP_LEVEL


def compressible(content_type: str | None) -> bool:
    """Whether tornado's compression compresses this media type (``charset`` ignored).

    Examples
    --------
    >>> compressible("application/javascript"), compressible("text/css; charset=UTF-8")
    (True, True)
    >>> compressible("font/woff2"), compressible(None)
    (False, False)
    """
    if not content_type:
        return False
    media = content_type.split(";", 1)[0].strip().lower()
    return media.startswith("text/") or media in tornado.web.GZipContentEncoding.CONTENT_TYPES


class _Cache:
    """Compressed bodies by (handler class, path, modification time, size); bounded LRU."""

    def __init__(self, limit: int) -> None:
        self.limit = limit
        self._bodies: OrderedDict[tuple, bytes] = OrderedDict()
        self._lock = threading.Lock()

    def get(self, key: tuple, make) -> bytes:
        with self._lock:
            if key in self._bodies:
                self._bodies.move_to_end(key)
                return self._bodies[key]
        body = make()
        with self._lock:
            self._bodies[key] = body
            while len(self._bodies) > self.limit:
                self._bodies.popitem(last=False)
        return body

    def __len__(self) -> int:
        return len(self._bodies)


CACHE = _Cache(MAX_CACHED)


class GzipOnce(tornado.web.StaticFileHandler):
    """Mix-in for a :class:`tornado.web.StaticFileHandler`: a compressible file (module
    docstring) goes to a client that accepts gzip as its bytes compressed once per server
    (``get_content``'s bytes: what the handler serves, e.g. with the compile hint of
    :mod:`studykit.app.compile_hints`)."""

    async def get(self, path: str, include_body: bool = True) -> None:
        headers = self.request.headers
        if "gzip" not in headers.get("Accept-Encoding", "") or headers.get("Range"):
            return await super().get(path, include_body)
        self.path = self.parse_url_path(path)
        absolute_path = self.get_absolute_path(self.root, self.path)
        self.absolute_path = self.validate_absolute_path(self.root, absolute_path)
        if self.absolute_path is None:
            return None
        stat = os.stat(self.absolute_path)
        if stat.st_size > MAX_FILE_BYTES or not compressible(self.get_content_type()):
            return await super().get(path, include_body)
        self.modified = self.get_modified_time()
        self.set_headers()
        if self.should_return_304():
            self.set_status(304)
            return None
        key = (type(self), self.absolute_path, stat.st_mtime_ns, stat.st_size)
        body = CACHE.get(key, lambda: self._compressed(self.absolute_path))
        self.set_header("Content-Encoding", "gzip")  # tornado then compresses it no further
        if not self.settings.get("compress_response"):  # else tornado's transform adds it
            self.set_header("Vary", "Accept-Encoding")
        self.clear_header("Accept-Ranges")  # ranges are answered uncompressed (above)
        if include_body:
            self.write(body)
        else:
            self.set_header("Content-Length", len(body))
        return None

    @classmethod
    def _compressed(cls, abspath: str) -> bytes:
        content = cls.get_content(abspath)
        data = content if isinstance(content, bytes) else b"".join(content)
        return gzip.compress(data, compresslevel=_LEVEL, mtime=0)


_MADE: dict[type, type] = {}
_PUBLIC = "__allow_unauthenticated"  # jupyter_server's mark of a public method


def with_gzip_once(handler: type) -> type:
    """``handler`` (a static-file handler class) with :class:`GzipOnce` first (one class per
    handler). A handler whose ``get`` jupyter_server marks public (its extensions' files,
    ``allow_unauthenticated``) keeps the mark; no other ``get`` gains it.

    Examples
    --------
    >>> cls = with_gzip_once(tornado.web.StaticFileHandler)
    >>> cls.__mro__[1] is GzipOnce, with_gzip_once(cls) is cls
    (True, True)
    >>> getattr(cls.get, _PUBLIC, False)
    False
    """
    if issubclass(handler, GzipOnce):
        return handler
    if handler not in _MADE:

        async def get(self, path: str, include_body: bool = True) -> None:
            return await GzipOnce.get(self, path, include_body)

        if getattr(handler.get, _PUBLIC, False):
            setattr(get, _PUBLIC, True)
        name = f"GzipOnce{handler.__name__}"
        _MADE[handler] = type(name, (GzipOnce, handler), {"get": get, "__module__": __name__})
    return _MADE[handler]

"""Scripts served with a compile hint, so the browser compiles them off the page's main thread.

A workbook page runs about 4 MB of JavaScript (Voila's front end, the widget manager, BokehJS).
Chromium's engine compiles a script's top level while it downloads, on a background thread,
but each function only when it is first called, on the page's main thread: the page's busiest
resource (a second visitor's page was busy about 1.1 s of its 1.4 s). A script whose first line
is the comment :data:`COMPILE_HINT` (``//# allFunctionsCalledOnLoad``, V8's explicit compile
hint) has all its functions compiled on the background thread instead. These scripts do call
most of their functions while the page starts, so the hint moves that work off the main
thread. The cost: the functions the page never calls are compiled too (the page's JavaScript
heap 28 MB against 22 MB without the hint, the demo study's landing view in Chromium).

:class:`HintedScripts` (mixed into the server's static-file handlers of Voila's scripts, the
extensions' scripts and BokehJS) serves every ``.js`` file with that line in front. Nothing
else changes: the scripts' code is byte for byte the installed file; a browser without the
hint reads a comment. Sizes, ranges and the ``ETag`` follow the served bytes. Line numbers in
a browser's console are one more than in the file (source maps of these minified bundles are
not shipped with the packages).

Measured with ``tests/bench/bench_app.py`` (README, performance).
"""

from __future__ import annotations

from collections.abc import Generator, Iterator

import tornado.web

__all__ = ["COMPILE_HINT", "HintedScripts", "hinted", "is_script", "with_hint"]

#: the first line of every script served (V8's explicit compile hint, a comment elsewhere)
COMPILE_HINT = b"//# allFunctionsCalledOnLoad\n"


def is_script(path: str) -> bool:
    """True for the files served with the hint: JavaScript by name (``.js``, ``.mjs``).

    Examples
    --------
    >>> is_script("/x/voila.js"), is_script("/x/bokeh.min.js"), is_script("/x/index.css")
    (True, True, False)
    >>> is_script("/x/remoteEntry.MJS")
    True
    """
    return path.lower().endswith((".js", ".mjs"))


def hinted(content: bytes) -> bytes:
    """``content`` with :data:`COMPILE_HINT` in front.

    Examples
    --------
    >>> hinted(b"var a = 1;")
    b'//# allFunctionsCalledOnLoad\\nvar a = 1;'
    """
    return COMPILE_HINT + content


def _ranged(data: bytes, start: int | None, end: int | None) -> bytes:
    return data[(start or 0) : end]


class HintedScripts(tornado.web.StaticFileHandler):
    """Mix-in for a :class:`tornado.web.StaticFileHandler`: ``.js`` files are served with
    :data:`COMPILE_HINT` in front (module docstring); every other file as it is.

    ``get_content`` gives the bytes from ``start`` to ``end`` of the served content (the hint
    included), ``get_content_size`` its size; the ``ETag`` (tornado hashes ``get_content``)
    follows: the hashes tornado keeps per file are kept apart from the plain handlers'."""

    _static_hashes: dict[str, str | None] = {}  # noqa: RUF012 - tornado's per-class cache

    def get_content_size(self) -> int:
        size = super().get_content_size()
        return size + len(COMPILE_HINT) if is_script(self.absolute_path) else size

    @classmethod
    def get_content(
        cls, abspath: str, start: int | None = None, end: int | None = None
    ) -> Generator[bytes, None, None]:
        if not is_script(abspath):
            yield from _as_chunks(super().get_content(abspath, start, end))
            return
        n = len(COMPILE_HINT)
        if start is None or start < n:  # part of the hint, then the file from its start
            yield _ranged(COMPILE_HINT, start, end)
            if end is not None and end <= n:
                return
            start_in_file = None
        else:
            start_in_file = start - n
        end_in_file = None if end is None else end - n
        yield from _as_chunks(super().get_content(abspath, start_in_file, end_in_file))


def _as_chunks(content) -> Iterator[bytes]:
    if isinstance(content, bytes):
        yield content
    else:
        yield from content


_HINTED: dict[type, type] = {}


def with_hint(handler: type) -> type:
    """``handler`` (a static-file handler class) serving scripts with the hint: a subclass
    with :class:`HintedScripts` first (one per class, so tornado's per-class caches hold).

    Examples
    --------
    >>> cls = with_hint(tornado.web.StaticFileHandler)
    >>> cls.__mro__[1] is HintedScripts, with_hint(tornado.web.StaticFileHandler) is cls
    (True, True)
    """
    if issubclass(handler, HintedScripts):
        return handler
    if handler not in _HINTED:
        _HINTED[handler] = type(f"Hinted{handler.__name__}", (HintedScripts, handler), {})
    return _HINTED[handler]

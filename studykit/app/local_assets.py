"""Icons served by the workbook server itself, so no page request leaves the machine.

Voila's page template links the Font Awesome 5 style sheets (the icon font of the ipywidgets
buttons) from a public CDN. The workbook server (:mod:`studykit.app.server`) serves the same
files from the ``fontawesome-free`` package under :data:`FONTAWESOME_ROUTE` and rewrites those
two links in the page (:func:`localise_links`); BokehJS is served the same way
(:mod:`studykit.app.bokeh_assets`). The page's fonts are the system's (``theme.CSS_FONT_STACK``):
no web font is fetched.

Examples
--------
>>> html = ('<link rel="stylesheet" href="https://cdn.example.net/npm/@fortawesome/'
...         'fontawesome-free@^5/css/all.min.css" type="text/css" />')
>>> localise_links(html, "/")
'<link rel="stylesheet" href="/studykit/fontawesome/5/css/all.min.css" type="text/css" />'
"""

from __future__ import annotations

import os
import re
from functools import lru_cache
from pathlib import Path

import tornado.web

__all__ = ["FONTAWESOME_ROUTE", "FontAwesomeHandler", "fontawesome_dir", "localise_links"]

#: Where the server answers with the Font Awesome files (major version 5, as the page asks).
FONTAWESOME_ROUTE = "/studykit/fontawesome/5/"
#: A link to the Font Awesome Free 5 files on any remote host (the style sheet path is kept).
_REMOTE = re.compile(
    r'href="https?://[^"]*/@fortawesome/fontawesome-free@[^/"]*/'
    r'(css/[A-Za-z0-9_.-]+)"'
)
_SERVED = ("css", "webfonts")


@lru_cache(maxsize=1)
def fontawesome_dir() -> Path | None:
    """The folder with ``css/`` and ``webfonts/`` of the installed ``fontawesome-free``, or None.

    The package is a folder of static files (not importable), found through its metadata.
    """
    from importlib import metadata

    try:
        dist = metadata.distribution("fontawesome-free")
    except metadata.PackageNotFoundError:
        return None
    folder = Path(str(dist.locate_file("fontawesome-free/static/fontawesome_free")))
    return folder if (folder / "css" / "all.min.css").is_file() else None


def localise_links(html: str, base_url: str = "/") -> str:
    """``html`` with every remote Font Awesome 5 style sheet link pointing at this server.

    Left as it is when the package is not installed (then the links stay remote, as before).
    """
    if fontawesome_dir() is None:
        return html
    base = base_url.rstrip("/") + FONTAWESOME_ROUTE
    return _REMOTE.sub(lambda m: f'href="{base}{m.group(1)}"', html)


class FontAwesomeHandler(tornado.web.StaticFileHandler):
    """Serves the style sheets and web fonts of Font Awesome Free 5; anything else is a 404."""

    def validate_absolute_path(self, root, absolute_path):
        rel = os.path.relpath(absolute_path, root).split(os.sep)
        if len(rel) != 2 or rel[0] not in _SERVED:
            raise tornado.web.HTTPError(404)
        return super().validate_absolute_path(root, absolute_path)

    @classmethod
    def get_cache_time(cls, path, modified, mime_type):
        # the installed package's files do not change while the server runs
        return 7 * 24 * 3600

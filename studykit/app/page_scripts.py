"""The front-end extensions a workbook page loads, and their scripts announced in its ``<head>``.

Voila's page loads each JupyterLab front-end extension it finds installed (its
``remoteEntry`` script), and each of those loads its parts (webpack chunks) one round after
the other, as the code asks for them: on this project's machine, a second visitor's page
waited for four such rounds (about 0.3 s of its 1.9 s). Here:

* **Only the extensions the workbook needs** (:data:`WORKBOOK_EXTENSIONS`: the widget manager,
  the controls, the Bokeh widget) are loaded, unless ``VoilaConfiguration.extension_allowlist``
  or ``extension_denylist`` is configured: not, say, a syntax highlighter (Voila strips the
  code) or whatever else a user has installed for JupyterLab.
* **Their entry scripts are announced** at the top of every page (``<link rel="preload">``):
  the browser fetches them while the kernel still runs the notebook.
* **The parts the pages asked for are announced to the next pages**, at the end of the page's
  ``<head>`` (:class:`ScriptMemory`): the extensions' file route records every script it served
  to a page (a file that exists, its ``?v=`` version tag kept, at most :data:`MAX_REMEMBERED`), so
  a later visitor's browser fetches them all at once, before the code asks. Nothing is
  announced that no page asked for (a chunk the workbook does not use is never fetched) and
  no guess of the bundles' layout is made, so a new version of an extension only changes
  what is remembered.

Measured with ``tests/bench/bench_app.py`` (README, performance).
"""

from __future__ import annotations

import html
import re
from collections.abc import Iterable

from jupyter_server.base.handlers import FileFindHandler
from jupyter_server.utils import url_path_join

__all__ = [
    "LABEXTENSIONS_ROUTE",
    "MAX_REMEMBERED",
    "WORKBOOK_EXTENSIONS",
    "RememberingFileFindHandler",
    "ScriptMemory",
    "before_head_end",
    "entry_scripts",
]

#: the front-end extensions the workbook's page uses (ipywidgets 8: Voila's own widget manager)
WORKBOOK_EXTENSIONS = (
    "@jupyter-widgets/jupyterlab-manager",
    "@voila-dashboards/widgets-manager8",
    "@bokeh/jupyter_bokeh",
)
#: Voila's route of the front-end extensions' files (below the server's base URL)
LABEXTENSIONS_ROUTE = "voila/labextensions/"
#: at most this many scripts are remembered (the workbook's page asked for 16)
MAX_REMEMBERED = 64
# a file name of the extensions' bundles, and the version tag webpack adds to a chunk's address
_SCRIPT_PATH = re.compile(r"[A-Za-z0-9@_./-]+\.js")
_VERSION_TAG = re.compile(r"v=[0-9a-f]{6,64}")


def preload_tags(urls: Iterable[str]) -> str:
    """``<link rel="preload" as="script">`` tags for ``urls`` (escaped).

    >>> preload_tags(["/voila/labextensions/a/static/remoteEntry.1f.js"])
    '<link rel="preload" as="script" href="/voila/labextensions/a/static/remoteEntry.1f.js">'
    """
    return "".join(
        f'<link rel="preload" as="script" href="{html.escape(u, quote=True)}">' for u in urls
    )


_HEAD_END = re.compile(r"</head\s*>", re.IGNORECASE)


def before_head_end(page: str, snippet: str) -> tuple[str, bool]:
    """``page`` with ``snippet`` right before its ``</head>`` tag, and whether it was found.

    The remembered scripts are announced there, after what the page's head asks for itself
    (its styles and Voila's blocking style script): a browser fetches at most six files at
    once from one server, in the order it finds them, so those come first.

    >>> before_head_end("<head><link></head><body>", "<x>")
    ('<head><link><x></head><body>', True)
    >>> before_head_end("<body>", "<x>")
    ('<body>', False)
    """
    m = _HEAD_END.search(page)
    if not m:
        return page, False
    return page[: m.start()] + snippet + page[m.start() :], True


class ScriptMemory:
    """The extension scripts pages of this server asked for, in the order first asked.

    >>> memory = ScriptMemory("/")
    >>> memory.record("/voila/labextensions/x/static/7.2a0c5e.js", "v=2a0c5e")
    True
    >>> memory.record("/voila/labextensions/x/static/7.2a0c5e.js", "v=2a0c5e")  # known already
    False
    >>> memory.record("/voila/labextensions/x/static/8.js", "token=abc")  # not a version tag
    False
    >>> memory.urls()
    ['/voila/labextensions/x/static/7.2a0c5e.js?v=2a0c5e']
    """

    def __init__(self, base_url: str, limit: int = MAX_REMEMBERED) -> None:
        self.prefix = url_path_join(base_url, LABEXTENSIONS_ROUTE)
        self.limit = limit
        self._urls: dict[str, None] = {}  # insertion-ordered set

    def record(self, path: str, query: str) -> bool:
        """Remember a script served to a page (``path`` below :data:`LABEXTENSIONS_ROUTE`,
        ``query`` empty or its version tag); True when it was new."""
        if not path.startswith(self.prefix) or not _SCRIPT_PATH.fullmatch(path):
            return False
        if query and not _VERSION_TAG.fullmatch(query):
            return False
        url = f"{path}?{query}" if query else path
        if url in self._urls or len(self._urls) >= self.limit:
            return False
        self._urls[url] = None
        return True

    def urls(self) -> list[str]:
        return list(self._urls)


def entry_scripts(base_url: str, labextensions_path: list[str], names: Iterable[str]) -> list:
    """The addresses of the entry scripts (``remoteEntry``) of the installed extensions
    ``names`` (those not installed are left out), as Voila's page asks for them."""
    from jupyterlab_server.config import get_federated_extensions

    installed = get_federated_extensions(labextensions_path)
    urls = []
    for name in names:
        load = installed.get(name, {}).get("jupyterlab", {}).get("_build", {}).get("load")
        if load and _SCRIPT_PATH.fullmatch(load):
            urls.append(url_path_join(base_url, LABEXTENSIONS_ROUTE, name, load))
    return urls


class RememberingFileFindHandler(FileFindHandler):
    """Voila's handler of the extensions' files, telling :class:`ScriptMemory` (the
    ``memory`` argument) which scripts it served."""

    def initialize(self, *args, memory: ScriptMemory | None = None, **kwargs) -> None:
        super().initialize(*args, **kwargs)
        self._memory = memory

    def on_finish(self) -> None:
        if (
            self._memory is not None
            and self.request.method == "GET"
            and self.get_status() in (200, 304)
        ):
            self._memory.record(self.request.path, self.request.query)
        super().on_finish()

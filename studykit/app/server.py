"""The Voila server that hosts the workbook, with BokehJS served once as a static file.

``python -m studykit.app.server [voila options] NOTEBOOK`` behaves like ``voila`` with these
additions:

* ``/studykit/bokehjs/<bokeh version>/<file>`` serves BokehJS from the installed ``bokeh``
  package (gzip-compressed, cacheable), so pages need neither a CDN nor 1-8 MB of inline
  JavaScript. The workbook kernel finds the address in the ``STUDYKIT_BOKEHJS_URL`` environment
  variable (set here, inherited by every kernel) and writes one ``<script src>`` tag.
* ``/studykit/fontawesome/5/css|webfonts/<file>`` serves the icon font of the widget buttons
  from the installed ``fontawesome-free`` package, and the page's links to a CDN copy are
  rewritten to it (:mod:`studykit.app.local_assets`): no page request leaves the machine.
* ``STUDYKIT_SERVE_TOKEN`` in the environment, when set, becomes ``Voila.token`` (Jupyter
  server token authentication: pages without ``?token=`` are refused). The token never reaches
  a log line or a kernel (:mod:`studykit.app.server_guard`).
* Only the server's own names are answered (``Host``: loopback names, the bound address,
  ``StudykitVoila.allow_hosts``) and only same-origin requests, on every route and the kernel
  websocket: a page of another site cannot drive the workbook, also not by DNS rebinding.
* The page sets the ``_xsrf`` cookie that Voila's close beacon sends back, so the kernel of a
  closed page is shut down; kernels with no page connected are shut down after
  ``StudykitVoila.kernel_idle_minutes`` idle (Jupyter's kernel culler).
* Pages that need a new kernel are started at most ``StudykitVoila.concurrent_page_starts``
  at a time (the others wait their turn), and the executor waits up to
  :data:`IOPUB_TIMEOUT` s for a cell's output, so many pages opened at once all render.
* The kernel websocket accepts messages up to the upload limit plus headroom, so an upload of
  up to :data:`studykit.app.server_guard.MAX_UPLOAD_BYTES` reaches the kernel (tornado's default cap
  is 10 MiB); the page refuses larger files before sending them, with a message.
* SIGINT and SIGTERM stop the server whatever the parent did with them (ignored or blocked),
  and with ``STUDYKIT_PARENT_PID`` set the server stops when that process goes away.
* The kernel pool is refilled once the kernel just handed to a page has run the workbook and
  its page had :data:`REFILL_PAUSE_S` to load (Voila refills 1 s after handing it out, while
  that kernel still imports and builds: the two then share the cores and the page waits
  longer). A page that arrives while the
  pool is empty gets a kernel started for it, as without the pool.
* Kernels use one BLAS thread (``OPENBLAS_NUM_THREADS=1`` and the like, unless set already):
  a kernel serves one page on a machine shared by every page, and on 2 busy cores the
  400-point Gauss-Legendre rule behind the constant d3 (an eigenvalue problem, computed once per
  process) took 1.7-2.5 s with OpenBLAS's threads against 0.03 s with one; the numbers are the
  same bits.
* Kernels start without the debugger back end (``debugpy``, which Voila's pages cannot use):
  ``python -m studykit.app.kernel`` in place of ``-m ipykernel_launcher``
  (:mod:`studykit.app.kernel`), about 16 MB less per kernel.
* The page loads only the front-end extensions the workbook uses, announces their entry
  scripts in its ``<head>``, and announces the extension scripts earlier pages asked for, so
  the browser fetches them at once instead of one round after the other
  (:mod:`studykit.app.page_scripts`).
* The page's scripts are served with V8's compile hint in front (``//#
  allFunctionsCalledOnLoad``), so the browser compiles their functions on a background
  thread rather than on the page's main thread (:mod:`studykit.app.compile_hints`;
  ``StudykitVoila.script_compile_hint``).
* ``rfc3987_syntax`` is not imported: ``jsonschema`` imports it, when installed, only to check
  the "iri" string format (which no schema of the server uses), and it builds a grammar on import
  that took 1-2.8 s of the server's start.
"""

# ruff: noqa: E402 - one statement runs before the third-party imports (see below)
from __future__ import annotations

import asyncio
import contextlib
import os
import signal
import socket
import subprocess
import sys
import time
import urllib.error
import urllib.request
from dataclasses import dataclass

# before anything imports jsonschema (voila, jupyter_server): see the module docstring
sys.modules.setdefault("rfc3987_syntax", None)  # type: ignore[arg-type]

import bokeh
import tornado.ioloop
import tornado.web
from bokeh.util.paths import bokehjs_path
from jupyter_client.kernelspec import KernelSpecManager
from jupyter_server.utils import url_path_join
from traitlets import Bool, Float, Integer, Unicode
from voila.app import Voila
from voila.static_file_handler import MultiStaticFileHandler, TemplateStaticFileHandler
from voila.tornado.handler import TornadoVoilaHandler

from studykit.app.compile_hints import with_hint
from studykit.app.gzip_once import with_gzip_once
from studykit.app.kernel import WorkbookKernelSpecs
from studykit.app.local_assets import (
    FONTAWESOME_ROUTE,
    FontAwesomeHandler,
    fontawesome_dir,
    localise_links,
)
from studykit.app.page_scripts import (
    LABEXTENSIONS_ROUTE,
    WORKBOOK_EXTENSIONS,
    RememberingFileFindHandler,
    ScriptMemory,
    before_head_end,
    entry_scripts,
    preload_tags,
)
from studykit.app.server_guard import (
    MAX_UPLOAD_BYTES,
    HostPolicy,
    inject_into_head,
    install_redaction,
    log_request,
    request_rule,
    restore_stop_signals,
    strip_token,
    upload_guard_script,
)
from studykit.runtime import BLAS_THREAD_VARS, one_blas_thread

ENV_BOKEHJS_URL = "STUDYKIT_BOKEHJS_URL"
ENV_TOKEN = "STUDYKIT_SERVE_TOKEN"  # set by `studykit serve` for non-loopback addresses
ENV_PARENT_PID = "STUDYKIT_PARENT_PID"  # stop when this process goes away
BOKEHJS_FILES = ("bokeh.min.js", "bokeh-widgets.min.js", "bokeh-tables.min.js")
BOKEHJS_ROUTE = f"/studykit/bokehjs/{bokeh.__version__}/"
WEBSOCKET_MAX_MESSAGE = MAX_UPLOAD_BYTES * 2 + 1024 * 1024  # one message carries a whole upload
DEFAULT_KERNEL_IDLE_MINUTES = 10.0
IOPUB_TIMEOUT = 120  # s a cell's output may take after its reply (nbclient's default is 4 s)
REFILL_WAIT_S = 120.0  # the pool is refilled at the latest this long after a kernel was taken
REFILL_PAUSE_S = 4.0  # and this long after that kernel ran the workbook (its page loads meanwhile)
#: kernels use one BLAS/OpenMP thread unless these are set already (module docstring)
KERNEL_THREAD_VARS = BLAS_THREAD_VARS
_SLOTS = "studykit_page_start_slots"
_HEAD_SNIPPET = "studykit_head_snippet"
_SCRIPT_MEMORY = "studykit_script_memory"
#: Voila's handlers of its front end's files (its scripts get the compile hint)
_SCRIPT_HANDLERS = (MultiStaticFileHandler, TemplateStaticFileHandler)


class BokehJSHandler(tornado.web.StaticFileHandler):
    """Serves only the listed BokehJS bundles; every other name is a 404. The server serves
    them compressed once (:mod:`studykit.app.gzip_once`) and with the compile hint
    (:mod:`studykit.app.compile_hints`) unless ``StudykitVoila.script_compile_hint`` is off,
    like the page's other files."""

    def validate_absolute_path(self, root, absolute_path):
        if os.path.basename(absolute_path) not in BOKEHJS_FILES:
            raise tornado.web.HTTPError(404)
        return super().validate_absolute_path(root, absolute_path)

    @classmethod
    def get_cache_time(cls, path, modified, mime_type):
        # the URL carries the bokeh version, so the file never changes under it
        return 365 * 24 * 3600


class WorkbookPageHandler(TornadoVoilaHandler):
    """Voila's page handler, with three changes.

    * It sets the ``_xsrf`` cookie. Voila's page reads that cookie on close and sends it with
      its kernel-shutdown request (``navigator.sendBeacon``); a page rendered from a preheated
      kernel never touched the XSRF token, so no cookie was set and every shutdown was refused
      with "_xsrf argument missing" (the XSRF check itself stays on).
    * Once authenticated, the token is taken out of the request, so Voila does not hand it to
      the kernel (``QUERY_STRING``, ``VOILA_REQUEST_URL``) or the log.
    * Pages wait for one of a few start slots before a kernel is started and the notebook run,
      and the upload guard script is put into the page's ``<head>``.
    """

    _client_gone = False

    async def prepare(self):
        await super().prepare()
        if self._finished:  # refused or redirected to the login page
            return
        self.xsrf_token  # noqa: B018 - reading it sets the cookie
        strip_token(self.request)

    def on_connection_close(self):
        self._client_gone = True
        super().on_connection_close()

    @tornado.web.authenticated
    async def get(self, path=None):
        slots = self.settings.get(_SLOTS)
        async with slots if slots is not None else contextlib.nullcontext():
            if self._client_gone:  # the page was closed while it waited: start no kernel
                return
            snippet = self.settings.get(_HEAD_SNIPPET, "")
            memory = self.settings.get(_SCRIPT_MEMORY)
            # the scripts earlier pages asked for: last in the head (page_scripts)
            remembered = preload_tags(memory.urls()) if memory is not None else ""
            injected, announced = not snippet, not remembered
            async for html in self.get_generator(path=path):
                html = localise_links(html, self.base_url)  # icons from here, not a CDN
                if not injected:
                    html, injected = inject_into_head(html, snippet)
                if injected and not announced:
                    html, announced = before_head_end(html, remembered)
                self.write(html)
                self.flush()


def preload_links(base_url: str) -> str:
    """The page's ``<head>`` additions for its two big scripts: Voila's front end is announced
    (``<link rel="preload">``; Voila names it only at the end of the page, after the kernel has
    run the notebook) and BokehJS is run from the head (``<script async>``): the browser fetches
    and runs it as soon as it can (for a first visitor while the kernel still runs the
    notebook), instead of after the kernel connection, when the notebook's output would run it
    (there the 0.15-0.5 s of running it held up the widgets). The kernel's output then loads
    nothing (:func:`studykit.app.bokeh_assets.bokehjs_html`). BokehJS is announced as well: an
    ``async`` script alone is fetched at low priority, after the page's other files.

    Examples
    --------
    >>> 'href="/voila/static/voila.js"' in preload_links("/")
    True
    >>> "<script async" in preload_links("/")
    True
    """
    voila = url_path_join(base_url, "voila/static/voila.js")
    bokehjs = url_path_join(base_url, BOKEHJS_ROUTE, BOKEHJS_FILES[0])
    return (
        f'<link rel="preload" as="script" href="{voila}">'
        f'<link rel="preload" as="script" href="{bokehjs}">'  # fetched first, not last
        f'<script async type="text/javascript" src="{bokehjs}"></script>'
    )


class StudykitVoila(Voila):
    """Voila plus the BokehJS route, request checks, kernel clean-up and page start slots."""

    name = "studykit-voila"

    allow_hosts = Unicode(
        "",
        config=True,
        help="More names (comma-separated) accepted in the Host header, besides the loopback "
        "names and the bound address (`studykit serve --allow-host`).",
    )
    kernel_idle_minutes = Float(
        DEFAULT_KERNEL_IDLE_MINUTES,
        config=True,
        help="A kernel with no page connected is shut down after this many idle minutes "
        "(0: never). Sets MappingKernelManager.cull_idle_timeout unless that is given.",
    )
    script_compile_hint = Bool(
        True,
        config=True,
        help="Serve the page's scripts (Voila's, the extensions', BokehJS) with V8's compile "
        "hint as their first line, so the browser compiles them off the page's main thread "
        "(studykit.app.compile_hints).",
    )
    concurrent_page_starts = Integer(
        0,
        config=True,
        help="Pages whose kernel is started and whose notebook is run at the same time; more "
        "wait their turn (0: the number of CPUs, at least 1, at most 4).",
    )

    def initialize(self, argv=None):
        one_blas_thread()  # inherited by every kernel (started after this)
        super().initialize(argv)
        # serve no files from the notebook folder (Voila's default allows images)
        self.voila_configuration.file_allowlist = []
        configuration = self.voila_configuration
        if not configuration.extension_allowlist and not configuration.extension_denylist:
            # only the front-end extensions the workbook uses (studykit.app.page_scripts)
            configuration.extension_allowlist = list(WORKBOOK_EXTENSIONS)
        self._set_config_if_unset("VoilaExecutor", "iopub_timeout", IOPUB_TIMEOUT)
        if self.kernel_idle_minutes > 0:
            idle = max(1, round(self.kernel_idle_minutes * 60))
            self._set_config_if_unset("MappingKernelManager", "cull_idle_timeout", idle)
            self._set_config_if_unset(
                "MappingKernelManager", "cull_interval", max(1, min(60, idle // 4))
            )
        extra = [n.strip() for n in self.allow_hosts.split(",") if n.strip()]
        self.host_policy = HostPolicy(self.ip or "", extra, machine_name=socket.gethostname())

    def _set_config_if_unset(self, section: str, name: str, value) -> None:
        if name not in self.config[section]:
            self.config[section][name] = value

    def init_handlers(self):
        handlers = []
        memory = self.settings_memory()
        extensions_route = url_path_join(self.server_url, "/" + LABEXTENSIONS_ROUTE + "(.*)")

        def scripts(handler: type) -> type:  # the page's files: compressed once, hinted
            return with_gzip_once(with_hint(handler) if self.script_compile_hint else handler)

        for spec in super().init_handlers():
            if isinstance(spec, tuple) and len(spec) >= 2 and spec[1] is TornadoVoilaHandler:
                spec = (spec[0], WorkbookPageHandler, *spec[2:])
            elif isinstance(spec, tuple) and len(spec) == 3 and spec[0] == extensions_route:
                # the same files, and the scripts served are remembered for the next pages
                handler = scripts(RememberingFileFindHandler)
                spec = (spec[0], handler, {**spec[2], "memory": memory})
            elif isinstance(spec, tuple) and len(spec) >= 2 and spec[1] in _SCRIPT_HANDLERS:
                spec = (spec[0], scripts(spec[1]), *spec[2:])  # Voila's front end
            handlers.append(spec)
        route = url_path_join(self.server_url, BOKEHJS_ROUTE, r"(.*)")
        bokehjs = scripts(BokehJSHandler)
        handlers.insert(0, (route, bokehjs, {"path": str(bokehjs_path() / "js")}))
        if fontawesome_dir() is not None:
            handlers.insert(
                0,
                (
                    url_path_join(self.server_url, FONTAWESOME_ROUTE, r"(.*)"),
                    with_gzip_once(FontAwesomeHandler),
                    {"path": str(fontawesome_dir())},
                ),
            )
        # first of all: refuse foreign Host names and cross-origin requests on every route
        handlers.insert(0, request_rule(self.host_policy, self.log))
        return handlers

    def settings_memory(self) -> ScriptMemory:
        """The server's :class:`ScriptMemory` (made on first use)."""
        if getattr(self, "_script_memory", None) is None:
            self._script_memory = ScriptMemory(self.base_url)
        return self._script_memory

    def init_settings(self):
        if self.voila_configuration.kernel_spec_manager_class is KernelSpecManager:
            # kernels without the debugger back end (module docstring)
            self.voila_configuration.kernel_spec_manager_class = WorkbookKernelSpecs
        settings = super().init_settings()
        settings["websocket_max_message_size"] = WEBSOCKET_MAX_MESSAGE
        settings["compress_response"] = True  # BokehJS: 1.3 MB -> about 0.35 MB on the wire
        settings["log_function"] = log_request  # the path, never the query string
        slots = self.concurrent_page_starts or min(4, max(1, os.cpu_count() or 1))
        settings[_SLOTS] = asyncio.Semaphore(slots)
        entries = entry_scripts(
            self.base_url,
            self.labextensions_path,
            self.voila_configuration.extension_allowlist or (),
        )
        settings[_HEAD_SNIPPET] = (
            preload_links(self.base_url)
            + preload_tags(entries)
            + upload_guard_script(MAX_UPLOAD_BYTES, WEBSOCKET_MAX_MESSAGE)
        )
        settings[_SCRIPT_MEMORY] = self.settings_memory()
        if self.voila_configuration.preheat_kernel:
            refill_after_render(self.kernel_manager)
        return settings

    def start(self):
        # the token arrives through the environment (not argv, which `ps` shows to everyone);
        # take it out again so kernels and their code never see it
        token = os.environ.pop(ENV_TOKEN, "")
        if token:
            self.token = token
        install_redaction(token or None, loggers=[self.log])
        os.environ[ENV_BOKEHJS_URL] = url_path_join(self.base_url, BOKEHJS_ROUTE)
        self._watch_parent()
        # (browser signing) tell the kernels whether this server is loopback, token or open
        from studykit.app.access import ENV_ACCESS, access_kind

        os.environ[ENV_ACCESS] = access_kind(self.ip, bool(self.token) or bool(self.auto_token))
        super().start()

    def _watch_parent(self) -> None:
        """Stop when the process named in ``STUDYKIT_PARENT_PID`` is no longer our parent."""
        value = os.environ.pop(ENV_PARENT_PID, "")
        if not value.isdigit():
            return
        parent = int(value)

        def check():
            if os.getppid() != parent:
                self.log.warning("the process that started this server has ended; stopping")
                tornado.ioloop.IOLoop.current().stop()

        self._parent_watch = tornado.ioloop.PeriodicCallback(check, 1000)
        self._parent_watch.start()


def refill_after_render(
    kernel_manager, wait_s: float = REFILL_WAIT_S, pause_s: float = REFILL_PAUSE_S
) -> None:
    """Make Voila's kernel pool refill only once the kernel it handed out has run the notebook.

    Voila's pooling kernel manager calls ``fill_if_needed(delay=None)`` (refill after
    ``fill_delay``, 1 s) from ``get_rendered_notebook``, right after the handed-out kernel
    started. Here that refill waits for the handed-out kernel's rendering task (at most
    ``wait_s``), then ``pause_s`` while the page loads its scripts and builds its widgets (a
    kernel starting meanwhile takes the cores from it), then ``fill_delay`` as before. Explicit
    delays (the pool's first fill) are unchanged.
    """
    fill = kernel_manager.fill_if_needed
    get = kernel_manager.get_rendered_notebook
    rendering: list = []

    def fill_if_needed(delay=None, **kwargs):
        if delay is not None:
            return fill(delay=delay, **kwargs)

        async def later():
            await asyncio.sleep(0)  # get_rendered_notebook below has recorded the task
            busy = [t for t in rendering if not t.done()]
            if busy:
                await asyncio.wait(busy, timeout=wait_s)
            await asyncio.sleep(pause_s)
            fill(delay=kernel_manager.fill_delay, **kwargs)

        task = asyncio.ensure_future(later())
        rendering_refills.add(task)
        task.add_done_callback(rendering_refills.discard)
        return None

    async def get_rendered_notebook(*args, **kwargs):
        render_task, rendered_cache, kernel_id = await get(*args, **kwargs)
        rendering[:] = [t for t in rendering if not t.done()] + [render_task]
        return render_task, rendered_cache, kernel_id

    rendering_refills: set = set()  # keeps the waiting tasks referenced until they ran
    kernel_manager.fill_if_needed = fill_if_needed
    kernel_manager.get_rendered_notebook = get_rendered_notebook


def free_port(host: str = "127.0.0.1") -> int:
    """A TCP port that is free right now on ``host``."""
    with socket.socket() as s:
        s.bind((host, 0))
        return s.getsockname()[1]


@dataclass(frozen=True)
class ServerProcess:
    """A server started by :func:`server_process`: its base URL and its process."""

    url: str
    proc: subprocess.Popen

    @property
    def pid(self) -> int:
        return self.proc.pid


@contextlib.contextmanager
def server_process(
    path,
    *,
    port: int | None = None,
    env: dict | None = None,
    extra_args: tuple[str, ...] = (),
    timeout: float = 90.0,
    log=None,
):
    """Run this server on a notebook or folder in a subprocess; yield a :class:`ServerProcess`.

    For tests and benchmarks. The server runs in its own process group, which is stopped
    (SIGTERM, then SIGKILL) on exit, also when the body raises; the server also stops by itself
    if this process dies (``STUDYKIT_PARENT_PID``).
    """
    port = port or free_port()
    path = os.fspath(path)
    cwd = path if os.path.isdir(path) else os.path.dirname(os.path.abspath(path))
    cmd = [
        sys.executable,
        "-m",
        "studykit.app.server",
        os.path.abspath(path),
        "--no-browser",
        f"--port={port}",
        "--Voila.ip=127.0.0.1",
        "--Voila.port_retries=0",
        *extra_args,
    ]
    proc = subprocess.Popen(
        cmd,
        cwd=cwd,
        env={**os.environ, ENV_PARENT_PID: str(os.getpid()), **(env or {})},
        stdout=log or subprocess.DEVNULL,
        stderr=subprocess.STDOUT,
        start_new_session=True,
    )
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
        yield ServerProcess(url, proc)
    finally:
        stop_process_group(proc)


@contextlib.contextmanager
def running_server(path, **kwargs):
    """:func:`server_process`, yielding only the base URL."""
    with server_process(path, **kwargs) as server:
        yield server.url


def kernel_pids(server_pid: int) -> dict[str, int]:
    """The kernels a server runs now: ``{kernel id: process id}`` (Linux ``/proc``; else {}).

    A kernel is a process whose command line names a ``kernel-<id>.json`` connection file and
    whose parent is ``server_pid``.
    """
    found = {}
    for entry in os.scandir("/proc") if os.path.isdir("/proc") else ():
        if not entry.name.isdigit():
            continue
        try:
            with open(f"/proc/{entry.name}/stat", "rb") as f:
                stat = f.read().decode(errors="replace")
            ppid = int(stat.rsplit(")", 1)[1].split()[1])
            if ppid != server_pid:
                continue
            with open(f"/proc/{entry.name}/cmdline", "rb") as f:
                args = f.read().decode(errors="replace").split("\0")
        except (OSError, ValueError, IndexError):
            continue  # gone meanwhile
        for arg in args:
            name = os.path.basename(arg)
            if name.startswith("kernel-") and name.endswith(".json"):
                found[name[len("kernel-") : -len(".json")]] = int(entry.name)
    return found


def stop_process_group(proc: subprocess.Popen, timeout: float = 20.0) -> int:
    """SIGTERM the process group led by ``proc``; SIGKILL it after ``timeout`` seconds."""
    for sig, wait in ((signal.SIGTERM, timeout), (signal.SIGKILL, None)):
        with contextlib.suppress(ProcessLookupError, PermissionError):
            os.killpg(proc.pid, sig)
        try:
            proc.wait(timeout=wait)
            break
        except subprocess.TimeoutExpired:
            continue
    with contextlib.suppress(ProcessLookupError, PermissionError):
        os.killpg(proc.pid, signal.SIGKILL)  # anything the leader left behind in its group
    return proc.returncode


def main(argv: list[str] | None = None) -> None:
    """Run the server (the command line of ``voila``)."""
    restore_stop_signals()
    StudykitVoila.launch_instance(argv=sys.argv[1:] if argv is None else argv)


if __name__ == "__main__":  # pragma: no cover
    main()

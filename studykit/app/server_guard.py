"""Request checks and log hygiene for the workbook server (used by :mod:`studykit.app.server`).

* :class:`HostPolicy` decides which ``Host`` names the server answers to: the loopback names
  (``localhost``, ``127.0.0.1``, ``[::1]``), the address it is bound to and names given with
  ``studykit serve --allow-host``. A web page on another site that re-points its own name at
  this machine (DNS rebinding) sends its own name as ``Host`` and is refused. A request whose
  ``Origin`` is not the page's own origin is refused too (the kernel websocket included), so a
  page of another site can neither load the workbook nor open a kernel connection.
* :func:`redact` / :class:`RedactingFilter` keep the access token out of every log line, and
  :func:`strip_token` takes it out of a request once it has been checked, so neither the log
  nor a kernel's environment ever holds it.
* :func:`upload_guard_script` is a small script put into the page's ``<head>``: a file above
  the upload limit is refused in the browser with a message beside the upload button, before
  any byte is sent (the kernel connection would otherwise be dropped by the server's message
  size limit without a word).
"""

from __future__ import annotations

import ipaddress
import json
import logging
import re
import signal
import threading
from urllib.parse import parse_qsl, urlencode, urlsplit

import tornado.routing
import tornado.web

MAX_UPLOAD_BYTES = 50 * 1024 * 1024  # one measurement file; larger files are refused

LOOPBACK_NAMES = ("localhost", "127.0.0.1", "::1")
WIDE_BINDS = ("", "0.0.0.0", "::")


def host_name(host_header: str) -> str:
    """The name in a ``Host`` header or an origin's netloc: no port, no brackets, lower case.

    Examples
    --------
    >>> host_name("LocalHost:8866"), host_name("[::1]:8866"), host_name("example.org.")
    ('localhost', '::1', 'example.org')
    """
    host = host_header.strip().lower()
    if host.startswith("["):  # [v6]:port
        host = host[1:].split("]", 1)[0]
    elif host.count(":") == 1:  # name:port (a bare IPv6 address has several colons)
        host = host.split(":", 1)[0]
    return host.rstrip(".")


def _is_ip(name: str) -> bool:
    try:
        ipaddress.ip_address(name)
    except ValueError:
        return False
    return True


class HostPolicy:
    """Which ``Host`` names and origins the server accepts.

    Parameters
    ----------
    bind : str
        The address the server listens on (``--host``). A wide bind (``0.0.0.0``, ``::``)
        also accepts any IP address as ``Host`` (DNS rebinding needs a *name*) and the
        machine's own name, as printed in the address.
    extra : iterable of str
        More names to accept (``studykit serve --allow-host``).

    Examples
    --------
    >>> p = HostPolicy("127.0.0.1")
    >>> p.host_allowed("127.0.0.1:8866"), p.host_allowed("[::1]:8866"), p.host_allowed("evil.example")
    (True, True, False)
    >>> HostPolicy("0.0.0.0", extra=["review.example"]).host_allowed("review.example:8866")
    True
    """

    def __init__(self, bind: str, extra=(), *, machine_name: str | None = None):
        self.wide = bind.strip("[]") in WIDE_BINDS
        names = set(LOOPBACK_NAMES)
        if not self.wide:
            names.add(bind.strip("[]").lower().rstrip("."))
        elif machine_name:
            names.add(host_name(machine_name))
        names.update(host_name(n) for n in extra if n and n.strip())
        self.names = frozenset(names)

    def host_allowed(self, host_header: str | None) -> bool:
        if not host_header:
            return False
        name = host_name(host_header)
        if name in self.names:
            return True
        return self.wide and _is_ip(name)

    def refusal(self, request) -> str | None:
        """Why ``request`` is refused (a sentence without the query string), or None."""
        host = request.headers.get("Host")
        if not self.host_allowed(host):
            return (
                f"the address name {host!r} is not one of this server's names; a page of "
                "another site may be trying to reach the workbook. If colleagues use this "
                "name, restart with `studykit serve --allow-host NAME`"
            )
        origin = request.headers.get("Origin")
        if origin is not None:
            parts = urlsplit(origin.strip())
            if origin.strip().lower() == "null" or parts.netloc.lower() != host.strip().lower():
                return (
                    f"the request comes from a page of another site ({origin!r}); only the "
                    "workbook's own page may use this server"
                )
        return None


class ForeignRequestMatcher(tornado.routing.Matcher):
    """Routes every request that :meth:`HostPolicy.refusal` refuses to :class:`RefusedHandler`."""

    def __init__(self, policy: HostPolicy):
        self.policy = policy

    def match(self, request):
        return {} if self.policy.refusal(request) else None


class RefusedHandler(tornado.web.RequestHandler):
    """403 with a one-line reason, for any method (a websocket handshake included)."""

    def initialize(self, policy: HostPolicy, log: logging.Logger | None = None):
        self.policy = policy
        self.logger = log or logging.getLogger("studykit.server")

    def prepare(self):
        reason = self.policy.refusal(self.request) or "refused"
        self.logger.warning("refused %s %s: %s", self.request.method, self.request.path, reason)
        self.set_status(403)
        self.set_header("Content-Type", "text/plain; charset=utf-8")
        self.set_header("X-Content-Type-Options", "nosniff")
        self.finish(f"403 refused: {reason}\n")

    def check_xsrf_cookie(self):  # the request is refused anyway
        return None


def request_rule(policy: HostPolicy, log: logging.Logger | None = None) -> tornado.routing.Rule:
    """The routing rule to put first, so no other handler sees a refused request."""
    return tornado.routing.Rule(
        ForeignRequestMatcher(policy), RefusedHandler, {"policy": policy, "log": log}
    )


# --- the access token in logs and requests ------------------------------------------------------

_TOKEN_PARAM = re.compile(r"(?i)(token=)[^&\s\"'<>]+")
_AUTH_HEADER = re.compile(r"(?i)(authorization:\s*token\s+)\S+")


def redact(text: str, token: str | None = None) -> str:
    """``text`` with the token (and any ``token=`` value, right or wrong) replaced.

    Examples
    --------
    >>> redact("GET /?token=abc123&x=1", "abc123")
    'GET /?token=[hidden]&x=1'
    >>> redact("cookie for abc123 set", "abc123")
    'cookie for [hidden] set'
    """
    if token:
        text = text.replace(token, "[hidden]")
    text = _TOKEN_PARAM.sub(r"\1[hidden]", text)
    return _AUTH_HEADER.sub(r"\1[hidden]", text)


class RedactingFilter(logging.Filter):
    """A logging filter that rewrites each record's message through :func:`redact`."""

    def __init__(self, token: str | None = None):
        super().__init__()
        self.token = token

    def filter(self, record: logging.LogRecord) -> bool:
        try:
            message = record.getMessage()
        except Exception:  # noqa: BLE001 - a malformed record is passed on unchanged
            return True
        clean = redact(message, self.token)
        if record.exc_info and not record.exc_text:
            record.exc_text = logging.Formatter().formatException(record.exc_info)
        if record.exc_text:
            record.exc_text = redact(record.exc_text, self.token)
        if clean != message or record.args:
            record.msg, record.args = clean, ()
        return True


def install_redaction(token: str | None, loggers=()) -> RedactingFilter:
    """Put a :class:`RedactingFilter` on every handler there is now (and on ``lastResort``).

    Filters on a *handler* see every record that reaches it, also those propagated from child
    loggers (``tornado.access``, ``tornado.general`` ...), so the token cannot slip past.
    """
    filt = RedactingFilter(token)
    handlers = set(logging.getLogger().handlers)
    for logger in [*loggers, *logging.Logger.manager.loggerDict.values()]:
        if isinstance(logger, logging.Logger):
            handlers.update(logger.handlers)
            if logger.name.startswith("tornado"):
                logger.addFilter(filt)
    for logger in loggers:
        logger.addFilter(filt)
    if logging.lastResort is not None:
        handlers.add(logging.lastResort)
    for handler in handlers:
        if not any(isinstance(f, RedactingFilter) for f in handler.filters):
            handler.addFilter(filt)
    return filt


def strip_token(request) -> None:
    """Remove ``token`` from a request's query once authentication has used it.

    The page handler passes the request URL and query to the kernel (Voila's
    ``QUERY_STRING`` / ``VOILA_REQUEST_URL``) and the access log prints it; neither needs the
    token after the login cookie is set.
    """
    if "token" not in request.query_arguments:
        return
    request.query_arguments.pop("token", None)
    request.arguments.pop("token", None)
    pairs = [(k, v) for k, v in parse_qsl(request.query, keep_blank_values=True) if k != "token"]
    request.query = urlencode(pairs)
    request.uri = request.path + (f"?{request.query}" if request.query else "")


def log_request(handler) -> None:
    """Tornado's ``log_function``: path only (never the query string), failures as warnings."""
    status = handler.get_status()
    request = handler.request
    logger = getattr(handler, "log", None)
    if not isinstance(logger, logging.Logger):
        logger = logging.getLogger("tornado.access")
    if status < 400:
        level = logging.DEBUG
    elif status < 500:
        level = logging.WARNING
    else:
        level = logging.ERROR
    logger.log(
        level,
        "%d %s %s (%s) %.1f ms",
        status,
        request.method,
        request.path,
        request.remote_ip,
        1000.0 * request.request_time(),
    )


# --- uploads above the limit --------------------------------------------------------------------

_UPLOAD_GUARD = """<script>/* studykit: files above the upload limit are refused before sending */
(function () {
  "use strict";
  var LIMIT = %(limit)s, MESSAGE_CAP = %(cap)s, lastButton = null;
  function mb(n) { return (n / 1048576).toFixed(1) + " MB"; }
  function limitOf(button) {
    if (button) {
      for (var i = 0; i < button.classList.length; i++) {
        var m = /^sk-upload-limit-([0-9]+)$/.exec(button.classList[i]);
        if (m) { return Number(m[1]); }
      }
    }
    return LIMIT;
  }
  function clear() {
    var old = document.querySelectorAll(".sk-upload-refused");
    for (var i = 0; i < old.length; i++) { old[i].remove(); }
  }
  function show(text) {
    clear();
    var box = document.createElement("div"), kind = document.createElement("span");
    box.className = "sk-msg sk-msg-error sk-upload-refused";
    box.setAttribute("role", "alert");
    kind.className = "sk-msg-kind";
    kind.textContent = "Not sent";
    box.appendChild(kind);
    box.appendChild(document.createTextNode(text));
    if (lastButton && lastButton.isConnected) { lastButton.insertAdjacentElement("afterend", box); }
    else { document.body.insertAdjacentElement("afterbegin", box); }
  }
  document.addEventListener("click", function (e) {
    var b = e.target && e.target.closest ? e.target.closest(".widget-upload") : null;
    if (b) { lastButton = b; }
  }, true);
  var add = HTMLInputElement.prototype.addEventListener;
  HTMLInputElement.prototype.addEventListener = function (type, listener, options) {
    if (type === "change" && this.type === "file" && listener) {
      var input = this, inner = listener;
      listener = function (event) {
        var files = Array.prototype.slice.call(input.files || []), limit = limitOf(lastButton);
        var big = files.filter(function (f) { return f.size > limit; })[0];
        clear();
        if (big) {
          input.value = "";
          show("file '" + big.name + "': the file is " + mb(big.size) + ", above the upload " +
               "limit of " + mb(limit) + "; nothing was sent. Split it by characteristic or " +
               "remove unused columns and upload again.");
          return undefined;
        }
        return typeof inner === "function" ? inner.call(this, event) : inner.handleEvent(event);
      };
    }
    return add.call(this, type, listener, options);
  };
  var send = WebSocket.prototype.send;
  WebSocket.prototype.send = function (data) {
    var n = 0;
    if (data && data.byteLength !== undefined) { n = data.byteLength; }
    else if (data && data.size !== undefined) { n = data.size; }
    else if (typeof data === "string" && data.length * 3 > MESSAGE_CAP) { n = new Blob([data]).size; }
    if (n > MESSAGE_CAP) {
      var size = mb(n), cap = mb(MESSAGE_CAP);
      if (size === cap) {  // just above the cap: the megabytes read the same, give bytes
        size = n.toLocaleString("en") + " bytes";
        cap = MESSAGE_CAP.toLocaleString("en") + " bytes";
      }
      show("a message of " + size + " is above what the server accepts (" + cap + "); it was " +
           "not sent, and the connection to the workbook stays open. If it was an upload, " +
           "choose a smaller file.");
      return undefined;
    }
    return send.call(this, data);
  };
  // upload buttons show their label only: ipywidgets writes "label (n)" into the button; the
  // count goes into data-files and the text keeps the label (class sk-no-count)
  function relabel(button) {
    for (var i = 0; i < button.childNodes.length; i++) {
      var node = button.childNodes[i];
      var m = node.nodeType === 3 ? /^(.*) \\(([0-9]+)\\)$/.exec(node.nodeValue) : null;
      if (m) { button.setAttribute("data-files", m[2]); node.nodeValue = m[1]; }
    }
  }
  new MutationObserver(function () {
    var buttons = document.querySelectorAll(".widget-upload.sk-no-count");
    for (var i = 0; i < buttons.length; i++) { relabel(buttons[i]); }
  }).observe(document.documentElement, { childList: true, subtree: true });
})();
</script>"""


def upload_guard_script(limit: int, message_cap: int) -> str:
    """The ``<script>`` that refuses files above ``limit`` bytes in the browser.

    ``message_cap`` is the server's websocket message limit: anything larger would make the
    server drop the kernel connection, so the page refuses to send it and says why.

    Examples
    --------
    >>> "LIMIT = 1024," in upload_guard_script(1024, 4096)
    True
    """
    return _UPLOAD_GUARD % {"limit": json.dumps(int(limit)), "cap": json.dumps(int(message_cap))}


_HEAD = re.compile(r"<head(\s[^>]*)?>", re.IGNORECASE)


def inject_into_head(html: str, snippet: str) -> tuple[str, bool]:
    """``html`` with ``snippet`` right after its ``<head>`` tag, and whether it was found.

    Examples
    --------
    >>> inject_into_head("<html><head><title>x</title>", "<script></script>")
    ('<html><head><script></script><title>x</title>', True)
    """
    m = _HEAD.search(html)
    if not m:
        return html, False
    return html[: m.end()] + snippet + html[m.end() :], True


def restore_stop_signals() -> None:
    """Make SIGINT (Ctrl-C) and SIGTERM work, whatever the parent process did with them.

    A parent may start us with SIGINT ignored (``nohup``, a shell's background job, some test
    runners) -- Python then installs no KeyboardInterrupt handler -- or with the signals
    blocked; both are inherited across ``exec``. Unblock both, and give SIGINT Python's
    default handler and SIGTERM the system default unless a handler is already set.
    """
    if threading.current_thread() is not threading.main_thread():
        return  # handlers can only be set in the main thread
    stops = {signal.SIGINT, signal.SIGTERM}
    signal.pthread_sigmask(signal.SIG_UNBLOCK, stops)
    signal.signal(signal.SIGINT, signal.default_int_handler)
    if signal.getsignal(signal.SIGTERM) in (signal.SIG_IGN, None):
        signal.signal(signal.SIGTERM, signal.SIG_DFL)

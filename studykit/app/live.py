"""Live study state: every open page follows the study file, and knows what its page shows.

:class:`LiveLink` (one per workbook with a study file open) does three things:

* **Watch.** A timer in the kernel (a tornado ``PeriodicCallback`` on the kernel's own event
  loop, so it never runs at the same time as a button callback) asks the study file every
  :data:`POLL_MS` milliseconds whether anything was committed (SQLite ``PRAGMA data_version``
  through :class:`studykit.store.ChangeWatch`). When something was, the session reads the file
  again and every panel is redrawn, and a note says who changed what (the newest audit
  entries). A kernel that Voila started before anyone asked (``preheat_kernel``) keeps itself
  current the same way, and checks again the moment a page connects.
* **Know what the page shows.** The kernel writes the version it drew (the newest audit id)
  into a hidden widget; a front-end link (``ipywidgets.jsdlink``) copies it into a second
  hidden widget, which the browser sends back once it has applied the update. That echo is
  :attr:`StudySession.page_version`: the version the person is looking at.
* **Refuse actions on an older view.** Every write of the session names the version it was
  decided on; the study file refuses it inside its transaction when the file moved on
  (:class:`studykit.store.StaleView`), the page is redrawn and the message says what changed.

``STUDYKIT_LIVE_POLL_MS`` (environment of the server, inherited by kernels) sets the interval;
``0`` switches the watch off (pages then follow only after their own actions and refusals).
"""

from __future__ import annotations

import os
from datetime import datetime

import ipywidgets as widgets

from studykit.app.widgets import esc, html_box

__all__ = ["ENV_POLL_MS", "POLL_MS", "LiveLink", "changes_html"]

ENV_POLL_MS = "STUDYKIT_LIVE_POLL_MS"
#: how often the kernel asks the study file whether it changed (milliseconds)
POLL_MS = 500


def poll_interval_ms() -> int:
    """The watch interval from ``$STUDYKIT_LIVE_POLL_MS`` (default :data:`POLL_MS`)."""
    raw = os.environ.get(ENV_POLL_MS, "").strip()
    try:
        return max(0, int(raw)) if raw else POLL_MS
    except ValueError:
        return POLL_MS


def _when(text: str) -> str:
    return esc((text or "").replace("T", " ").rstrip("Z"))


def changes_html(entries, *, limit: int = 4) -> str:
    """The "who changed what" note for audit entries written elsewhere (newest first).

    Examples
    --------
    >>> from studykit.store import AuditEntry
    >>> e = AuditEntry(7, "2026-03-05T10:00:00Z", "B. Reviewer", "comment", "", {})
    >>> "B. Reviewer" in changes_html([e])
    True
    """
    entries = list(entries)
    if not entries:
        return ""
    shown = entries[-limit:][::-1]

    def what(e) -> str:
        text = str((e.detail or {}).get("text") or "")
        return e.what + (f' "{text[:80]}{"…" if len(text) > 80 else ""}"' if text else "")

    items = "".join(
        f"<li><b>{esc(e.who)}</b>: {esc(what(e))}"
        + (f" <span class='sk-small'>({esc(e.why)})</span>" if e.why else "")
        + f" <span class='sk-small'>· {_when(e.when)} UTC</span></li>"
        for e in shown
    )
    more = len(entries) - len(shown)
    tail = f"<div class='sk-small'>and {more} earlier change(s)</div>" if more > 0 else ""
    stamp = datetime.now().strftime("%H:%M:%S")
    return (
        '<div class="sk-live-note" role="status"><b>The study file changed</b> '
        f'<span class="sk-small">(page updated at {stamp})</span>'
        f'<ul style="margin:4px 0 0 0">{items}</ul>{tail}</div>'
    )


LIVE_CSS = """
<style>
.sk-live-note { border: 1px solid #0072B2; border-left: 6px solid #0072B2; background: #E0EEF6;
  padding: 8px 14px; margin: 6px 0; border-radius: 3px; }
</style>
"""


class LiveLink:
    """Keeps one workbook's session and page in step with the study file (module docstring).

    Parameters
    ----------
    session : StudySession
    messages : MessageArea, optional
        Where a failing watch says so (once).
    poll_ms : int, optional
        Interval; default :func:`poll_interval_ms`. 0: no timer.
    """

    def __init__(self, session, *, messages=None, poll_ms: int | None = None):
        self.session = session
        self.messages = messages
        self.note = html_box("", "sk-live")
        self.shown = widgets.IntText(
            value=session.view_version, layout=widgets.Layout(display="none")
        )
        self.shown.add_class("sk-view-version")
        self.seen = widgets.IntText(value=-1, layout=widgets.Layout(display="none"))
        self.seen.add_class("sk-page-version")
        self._link = widgets.jsdlink((self.shown, "value"), (self.seen, "value"))
        self.seen.observe(self._on_seen, names="value")
        self.widget = widgets.VBox([html_box(LIVE_CSS), self.note, self.shown, self.seen])
        self.widget.add_class("sk-live-box")
        self._failed = False
        self.connected = False
        session.subscribe(self._on_session)
        self.poll_ms = poll_interval_ms() if poll_ms is None else int(poll_ms)
        self._timer = None
        if self.poll_ms > 0:
            self._start_timer()

    # --- the watch ----------------------------------------------------------------------------
    def _start_timer(self) -> None:
        try:
            import asyncio

            from tornado.ioloop import IOLoop, PeriodicCallback

            asyncio.get_running_loop()  # only inside a running loop (the kernel's)
        except (ImportError, RuntimeError):
            return
        IOLoop.current()  # the kernel's loop; the timer runs on it, between messages
        self._timer = PeriodicCallback(self.check, self.poll_ms)
        self._timer.start()

    def stop(self) -> None:
        if self._timer is not None:
            self._timer.stop()
            self._timer = None
        self.session._watch.close()

    def check(self) -> bool:
        """Reload when the study file changed; True when it did. Never raises."""
        try:
            changed = self.session.check_for_changes()
            self._failed = False
            return changed
        except Exception as exc:  # noqa: BLE001 - a timer must not die; say it once
            if not self._failed and self.messages is not None:
                self.messages.error(f"Cannot follow the study file any more: {exc}")
            self._failed = True
            return False

    # --- page and kernel ----------------------------------------------------------------------
    def _on_seen(self, change) -> None:
        value = change["new"]
        if value is None or value < 0:
            return
        first = not self.connected
        self.connected = True
        self.session.page_version = int(value)
        if first:
            # a page just connected (perhaps to a kernel started long before): make sure it
            # shows the file as it is now
            self.check()

    def _on_session(self, session, changed) -> None:
        self.note.value = changes_html(session.external_changes)
        if self.shown.value != session.view_version:
            self.shown.value = session.view_version  # last: after every panel was redrawn

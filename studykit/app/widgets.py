"""Shared workbook pieces: style sheet, message area, the ``guarded`` decorator, banners.

No statistics in here. Every callback a step registers is wrapped with :func:`guarded`, so an
error raised while handling a click or an upload shows up as a readable message in the page
(Voila hides tracebacks, so an unhandled error would otherwise vanish silently).
"""

from __future__ import annotations

import functools
import html
import logging
from collections.abc import Callable
from datetime import datetime

import ipywidgets as widgets
from ipywidgets.widgets.widget_string import HTMLStyle

from studykit import theme
from studykit.analysis import SAFETY_SENTENCE
from studykit.app.server_guard import MAX_UPLOAD_BYTES  # noqa: F401 - re-exported here
from studykit.errors import StudyInputError

log = logging.getLogger("studykit.app")

#: the safety caution, the same words as the PDF, the terminal and the JSON
SAFETY_NOTE = SAFETY_SENTENCE


def esc(value) -> str:
    """HTML-escape any value for display (``None`` shows as an em dash)."""
    return "—" if value is None else html.escape(str(value))


# --- style sheet --------------------------------------------------------------------------------

#: The palette ribbon at the top of the header: the chart colours, in the order the charts use.
_RIBBON = ", ".join(
    f"{c} {100 * i / 6:.2f}% {100 * (i + 1) / 6:.2f}%"
    for i, c in enumerate(
        [
            theme.OKABE_ITO["blue"],
            theme.OKABE_ITO["bluish_green"],
            theme.OKABE_ITO["orange"],
            theme.OKABE_ITO["sky_blue"],
            theme.OKABE_ITO["reddish_purple"],
            theme.OKABE_ITO["vermillion"],
        ]
    )
)

CSS = f"""
<style>
body {{ background: {theme.PAGE}; }}
.sk-root {{ font-family: {theme.CSS_FONT_STACK}; color: {theme.INK}; font-size: 14px;
  max-width: 1400px; margin: 0 auto; background: {theme.PAGE}; }}
.sk-root .widget-html-content, .sk-root .widget-label {{ font-family: {theme.CSS_FONT_STACK};
  font-size: 14px; line-height: 1.45; }}
/* header: a light card under a ribbon of the chart palette */
.sk-header {{ background: {theme.PAPER}; color: {theme.INK}; padding: 14px 22px 12px 22px;
  border: 1px solid {theme.RULE}; border-top: none; border-radius: 10px 10px 0 0;
  background-image: linear-gradient(90deg, {_RIBBON});
  background-size: 100% 5px; background-repeat: no-repeat; background-position: top; }}
.sk-header .widget-html-content {{ color: {theme.INK}; line-height: 1.3; }}
.sk-brand {{ font-size: 13px; font-weight: 700; color: {theme.ACCENT_DEEP}; margin-top: 4px; }}
.sk-title {{ font-size: 22px; font-weight: 600; margin-top: 2px; color: {theme.INK}; }}
.sk-sub {{ font-size: 13px; color: {theme.INK_SOFT}; margin-top: 2px; }}
.sk-state {{ display: inline-block; padding: 3px 12px; border-radius: 6px; font-size: 13px;
  font-weight: 600; border: 1px solid {theme.ACCENT}; background: {theme.TINT};
  color: {theme.INK}; }}
/* step bar: a path of numbered stops; the current one filled, the done ones ticked */
.sk-stepbar {{ background: {theme.PANEL}; border: 1px solid {theme.RULE}; border-top: none;
  padding: 8px 12px; gap: 4px; align-items: center; }}
.sk-root .sk-stepbar .jupyter-button.sk-step {{ background: {theme.PAPER};
  border: 1px solid {theme.RULE}; border-radius: 17px; color: {theme.INK}; font-size: 13px;
  height: 34px; padding: 0 12px; box-shadow: none; margin: 0; }}
.sk-root .sk-stepbar .jupyter-button.sk-step:hover {{ border-color: {theme.ACCENT};
  background: {theme.TINT}; }}
.sk-root .sk-stepbar .jupyter-button.sk-step.sk-done {{ border-color: {theme.OKABE_ITO["bluish_green"]};
  color: {theme.VERDICTS["pass"].text_color}; }}
.sk-root .sk-stepbar .jupyter-button.sk-step.sk-current {{ background: {theme.ACCENT};
  border-color: {theme.ACCENT}; color: {theme.PAPER}; font-weight: 600; }}
/* a visible keyboard focus ring on everything that takes focus */
.sk-root :focus-visible, .sk-root .jupyter-button:focus-visible,
.sk-root input:focus-visible, .sk-root select:focus-visible, .sk-root textarea:focus-visible,
.sk-root summary:focus-visible, .sk-root a:focus-visible {{
  outline: 3px solid {theme.FOCUS} !important; outline-offset: 2px;
  box-shadow: 0 0 0 7px {theme.FOCUS_HALO} !important; }}
.sk-root .jupyter-button:focus:not(:focus-visible) {{ outline: none; }}
.sk-guidance {{ padding: 10px 22px; border: 1px solid {theme.RULE}; border-top: none;
  background: {theme.PAPER}; color: {theme.INK_SOFT}; }}
.sk-guidance b {{ color: {theme.INK}; }}
.sk-body {{ padding: 18px 22px; border: 1px solid {theme.RULE}; border-top: none;
  background: {theme.PAPER}; min-height: 260px; }}
.sk-overview-card {{ min-height: 0; border-radius: 0 0 10px 10px; }}
.sk-section {{ font-size: 16px; font-weight: 600; margin: 4px 0 8px 0; color: {theme.INK}; }}
.sk-muted {{ color: {theme.INK_SOFT}; }}
.sk-table {{ border-collapse: collapse; margin: 6px 0 10px 0; font-size: 14px; min-width: 60%; }}
.sk-table th {{ text-align: left; font-weight: 600; color: {theme.INK}; font-size: 13px;
  background: {theme.PANEL}; border-bottom: 1px solid {theme.RULE};
  padding: 6px 14px 6px 6px; }}
.sk-table td {{ border-bottom: 1px solid {theme.RULE_SOFT}; padding: 7px 14px 7px 6px;
  vertical-align: top; }}
.sk-table td.num {{ text-align: right; font-variant-numeric: tabular-nums; }}
.sk-scroll {{ max-width: 100%; overflow-x: auto; }}
.sk-facts {{ display: grid; grid-template-columns: max-content 1fr; gap: 4px 24px; margin: 6px 0 12px 0;
  justify-content: start; }}
.sk-facts dt {{ color: {theme.INK_SOFT}; }}
.sk-facts dd {{ margin: 0; font-weight: 600; }}
.sk-msg {{ border-left: 4px solid; padding: 8px 12px; margin: 6px 0; border-radius: 2px; }}
.sk-msg-error {{ border-color: {theme.VERDICTS["fail"].color}; background: {theme.VERDICTS["fail"].background}; }}
.sk-msg-warning {{ border-color: {theme.VERDICTS["caution"].color}; background: {theme.VERDICTS["caution"].background}; }}
.sk-msg-info {{ border-color: {theme.ACCENT}; background: {theme.TINT}; }}
.sk-msg-ok {{ border-color: {theme.VERDICTS["pass"].color}; background: {theme.VERDICTS["pass"].background}; }}
.sk-msg .sk-msg-kind {{ font-weight: 700; margin-right: 6px; }}
.sk-msg .sk-msg-time {{ color: {theme.INK_SOFT}; font-size: 12px; margin-left: 8px; }}
.sk-caution {{ border: 1px solid {theme.VERDICTS["caution"].color};
  background: {theme.VERDICTS["caution"].background}; padding: 10px 14px; border-radius: 3px; }}
.sk-coming {{ border: 1px dashed {theme.RULE}; background: {theme.PANEL}; padding: 16px 18px;
  border-radius: 3px; color: {theme.INK_SOFT}; }}
.sk-coming b {{ color: {theme.INK}; }}
.sk-verdict {{ display: inline-block; padding: 1px 8px; border-radius: 10px; font-size: 12px;
  font-weight: 600; }}
.sk-root .jupyter-button.mod-primary {{ background: {theme.ACCENT}; color: {theme.PAPER}; }}
.sk-root .jupyter-button {{ font-size: 14px; height: 34px; padding: 0 16px; border-radius: 6px; }}
.sk-root .jupyter-button.sk-clear {{ background: transparent; color: {theme.INK_SOFT};
  font-size: 12px; height: 24px; box-shadow: none; padding: 0 6px; }}
.sk-root .jupyter-button.sk-clear:hover {{ color: {theme.INK}; text-decoration: underline; }}
.sk-messages {{ margin: 6px 0 0 0; }}
.sk-root details > summary {{ cursor: pointer; color: {theme.ACCENT_DEEP}; font-weight: 600;
  margin: 4px 0; }}
.sk-figure-caption {{ margin: 2px 0 0 4px; }}
/* small screens: the page never scrolls sideways; wide tables scroll in their own box */
@media (max-width: 900px) {{
  .sk-root table.sk-table {{ display: block; max-width: 100%; overflow-x: auto; min-width: 0; }}
  .sk-root .sk-ovtable {{ overflow-x: auto; max-width: 100%; }}
  .sk-root .bk-root, .sk-root .jupyter-widgets {{ max-width: 100%; }}
}}
@media (max-width: 640px) {{
  .sk-root .sk-stepbar {{ flex-wrap: nowrap !important; overflow-x: auto; }}
  .sk-root .sk-stepbar .jupyter-button.sk-step {{ flex: 0 0 auto; }}
  .sk-header, .sk-guidance, .sk-body {{ padding-left: 12px; padding-right: 12px; }}
  .sk-title {{ font-size: 18px; }}
  /* figures drawn for paper keep a readable size and scroll in their own box */
  .sk-root .sk-gauge-figure-box {{ overflow-x: auto; }}
  .sk-root img.sk-gauge-figure {{ min-width: 560px; }}
}}
</style>
"""


def style_sheet() -> widgets.HTML:
    """The workbook's style sheet as a widget (must be displayed once, anywhere in the page)."""
    return widgets.HTML(CSS, layout=widgets.Layout(height="0px", overflow="hidden"))


def upload_button(description: str, **kwargs) -> widgets.FileUpload:
    """A file-upload button that shows its label only: ipywidgets writes the number of chosen
    files ("(0)") after the label; the page script of the served workbook
    (``server_guard.upload_guard_script``) takes it out of the button's text and keeps it in
    the button's ``data-files`` attribute (class ``sk-no-count`` marks these buttons)."""
    w = widgets.FileUpload(description=description, tooltip=description, **kwargs)
    w.add_class("sk-no-count")
    return w


_HTML_STYLE: list = []


def shared_html_style():
    """One ``HTMLStyle`` for every :func:`html_box` (the workbook never changes their style):
    each HTML widget otherwise brings its own style model, which the page fetches and builds
    (189 of the landing view's 866 widget models)."""
    if not _HTML_STYLE or _HTML_STYLE[0].comm is None:  # none yet, or closed
        _HTML_STYLE[:] = [HTMLStyle()]
    return _HTML_STYLE[0]


def html_box(text: str = "", *classes: str) -> widgets.HTML:
    """An HTML widget with our CSS classes (its style model is shared: never change it)."""
    box = widgets.HTML(text, style=shared_html_style())
    for c in classes:
        box.add_class(c)
    return box


def labelled(text: str, w: widgets.Widget) -> widgets.VBox:
    """``w`` under its field label (class ``sk-field-label``)."""
    return widgets.VBox([html_box(f'<div class="sk-field-label">{esc(text)}</div>'), w])


def button(
    description: str,
    css: str,
    *,
    icon: str = "",
    primary: bool = False,
    disabled: bool = False,
    width: str | None = None,
    on_click: Callable[[], object] | None = None,
    messages: MessageArea | None = None,
) -> widgets.Button:
    """A workbook button: CSS class ``css`` (the style sheet and the browser tests find it by
    it), ``primary`` for a step's main action, ``on_click()`` wrapped in :func:`guarded`.

    Examples
    --------
    >>> b = button("Save", "sk-save", icon="save", primary=True, disabled=True)
    >>> b.button_style, b.disabled, b._dom_classes
    ('primary', True, ('sk-save',))
    """
    layout = {"layout": widgets.Layout(width=width)} if width else {}
    b = widgets.Button(
        description=description,
        icon=icon,
        button_style="primary" if primary else "",
        disabled=disabled,
        **layout,
    )
    b.add_class(css)
    if on_click is not None:
        b.on_click(guarded(lambda _b: on_click(), messages=messages))
    return b


def text_field(css: str, *, placeholder: str, width: str) -> widgets.Text:
    """A one-line text field of the workbook (a reason, a name) with CSS class ``css``."""
    w = widgets.Text(placeholder=placeholder, layout=widgets.Layout(width=width))
    w.add_class(css)
    return w


def verdict_badge(name: str) -> str:
    """HTML for a verdict chip: symbol + word + colour (never colour alone).

    Examples
    --------
    >>> "✓" in verdict_badge("pass")
    True
    """
    v = theme.VERDICTS[name]
    return (
        f'<span class="sk-verdict" style="color:{v.text_color};background:{v.background}">'
        f"{v.symbol} {esc(v.label)}</span>"
    )


def caution_banner(text: str = SAFETY_NOTE, *, title: str = "Safety-critical characteristic"):
    """The caution banner shown with every safety-critical characteristic.

    Examples
    --------
    >>> "do not replace" in caution_banner().value
    True
    """
    symbol = theme.VERDICTS["caution"].symbol
    return html_box(
        f'<div class="sk-caution" role="note"><b>{symbol} {esc(title)}.</b> {esc(text)}</div>',
        "sk-caution-banner",
    )


def coming_panel(title: str, what: str) -> widgets.HTML:
    """Placeholder for a step that a later version fills in."""
    return html_box(
        f'<div class="sk-coming"><b>{esc(title)}: coming in a later version.</b><br>'
        f"{esc(what)}</div>",
        "sk-coming-panel",
    )


# --- messages -----------------------------------------------------------------------------------


class MessageArea(widgets.VBox):
    """Where errors, warnings and notes from callbacks are shown (newest first, at most 6).

    Examples
    --------
    >>> area = MessageArea()
    >>> area.error("`usl` (9.5) must be greater than `lsl` (10.0)")
    >>> area.messages[0][0], "9.5" in area.messages[0][1]
    ('error', True)
    """

    _KINDS = {"error": "Problem", "warning": "Caution", "info": "Note", "ok": "Done"}
    _current: MessageArea | None = None
    limit = 6

    def __init__(self, **kwargs):
        self._list = widgets.HTML("")
        self._clear = widgets.Button(
            description="Clear messages",
            icon="times",
            layout={"display": "none", "width": "auto", "align_self": "flex-end"},
        )
        self._clear.add_class("sk-clear")
        self._clear.on_click(lambda _b: self.clear())
        self.messages: list[tuple[str, str, str]] = []
        super().__init__([self._list, self._clear], **kwargs)
        self.add_class("sk-messages")
        MessageArea._current = self

    @classmethod
    def current(cls) -> MessageArea | None:
        """The most recently built message area (one workbook per kernel)."""
        return cls._current

    def show(self, kind: str, text: str) -> None:
        if kind not in self._KINDS:
            kind = "info"
        stamp = datetime.now().strftime("%H:%M:%S")
        self.messages.insert(0, (kind, str(text), stamp))
        del self.messages[self.limit :]
        self._render()

    def error(self, text: str) -> None:
        self.show("error", text)

    def warning(self, text: str) -> None:
        self.show("warning", text)

    def info(self, text: str) -> None:
        self.show("info", text)

    def ok(self, text: str) -> None:
        self.show("ok", text)

    def clear(self) -> None:
        self.messages.clear()
        self._render()

    def _render(self) -> None:
        parts = [
            f'<div class="sk-msg sk-msg-{kind}" role="{"alert" if kind == "error" else "status"}">'
            f'<span class="sk-msg-kind">{self._KINDS[kind]}</span>{esc(text)}'
            f'<span class="sk-msg-time">{stamp}</span></div>'
            for kind, text, stamp in self.messages
        ]
        self._list.value = "".join(parts)
        self._clear.layout.display = "" if self.messages else "none"


def describe_exception(exc: BaseException) -> str:
    """The text a user sees for an exception: our input errors verbatim, others in short.

    Examples
    --------
    >>> describe_exception(StudyInputError("`lsl` must be a number"))
    '`lsl` must be a number'
    >>> describe_exception(KeyError("x"))
    "Something went wrong: KeyError: 'x'. The details are in the server log."
    """
    if isinstance(exc, StudyInputError):
        return str(exc)
    return f"Something went wrong: {type(exc).__name__}: {exc}. The details are in the server log."


def guarded(callback: Callable | None = None, *, messages: MessageArea | None = None):
    """Wrap a widget callback so every exception becomes a message in the page.

    ``StudyInputError`` (and subclasses) show their own text; any other exception shows
    "Something went wrong: <type>: <message>" and its traceback goes to the ``studykit.app``
    logger (the server log), never to the page. The callback's return value is passed
    through (``None`` when it failed).

    Use as ``@guarded`` or ``guarded(messages=area)(fn)``; without ``messages`` the most
    recently built :class:`MessageArea` is used.

    Examples
    --------
    >>> area = MessageArea()
    >>> @guarded(messages=area)
    ... def on_click(_button):
    ...     raise StudyInputError("`usl` (9.5) must be greater than `lsl` (10.0)")
    >>> on_click(None)
    >>> area.messages[0][:2]
    ('error', '`usl` (9.5) must be greater than `lsl` (10.0)')
    """

    def decorate(fn: Callable) -> Callable:
        @functools.wraps(fn)
        def wrapper(*args, **kwargs):
            try:
                return fn(*args, **kwargs)
            except Exception as exc:  # noqa: BLE001 - the whole point: nothing escapes
                if isinstance(exc, StudyInputError):
                    log.info("input error in %s: %s", getattr(fn, "__name__", fn), exc)
                else:
                    log.exception("callback %s failed", getattr(fn, "__name__", fn))
                area = messages or MessageArea.current()
                if area is not None:
                    area.error(describe_exception(exc))
                return None

        wrapper.__studykit_guarded__ = True
        return wrapper

    return decorate(callback) if callback is not None else decorate

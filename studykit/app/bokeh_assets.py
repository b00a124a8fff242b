"""BokehJS delivery and small chart helpers for the workbook.

Under ``studykit serve`` (see :mod:`studykit.app.server`) BokehJS is served once as a static,
gzip-compressed, cacheable file and the page gets a single ``<script src>`` tag. Outside that
server (JupyterLab, nbval) the full library is inlined instead so the notebook still works
offline; that costs about 1.3 MB in the saved output.
"""

from __future__ import annotations

import json
import os
from typing import Any

import ipywidgets as widgets

from studykit import theme

ENV_BOKEHJS_URL = "STUDYKIT_BOKEHJS_URL"  # same name as studykit.app.server.ENV_BOKEHJS_URL

#: the names bokeh 3's ``Model.__init_subclass__`` uses: its own step is the model naming of
#: ``HasProps``, then a call signature and an example note for the documentation, nothing else
_MODEL_SUBCLASS_NAMES = frozenset(
    {
        "super",
        "__init_subclass__",
        "__module__",
        "startswith",
        "__dict__",
        "str",
        "parameters",
        "__init__",
        "Signature",
        "__signature__",
        "process_example",
    }
)


def import_bokeh_models() -> bool:
    """Import ``bokeh.models`` and ``bokeh.plotting`` without the documentation each of
    bokeh's model classes gets as it is defined; True when that step was left out.

    bokeh 3 gives every class of ``bokeh.models`` a call signature (``__init__.__signature__``,
    from the defaults of all its properties) and an example note in its docstring while the
    module is imported: about 0.1 s of the workbook kernel's start, for ``help()`` and editors
    only, which a served page never uses. Here that step is left out for the classes defined
    during this import (the model naming of ``HasProps``, which BokehJS relies on, runs as
    before; classes defined later get bokeh's own step). Only when bokeh's step is the one this
    was written for (the names its code uses, :data:`_MODEL_SUBCLASS_NAMES`) and
    ``bokeh.models`` is not imported yet; otherwise a plain import.
    """
    import sys

    if "bokeh.models" in sys.modules:
        return False
    from bokeh.core.has_props import HasProps
    from bokeh.model.model import Model

    original = Model.__dict__.get("__init_subclass__")
    naming = HasProps.__dict__.get("__init_subclass__")
    func = getattr(original, "__func__", None)
    if func is None or naming is None or set(func.__code__.co_names) != _MODEL_SUBCLASS_NAMES:
        import bokeh.models  # noqa: F401
        import bokeh.plotting  # noqa: F401

        return False

    def named_only(cls) -> None:
        naming.__func__(cls)

    model: Any = Model
    model.__init_subclass__ = classmethod(named_only)
    try:
        import bokeh.models  # noqa: F401
        import bokeh.plotting  # noqa: F401
    finally:
        model.__init_subclass__ = original
    return True


def bokehjs_html(*, extras: tuple[str, ...] = ()) -> str:
    """HTML that makes ``window.Bokeh`` available to the page.

    Under the workbook server (``STUDYKIT_BOKEHJS_URL`` set) a small script adds one
    ``<script src>`` per bundle, in order, except for a bundle the page has a ``<script>`` tag
    for already (the server's pages load the main bundle from their ``<head>``,
    :mod:`studykit.app.server`): BokehJS is never run twice.

    Parameters
    ----------
    extras : tuple of str
        Extra BokehJS bundles to load: ``"widgets"``, ``"tables"``.

    Examples
    --------
    >>> import os
    >>> os.environ["STUDYKIT_BOKEHJS_URL"] = "/studykit/bokehjs/3/"
    >>> print(bokehjs_html())  # doctest: +NORMALIZE_WHITESPACE
    <script type="text/javascript">(function () { var urls = ["/studykit/bokehjs/3/bokeh.min.js"];
    urls.filter(function (u) { return !document.querySelector('script[src="' + u + '"]'); })
    .forEach(function (u) { var s = document.createElement("script"); s.src = u;
    s.async = false; document.head.appendChild(s); }); })();</script>
    >>> del os.environ["STUDYKIT_BOKEHJS_URL"]
    """
    names = ["bokeh.min.js", *(f"bokeh-{e}.min.js" for e in extras)]
    base = os.environ.get(ENV_BOKEHJS_URL)
    if base:
        if not base.endswith("/"):
            base += "/"
        urls = json.dumps([base + n for n in names])
        return (
            f'<script type="text/javascript">(function () {{ var urls = {urls};\n'
            "urls.filter(function (u) { return !document.querySelector('script[src=\"' + u + "
            '\'"]\'); })\n.forEach(function (u) { var s = document.createElement("script"); '
            "s.src = u;\ns.async = false; document.head.appendChild(s); }); })();</script>"
        )
    from bokeh.resources import Resources

    components = ["bokeh", *(f"bokeh-{e}" for e in extras)]
    return Resources(mode="inline", components=components).render_js()


def load_bokehjs(*, extras: tuple[str, ...] = ()) -> None:
    """Display :func:`bokehjs_html` as an output (call once, before the first chart)."""
    from IPython.display import HTML, display

    display(HTML(bokehjs_html(extras=extras)))


def chart_widget(layout, **kwargs) -> widgets.Widget:
    """Wrap a bokeh layout as a live ipywidget (``jupyter_bokeh.BokehModel``)."""
    from jupyter_bokeh.widgets import BokehModel

    return BokehModel(layout, **kwargs)


def values_in_order_figure(values, *, title: str = "", unit: str | None = None, fig=None):
    """A plain look at the values in file order (no limits, no statistics).

    Parameters
    ----------
    values : sequence of float
        Values as read; ``nan`` entries are gaps.
    title, unit : str
        Chart title and the y-axis unit.
    fig : bokeh figure, optional
        Figure to draw into; a new one is made if omitted.

    Returns
    -------
    bokeh.plotting.figure
        The figure, with a ``ColumnDataSource`` named ``"values"``.

    Examples
    --------
    >>> f = values_in_order_figure([1.0, 2.0, float("nan"), 3.0], title="Bore", unit="mm")
    >>> f.select_one({"name": "values"}).data["order"]
    [1, 2, 3, 4]
    """
    from bokeh.models import ColumnDataSource
    from bokeh.plotting import figure

    ys = [float(v) for v in values]
    source = ColumnDataSource({"order": list(range(1, len(ys) + 1)), "value": ys}, name="values")
    if fig is None:
        fig = figure(
            height=260,
            sizing_mode="stretch_width",
            title=title,
            tools="pan,wheel_zoom,box_zoom,reset,save",
            toolbar_location="right",
            x_axis_label="Order in file",
            y_axis_label=f"Value ({unit})" if unit else "Value",
        )
    fig.line("order", "value", source=source, **theme.bokeh_line_kwargs("data"))
    fig.scatter("order", "value", source=source, **theme.bokeh_marker_kwargs("data"))
    theme.style_bokeh_figure(fig)
    return fig

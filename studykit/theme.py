"""studykit's visual language: one palette and one set of marks for the workbook and the PDF.

Every chart, in the browser (bokeh) and in the PDF (matplotlib), draws its lines and points
through the named *roles* below, so a control limit looks the same on screen and on paper.

Choices
-------
* Colours come from the eight-colour palette of Okabe and Ito, designed to stay distinguishable
  for the common forms of colour-vision deficiency (protanopia, deuteranopia, tritanopia).
* Colour is never the only carrier of meaning: every role also has its own line style or marker
  shape, and every verdict has a symbol and a word, so a grey-scale print or a colour-blind reader
  loses nothing.
* Sizes are chosen to stay legible on a meeting-room projector: data lines 2 px, limits 2 px,
  markers 7-11 px, axis text 13 px on screen and 10-11 pt on paper (common practice, no source).

References
----------
.. [1] M. Okabe and K. Ito, "Color Universal Design (CUD): how to make figures and presentations
   that are friendly to colorblind people", J*FLY, 2002/2008, https://jfly.uni-koeln.de/color/
.. [2] B. Wong, "Points of view: Color blindness", Nature Methods 8, 441 (2011),
   doi:10.1038/nmeth.1618 (reprints the Okabe-Ito palette with its RGB values).

Examples
--------
>>> from studykit import theme
>>> theme.ROLES["control_limit"].color
'#D55E00'
>>> theme.ROLES["control_limit"].mpl_linestyle
'--'
>>> markers = [role.marker for role in theme.ROLES.values() if role.marker]
>>> len(markers) == len(set(markers))  # point roles differ by shape, not colour alone
True
>>> theme.VERDICTS["fail"].symbol
'✗'
"""

from __future__ import annotations

import contextlib
from dataclasses import asdict, dataclass

from studykit import names

# --- the Okabe-Ito palette [1], [2]; hex values as published (Wong 2011, Fig. 2) ----------------
OKABE_ITO = {
    "black": "#000000",
    "orange": "#E69F00",
    "sky_blue": "#56B4E9",
    "bluish_green": "#009E73",
    "yellow": "#F0E442",
    "blue": "#0072B2",
    "vermillion": "#D55E00",
    "reddish_purple": "#CC79A7",
}

#: The order in which series take the palette's colours (charts with several series: streams,
#: appraisers, models); yellow last, as it is the weakest on white.
SERIES_ORDER = (
    "blue",
    "orange",
    "bluish_green",
    "reddish_purple",
    "sky_blue",
    "vermillion",
    "black",
    "yellow",
)

# Neutral tones for text, rules and page: our own, each tinted with the palette's blue (#0072B2)
# so the frame belongs to the charts (not part of the published palette). The mix is
# ``(1 - t) * base + t * blue`` per channel; contrast is checked in tests/test_app_theme.py.
INK = "#12212B"  # body text: near-black + 10 % blue (16.4:1 on white)
INK_SOFT = "#445A69"  # secondary text, axis labels: slate + 15 % blue (7.2:1 on white)
RULE = "#CBDAE2"  # borders, grid: light grey + 10 % blue
RULE_SOFT = "#DEE7EC"  # row lines inside tables: + 6 % blue
PAPER = "#FFFFFF"
PANEL = "#F0F7FA"  # quiet panel background: white + 6 % blue
PAGE = "#F5F9FC"  # the workbook's page behind its cards: white + 4 % blue
TINT = "#E0EEF6"  # information notes, the current step's halo: white + 12 % blue
EXCLUDED_GREY = "#778D9A"  # excluded points: grey + 15 % blue (3.5:1 on white)
ACCENT = "#0072B2"  # Okabe-Ito blue: the current step, primary buttons (white text 5.2:1)
ACCENT_DEEP = "#005A8C"  # blue darkened: links and text in the accent colour (7.4:1 on white)
# The keyboard focus ring: a dark ring with a yellow halo (Okabe-Ito yellow), visible on white, on
# the page tint and on the blue of the current step (WCAG 2.2 SC 2.4.13 asks 3:1 for the ring).
FOCUS = INK
FOCUS_HALO = "#F0E442"

# Two palette colours are too light for a line on white (WCAG 2.1 SC 1.4.11 asks 3:1 for graphics
# needed to read a chart): they are darkened, keeping their hue, until they reach 3:1.
ORANGE_LINE = "#C68900"  # Okabe-Ito orange x 0.86 -> 3.0:1 on white
SKY_BLUE_LINE = "#4B9DCB"  # Okabe-Ito sky blue x 0.87 -> 3.0:1 on white

FONT_FAMILY = "DejaVu Sans"  # ships with matplotlib, so the PDF never falls back silently
CSS_FONT_STACK = '"Segoe UI", "Helvetica Neue", Arial, "DejaVu Sans", sans-serif'


@dataclass(frozen=True)
class Role:
    """How one kind of chart element is drawn.

    Attributes
    ----------
    name : str
        Role key, e.g. ``"control_limit"``.
    label : str
        Legend text.
    color : str
        Hex colour.
    line_dash : str or None
        Dash name for line roles: ``"solid"``, ``"dashed"``, ``"dotted"``, ``"dashdot"``,
        ``"longdash"`` (see ``bokeh_dash`` and ``mpl_linestyle``). Limit lines all differ.
    line_width : float
        Line width in screen pixels (matplotlib: points, scaled by ``PT_PER_PX``).
    marker : str or None
        bokeh marker name for point roles (matplotlib code in ``mpl_marker``).
    marker_size : float
        Marker size in screen pixels.
    filled : bool
        Whether the marker is filled.
    """

    name: str
    label: str
    color: str
    line_dash: str | None = None
    line_width: float = 2.0
    marker: str | None = None
    marker_size: float = 7.0
    filled: bool = True

    @property
    def mpl_linestyle(self) -> str | None:
        """The matplotlib line style for ``line_dash``."""
        return _DASHES[self.line_dash][1] if self.line_dash else None

    @property
    def bokeh_dash(self):
        """The bokeh ``line_dash`` value for ``line_dash``."""
        return _DASHES[self.line_dash][0] if self.line_dash else "solid"

    @property
    def mpl_marker(self) -> str | None:
        """The matplotlib marker code for ``marker``."""
        return _MPL_MARKER.get(self.marker) if self.marker else None

    def to_dict(self) -> dict:
        """JSON-safe description of the role."""
        return asdict(self)


# our dash names -> (bokeh dash, matplotlib linestyle)
_DASHES = {
    "solid": ("solid", "-"),
    "dashed": ("dashed", "--"),
    "dotted": ("dotted", ":"),
    "dashdot": ("dashdot", "-."),
    "longdash": ([12, 5], (0, (8, 3.5))),
}
_MPL_MARKER = {
    "circle": "o",
    "square": "s",
    "diamond": "D",
    "triangle": "^",
    "inverted_triangle": "v",
    "x": "x",
    "cross": "+",
}
PT_PER_PX = 0.75  # 1 CSS pixel = 0.75 pt

ROLES: dict[str, Role] = {
    r.name: r
    for r in [
        Role("data", "Measured values", OKABE_ITO["blue"], "solid", 1.6, "circle", 7.0),
        Role("centre_line", "Centre line", OKABE_ITO["black"], "solid", 2.0),
        Role("control_limit", "Control limit", OKABE_ITO["vermillion"], "dashed", 2.0),
        Role("warning_limit", "Warning limit", ORANGE_LINE, "dotted", 2.0),
        Role("spec_limit", "Specification limit", OKABE_ITO["reddish_purple"], "dashdot", 2.5),
        Role("target", "Target", OKABE_ITO["bluish_green"], "longdash", 2.0),
        Role("fit", "Fitted model", SKY_BLUE_LINE, "solid", 2.5),
        Role("signal", "Signal (rule broken)", OKABE_ITO["vermillion"], None, 0, "diamond", 11.0),
        Role("excluded", "Excluded (reason recorded)", EXCLUDED_GREY, None, 0, "x", 10.0, False),
        Role("secondary", "Second series", ORANGE_LINE, "solid", 1.6, "square", 7.0),
    ]
}


@dataclass(frozen=True)
class Verdict:
    """How a verdict is shown: colour, symbol and word together (never colour alone).

    ``color`` is for marks (bars, borders); ``text_color`` is the same hue darkened to reach
    4.5:1 on ``background`` (WCAG 2.1 SC 1.4.3, contrast for normal-size text).
    """

    name: str
    label: str
    color: str
    background: str
    symbol: str
    text_color: str


VERDICTS: dict[str, Verdict] = {
    "pass": Verdict(
        "pass", names.VERDICT_STATES["meets"], OKABE_ITO["bluish_green"], "#E3F4EE", "✓", "#007D5B"
    ),
    "fail": Verdict(
        "fail",
        names.VERDICT_STATES["does_not_meet"],
        OKABE_ITO["vermillion"],
        "#FBE9E0",
        "✗",
        "#B14E00",
    ),
    "caution": Verdict("caution", "Read with care", ORANGE_LINE, "#FDF3D8", "!", "#956700"),
    "pending": Verdict(
        "pending", names.VERDICT_STATES["not_analysed"], INK_SOFT, PANEL, "…", INK_SOFT
    ),
    # a verdict computed but withheld (signals left, trimming, order): the text says why
    "withheld": Verdict(
        "withheld", names.VERDICT_STATES["no_verdict"], INK_SOFT, PANEL, "?", INK_SOFT
    ),
}


def relative_luminance(hex_color: str) -> float:
    """Relative luminance of an sRGB colour as WCAG 2.1 defines it (0 black, 1 white).

    References
    ----------
    W3C, Web Content Accessibility Guidelines 2.1, definition "relative luminance".

    Examples
    --------
    >>> relative_luminance("#FFFFFF"), relative_luminance("#000000")
    (1.0, 0.0)
    """
    h = hex_color.lstrip("#")
    channels = [int(h[i : i + 2], 16) / 255 for i in (0, 2, 4)]
    r, g, b = (c / 12.92 if c <= 0.04045 else ((c + 0.055) / 1.055) ** 2.4 for c in channels)
    return 0.2126 * r + 0.7152 * g + 0.0722 * b


def contrast_ratio(foreground: str, background: str) -> float:
    """WCAG 2.1 contrast ratio ``(L1 + 0.05) / (L2 + 0.05)``, from 1 to 21.

    Examples
    --------
    >>> contrast_ratio("#000000", "#FFFFFF")
    21.0
    """
    a, b = sorted([relative_luminance(foreground), relative_luminance(background)], reverse=True)
    return (a + 0.05) / (b + 0.05)


def color(role: str) -> str:
    """Colour of a role or verdict by name.

    Examples
    --------
    >>> color("pass")
    '#009E73'
    """
    if role in ROLES:
        return ROLES[role].color
    if role in VERDICTS:
        return VERDICTS[role].color
    from studykit.errors import StudyInputError

    known = ", ".join([*ROLES, *VERDICTS])
    raise StudyInputError(f"`role` ({role!r}) is not a known role; use one of: {known}")


# --- matplotlib (PDF) ---------------------------------------------------------------------------


def matplotlib_style() -> dict:
    """rcParams for PDF figures in studykit's style (use with ``matplotlib.rc_context``).

    Examples
    --------
    >>> style = matplotlib_style()
    >>> style["axes.prop_cycle"].by_key()["color"][0]
    '#0072B2'
    """
    from cycler import cycler

    cycle = [OKABE_ITO[k] for k in SERIES_ORDER[:-1]]  # yellow left out on paper
    return {
        "font.family": "sans-serif",
        "font.sans-serif": [FONT_FAMILY],
        "font.size": 10.0,
        "axes.titlesize": 11.0,
        "axes.titleweight": "bold",
        "axes.titlelocation": "left",
        "axes.labelsize": 10.0,
        "axes.labelcolor": INK,
        "axes.edgecolor": INK_SOFT,
        "axes.linewidth": 0.8,
        "axes.grid": True,
        "axes.spines.top": False,
        "axes.spines.right": False,
        "axes.prop_cycle": cycler(color=cycle),
        "grid.color": RULE,
        "grid.linewidth": 0.6,
        "grid.linestyle": "-",
        "xtick.color": INK_SOFT,
        "ytick.color": INK_SOFT,
        "xtick.labelsize": 9.0,
        "ytick.labelsize": 9.0,
        "lines.linewidth": ROLES["data"].line_width * PT_PER_PX,
        "lines.markersize": ROLES["data"].marker_size * PT_PER_PX,
        "legend.fontsize": 9.0,
        "legend.frameon": False,
        "figure.facecolor": PAPER,
        "axes.facecolor": PAPER,
        "savefig.facecolor": PAPER,
        "figure.dpi": 100,
        "savefig.dpi": 200,
        "pdf.fonttype": 42,  # embed TrueType, text stays searchable
    }


@contextlib.contextmanager
def matplotlib_context():
    """Context manager applying :func:`matplotlib_style` for the figures drawn inside it."""
    import matplotlib

    with matplotlib.rc_context(matplotlib_style()):
        yield


def mpl_line_kwargs(role: str) -> dict:
    """``Axes.plot``/``axhline`` keyword arguments for a line role.

    Examples
    --------
    >>> mpl_line_kwargs("spec_limit")["linestyle"]
    '-.'
    """
    r = _role(role)
    return {
        "color": r.color,
        "linestyle": r.mpl_linestyle or "-",
        "linewidth": r.line_width * PT_PER_PX,
        "label": r.label,
    }


def mpl_marker_kwargs(role: str) -> dict:
    """``Axes.scatter`` keyword arguments for a point role (``s`` is an area in pt²)."""
    r = _role(role)
    size_pt = r.marker_size * PT_PER_PX
    kw = {"marker": r.mpl_marker or "o", "s": size_pt**2, "label": r.label, "zorder": 3}
    if r.filled and r.marker not in ("x", "cross"):
        kw.update(color=r.color, edgecolors=PAPER, linewidths=0.5)
    else:
        kw.update(color=r.color, linewidths=1.5)
    return kw


# --- bokeh (workbook) ---------------------------------------------------------------------------


def bokeh_line_kwargs(role: str) -> dict:
    """Keyword arguments for ``figure.line``/``Span`` for a line role.

    Examples
    --------
    >>> bokeh_line_kwargs("control_limit")
    {'line_color': '#D55E00', 'line_dash': 'dashed', 'line_width': 2.0}
    """
    r = _role(role)
    return {"line_color": r.color, "line_dash": r.bokeh_dash, "line_width": r.line_width}


def bokeh_marker_kwargs(role: str) -> dict:
    """Keyword arguments for ``figure.scatter`` for a point role.

    Examples
    --------
    >>> bokeh_marker_kwargs("excluded")["marker"]
    'x'
    """
    r = _role(role)
    kw = {"marker": r.marker or "circle", "size": r.marker_size, "line_color": r.color}
    if r.filled and r.marker not in ("x", "cross"):
        kw.update(fill_color=r.color, line_color=PAPER, line_width=0.8)
    else:
        kw.update(fill_alpha=0.0, line_width=2.0)
    return kw


def bokeh_theme():
    """A :class:`bokeh.themes.Theme` with studykit's fonts, sizes and quiet axes."""
    from bokeh.themes import Theme

    text = {"text_font": "Helvetica, Arial, sans-serif"}
    return Theme(
        json={
            "attrs": {
                "Plot": {
                    "background_fill_color": PAPER,
                    "border_fill_color": PAPER,
                    "outline_line_color": None,
                    "min_border_left": 50,
                },
                "Axis": {
                    "axis_label_text_font_size": "13px",
                    "axis_label_text_color": INK_SOFT,
                    "axis_label_text_font_style": "normal",
                    "major_label_text_font_size": "12px",
                    "major_label_text_color": INK_SOFT,
                    "axis_line_color": INK_SOFT,
                    "major_tick_line_color": INK_SOFT,
                    "minor_tick_line_color": None,
                },
                "Grid": {"grid_line_color": RULE, "grid_line_alpha": 0.8},
                "Title": {
                    "text_font_size": "14px",
                    "text_color": INK,
                    "text_font_style": "bold",
                    **text,
                },
                "Legend": {
                    "label_text_font_size": "12px",
                    "label_text_color": INK,
                    "border_line_color": None,
                    "background_fill_alpha": 0.85,
                },
            }
        }
    )


def style_bokeh_figure(fig):
    """Apply the theme's look to an existing bokeh figure in place and return it.

    Widgets built with :class:`jupyter_bokeh.widgets.BokehModel` do not pass through a bokeh
    ``Document`` theme, so charts call this on each figure they build.
    """
    fig.background_fill_color = PAPER
    fig.border_fill_color = PAPER
    fig.outline_line_color = None
    fig.toolbar.logo = None
    if fig.title is not None:
        fig.title.text_font_size = "14px"
        fig.title.text_color = INK
    for axis in [*fig.xaxis, *fig.yaxis]:
        axis.axis_label_text_font_size = "13px"
        axis.axis_label_text_color = INK_SOFT
        axis.axis_label_text_font_style = "normal"
        axis.major_label_text_font_size = "12px"
        axis.major_label_text_color = INK_SOFT
        axis.axis_line_color = INK_SOFT
        axis.minor_tick_line_color = None
    for grid in [*fig.xgrid, *fig.ygrid]:
        grid.grid_line_color = RULE
    wrap_legends(fig)
    return fig


# A horizontal legend is one row wide unless told otherwise, and bokeh clips what does not fit
# its plot. On every change of the plot's width this picks the fewest rows whose widest
# columns fit: each entry's width is measured with the legend's own font (canvas measureText).
_WRAP_LEGEND_JS = """
const ctx = (window._studykitLegendCtx = window._studykitLegendCtx ||
             document.createElement('canvas').getContext('2d'));
const avail = fig.inner_width + (fig.min_border_left || 0) - 16;
if (!(avail > 0)) { return; }
let extra = 0;  // pixels the added legend rows take
for (const leg of legends) {
  ctx.font = `${leg.label_text_font_size || '12px'} Helvetica, Arial, sans-serif`;
  const w = leg.items.map((it) => {
    const l = it.label;
    const text = typeof l === 'string' ? l : ((l && (l.value ?? l.field)) || '');
    return ctx.measureText(String(text)).width + leg.glyph_width + leg.label_standoff
      + leg.spacing;
  }).sort((a, b) => b - a);
  let cols = w.length;
  while (cols > 1 && w.slice(0, cols).reduce((a, b) => a + b, 0)
         + 2 * (leg.padding + leg.margin) > avail) { cols -= 1; }
  const rows = Math.max(1, Math.ceil(w.length / cols));
  if (leg.nrows !== rows) { leg.ncols = 'auto'; leg.nrows = rows; }
  // a row is its glyph or label and the spacing between rows (bokeh applies both ways)
  // (label_height is "auto" in bokeh 3.9; the glyph sets the row)
  const rowPx = Math.max(row_height, (Number(leg.glyph_height) || 20) + (Number(leg.spacing) || 0));
  extra = Math.max(extra, (rows - (rows0[legends.indexOf(leg)] || 1)) * rowPx);
}
// the plot keeps its own height: the figure grows by the rows the legends added; a height set
// from Python since our last change (e.g. one row per characteristic) becomes the new base
if (!(base_height > 0) || typeof fig.height !== 'number') { return; }
if (fig._skSet === undefined || fig.height !== fig._skSet) { fig._skBase = fig.height; }
const height = fig._skBase + extra;
fig._skSet = height;
if (fig.height !== height) { fig.height = height; }
"""


def wrap_legends(fig) -> None:
    """Let the horizontal legends of ``fig`` take as many rows as its width needs (browser side).

    Examples
    --------
    >>> from bokeh.models import Legend, LegendItem
    >>> from bokeh.plotting import figure
    >>> f = figure(width=300)
    >>> r = f.line([1, 2], [1, 2])
    >>> f.add_layout(Legend(items=[LegendItem(label="a", renderers=[r])],
    ...                     orientation="horizontal"), "above")
    >>> wrap_legends(f)
    >>> len(f.js_property_callbacks["change:inner_width"])
    1
    """
    from bokeh.models import CustomJS

    legends = [leg for leg in fig.legend if leg.orientation == "horizontal"]
    if not legends or fig.js_property_callbacks.get("change:inner_width"):
        return
    rows0 = [leg.nrows if isinstance(leg.nrows, int) else 1 for leg in legends]
    row_height = 26  # one legend row at 12 px text with its glyph and padding
    callback = CustomJS(
        args={
            "fig": fig,
            "legends": legends,
            "rows0": rows0,
            "row_height": row_height,
            "base_height": fig.height if isinstance(fig.height, int) else 0,
        },
        code=_WRAP_LEGEND_JS,
    )
    fig.js_on_change("inner_width", callback)
    fig.js_on_change("height", callback)  # a new height from Python gets the legend rows too


def _role(name: str) -> Role:
    if name not in ROLES:
        from studykit.errors import StudyInputError

        raise StudyInputError(
            f"`role` ({name!r}) is not a chart role; use one of: {', '.join(ROLES)}"
        )
    return ROLES[name]

"""Matplotlib figures of a gauge study, for the PDF.

Every builder takes a :class:`~studykit.stats.gauge.GaugeResult` (which carries its own values
and chart limits; nothing is computed here) and an optional ``ax``; it draws into ``ax`` when
given, otherwise into a new figure, and returns the :class:`matplotlib.figure.Figure`.

Colours, line styles and markers come from :mod:`studykit.theme` (Okabe-Ito palette). Appraisers
differ by colour AND marker, so the figures read in grey scale too.
"""

from __future__ import annotations

import functools

import numpy as np
from matplotlib.figure import Figure

from studykit import theme
from studykit.stats.gauge import (
    APPRAISER,
    GAUGE_RR,
    INTERACTION,
    PART,
    REPEATABILITY,
    REPRODUCIBILITY,
    GaugeResult,
)

__all__ = [
    "components_figure",
    "by_part_figure",
    "by_appraiser_figure",
    "range_chart_figure",
    "mean_chart_figure",
    "interaction_figure",
    "all_figures",
]

_APPRAISER_COLOURS = [theme.OKABE_ITO[k] for k in (
    "blue", "orange", "bluish_green", "reddish_purple", "sky_blue", "vermillion", "black",
    "yellow")]
_APPRAISER_MARKERS = ["o", "s", "D", "^", "v", "P", "X", "*"]
_BAR_NAMES = (GAUGE_RR, REPEATABILITY, REPRODUCIBILITY, PART)
_BAR_LABELS = {GAUGE_RR: "Gauge R&R", REPEATABILITY: "Repeat.", REPRODUCIBILITY: "Reprod.",
               PART: "Part-to-part", APPRAISER: "Appraiser", INTERACTION: "Appr. x part"}


def _appraiser_style(j: int) -> dict:
    return {"color": _APPRAISER_COLOURS[j % len(_APPRAISER_COLOURS)],
            "marker": _APPRAISER_MARKERS[j % len(_APPRAISER_MARKERS)]}


def _styled(build):
    """Run a figure builder inside studykit's matplotlib style."""

    @functools.wraps(build)
    def wrapper(*args, **kwargs):
        with theme.matplotlib_context():
            return build(*args, **kwargs)

    return wrapper


def _axes(ax, size=(6.4, 3.4)):
    if ax is not None:
        return ax.figure, ax
    fig = Figure(figsize=size, layout="constrained")
    return fig, fig.add_subplot()


def _finish(ax, title: str, xlabel: str, ylabel: str) -> None:
    ax.set_title(title, loc="left", fontweight="bold", fontsize=11)
    ax.set_xlabel(xlabel)
    ax.set_ylabel(ylabel)
    ax.grid(True, color=theme.RULE, linewidth=0.6)
    ax.set_axisbelow(True)
    for side in ("top", "right"):
        ax.spines[side].set_visible(False)


def _hline(ax, y: float, role: str, text: str) -> None:
    kw = theme.mpl_line_kwargs(role)
    kw["label"] = text
    ax.axhline(y, **kw)


@_styled
def components_figure(result: GaugeResult, *, ax=None) -> Figure:
    """Bars of %contribution, %study variation and (with limits) %tolerance per component.

    Groups: gauge R&R, repeatability, reproducibility, part-to-part; 3 or 4 x 2 or 3 bars.
    """
    fig, ax = _axes(ax)
    series = [("pct_contribution", "% contribution", theme.OKABE_ITO["blue"], None),
              ("pct_study_variation", "% study variation", theme.OKABE_ITO["orange"], "//")]
    if result.tolerance is not None:
        series.append(("pct_tolerance", "% tolerance", theme.OKABE_ITO["bluish_green"], ".."))
    x = np.arange(len(_BAR_NAMES))
    width = 0.8 / len(series)
    for k, (field, label, colour, hatch) in enumerate(series):
        heights = [getattr(result.component(n), field) or 0.0 for n in _BAR_NAMES]
        ax.bar(x + (k - (len(series) - 1) / 2) * width, heights, width, label=label,
               color=colour, hatch=hatch, edgecolor=theme.PAPER, linewidth=0.5)
    for level, style in ((10, ":"), (30, "--")):
        ax.axhline(level, color=theme.INK_SOFT, linestyle=style, linewidth=1.0)
    ax.set_xticks(x, [_BAR_LABELS[n] for n in _BAR_NAMES])
    ax.legend(loc="upper left", ncols=len(series))
    ax.set_ylim(0, max(110.0, ax.get_ylim()[1]))
    _finish(ax, "Components of variation", "", "percent")
    return fig


@_styled
def by_part_figure(result: GaugeResult, *, ax=None) -> Figure:
    """Every measurement by part (points), with the part means joined by a line."""
    fig, ax = _axes(ax)
    cube = result.values
    p = cube.shape[0]
    x = np.repeat(np.arange(p), cube.shape[1] * cube.shape[2])
    pts = theme.mpl_marker_kwargs("data")
    pts.update(label="measurement", s=pts["s"] * 0.7, alpha=0.8)
    ax.scatter(x, cube.reshape(p, -1).ravel(), **pts)
    line = theme.mpl_line_kwargs("centre_line")
    line.update(label="part mean", marker="_", markersize=14)
    ax.plot(np.arange(p), cube.mean(axis=(1, 2)), **line)
    ax.set_xticks(np.arange(p), result.part_labels)
    ax.legend(loc="best")
    _finish(ax, "Measurements by part", "part", "measurement")
    return fig


@_styled
def by_appraiser_figure(result: GaugeResult, *, ax=None) -> Figure:
    """Every measurement by appraiser (points in the appraiser's colour and marker), means joined."""
    fig, ax = _axes(ax)
    cube = result.values
    o = cube.shape[1]
    for j in range(o):
        st = _appraiser_style(j)
        vals = cube[:, j, :].ravel()
        ax.scatter(np.full(vals.size, j), vals, color=st["color"], marker=st["marker"],
                   s=30, alpha=0.75, edgecolors=theme.PAPER, linewidths=0.4, zorder=3)
    line = theme.mpl_line_kwargs("centre_line")
    line.update(label="appraiser mean", marker="_", markersize=14)
    ax.plot(np.arange(o), cube.mean(axis=(0, 2)), **line)
    ax.set_xticks(np.arange(o), result.appraiser_labels)
    ax.legend(loc="best")
    _finish(ax, "Measurements by appraiser", "appraiser", "measurement")
    return fig


def _by_appraiser_chart(result: GaugeResult, ax, stat: np.ndarray, centre: float, ucl: float,
                        lcl: float | None, title: str, ylabel: str) -> None:
    p, o = stat.shape
    for j in range(o):
        st = _appraiser_style(j)
        xs = j * (p + 1) + np.arange(p)
        ax.plot(xs, stat[:, j], color=st["color"], marker=st["marker"], markersize=5,
                linewidth=1.2, label=f"appraiser {result.appraiser_labels[j]}")
    _hline(ax, centre, "centre_line", "centre line")
    _hline(ax, ucl, "control_limit", "control limits")
    if lcl is not None and lcl > 0:
        kw = theme.mpl_line_kwargs("control_limit")
        kw["label"] = "_nolegend_"
        ax.axhline(lcl, **kw)
    ticks = [j * (p + 1) + (p - 1) / 2 for j in range(o)]
    ax.set_xticks(ticks, result.appraiser_labels)
    ax.legend(loc="upper left", bbox_to_anchor=(1.0, 1.0), fontsize=8)
    _finish(ax, title, "appraiser (parts in order within each)", ylabel)


@_styled
def range_chart_figure(result: GaugeResult, *, ax=None) -> Figure:
    """Range of each part's trials, one segment per appraiser, with Rbar and D3/D4 limits.

    Lines: one per appraiser, the centre line, the upper limit, and the lower limit when it
    is above zero (trials >= 7); ranges above the limit get the theme's signal marker.
    """
    fig, ax = _axes(ax, size=(7.2, 3.4))
    ch = result.charts
    ranges = np.ptp(result.values, axis=2)
    p = ranges.shape[0]
    above = np.argwhere(ranges > ch.range_ucl * (1 + 1e-12))
    if above.size:
        sig = theme.mpl_marker_kwargs("signal")
        sig["label"] = "above the limit"
        ax.scatter(above[:, 1] * (p + 1) + above[:, 0], ranges[above[:, 0], above[:, 1]], **sig)
    _by_appraiser_chart(result, ax, ranges, ch.range_centre, ch.range_ucl, ch.range_lcl,
                        "Range chart by appraiser", "range of trials")
    return fig


@_styled
def mean_chart_figure(result: GaugeResult, *, ax=None) -> Figure:
    """Mean of each part's trials, one segment per appraiser, with grand mean +- A2 Rbar.

    A good gauge puts most means outside these limits: they show the gauge's own noise.
    Lines: one per appraiser, the centre line and both limits.
    """
    fig, ax = _axes(ax, size=(7.2, 3.4))
    ch = result.charts
    _by_appraiser_chart(result, ax, result.values.mean(axis=2), ch.mean_centre, ch.mean_ucl,
                        None, "Mean chart by appraiser", "mean of trials")
    kw = theme.mpl_line_kwargs("control_limit")
    kw["label"] = "_nolegend_"
    ax.axhline(ch.mean_lcl, **kw)
    ax.text(0.01, 0.02, f"{ch.pct_means_outside:.0f} % of means outside the limits",
            transform=ax.transAxes, fontsize=8, color=theme.INK_SOFT)
    return fig


@_styled
def interaction_figure(result: GaugeResult, *, ax=None) -> Figure:
    """Appraiser-by-part interaction: each appraiser's part means joined across parts.

    Parallel lines mean no interaction. Lines: one per appraiser.
    """
    fig, ax = _axes(ax)
    means = result.values.mean(axis=2)
    p, o = means.shape
    for j in range(o):
        st = _appraiser_style(j)
        ax.plot(np.arange(p), means[:, j], color=st["color"], marker=st["marker"],
                markersize=5, linewidth=1.4, label=f"appraiser {result.appraiser_labels[j]}")
    ax.set_xticks(np.arange(p), result.part_labels)
    ax.legend(loc="upper left", bbox_to_anchor=(1.0, 1.0), fontsize=8)
    p_text = "-" if result.interaction_p is None else f"{result.interaction_p:.3g}"
    _finish(ax, f"Appraiser by part (interaction p = {p_text})", "part", "mean of trials")
    return fig


def all_figures(result: GaugeResult) -> dict[str, Figure]:
    """Every gauge figure by name, in report order.

    Returns
    -------
    dict of str to Figure
        ``components``, ``by_part``, ``by_appraiser``, ``range_chart``, ``mean_chart``,
        ``interaction``.

    Examples
    --------
    >>> from studykit.stats.gauge import gauge_rr
    >>> res = gauge_rr([1.0, 1.1, 1.2, 1.1, 2.0, 2.2, 2.1, 2.1], [1, 1, 1, 1, 2, 2, 2, 2],
    ...                ["A", "A", "B", "B"] * 2)
    >>> figs = all_figures(res)
    >>> list(figs)[:2], len(figs["interaction"].axes[0].lines)
    (['components', 'by_part'], 2)
    """
    return {
        "components": components_figure(result),
        "by_part": by_part_figure(result),
        "by_appraiser": by_appraiser_figure(result),
        "range_chart": range_chart_figure(result),
        "mean_chart": mean_chart_figure(result),
        "interaction": interaction_figure(result),
    }

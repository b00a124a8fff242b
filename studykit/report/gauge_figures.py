"""Matplotlib figures of a gauge study, for the PDF and the workbook's gauge step.

The figures tell one story that follows the verdict (:func:`story`):

1. **Where the spread comes from** (``sources``): one horizontal bar per source, its share of
   the study spread, over shaded acceptance bands (below 10 %, 10-30 %, above 30 %: common
   practice, no source); the share of tolerance as a hollow mark on the same row.
2. **Readings by part** (``readings``): every reading, parts along the axis, each appraiser in
   its own colour and marker, the appraiser's part means joined (crossing lines show the
   appraiser-by-part interaction), over the band that the gauge's own noise would explain for a
   mean of the trials (grand mean +- A2 Rbar).
3. **Repeatability check** (``repeatability``): the range of each part's repeat readings, all
   appraisers in one chart, against the mean range and its upper limit (D4 Rbar).

When the gauge itself (repeatability) dominates a gauge that needs action, the repeatability
check comes second; otherwise the readings come second.

Every builder takes a :class:`~studykit.stats.gauge.GaugeResult` (which carries its values and
chart limits; nothing is computed here) and an optional ``ax``; it draws into ``ax`` when given,
otherwise into a new figure, and returns the :class:`matplotlib.figure.Figure`. Colours, line
styles and markers come from :mod:`studykit.theme` (Okabe-Ito palette); appraisers differ by
colour AND marker, so the figures read in grey scale too. Every word a reader sees is in
:data:`LABELS` (one place, so it can move to the shared names module).
"""

from __future__ import annotations

import functools
from collections.abc import Mapping
from typing import TYPE_CHECKING

import numpy as np

from studykit import theme
from studykit.errors import StudyInputError
from studykit.stats.gauge import (
    GAUGE_RR,
    PART,
    REPEATABILITY,
    REPRODUCIBILITY,
    GaugeResult,
)

if TYPE_CHECKING:
    from matplotlib.figure import Figure

__all__ = [
    "LABELS",
    "SOURCE_LABELS",
    "BANDS",
    "sources_figure",
    "readings_figure",
    "repeatability_figure",
    "story",
    "result_from_payload",
    "all_figures",
]

#: Every word the figures show (titles, axes, legends, captions).
LABELS = {
    "sources": "Where the spread comes from",
    "readings": "Readings by part, one colour per appraiser",
    "repeatability": "Repeatability check",
    "share_axis": "share of study spread (%)",
    "tolerance_mark": "share of tolerance",
    "bands_note": "bands: common practice, no source",
    "part_axis": "part",
    "reading_axis": "reading",
    "range_axis": "range of repeat readings",
    "noise_band": "band of the gauge's own noise (mean of trials)",
    "appraiser": "appraiser {label}",
    "mean_range": "mean range",
    "range_limit": "upper limit of a range",
    "above": "above the limit",
    # captions: the story in words
    "cap_sources": (
        "The measurement takes {grr} of the study spread{tol}; the verdict is {status}."
    ),
    "cap_sources_tol": " and {tol} of the tolerance",
    "cap_readings": (
        "{outside} of the part means lie outside the band the gauge's own noise "
        "would explain (the more, the better the gauge tells parts apart). "
        "Lines that cross show appraisers who rank parts differently "
        "(interaction p = {p})."
    ),
    "cap_repeat_ok": (
        "Every part's repeat readings stay within the limit: the gauge repeats "
        "evenly for every appraiser."
    ),
    "cap_repeat_bad": (
        "{n} part-and-appraiser cell(s) repeat worse than the limit ({cells}): "
        "look at those readings first."
    ),
}

#: Source names in words (the order is the order of the rows, top to bottom).
SOURCE_LABELS = {
    GAUGE_RR: "Gauge R&R (all measurement)",
    REPEATABILITY: "Repeatability (the gauge)",
    REPRODUCIBILITY: "Reproducibility (the people)",
    PART: "Part to part",
}

#: Acceptance bands of the share of study spread (common practice, no source): upper edge, key of
#: the theme verdict whose tint shades the band, words.
BANDS = (
    (10.0, "pass", "below 10 %: acceptable"),
    (30.0, "caution", "10 to 30 %: conditional"),
    (None, "fail", "above 30 %: not acceptable"),
)

_APPRAISER_COLOURS = [
    theme.OKABE_ITO["blue"],
    theme.ORANGE_LINE,
    theme.OKABE_ITO["bluish_green"],
    theme.OKABE_ITO["reddish_purple"],
    theme.SKY_BLUE_LINE,
    theme.OKABE_ITO["vermillion"],
    theme.OKABE_ITO["black"],
]
_APPRAISER_MARKERS = ["o", "s", "D", "^", "v", "P", "X", "*"]


def _appraiser_style(j: int) -> dict:
    return {
        "color": _APPRAISER_COLOURS[j % len(_APPRAISER_COLOURS)],
        "marker": _APPRAISER_MARKERS[j % len(_APPRAISER_MARKERS)],
    }


def _styled(build):
    """Run a figure builder inside studykit's matplotlib style."""

    @functools.wraps(build)
    def wrapper(*args, **kwargs):
        with theme.matplotlib_context():
            return build(*args, **kwargs)

    return wrapper


def _axes(ax, size=(6.6, 3.0)):
    if ax is not None:
        return ax.figure, ax
    from matplotlib.figure import Figure  # imported on first use: the workbook starts without it

    fig = Figure(figsize=size, layout="constrained")
    return fig, fig.add_subplot()


def _finish(ax, title: str, xlabel: str, ylabel: str) -> None:
    ax.set_title(title, loc="left", fontweight="bold", fontsize=11)
    ax.set_xlabel(xlabel)
    ax.set_ylabel(ylabel)
    ax.set_axisbelow(True)
    for side in ("top", "right"):
        ax.spines[side].set_visible(False)


def _dodge(n: int) -> np.ndarray:
    """Offsets that spread n appraisers around a part's position (within +-0.3)."""
    return np.zeros(1) if n == 1 else np.linspace(-0.3, 0.3, n)


def _legend_below(ax) -> None:
    """The legend in rows under the axes (the plot keeps the full width on paper and screen)."""
    n = len(ax.get_legend_handles_labels()[0])
    ax.legend(loc="upper center", bbox_to_anchor=(0.5, -0.2), ncols=min(4, max(1, n)), fontsize=7.5)


def _pct(v) -> str:
    return "–" if v is None else f"{v:.1f} %"


def result_from_payload(payload: Mapping) -> GaugeResult:
    """Rebuild the stored :class:`~studykit.stats.gauge.GaugeResult` from its payload.

    The payload (``GaugeResult.to_dict()``) keeps every number of the study and its readings
    (a parts x appraisers x trials cube); the figures need the result object, which is rebuilt
    by :meth:`~studykit.stats.gauge.GaugeResult.from_dict`: nothing is computed again.

    Raises
    ------
    StudyInputError
        When the payload lacks the readings (e.g. written by an older version).

    Examples
    --------
    >>> from studykit.stats.gauge import gauge_rr
    >>> res = gauge_rr([1.0, 1.1, 1.2, 1.1, 2.0, 2.2, 2.1, 2.1], [1, 1, 1, 1, 2, 2, 2, 2],
    ...                ["A", "A", "B", "B"] * 2)
    >>> again = result_from_payload(res.to_dict())
    >>> again.pct_grr == res.pct_grr, again.n_values
    (True, 8)
    """
    try:
        return GaugeResult.from_dict(payload)
    except (KeyError, TypeError, IndexError, ValueError) as exc:
        raise StudyInputError(
            f"the stored gauge study lacks its readings ({type(exc).__name__}: {exc}); its "
            "numbers are shown, but the figures need the readings: run the study again from "
            "its data file to attach a complete result"
        ) from None


def _natural(label):
    """'7' -> 7 (numbers sort as numbers); anything else unchanged."""
    if isinstance(label, str) and label.strip().lstrip("-").isdigit():
        return int(label)
    return label


# --- 1. where the spread comes from ------------------------------------------------------------


@_styled
def sources_figure(result: GaugeResult, *, ax=None) -> Figure:
    """One bar per source: its share of the study spread, over the shaded acceptance bands.

    Bars (top to bottom): gauge R&R, repeatability, reproducibility, part to part; with limits
    a hollow diamond per row marks the share of tolerance. The bands (0-10, 10-30, above 30 %)
    are common practice, no source, and say so on the chart.
    """
    fig, ax = _axes(ax, size=(6.6, 3.0))
    names = list(SOURCE_LABELS)
    shares = [result.component(n).pct_study_variation or 0.0 for n in names]
    tol = (
        [result.component(n).pct_tolerance for n in names] if result.tolerance is not None else None
    )
    top = max(105.0, 1.15 * max([*shares, *[t or 0.0 for t in tol or []]]))
    from matplotlib.patches import Patch

    handles = []
    lo = 0.0
    for edge, key, words in BANDS:
        hi = top if edge is None else edge
        ax.axvspan(lo, hi, color=theme.VERDICTS[key].background, zorder=0, linewidth=0)
        handles.append(
            Patch(
                facecolor=theme.VERDICTS[key].background,
                edgecolor=theme.VERDICTS[key].color,
                linewidth=0.8,
                label=words,
            )
        )
        lo = hi
    y = np.arange(len(names))[::-1].astype(float)
    measurement = theme.OKABE_ITO["blue"]
    colours = [measurement, measurement, measurement, theme.INK_SOFT]
    ax.barh(y, shares, height=0.55, color=colours, edgecolor=theme.PAPER, zorder=2)
    ends = (
        list(shares)
        if tol is None
        else [max(s, t or 0.0) for s, t in zip(shares, tol, strict=True)]
    )
    for yi, s, end in zip(y, shares, ends, strict=True):
        ax.text(
            end + 0.012 * top + (1.2 if end > s else 0.0),
            yi,
            _pct(s),
            va="center",
            ha="left",
            fontsize=8.5,
            color=theme.INK,
            zorder=4,
        )
    if tol is not None:
        ty = [yi for yi, t in zip(y, tol, strict=True) if t is not None]
        tx = [t for t in tol if t is not None]
        handles.append(
            ax.scatter(
                tx,
                ty,
                marker="D",
                s=36,
                facecolors="none",
                edgecolors=theme.INK,
                linewidths=1.2,
                zorder=5,
                label=LABELS["tolerance_mark"],
            )
        )
    ax.set_yticks(y, [SOURCE_LABELS[n] for n in names])
    ax.set_xlim(0, top)
    ax.set_ylim(-0.5, len(names) - 0.5)
    ax.grid(True, axis="x", color=theme.RULE, linewidth=0.6)
    ax.grid(False, axis="y")
    ax.legend(
        handles=handles, loc="upper center", bbox_to_anchor=(0.4, -0.2), ncols=2, fontsize=7.5
    )
    _finish(ax, LABELS["sources"], f"{LABELS['share_axis']} · {LABELS['bands_note']}", "")
    return fig


# --- 2. readings by part -------------------------------------------------------------------------


@_styled
def readings_figure(result: GaugeResult, *, ax=None) -> Figure:
    """Every reading by part, one colour and marker per appraiser, their part means joined.

    Shaded: the band ``mean_lcl .. mean_ucl`` of the stored chart limits (grand mean +- A2
    Rbar), what the gauge's own noise would explain for a mean of the trials. Lines: one per
    appraiser (its part means); points: every reading.
    """
    fig, ax = _axes(ax, size=(6.6, 3.6))
    cube = result.values
    p, o, r = cube.shape
    ch = result.charts
    ax.axhspan(
        ch.mean_lcl,
        ch.mean_ucl,
        color=theme.OKABE_ITO["sky_blue"],
        alpha=0.25,
        linewidth=0,
        zorder=0,
        label=LABELS["noise_band"],
    )
    ax.axhline(ch.mean_centre, color=theme.INK_SOFT, linewidth=0.8, zorder=1)
    offsets = _dodge(o)
    for j in range(o):
        st = _appraiser_style(j)
        xs = np.arange(p) + offsets[j]
        ax.scatter(
            np.repeat(xs, r),
            cube[:, j, :].ravel(),
            color=st["color"],
            marker=st["marker"],
            s=16,
            alpha=0.75,
            edgecolors=theme.PAPER,
            linewidths=0.3,
            zorder=3,
        )
        ax.plot(
            xs,
            np.nanmean(cube[:, j, :], axis=1),
            color=st["color"],
            marker=st["marker"],
            markersize=4.5,
            linewidth=1.3,
            zorder=4,
            label=LABELS["appraiser"].format(label=result.appraiser_labels[j]),
        )
    ax.set_xticks(np.arange(p), [str(x) for x in result.part_labels])
    ax.set_xlim(-0.6, p - 0.4)
    ax.grid(True, axis="y", color=theme.RULE, linewidth=0.6)
    ax.grid(False, axis="x")
    _legend_below(ax)
    _finish(ax, LABELS["readings"], LABELS["part_axis"], LABELS["reading_axis"])
    return fig


# --- 3. repeatability check ----------------------------------------------------------------------


@_styled
def repeatability_figure(result: GaugeResult, *, ax=None) -> Figure:
    """The range of each part's repeat readings, every appraiser in one chart.

    Lines: the mean range (centre line role), its upper limit (control limit role) and the lower
    limit when above zero (7 trials or more); ranges above the limit get the signal marker.
    """
    fig, ax = _axes(ax, size=(6.6, 3.4))
    ch = result.charts
    ranges = np.ptp(result.values, axis=2)
    p, o = ranges.shape
    offsets = _dodge(o)
    for j in range(o):
        st = _appraiser_style(j)
        ax.scatter(
            np.arange(p) + offsets[j],
            ranges[:, j],
            color=st["color"],
            marker=st["marker"],
            s=26,
            edgecolors=theme.PAPER,
            linewidths=0.4,
            zorder=3,
            label=LABELS["appraiser"].format(label=result.appraiser_labels[j]),
        )
    above = np.argwhere(ranges > ch.range_ucl * (1 + 1e-12))
    if above.size:
        sig = theme.mpl_marker_kwargs("signal")
        sig.update(
            label=LABELS["above"],
            facecolors="none",
            edgecolors=sig.pop("color"),
            linewidths=1.5,
            s=sig["s"] * 1.8,
        )
        ax.scatter(above[:, 0] + offsets[above[:, 1]], ranges[above[:, 0], above[:, 1]], **sig)
    kw = theme.mpl_line_kwargs("centre_line")
    kw.update(label=LABELS["mean_range"], linewidth=1.0)
    ax.axhline(ch.range_centre, **kw)
    kw = theme.mpl_line_kwargs("control_limit")
    kw["label"] = LABELS["range_limit"]
    ax.axhline(ch.range_ucl, **kw)
    if ch.range_lcl is not None and ch.range_lcl > 0:
        kw["label"] = "_nolegend_"
        ax.axhline(ch.range_lcl, **kw)
    ax.set_xticks(np.arange(p), [str(x) for x in result.part_labels])
    ax.set_xlim(-0.6, p - 0.4)
    ax.set_ylim(bottom=0)
    ax.grid(True, axis="y", color=theme.RULE, linewidth=0.6)
    ax.grid(False, axis="x")
    _legend_below(ax)
    _finish(ax, LABELS["repeatability"], LABELS["part_axis"], LABELS["range_axis"])
    return fig


# --- the story -----------------------------------------------------------------------------------

_BUILDERS = {
    "sources": sources_figure,
    "readings": readings_figure,
    "repeatability": repeatability_figure,
}


def story(result: GaugeResult) -> list[tuple[str, str, str]]:
    """The figures in the order the verdict asks for, each with its title and caption in words.

    Returns
    -------
    list of (key, title, caption)
        ``sources`` first; then ``repeatability`` before ``readings`` when the gauge needs
        action and repeatability (the gauge itself) is the larger measurement source,
        otherwise ``readings`` before ``repeatability``.

    Examples
    --------
    >>> from studykit.stats.gauge import gauge_rr
    >>> res = gauge_rr([1.0, 1.1, 1.2, 1.1, 2.0, 2.2, 2.1, 2.1], [1, 1, 1, 1, 2, 2, 2, 2],
    ...                ["A", "A", "B", "B"] * 2)
    >>> [key for key, _title, _caption in story(res)][0]
    'sources'
    """
    v = result.verdict
    tol = (
        ""
        if v.pct_grr_tolerance is None
        else LABELS["cap_sources_tol"].format(tol=_pct(v.pct_grr_tolerance))
    )
    cap_sources = LABELS["cap_sources"].format(
        grr=_pct(v.pct_grr_study_variation), tol=tol, status=v.status
    )
    p_text = "–" if result.interaction_p is None else f"{result.interaction_p:.2g}"
    cap_readings = LABELS["cap_readings"].format(
        outside=f"{result.charts.pct_means_outside:.0f} %", p=p_text
    )
    cells = result.charts.ranges_above_ucl
    if cells:
        listed = ", ".join(
            f"part {part}, {LABELS['appraiser'].format(label=appr)}" for part, appr in cells[:4]
        ) + (", …" if len(cells) > 4 else "")
        cap_repeat = LABELS["cap_repeat_bad"].format(n=len(cells), cells=listed)
    else:
        cap_repeat = LABELS["cap_repeat_ok"]
    captions = {"sources": cap_sources, "readings": cap_readings, "repeatability": cap_repeat}
    order = ["sources", "readings", "repeatability"]
    if v.status != "acceptable" and v.dominant == REPEATABILITY:
        order = ["sources", "repeatability", "readings"]
    return [(key, LABELS[key], captions[key]) for key in order]


def all_figures(result: GaugeResult) -> dict[str, Figure]:
    """Every gauge figure by key, in the order of :func:`story`.

    Examples
    --------
    >>> from studykit.stats.gauge import gauge_rr
    >>> res = gauge_rr([1.0, 1.1, 1.2, 1.1, 2.0, 2.2, 2.1, 2.1], [1, 1, 1, 1, 2, 2, 2, 2],
    ...                ["A", "A", "B", "B"] * 2)
    >>> figs = all_figures(res)
    >>> sorted(figs), len(figs["readings"].axes[0].lines)
    (['readings', 'repeatability', 'sources'], 3)
    """
    return {key: _BUILDERS[key](result) for key, _title, _caption in story(result)}
